"""Speed of transient runs: the 30-minute, 1 Hz harbour trace (cases/harbour_trace.toml) through
two SCR bricks and a dual-layer slip catalyst at the default resolution.

Prints figures only (never asserts): the real-time factor (trace seconds per second of
computing; target of the transient issue: at least 1000), and how the cost grows with cells per
brick and with trace length. Run: python benchmarks/transient.py [--quick]
"""
import dataclasses
import os
import platform
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

import numpy as np  # noqa: E402

from aftertreat.cyclecase import load_run_case  # noqa: E402
from aftertreat.train import Train  # noqa: E402
from aftertreat.transient_run import Timeline, run_transient, timeline  # noqa: E402
import aftertreat.transient_run as tr  # noqa: E402


def _run(case, n_steps=None, cells=None):
    """One run; returns (trace seconds, solve seconds, Jacobians, residual calls per step)."""
    train = case.train
    if cells is not None:
        train = Train([dataclasses.replace(b, cells=cells) for b in train.bricks])
    full = timeline(case)
    if n_steps is not None:
        cut = Timeline(full.t_s[:n_steps + 1], full.power_kW[:n_steps + 1],
                       full.engine_out[:n_steps + 1], full.anr_fixed[:n_steps + 1],
                       full.air_CO2_mol_s[:n_steps + 1], full.source)
        tr.timeline = lambda c: cut
    try:
        run = run_transient(case, train=train)
    finally:
        tr.timeline = timeline
    r = run.result
    return r.t_s[-1] - r.t_s[0], r.seconds, int(r.jacobians.sum()), run


def main():
    quick = "--quick" in sys.argv
    print(f"platform {platform.platform()}, python {platform.python_version()}, "
          f"numpy {np.__version__}, cores {os.cpu_count()}")
    case = load_run_case(ROOT / "cases" / "harbour_trace.toml")
    b = case.train.bricks
    print("train: " + ", ".join(f"{x.name} ({x.cells} cells, {x.washcoat}"
                                + (f", {x.nodes_per_layer} nodes/layer" if x.washcoat ==
                                   "resolved" else "") + ")" for x in b))
    _run(case, n_steps=5)                                # one-time set-up (Cantera tables)
    n = 300 if quick else None
    T, s, jac, run = _run(case, n_steps=n)
    print(f"trace {T:.0f} s at 1 Hz: solved in {s:.1f} s -> real-time factor {T / s:.0f} "
          f"(target >= 1000), {jac} Jacobians, {s / (len(run.result.t_s) - 1) * 1e3:.1f} ms "
          f"per step, all converged {run.result.all_converged}")
    print("cost versus cells per brick (first 300 s of the trace):")
    for cells in (10, 20, 40):
        T, s, jac, _ = _run(case, n_steps=300, cells=cells)
        print(f"   {cells:3d} cells   {s / 300 * 1e3:6.1f} ms per step   real-time factor "
              f"{T / s:5.0f}")
    print("cost versus trace length (default cells):")
    for steps in ((150, 300) if quick else (300, 900, 1799)):
        T, s, jac, _ = _run(case, n_steps=steps)
        print(f"   {steps:5d} steps   {s:6.1f} s   {s / steps * 1e3:6.1f} ms per step")


if __name__ == "__main__":
    main()
