"""Sizing from the terminal UI against `aftertreat size` on the same case: wall time from the
key press to the answer on screen (headless Textual app, 160x48), and the library's own sizing
time with the same settings (the UI computes the sizing curves too). Prints figures only; the
terminal-UI issue asks for a ratio of at most 1.5. Run: python benchmarks/tui_sizing.py [CASE]
"""
import asyncio
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from aftertreat.cyclecase import load_run_case  # noqa: E402
from aftertreat.sizing import size_case  # noqa: E402
from tui.app import CycleApp  # noqa: E402

CASE = Path(sys.argv[1]) if len(sys.argv) > 1 else ROOT / "cases" / "genset_d2.toml"


async def ui_sizing() -> float:
    app = CycleApp(CASE)
    async with app.run_test(size=(160, 48)) as pilot:
        while app.session is None or app.session.result is None or app.busy:
            await asyncio.sleep(0.02)
        await app.workers.wait_for_complete()
        t0 = time.perf_counter()
        await pilot.press("s")
        while app.session.sizing is None or app.busy:
            await app.workers.wait_for_complete()
            await pilot.pause()
        await pilot.pause()
        return time.perf_counter() - t0


def main() -> None:
    size_case(load_run_case(CASE), curves=True)              # compile and warm every cache
    lib = []
    for _ in range(3):
        t0 = time.perf_counter()
        size_case(load_run_case(CASE), curves=True)
        lib.append(time.perf_counter() - t0)
    ui = [asyncio.run(ui_sizing()) for _ in range(3)]
    a, b = sorted(lib)[1], sorted(ui)[1]
    print(f"case {CASE.name}")
    print(f"library sizing with curves, median of 3: {a:.2f} s")
    print(f"terminal UI, key press to the answer on screen, median of 3: {b:.2f} s")
    print(f"ratio UI / library: {b / a:.2f} (target <= 1.5)")


if __name__ == "__main__":
    main()
