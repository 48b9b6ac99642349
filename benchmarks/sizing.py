"""Speed of `aftertreat size` on the 5-mode demo genset (SCR + dual-layer slip catalyst).

Prints figures only (never asserts). Target of the sizing issue: under 2 s on one core.
Run: python benchmarks/sizing.py
"""
import os
import platform
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

import numpy as np  # noqa: E402

from aftertreat.cyclecase import load_run_case  # noqa: E402
from aftertreat.evaluate import run_case  # noqa: E402
from aftertreat.gas import _shared_table  # noqa: E402
from aftertreat.sizing import size_case  # noqa: E402


REPEATS = 3


def main():
    print(f"platform {platform.platform()}, python {platform.python_version()}, "
          f"numpy {np.__version__}, cores {os.cpu_count()}")
    case = load_run_case(ROOT / "cases" / "genset_d2.toml")
    run_case(case)                                     # one-time set-up (Cantera tables, pint)
    t = time.perf_counter()
    r = run_case(case)
    t_run = time.perf_counter() - t
    print(f"one cycle evaluation ({len(r.modes)} modes, {len(case.train.bricks)} bricks, cold "
          f"starts): {t_run:.2f} s")
    times = []
    for _ in range(REPEATS):
        _shared_table.cache_clear()                    # no gas tables left from earlier runs
        t = time.perf_counter()
        res = size_case(case, curves=False)
        times.append(time.perf_counter() - t)
    dt = float(np.median(times))
    _shared_table.cache_clear()
    t = time.perf_counter()
    with_curves = size_case(case)
    print(f"with the sizing curves (report): {time.perf_counter() - t:.1f} s, "
          f"{with_curves.evaluations} designs")
    print(f"sizing, median of {REPEATS} runs (fastest {min(times):.2f} s): {dt:.2f} s, "
          f"{res.evaluations} designs, {res.train_solves} train solves "
          f"({dt / max(res.train_solves, 1) * 1e3:.0f} ms per train solve), feasible "
          f"{res.feasible}, total volume {res.train.volume * 1e3:.0f} L")
    print(f"target (solver-core issue): <= 0.25 s without curves -> {dt / 0.25:.1f}x the target"
          + ("" if dt <= 0.25 else " (missed)"))


if __name__ == "__main__":
    main()
