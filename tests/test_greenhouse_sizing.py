"""N2O and greenhouse gases in runs and sizing: the train's N2O is always reported, [sizing]
caps become limits of the search, and objective = "CO2e" trades volume between the bricks
for a lower CO2e without breaking any limit. The CO2e arithmetic is GHG_CO2e = CO2 +
GWP100 x N2O (IPCC AR6 WG1 Table 7.15, GWP100 of N2O 273, from memory)."""
from pathlib import Path

import pytest

from aftertreat.cli import main
from aftertreat.cyclecase import load_run_case
from aftertreat.evaluate import engine_out_cycle, run_case
from aftertreat.sizing import size_case, with_sizing_caps

DEMO = Path(__file__).resolve().parents[1] / "cases" / "genset_d2.toml"


def test_run_reports_the_n2o_the_train_made():
    res = run_case(load_run_case(DEMO))
    t = res.train_n2o()
    c, e = res.cycle, res.engine_out_cycle
    assert t["N2O_made_g_kWh"] == pytest.approx(c["N2O_g_kWh"] - e["N2O_g_kWh"], rel=1e-12)
    assert t["N2O_made_CO2e_g_kWh"] == pytest.approx(273.0 * t["N2O_made_g_kWh"], rel=1e-9)
    assert t["GHG_CO2e_rise_pct"] == pytest.approx(
        100 * (c["GHG_CO2e_g_kWh"] / e["GHG_CO2e_g_kWh"] - 1), rel=1e-12)
    assert res.to_json()["train_N2O"] == t
    # the engine-out cycle has one definition, used by the run and by the sizing caps
    assert engine_out_cycle(res.case) == pytest.approx(e)


def test_sizing_caps_become_limit_rows():
    case = load_run_case(DEMO, ["sizing.N2O_max_g_kWh=1.1", "sizing.CO2e_rise_max_pct=15"])
    capped = with_sizing_caps(case)
    rows = capped.limit_sets[-1].rows
    assert capped.limit_sets[-1].name == "sizing caps" and len(rows) == 2
    assert rows[0].quantity == "N2O_g_kWh" and rows[0].value == 1.1
    g0 = engine_out_cycle(case)["GHG_CO2e_g_kWh"]
    assert rows[1].quantity == "GHG_CO2e_g_kWh"
    assert rows[1].value == pytest.approx(1.15 * g0, rel=1e-12)
    assert with_sizing_caps(load_run_case(DEMO)).limit_sets == load_run_case(DEMO).limit_sets


def test_an_n2o_cap_is_met_by_the_sized_train_or_answered_infeasible():
    """With an N2O cap below the demo's own, the sized train meets it with the design margin,
    or the answer says it cannot and names the cap."""
    res = size_case(load_run_case(DEMO, ["sizing.N2O_max_g_kWh=1.05"]), curves=False)
    row = [r.check for r in res.margins if r.check.name.endswith("(sizing cap)")]
    assert len(row) == 1
    if res.feasible:
        assert row[0].value <= 1.05 * (1 - res.case.sizing.design_margin) * (1 + 1e-5)
    else:
        assert any("sizing cap" in p for p in res.problems), res.problems


def test_co2e_objective_lowers_co2e_within_the_volume():
    """objective = "CO2e": no more volume than the smallest train (+ the allowance), every
    limit with its margin still met, and a cycle CO2e no higher than the smallest train's."""
    base = size_case(load_run_case(DEMO), curves=False)
    res = size_case(load_run_case(DEMO, ['sizing.objective="CO2e"',
                                         "sizing.volume_allowance_pct=40"]), curves=False)
    assert base.feasible and res.feasible
    assert res.train.volume <= base.train.volume * 1.4 * (1 + 1e-9)
    assert res.run.cycle["GHG_CO2e_g_kWh"] <= base.run.cycle["GHG_CO2e_g_kWh"] + 1e-9
    assert all(r.pass_with_design_margin for r in res.margins)
    assert "least CO2e" in res.objective and "volume" in base.objective


@pytest.mark.parametrize("assignment, key", [
    ('sizing.objective="cost"', "sizing.objective"),
    ("sizing.volume_allowance_pct=10", "sizing.volume_allowance_pct"),
    ("sizing.N2O_max_g_kWh=-1", "sizing.N2O_max_g_kWh"),
])
def test_bad_greenhouse_sizing_keys(assignment, key, capsys):
    assert main(["size", str(DEMO), "--set", assignment]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and key in err[0], err
