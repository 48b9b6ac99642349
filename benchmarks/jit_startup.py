"""Start-up cost of the compiled kernel (numba): first compile with an empty cache, start-up
with a warm cache, the wall time of `aftertreat run cases/genset_d2.toml`, and what happens
when no cache folder is writable.

Every figure is a fresh Python process (the cost a user sees). Prints figures only.
Run: python benchmarks/jit_startup.py
"""
import os
import platform
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]

#: one demo steady point: import, build the train, solve every brick (the kernel's first call
#: compiles or loads it)
POINT = """
import time
t0 = time.perf_counter()
import aftertreat as at
from aftertreat import solver
k = solver.get_kernel('numba')
t1 = time.perf_counter()
sub = at.Substrate.coated(cpsi=400, wall_mil=4, washcoat_um=(40,))
b = at.Brick('SCR', sub, at.load_catalyst('cu_chabazite'), length=0.3, diameter=0.5)
s = at.Stream.from_mole_fractions({'NO': 8e-4, 'NH3': 9e-4, 'O2': 0.1, 'H2O': 0.2}, T=600.0,
                                  mass_kg_s=0.5)
sol = at.solve_brick(b, s, settings=solver.SolverSettings(kernel='numba'))
t2 = time.perf_counter()
print(f"{t1 - t0:.3f} {t2 - t1:.3f} {sol.converged}")
"""

#: simulates an install where neither the package folder nor the user cache folder can be
#: written (as root, file permissions cannot show it): numba is left with no cache locator
NO_LOCATOR = "import numba.core.caching as c; c.CacheImpl._locator_classes = []\n"


def run(code, env=None):
    t = time.perf_counter()
    p = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, cwd=ROOT,
                       env={**os.environ, **(env or {})})
    wall = time.perf_counter() - t
    if p.returncode != 0:
        raise SystemExit(f"failed:\n{p.stderr}")
    imp, solve, conv = p.stdout.split()[-3:]
    return wall, float(imp), float(solve), conv, p.stderr.strip()


def main():
    print(f"platform {platform.platform()}, python {platform.python_version()}, "
          f"cores {os.cpu_count()}")
    with tempfile.TemporaryDirectory() as cache:
        env = {"NUMBA_CACHE_DIR": cache}
        w, i, s, c, _ = run(POINT, env)
        print(f"first run, empty cache:  {w:6.1f} s wall (import {i:.1f} s, first solve with "
              f"compile {s:.1f} s; converged {c})")
        w, i, s, c, _ = run(POINT, env)
        print(f"second run, warm cache:  {w:6.1f} s wall (import {i:.2f} s, first solve with "
              f"cache load {s:.2f} s; converged {c})")
        files = sum(1 for _ in Path(cache).rglob("*.nbi"))
        size = sum(f.stat().st_size for f in Path(cache).rglob("*") if f.is_file())
        print(f"cache: {files} compiled functions, {size / 1e6:.1f} MB")
    # the CLI on the demo genset, with the package's own (warm) cache
    exe = shutil.which("aftertreat")
    cmd = (([exe] if exe else [sys.executable, "-m", "aftertreat.cli"])
           + ["run", "cases/genset_d2.toml"])
    subprocess.run(cmd, capture_output=True, cwd=ROOT)          # make sure the cache is warm
    walls = []
    for _ in range(3):
        t = time.perf_counter()
        p = subprocess.run(cmd, capture_output=True, text=True, cwd=ROOT)
        walls.append(time.perf_counter() - t)
    ok = "passes" if p.returncode == 0 else f"exit {p.returncode}"
    print(f"aftertreat run cases/genset_d2.toml, warm cache: median {sorted(walls)[1]:.2f} s "
          f"wall of 3 ({ok}); target <= 2 s")
    # no writable cache folder at all
    w, i, s, c, err = run(NO_LOCATOR + POINT)
    lines = [x for x in err.splitlines() if "Warning" in x]
    print(f"no writable cache folder: {w:.1f} s wall, compiled in memory at every start "
          f"(converged {c}); warnings: {len(lines)}")
    for x in lines:
        print(f"  {x.strip()[:160]}")


if __name__ == "__main__":
    main()
