"""Scale of a study on Dask: a Monte Carlo of the demo genset cycle with 1 and 2 workers.

    python benchmarks/study_scale.py [--samples 2000] [--workers 1 2] [--case FILE]

For each worker count it runs the study of ``cases/genset_d2_study.toml`` (7 uncertain inputs,
invented spreads) with ``--samples`` samples on a local Dask cluster (127.0.0.1, one thread
per worker) into a temporary folder, and prints: samples per second (over the computation,
after the workers started and solved the case once: ``startup_s``), the parallel efficiency
E(n) = rate(n) / (n rate(1)), the scheduler overhead share 1 - sum(chunk compute) / (wall x
workers), the resident memory of each worker at the end, and the CPU time over wall time of
the chunks (below 1 when other programs took the cores) with the load average. Nothing is
asserted: the figures
are for docs and README (DEVELOPERS.md: speed lives in benchmarks/).
"""
from __future__ import annotations

import argparse
import platform
import sys
import tempfile
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]


def _load() -> str:
    """The 1-minute load average (other programs on the machine compete for the cores)."""
    import os
    try:
        return f"{os.getloadavg()[0]:.2f}"
    except OSError:
        return "n/a"


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--samples", type=int, default=2000)
    ap.add_argument("--workers", type=int, nargs="+", default=[1, 2])
    ap.add_argument("--case", default=str(REPO / "cases" / "genset_d2_study.toml"))
    ap.add_argument("--reference", type=float, metavar="RATE",
                    help="samples/s of one worker from an earlier run, for the efficiency "
                         "when --workers does not start with 1")
    args = ap.parse_args(argv)
    from aftertreat.cyclecase import load_run_case
    from aftertreat.study import plan_study, run_study
    case = load_run_case(args.case, [f"study.samples={args.samples}"])
    plan = plan_study(case)
    print(f"case {args.case}: {plan.n_samples} samples, chunk "
          f"{case.study.chunk_size or 'auto'}; machine {platform.processor() or platform.machine()}"
          f", Python {platform.python_version()}", flush=True)
    rates = {}
    for n in args.workers:
        with tempfile.TemporaryDirectory(prefix="aftertreat-study-bench-") as tmp:
            run = run_study(case, Path(tmp) / "study", workers=n, plan=plan,
                            write_figures=False)
        st = run.stats
        rates[n] = st.samples_per_s
        mem = ", ".join(f"{m:.0f}" for m in st.memory_MB)
        ref = args.reference if args.reference else rates[args.workers[0]] / args.workers[0]
        eff = rates[n] / (n * ref)
        print(f"workers {n}: {st.samples} samples in {st.wall_s:.1f} s = "
              f"{st.samples_per_s:.3f} samples/s ({st.wall_s / st.samples * n:.3f} s per "
              f"sample per worker); start-up {st.startup_s:.1f} s; parallel efficiency "
              f"{100 * eff:.1f} %; scheduler overhead share {100 * st.overhead_share:.2f} %; "
              f"memory per worker {mem} MB; CPU/wall of the chunks {st.cpu_share:.2f} "
              f"(CPU {st.cpu_s / max(st.samples, 1):.3f} s per sample); load "
              f"average {_load()}; P(compliance) {run.summary.overall.probability:.3f}",
              flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
