"""Speed of the demo calibration (cases/lab_cu_chabazite: 6 parameters, 3 experiments, 90
measured values): wall time of one fit on one process, the number of residual evaluations and
of model solves (steady brick solves plus the right-hand-side evaluations of the time
experiments). Prints figures only (no assertions). Run from the repository root::

    python benchmarks/fit_demo.py

The target of the calibration issue is under 30 s on one core.
"""
from __future__ import annotations

import pathlib
import shutil
import sys
import tempfile
import time

ROOT = pathlib.Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "benchmarks"))

from machine import print_machine  # noqa: E402

from aftertreat.fit import fit, load_fit_spec  # noqa: E402


def main() -> None:
    print_machine()
    with tempfile.TemporaryDirectory() as tmp:
        dst = pathlib.Path(tmp) / "lab"
        shutil.copytree(ROOT / "cases" / "lab_cu_chabazite", dst,
                        ignore=shutil.ignore_patterns("*calibrated*"))
        spec = load_fit_spec(dst / "fit_cu_chabazite.toml")
        t0 = time.perf_counter()
        res = fit(spec)
        wall = time.perf_counter() - t0
    per = {}
    for e in spec.experiments:
        from aftertreat.bench import predict
        t1 = time.perf_counter()
        predict(spec.reactor, e)
        per[e.name] = time.perf_counter() - t1
    print(f"demo fit: {len(spec.parameters)} parameters, {len(spec.experiments)} experiments, "
          f"{sum(e.n_points for e in spec.experiments)} values")
    print(f"wall time {wall:.1f} s (target < 30 s); {res.evaluations} residual evaluations, "
          f"{res.solves} model solves; converged {res.converged}")
    for name, s in per.items():
        print(f"  one prediction of '{name}': {s:.3f} s")


if __name__ == "__main__":
    main()
