"""`aftertreat size --confidence` (aftertreat/study_sizing.py) on the closed-form test case of
tests/test_study.py: a film-limited first-order brick with a lognormal inlet scale, where the
probability of compliance of a train of length L is Phi(ln(limit / value(L)) / sigma)."""
from __future__ import annotations

import json
import math

import pytest

from aftertreat import cli
from aftertreat.cyclecase import load_run_case
from aftertreat.evaluate import run_case

from test_study import _write_case


def test_size_to_confidence_is_the_smallest_step_reaching_the_level(tmp_path, capsys):
    """The answer reaches the level and one build step shorter does not (our search contract,
    docs/study.md); every candidate's estimate is within its Wilson interval of the closed
    form (the premise: linear, film-limited brick; Wilson 1927)."""
    from scipy.stats import norm
    sigma, level = 0.3, 0.9
    case_file = _write_case(tmp_path, samples=200, chunk=50, sigma=sigma, limit=3.0)
    code = cli.main(["size", str(case_file), "--confidence", str(level), "--workers", "0",
                     "--json"])
    out = capsys.readouterr().out
    assert code == 0
    obj = json.loads(out)
    conf = obj["confidence"]
    assert conf["samples"] == 200 and conf["common_random_numbers"] is True
    best = conf["design"]
    assert best["probability"] >= level
    L = best["lengths_mm"]["B"]
    shorter = [c for c in conf["candidates"] if abs(c["lengths_mm"]["B"] - (L - 50.0)) < 1e-6]
    assert shorter and shorter[0]["probability"] < level     # 50 mm: the extruded build step
    for c in conf["candidates"]:
        Lc = c["lengths_mm"]["B"]
        v = run_case(load_run_case(case_file, [f"brick.B.length={Lc} mm"])).limits[0].value
        exact = float(norm.cdf(math.log(3.0 / v) / sigma))
        assert c["wilson95_lo"] <= exact <= c["wilson95_hi"], (Lc, c, exact)
    ps = sorted((c["lengths_mm"]["B"], c["probability"]) for c in conf["candidates"])
    assert [p for _, p in ps] == sorted(p for _, p in ps)   # common random numbers: monotone


def test_confidence_needs_uncertainties(capsys):
    """Bad input: exit 2 and one line naming the key (docs/conventions.md)."""
    from pathlib import Path
    d2 = Path(__file__).resolve().parents[1] / "cases" / "genset_d2.toml"
    assert cli.main(["size", str(d2), "--confidence", "0.95"]) == 2
    err = capsys.readouterr().err
    assert "'study'" in err and len(err.strip().splitlines()) == 1
    assert cli.main(["size", str(d2), "--workers", "2"]) == 2
    assert "--confidence" in capsys.readouterr().err


@pytest.mark.parametrize("bad", ["1.5", "0", "x"])
def test_confidence_level_must_be_a_probability(bad, capsys):
    with pytest.raises(SystemExit) as e:
        cli.main(["size", "cases/genset_d2.toml", "--confidence", bad])
    assert e.value.code == 2
    assert "probability" in capsys.readouterr().err
