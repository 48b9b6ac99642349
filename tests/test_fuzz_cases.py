"""The invented fuzz-case generator (tests/fuzz_cases.py): every seed gives a valid case with a
physically consistent exhaust, the reproduction case loads, and the result checker finds
deliberately corrupted results. Loading only (no solves) except one tiny real solve."""
import dataclasses
import tomllib
from types import SimpleNamespace

import numpy as np
import pytest

import fuzz_cases as fc
from aftertreat.cycle import load_cycle
from aftertreat.species import INDEX, SPECIES

SEEDS = range(400)


@pytest.fixture(scope="module")
def texts():
    return {s: fc.random_cycle_case(s) for s in SEEDS}


@pytest.fixture(scope="module")
def tables(texts):
    return {s: tomllib.loads(t) for s, t in texts.items()}


@pytest.mark.parametrize("seed", SEEDS)
def test_seed_loads_and_is_consistent(seed, texts, tmp_path):
    case = fc.load_case_text(texts[seed], f"seed_{seed}", tmp_path)
    assert case.n_modes >= 1
    assert fc.check_case_inputs(case) == []
    assert f"seed {seed}" in case.title and "nvented fuzz case" in case.title


def test_deterministic_and_distinct(texts):
    assert all(fc.random_cycle_case(s) == texts[s] for s in (0, 1, 17, 399))
    assert len(set(texts.values())) == len(texts)


def test_no_idle_cycles_and_positive_power(tables):
    for s, d in tables.items():
        if "iso8178" in d["cycle"]:
            assert min(load_cycle(d["cycle"]["iso8178"]).power_fractions()) > 0, s
        else:
            modes = d["cycle"]["mode"]
            assert 1 <= len(modes) <= 6
            names = [m["name"] for m in modes]
            assert len(set(names)) == len(names)
            assert abs(sum(m["weight"] for m in modes) - 1) < 1e-9
            assert all(m.get("power_pct", 1) > 0 and m.get("torque_pct", 1) > 0 for m in modes)


def test_ranges(tables):
    for s, d in tables.items():
        e = d["engine_out"]
        nox, nh3 = np.array(e["NOx_ppm"]), np.array(e["NH3_ppm"])
        assert np.all((100 <= nox) & (nox <= 3000)), s
        assert np.all(nh3 <= 8 * nox * (1 + 1e-3) + 0.1), s
        assert np.all((0 <= np.array(e["NO2_fraction"])) & (np.array(e["NO2_fraction"]) <= 0.7))
        assert np.all(np.array(e["N2O_ppm"]) <= 300) and np.all(np.array(e["H2_ppm"]) <= 3000)
        assert np.all((200 <= np.array(e["T_C"])) & (np.array(e["T_C"]) <= 550)), s
        if d.get("dosing", {}).get("method", "none") != "none":
            assert np.all((0 <= np.array(d["dosing"]["ANR"])) & (np.array(d["dosing"]["ANR"]) <= 2))
        assert 1 <= sum(b["catalyst"] in fc.SCR_CATALYSTS for b in d["brick"]) <= 3
        for b in d["brick"]:
            assert 50 <= b["length_mm"] <= 2000
            assert 2 <= b.get("cells", 40) <= 60
        assert d["limits"].get("sets") or d["limits"].get("custom")
        assert all("source" in r for r in d["limits"].get("custom", []))


def test_options_are_covered(tables):
    """Across the seeds every kind of input the brief asks for occurs."""
    seen = set()
    for d in tables.values():
        seen.add(("app", d["engine"]["application"]))
        seen.add(("method", d["engine_out"]["method"]))
        seen.add(("dosing", d.get("dosing", {}).get("method", "none")))
        seen.add(("cycle", d["cycle"].get("iso8178", f"custom{len(d['cycle'].get('mode', []))}")))
        f = d.get("fuel", {"NH3": 1.0})
        seen.add(("fuel", tuple(sorted(k for k in f if k != "cracked_H2")), f.get("cracked_H2")))
        cats = [b["catalyst"] for b in d["brick"]]
        if len({c for c in cats if c in fc.SCR_CATALYSTS}) > 1:
            seen.add(("mixed train",))
        for b in d["brick"]:
            seen.add(("brick", b["catalyst"], b["substrate"]))
            if b.get("cells", 40) <= 4:
                seen.add(("coarse",))
        e = d["engine_out"]
        if np.any(np.array(e["NH3_ppm"]) > 3 * np.array(e["NOx_ppm"])):
            seen.add(("NH3 > 3 NOx",))
        if np.any(np.array(e["NH3_ppm"]) == 0):
            seen.add(("no NH3",))
        if "imo_tier_iii" in d["limits"].get("sets", []):
            seen.add(("imo",))
        if d["limits"].get("custom"):
            seen.add(("custom limits",))
    need = {("app", a) for a in ("marine propulsion", "auxiliary genset", "stationary engine",
                                 "gas turbine")}
    need |= {("method", "measured"), ("method", "combustion"), ("dosing", "none"),
             ("dosing", "NH3"), ("dosing", "urea"), ("cycle", "D1"), ("cycle", "D2"),
             ("cycle", "E2"), ("cycle", "E3"), ("cycle", "custom1"), ("cycle", "custom6"),
             ("fuel", ("NH3",), None), ("fuel", ("H2", "NH3"), True),
             ("fuel", ("H2", "NH3"), False),
             ("fuel", ("NH3", "diesel"), None), ("mixed train",), ("coarse",), ("NH3 > 3 NOx",),
             ("no NH3",), ("imo",), ("custom limits",),
             ("brick", "vanadia_extruded", "extruded"), ("brick", "vanadia_extruded", "plate"),
             ("brick", "cu_chabazite", "coated"), ("brick", "cu_chabazite", "extruded"),
             ("brick", "fe_zeolite", "coated"), ("brick", "fe_zeolite", "plate"),
             ("brick", "asc_dual_layer", "coated"), ("brick", "platinum_alumina", "coated")}
    assert need <= seen, sorted(need - seen)


IDLE_SEEDS = range(80)


@pytest.fixture(scope="module")
def idle_texts():
    return {s: fc.random_cycle_case(s, idle=True) for s in IDLE_SEEDS}


def test_idle_seeds_load_and_are_consistent(idle_texts, tmp_path):
    """Cases drawn with an idle mode: each loads, has a zero-power mode and a positive-power
    one, and its exhaust passes the same consistency checks (the idle exhaust comes from the
    idle fuel share); shipped idle cycles and custom idle modes both occur."""
    kinds = set()
    for s, text in idle_texts.items():
        case = fc.load_case_text(text, f"idle_{s}", tmp_path)
        assert fc.check_case_inputs(case) == [], s
        fr = case.cycle.power_fractions()
        assert min(fr) == 0.0 and max(fr) > 0.0, s
        kinds.add(case.cycle.key if case.cycle.key in fc._IDLE_CYCLES else "custom")
        kinds.add(case.engine_out["method"])
    assert {"custom", "combustion", "measured"} <= kinds and len(kinds & set(fc._IDLE_CYCLES)) >= 2


def test_non_idle_seeds_do_not_change(texts):
    """Drawing idle cases uses its own random stream: the plain seeds stay as they were (the
    slow studies and the robustness tests name seeds of the plain stream)."""
    assert all(min(load_cycle(tomllib.loads(texts[s])["cycle"]["iso8178"]).power_fractions()) > 0
               for s in texts if "iso8178" in tomllib.loads(texts[s])["cycle"])


def test_reproduction_case_loads(tmp_path):
    case = fc.load_case_text(fc.reproduction_case(), "repro", tmp_path)
    assert fc.check_case_inputs(case) == []
    assert case.cycle.key == "D2" and case.engine.application == "auxiliary genset"
    assert case.fuel["shares"] == {"NH3": 1.0} and case.dosing["method"] == "none"
    e = case.engine_out
    assert e["method"] == "measured" and e["basis"] == "wet"
    assert np.all(e["NOx_ppm"] == 1395) and np.all(e["NO2_fraction"] == 0.35)
    assert list(e["NH3_ppm"]) == [4472, 449, 233, 5264, 1072]
    assert np.all((209 <= e["T_K"] - 273.15) & (e["T_K"] - 273.15 <= 212))
    b = case.train.bricks
    assert [x.catalysts[0].key for x in b] == ["cu_chabazite", "cu_chabazite", "fe_zeolite"]
    assert [x.substrate.kind for x in b] == ["extruded", "coated", "plate"]
    assert b[0].substrate.cell_density == pytest.approx(25 / 0.0254 ** 2)
    assert b[1].substrate.cell_density == pytest.approx(900 / 0.0254 ** 2) and b[1].cells == 4


# ---- the result checker -------------------------------------------------------------------------

def _stream(**ppm):
    F = np.zeros(len(SPECIES))
    F[INDEX["N2"]], F[INDEX["O2"]], F[INDEX["H2O"]] = 70.0, 10.0, 10.0
    for s, v in ppm.items():
        F[INDEX[s]] = v * 1e-4
    return SimpleNamespace(F=F)


def _fake_result(*, converged=True, balance=0.0, F=None, coverage=None, outlet=None):
    """A minimal object with the fields check_result reads (one mode, one brick)."""
    inlet = _stream(NO=1000.0, NH3=1000.0)
    out = outlet if outlet is not None else _stream(NO=10.0, NH3=5.0)
    if F is None:
        F = np.linspace(inlet.F, out.F, 5)
    if coverage is None:
        coverage = np.full((5, 1, 1), 0.3)
    brick = SimpleNamespace(brick=SimpleNamespace(name="fake SCR"), F=F, coverage=coverage,
                            converged=converged)
    mode = SimpleNamespace(name="fake mode", element_balance_error=lambda: balance, inlet=inlet,
                           outlet=out, solution=SimpleNamespace(converged=converged,
                                                                bricks=[brick]))
    return SimpleNamespace(modes=[mode])


def _kinds(problems):
    return {fc.problem_kind(p) for p in problems}


def test_checker_clean_fake_result():
    assert fc.check_result(_fake_result()) == []


def test_checker_finds_each_corruption():
    assert _kinds(fc.check_result(_fake_result(balance=1e-6))) == {"element balance"}
    assert fc.check_result(_fake_result(balance=1e-6, converged=False)) == []  # not flagged
    F = np.linspace(_stream(NO=1000.0).F, _stream(NO=10.0).F, 5)
    F[2, INDEX["NO2"]] = -1e-3
    p = fc.check_result(_fake_result(F=F))
    assert _kinds(p) == {"negative internal flow"} and "NO2" in p[0] and "cell 2" in p[0]
    assert fc.check_result(_fake_result(F=F), flow_tol=1e-3) == []    # below the tolerance
    F[1, INDEX["NO"]] = np.nan
    assert "non-finite internal flow" in _kinds(fc.check_result(_fake_result(F=F)))
    cov = np.full((5, 1, 1), 0.3)
    cov[4, 0, 0] = 1.2
    assert _kinds(fc.check_result(_fake_result(coverage=cov))) == {"coverage out of range"}
    cov[4, 0, 0] = -0.01
    assert _kinds(fc.check_result(_fake_result(coverage=cov))) == {"coverage out of range"}
    out = _stream(NO=10.0, NH3=5.0)
    out.F[INDEX["N2O"]] = -1e-9
    F = np.linspace(_stream(NO=1000.0, NH3=1000.0).F, _stream(NO=10.0, NH3=5.0).F, 5)
    assert _kinds(fc.check_result(_fake_result(outlet=out, F=F))) == {"negative outlet flow"}
    assert _kinds(fc.check_result(_fake_result(outlet=_stream(NO=10.0, NH3=1000.1)))) == \
        {"NH3 made"}
    assert fc.check_result(_fake_result(outlet=_stream(NO=10.0, NH3=1000.0))) == []


_TINY = """
title = "Invented tiny test case (not a real engine)"
[engine]
application = "auxiliary genset"
rated_power_kW = 500
rated_speed_rpm = 1500
[cycle]
[[cycle.mode]]
name = "only"
weight = 1.0
power_pct = 75
[engine_out]
method = "measured"
basis = "wet"
mass_flow_kg_h = 2500
T_C = 350
p_kPa = 103
O2_pct = 10.0
H2O_pct = 18.0
NOx_ppm = 900
NH3_ppm = 950
[[brick]]
name = "V"
catalyst = "vanadia_extruded"
substrate = "extruded"
cpsi = 35
wall_mm = 0.7
length_mm = 400
diameter_mm = 500
cells = 6
[limits]
[[limits.custom]]
name = "NH3"
quantity = "NH3_ppmvd"
value = 10.0
unit = "ppmvd"
o2_ref_pct = 15.0
source = "invented test limit"
"""


def test_checker_finds_corrupted_real_result(tmp_path, deadline):
    from aftertreat.evaluate import run_case
    case = fc.load_case_text(_TINY, "tiny", tmp_path)
    with deadline(120):
        result = run_case(case)
    clean = fc.check_result(result, flow_tol=1e-12)
    mode = result.modes[0]
    b0 = mode.solution.bricks[0]
    F = b0.F.copy()
    F[F.shape[0] // 2, INDEX["NO"]] = -0.01 * mode.inlet.F.sum()
    bad_brick = dataclasses.replace(b0, F=F)
    bad_sol = dataclasses.replace(mode.solution, bricks=[bad_brick])
    bad = dataclasses.replace(result, modes=[dataclasses.replace(mode, solution=bad_sol)])
    problems = fc.check_result(bad, flow_tol=1e-12)
    new = [p for p in problems if p not in clean]
    assert any(fc.problem_kind(p) == "negative internal flow" and "'V'" in p and "NO" in p
               for p in new), problems
    assert b0.F.min() == result.modes[0].solution.bricks[0].F.min()     # original untouched
