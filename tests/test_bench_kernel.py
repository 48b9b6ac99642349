"""The compiled tanks model of the bench (aftertreat/bench_kernel.py) against its numpy
reference (aftertreat/bench.py): the same outlet and coverages on the demo NH3 step and TPD
(three storage sites, an O2-starved purge) and on a step with NO in the feed (SCR on)."""
import dataclasses
from pathlib import Path

import numpy as np
import pytest

from aftertreat.bench import _timed
from aftertreat.fit import load_fit_spec

ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    out = tmp_path_factory.mktemp("k") / "never.toml"
    return load_fit_spec(ROOT / "cases" / "lab_cu_chabazite" / "fit_cu_chabazite.toml",
                         output=out)


@pytest.mark.parametrize("which", ["step", "tpd"])
def test_compiled_tanks_agree_with_numpy(demo, which):
    e = next(x for x in demo.experiments if x.kind == which)
    ref = _timed(demo.reactor, e, coverage=True, compiled=False)
    got = _timed(demo.reactor, e, coverage=True, compiled=True)
    assert ref.converged and got.converged
    assert np.abs(got.outlet_ppm["NH3"] - ref.outlet_ppm["NH3"]).max() < 1e-6
    assert np.abs(got.coverage - ref.coverage).max() < 1e-8
    assert got.coverage.shape[2] == 3                    # the three-site Cu-CHA


def test_compiled_tanks_agree_with_scr_running(demo):
    """An NH3 step with 500 ppm NO and 10 % O2 in the feed at 250 C: SCR, NO oxidation and
    NH3 oxidation all run in the tanks; NO and NH3 outlets agree."""
    e = next(x for x in demo.experiments if x.kind == "step")
    e = dataclasses.replace(e, feed=dict(e.feed, NO=500e-6, O2=0.10), T_K=e.T_K + 50.0,
                            measured={"NH3": e.measured["NH3"], "NO": e.measured["NH3"]})
    ref = _timed(demo.reactor, e, compiled=False)
    got = _timed(demo.reactor, e, compiled=True)
    assert ref.converged and got.converged
    assert ref.outlet_ppm["NO"].min() < 400.0                  # SCR does run
    for sp in ("NH3", "NO"):
        assert np.abs(got.outlet_ppm[sp] - ref.outlet_ppm[sp]).max() < 1e-6
