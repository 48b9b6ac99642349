"""Robustness of the steady solver: random operating points over the shipped catalysts, and
random ammonia-engine duty cycles solved mode after mode with warm starts.

Invariants with no external basis beyond conservation (element balances by construction, the
energy account by the first law) and common practice for a solver: every point converges, a
converged answer keeps its balances and its flows non-negative, and a warm-started mode gives
the answer of a cold solve.
"""
import warnings

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as hs

import aftertreat as at
from aftertreat.species import ELEMENT_MATRIX, INDEX

import fuzz_cases as fz

SCR_SUBSTRATES = {
    "vanadia_extruded": lambda: at.Substrate.extruded(cpsi=35, wall_mm=0.7),
    "cu_chabazite": lambda: at.Substrate.coated(cpsi=400, wall_mil=4, washcoat_um=(80,)),
    "fe_zeolite": lambda: at.Substrate.coated(cpsi=400, wall_mil=4, washcoat_um=(80,)),
    "platinum_alumina": lambda: at.Substrate.coated(cpsi=400, wall_mil=4, washcoat_um=(20,)),
}
KINDS = list(SCR_SUBSTRATES) + ["asc_dual_layer"]


def random_point(rng):
    """An operating point drawn from the issue's design space (invented): shipped catalyst,
    T 200-550 C, ANR 0-2, NO2/NOx 0-0.7, O2 2-15 %, H2O 5-30 %, GHSV 2,000-200,000 1/h,
    length 0.1-2 m."""
    kind = KINDS[int(rng.integers(len(KINDS)))]
    if kind == "asc_dual_layer":
        layers = at.load_layers(kind)
        sub = at.Substrate.coated(cpsi=400, wall_mil=4,
                                  washcoat_um=tuple(th * 1e6 for _, th in layers))
        cats = tuple(c for c, _ in layers)
    else:
        sub, cats = SCR_SUBSTRATES[kind](), at.load_catalyst(kind)
    L = float(rng.uniform(0.1, 2.0))
    D = 0.5
    brick = at.Brick(kind, sub, cats, length=L, diameter=D)
    nox = float(rng.uniform(50, 2000))
    f2 = float(rng.uniform(0, 0.7))
    x = {"NO": nox * (1 - f2) * 1e-6, "NO2": nox * f2 * 1e-6,
         "NH3": nox * float(rng.uniform(0, 2)) * 1e-6, "N2O": float(rng.uniform(0, 100)) * 1e-6,
         "O2": float(rng.uniform(0.02, 0.15)), "H2O": float(rng.uniform(0.05, 0.30))}
    ghsv = float(np.exp(rng.uniform(np.log(2e3), np.log(2e5))))
    total = ghsv / 3600 * brick.volume * 101325 / (8.314462618 * 273.15)
    inlet = at.Stream.from_mole_fractions(x, T=float(rng.uniform(200, 550)) + 273.15, p=104e3,
                                          total_mol_s=total)
    return brick, inlet


def check_point(seed):
    rng = np.random.default_rng(seed)
    brick, inlet = random_point(rng)
    try:
        sol = at.solve_brick(brick, inlet, check_validity=False)
    except at.InputError as exc:           # a pressure drop beyond half the inlet pressure
        assert "pressure drop" in str(exc)
        return None
    assert sol.converged, (seed, brick.name, sol.attempts)
    assert sol.element_balance_error < 1e-9
    assert np.all(sol.F >= 0)
    return sol


@pytest.mark.parametrize("block", range(6))
def test_random_operating_points_converge(block):
    """300 seeded random points (6 x 50): every one converges with balanced atoms."""
    for seed in range(50 * block, 50 * (block + 1)):
        check_point(seed)


@pytest.mark.slow
@pytest.mark.parametrize("block", range(100))
def test_random_operating_points_converge_10000(block):
    """10,000 seeded random points (100 x 100)."""
    for seed in range(100_000 + 100 * block, 100_000 + 100 * (block + 1)):
        check_point(seed)


def _rel_scale(inlet):
    return inlet.F[INDEX["NO"]] + inlet.F[INDEX["NO2"]] + inlet.F[INDEX["NH3"]]


@settings(max_examples=12, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(seed=hs.integers(0, 10 ** 6))
def test_warm_started_cycles_agree_with_cold_solves(seed):
    """A random ammonia-engine duty cycle (tests/fuzz_cases.py: engine NH3/NOx up to 8, NO2/NOx
    up to 0.7, mixed trains, coarse grids), solved mode after mode with warm starts: every mode
    converges, balances its atoms to 1e-9 (engine-out + dosed = outlet) and agrees with a cold
    solve of the same mode within 1e-6 of the NO + NO2 + NH3 entering; no warning is raised."""
    case = fz.load_case_text(fz.random_cycle_case(seed))
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        res = at.run_case(case)
        for m in res.modes:
            assert m.solution.converged, (seed, m.name, [b.attempts for b in m.solution.bricks])
            assert m.element_balance_error() < 1e-9
            cold = case.train.solve(m.inlet)
            scale = _rel_scale(m.inlet)
            for sp in ("NO", "NO2", "NH3", "N2O"):
                i = INDEX[sp]
                assert abs(cold.outlet.F[i] - m.outlet.F[i]) <= 1e-6 * scale + 1e-15, (
                    seed, m.name, sp, cold.outlet.ppm(sp), m.outlet.ppm(sp))


@settings(max_examples=5, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(seed=hs.integers(0, 10 ** 6))
def test_idle_cycles_solve_and_keep_their_invariants(seed):
    """Random duty cycles with an idle mode (tests/fuzz_cases.py, idle=True): every mode
    converges with its atoms balanced and no negative internal flow (check_result), the idle
    mode has no g/kWh rows of its own (ISO 8178-4; or the row exempts it, NTC 2008 3.1.4) and
    the JSON holds finite numbers only."""
    import json
    from aftertreat.output import to_json
    case = fz.load_case_text(fz.random_cycle_case(seed, idle=True))
    res = at.run_case(case)
    assert fz.check_result(res, flow_tol=1e-12) == [], seed
    assert res.converged, seed
    idle = [m.name for m in res.modes if m.power_kW == 0.0]
    assert idle
    for c in res.limits:
        if c.mode in idle and c.quantity.endswith("_g_kWh"):
            assert c.limit is None and ("idle" in c.note or "exempt" in c.note), c
    text = to_json(res.to_json())
    assert "NaN" not in text and "Infinity" not in text
    json.loads(text)


def test_sizing_an_idle_cycle_case_answers(capsys):
    """`aftertreat size` on a random idle-cycle case (fixed seed) answers: exit 0 (feasible or
    not) or 1 (a flagged non-converged design), never a traceback or a bad-input exit."""
    from aftertreat.cli import main
    import tempfile
    from pathlib import Path
    with tempfile.TemporaryDirectory() as d:
        f = Path(d) / "idle.toml"
        f.write_text(fz.random_cycle_case(3, idle=True) + "\n[sizing]\ndesign_margin = 0.1\n")
        assert main(["size", str(f), "--json"]) in (0, 1)
    import json
    obj = json.loads(capsys.readouterr().out)
    assert obj["schema"] == "aftertreat.size/1" and isinstance(obj["feasible"], bool)


def test_reproduction_case():
    """The case that exposed converged answers with negative flows inside a brick (a D2 genset,
    engine NH3 up to 5264 ppm at 210 C, a mixed Cu-CHA / Fe-zeolite train, tests/fuzz_cases.py):
    every mode converges, no flow inside a brick is negative, the atoms balance, and mode 25 %
    (the one that reported 2 ppm NH3 slip) agrees with its cold solve."""
    case = fz.load_case_text(fz.reproduction_case())
    res = at.run_case(case)
    for m in res.modes:
        assert m.solution.converged
        assert m.element_balance_error() < 1e-9
        for b in m.solution.bricks:
            assert np.all(b.F >= 0)
        cold = case.train.solve(m.inlet)
        assert abs(cold.outlet.F[INDEX["NH3"]] - m.outlet.F[INDEX["NH3"]]) <= 1e-6 * _rel_scale(
            m.inlet)
    atoms_in = ELEMENT_MATRIX @ (res.modes[3].engine_out.F + res.modes[3].reagent)
    assert np.max(np.abs(ELEMENT_MATRIX @ res.modes[3].outlet.F - atoms_in)) < 1e-9 * atoms_in.max()


def test_a_sized_design_that_does_not_converge_says_where():
    """Fuzz seed 21 (tests/fuzz_cases.py) has an extruded brick on 2 cells that the sizer grows
    to 1.3 m, where its cells no longer converge: the answer is flagged infeasible, names the
    brick and its cell count, and suggests more cells (our own rule)."""
    from aftertreat.sizing import size_case
    res = size_case(fz.load_case_text(fz.random_cycle_case(21)), curves=False)
    if res.run.converged:
        pytest.skip("the solver converges this design now: pick another hard seed")
    assert not res.feasible
    assert any("did not converge" in p and "2 cells" in p for p in res.problems), res.problems
    assert any(s.startswith("more cells in brick") for s in res.suggestions), res.suggestions
