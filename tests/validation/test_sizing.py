"""Sizing against the analytical mass-transfer-limited length, and the sizing contract."""
import math
from pathlib import Path

import numpy as np
import pytest

import aftertreat as at
from aftertreat.cyclecase import parse_run_case
from aftertreat.evaluate import run_case
from aftertreat.gas import GasProperties
from aftertreat.sizing import SIZING_TOL, size_case
from aftertreat.species import INDEX
from aftertreat.transport import shah_london_1978

CATALYST = """
name = "fast first-order NO removal (test)"
valid_T_C = [100.0, 700.0]
role = "SCR"
[[source]]
authors = "aftertreat test suite"
year = 2026
journal = "test data"
[pores]
porosity = 0.4
tortuosity = 3.0
pore_diameter_nm = 200.0
provenance = { porosity = "fitted: test", tortuosity = "fitted: test", pore_diameter_nm = "fitted: test" }
[[reaction]]
name = "NO removal"
equation = "2 NO -> N2 + O2"
form = "power_law"
k_ref = 1.0e6
E_kJ_mol = 0.0
orders = { NO = 1 }
provenance = { k_ref = "fitted: test", E_kJ_mol = "fitted: test", orders = "fitted: test" }
"""

O2_DRY = 12.0
NO_IN = 100.0          # ppm dry
LIMIT = 10.0           # ppmvd at O2_DRY: X = 0.9


def case_data(tmp_path, **sizing):
    (tmp_path / "fast_no.toml").write_text(CATALYST)
    return {
        "title": "film-limited sizing check",
        "engine": {"application": "stationary engine", "rated_power_kW": 1000.0},
        "cycle": {"mode": [{"name": "rated", "weight": 1.0, "power_pct": 100.0}]},
        "engine_out": {"method": "measured", "basis": "dry", "mass_flow_kg_h": 3600.0,
                       "T_C": 350.0, "p_kPa": 101.325, "O2_pct": O2_DRY, "H2O_pct": 10.0,
                       "NOx_ppm": NO_IN, "NO2_fraction": 0.0},
        "dosing": {"method": "none"},
        "brick": [{"name": "SCR", "catalyst": str(tmp_path / "fast_no.toml"),
                   "substrate": "coated", "cpsi": 400, "wall_mil": 4, "washcoat_um": [30],
                   "length_mm": 100.0, "diameter_mm": 300.0, "sherwood": "fully_developed",
                   "washcoat_model": "none", "cells": 20}],
        "limits": {"custom": [{"name": "NOx", "quantity": "NOx_ppmvd", "value": LIMIT,
                               "unit": "ppmvd", "o2_ref_pct": O2_DRY, "source": "test"}]},
        "sizing": dict({"design_margin": 0.0}, **sizing),
    }


@pytest.fixture(scope="module")
def sized(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("sizing")
    case = parse_run_case(case_data(tmp), str(tmp / "case.toml"))
    return case, size_case(case)


def test_film_limited_length_matches_analytical(sized):
    """Mass-transfer-limited first-order removal: L = u_s d_h ln(1/(1-X)) / (Sh D a) with the
    fully developed square-channel Sh = 2.976 (Shah & London 1978; plug-flow design equation,
    e.g. Fogler, Elements of Chemical Reaction Engineering, ch. 14 on external resistance).
    Tolerance 1 %: the search stops within 0.5 % (SIZING_TOL) of the smallest compliant length;
    the 100 ppm NO removal heats the gas by < 0.5 K, which moves D by < 0.2 %."""
    case, res = sized
    assert res.feasible
    brick = case.train.bricks[0]
    inlet = run_case(case).modes[0].inlet
    gas = GasProperties.from_flows(inlet.F, p=inlet.p)
    D = gas.diffusivity(inlet.T, inlet.p)[INDEX["NO"]]
    sub = brick.substrate
    u_s = inlet.volume_flow() / brick.frontal_area
    X = 1.0 - LIMIT / NO_IN
    L = u_s * sub.d_h * math.log(1.0 / (1.0 - X)) / (shah_london_1978("square").nu_t * D *
                                                      sub.gsa)
    assert res.train.bricks[0].length == pytest.approx(L, rel=0.01)


def test_sized_design_passes_and_3_percent_smaller_fails(sized):
    """The sized design passes `run`; the same design 3 % smaller fails the binding limit."""
    case, res = sized
    assert res.binding == ["NOx, mode rated"] or res.binding == ["NOx"] or res.binding
    ok = run_case(case, train=res.train)
    assert ok.passed
    import dataclasses
    small = at.Train([dataclasses.replace(b, length=b.length * 0.97) for b in res.train.bricks])
    assert not run_case(case, train=small).passed


def test_sizing_curves_monotonic(sized):
    """More SCR volume never raises outlet NOx (plug flow; common practice); the pressure drop
    rises with length (Hagen-Poiseuille)."""
    _, res = sized
    t = res.curve_table().sort_values("SCR_length_mm")
    assert np.all(np.diff(t["NOx_g_kWh"]) <= 1e-12)
    assert np.all(np.diff(t["dp_kPa_max"]) >= -1e-12)


def test_infeasible_is_answered(tmp_path):
    """An envelope too short to comply gives feasible = False with the limit that cannot be met,
    the best value reachable, and what would change it; no exception."""
    case = parse_run_case(case_data(tmp_path, scr_length_max_mm=15.0), str(tmp_path / "c.toml"))
    res = size_case(case)
    assert not res.feasible
    assert any("NOx" in p for p in res.problems)
    assert res.suggestions
    assert res.to_json()["schema"] == "aftertreat.size/1"
    assert res.to_json()["feasible"] is False


def test_size_json_contract(sized):
    case, res = sized
    o = res.to_json()
    for k in ("schema", "case", "bricks", "total_volume_L", "binding", "run"):
        assert k in o
    for b in o["bricks"]:
        for k in ("name", "role", "volume_L", "length_mm", "diameter_mm"):
            assert k in b
    assert o["run"]["schema"] == "aftertreat.run/1"
    assert o["total_volume_L"] == pytest.approx(sum(b["volume_L"] for b in o["bricks"]))
    assert SIZING_TOL <= 0.01


def test_smallest_root_finder():
    """The bracketing + Illinois search finds the smallest compliant x of a decreasing function
    to the stated tolerance (here f = 2 exp(-3 (x - 0.3)), root 0.3 + ln 2 / 3; arithmetic)."""
    from aftertreat.sizing import _smallest
    root = 0.3 + math.log(2.0) / 3.0
    for x0 in (0.05, 0.5, 3.0):
        x, ok, fx, _ = _smallest(lambda x: 2.0 * math.exp(-3.0 * (x - 0.3)), x0, 0.02, 4.0)
        assert ok and fx <= 1.0
        assert root <= x <= root * (1 + SIZING_TOL) + 1e-12
    x, ok, _, _ = _smallest(lambda x: 5.0, 0.1, 0.02, 4.0)
    assert not ok and x == 4.0


def test_anr_chosen_to_the_nox_target():
    """With dosing allowed, the sizing doses each mode to the NOx conversion its limits need
    (with the design margin) plus the excess, within [the engine's own NH3, the case's ANR]
    (dosing to a conversion target: common practice)."""
    from aftertreat.cyclecase import load_run_case
    from aftertreat.evaluate import engine_out_stream, mode_emissions
    from aftertreat.limits import evaluate
    from aftertreat.sizing import choose_anr
    case = load_run_case(Path(__file__).resolve().parents[2] / "cases" / "turbine_d1.toml")
    margin, excess = 0.1, 0.02
    anr = choose_anr(case, margin, excess)
    assert np.all(anr <= case.dosing["ANR"] + 1e-12)
    heads = []
    for i, mode in enumerate(case.cycle.modes):
        power, eo, co2 = engine_out_stream(case, i)
        own = eo.F[INDEX["NH3"]] / (eo.F[INDEX["NO"]] + eo.F[INDEX["NO2"]])
        assert anr[i] >= own - 1e-12
        heads.append(mode_emissions(mode.name, mode.weight, power, False, eo, co2))
    rows = [r for ls in case.limit_sets for r in evaluate(
        ls, heads, rated_power_kW=case.engine.rated_power_kW) if r["quantity"].startswith("NOx")
        and r.get("limit") is not None]
    assert rows
    names = [m.name for m in case.cycle.modes]
    for r in rows:                       # every gated NOx row is met at the chosen conversion
        i = names.index(r["mode"])
        x = anr[i] - excess
        assert r["value"] * (1.0 - x) <= r["limit"] * (1.0 - margin) * (1 + 1e-9)


def test_diameter_raised_for_the_back_pressure_budget(tmp_path):
    """With diameter_from_dp the diameter grows until the sized train meets the pressure-drop
    budget (laminar dp ~ V / D^4 at a given catalyst volume: Hagen-Poiseuille)."""
    data = case_data(tmp_path, dp_max_kPa=0.02, diameter_from_dp=True, max_diameter_mm=2000.0)
    case = parse_run_case(data, str(tmp_path / "c.toml"))
    base = size_case(parse_run_case(case_data(tmp_path), str(tmp_path / "c0.toml")))
    dp0 = max(m.solution.dp_Pa for m in base.run.modes) / 1e3
    assert dp0 > 0.02                      # the budget is binding at the case's diameter
    res = size_case(case)
    dp = max(m.solution.dp_Pa for m in res.run.modes) / 1e3
    assert res.train.bricks[0].diameter > base.train.bricks[0].diameter
    assert dp <= 0.02 * 1.001
    assert res.feasible


def test_size_command_json_and_report(tmp_path, capsys):
    """`aftertreat size CASE --json --report DIR`: exit 0, one aftertreat.size/1 object on
    stdout, and the sizing report (size.json, curves CSV and PNG, the run report) in DIR."""
    import json

    from aftertreat.cli import main
    from aftertreat.report import to_toml
    case_file = tmp_path / "case.toml"
    case_file.write_text(to_toml(case_data(tmp_path)))
    out = tmp_path / "report"
    assert main(["size", str(case_file), "--json", "--report", str(out)]) == 0
    obj = json.loads(capsys.readouterr().out)
    assert obj["schema"] == "aftertreat.size/1" and obj["feasible"] is True
    names = {p.name for p in out.iterdir()}
    assert {"size.json", "sizing_curves.csv", "sizing_curves.png", "margins.csv",
            "summary.json", "SAFETY.txt"} <= names
    assert (out / "sizing_curves.png").read_bytes()[:4] == b"\x89PNG"


def test_ghsv_diameter_rule(tmp_path):
    """The GHSV diameter rule: an SCR section of that diameter and the given length/diameter
    ratio has the design GHSV at the largest normal flow of the cycle (GHSV = Q_N / V, the trade
    definition, through the one GHSV function); the sizing then uses that diameter."""
    from aftertreat.evaluate import mode_inlets
    from aftertreat.sizing import ghsv_diameter
    from aftertreat.train import ghsv_per_h
    case = parse_run_case(case_data(tmp_path, ghsv_per_h=15000.0, length_to_diameter=1.5),
                          str(tmp_path / "c.toml"))
    inlets = mode_inlets(case)
    D = ghsv_diameter(inlets, 15000.0, 1.5)
    V = math.pi * D ** 2 / 4 * (1.5 * D)
    q_max = max((inl[3] for inl in inlets), key=lambda s: s.total)
    assert ghsv_per_h(q_max, V) == pytest.approx(15000.0, rel=1e-12)
    res = size_case(case, curves=False)
    assert res.train.bricks[0].diameter == pytest.approx(D, rel=1e-12)


@pytest.mark.parametrize("extra, key", [
    ({"ghsv_per_h": 20000.0, "face_velocity_m_s": 4.0}, "sizing.ghsv_per_h"),
    ({"length_to_diameter": 1.0}, "sizing.length_to_diameter"),
    ({"ghsv_per_h": -5.0}, "sizing.ghsv_per_h"),
])
def test_bad_diameter_rule_named(tmp_path, extra, key):
    """Conflicting or out-of-range diameter rules are rejected with the key named."""
    from aftertreat.errors import InputError
    with pytest.raises(InputError) as e:
        parse_run_case(case_data(tmp_path, **extra), str(tmp_path / "c.toml"))
    assert e.value.key == key
