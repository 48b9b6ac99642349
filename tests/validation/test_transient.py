"""Checks of the transient model (aftertreat.transient): conservation, the steady limit, an NH3
adsorption breakthrough against the isotherm, and temperature-programmed desorption against the
Redhead analysis."""
import numpy as np
import pytest
from scipy.optimize import brentq

import aftertreat as at
from aftertreat.species import INDEX
from aftertreat.problem import problem_for
from aftertreat.transient import TransientSettings, simulate, start
from aftertreat.units import R_GAS

SUB = at.Substrate.coated(cpsi=400, wall_mil=4, washcoat_um=(30,))
CAP = 200.0                     # mol NH3 per m3 of catalytic layer
TIGHT = TransientSettings(tol=1e-11, tol_accept=1e-9)


def _stream(T, nh3_ppm, no_ppm=0.0, total=0.05):
    return at.Stream.from_mole_fractions({"NH3": nh3_ppm * 1e-6, "NO": no_ppm * 1e-6,
                                          "O2": 0.10, "H2O": 0.10}, T=T, p=101325.0,
                                         total_mol_s=total)


def _storage_catalyst(make_catalyst, *, k_ads=1e3, k_des=50.0, E_des=100.0, T_ref_C=300.0,
                      scr=0.0, adsorb=True):
    """NH3 storage on one site: adsorption k_ads c_NH3 (1 - theta), first-order desorption
    k_des exp(-E/R (1/T - 1/T_ref)) theta, and (optionally) standard SCR on stored NH3."""
    rx = [{"name": "desorption", "equation": "NH3(S) -> NH3", "form": "mass_action",
           "k_ref": k_des, "E_kJ_mol": E_des, "T_ref_C": T_ref_C, "coverage": {"S": 1}}]
    if adsorb:
        rx.append({"name": "adsorption", "equation": "NH3 -> NH3(S)", "form": "mass_action",
                   "k_ref": k_ads, "E_kJ_mol": 0.0, "T_ref_C": T_ref_C, "orders": {"NH3": 1},
                   "free_sites": {"S": 1}})
    if scr:
        rx.append({"name": "standard SCR", "equation": "4 NH3(S) + 4 NO + O2 -> 4 N2 + 6 H2O",
                   "form": "mass_action", "k_ref": scr, "E_kJ_mol": 60.0, "T_ref_C": T_ref_C,
                   "orders": {"NO": 1}, "coverage": {"S": 1}})
    return make_catalyst(rx, sites=[{"name": "S", "capacity_mol_m3": CAP,
                                     "provenance": {"capacity_mol_m3": "fitted: test value"}}],
                         valid_T_C=(50, 800))


def _brick(cat, *, cells=10, length=0.05, heat_capacity=None, name="B"):
    return at.Brick(name, SUB, cat, length=length, diameter=0.1, washcoat="none",
                    sherwood="fully_developed", cells=cells, heat_capacity_kJ_m3K=heat_capacity)


def test_nh3_conserved_over_a_trace(make_catalyst):
    """Over a varying trace (temperature steps, NH3 pulses, SCR consuming stored NH3), NH3 in =
    NH3 out + NH3 destroyed + change in storage to 1e-6 relative: implicit Euler sums each
    step's rates at its end time, so the discrete account closes to the solver tolerance
    (conservation of the scheme; arithmetic)."""
    cat = _storage_catalyst(make_catalyst, scr=5.0)
    train = at.Train([_brick(cat, name="A"), _brick(cat, name="B")])
    t = np.arange(0.0, 241.0)
    streams = [_stream(523.15 + (60.0 if 60 <= ti < 150 else 0.0),
                       400.0 if (ti % 40) < 20 else 0.0, 300.0) for ti in t]
    r = simulate(train, t, streams, settings=TIGHT)
    assert r.all_converged
    acc = r.nh3_account()
    assert acc["in_mol"] > 0 and acc["reacted_mol"] > 0
    assert abs(acc["stored_change_mol"]) > 1e-3 * acc["in_mol"]      # storage took part
    assert abs(acc["imbalance_mol"]) <= 1e-6 * acc["in_mol"]


def test_long_constant_input_reaches_the_steady_solution(make_catalyst):
    """A clean brick under a constant inlet for a long time ends at the steady solver's answer:
    implicit Euler's fixed point is the steady state (Hairer & Wanner 1996, stiff decay), here
    within 1e-6 relative on outlet NO, NH3 and stored NH3 and 1e-6 K on the solid."""
    cat = _storage_catalyst(make_catalyst, scr=5.0)
    train = at.Train([_brick(cat, heat_capacity=400.0)])
    inlet = _stream(548.15, 500.0, 400.0)
    steady = train.solve(inlet)
    t = np.concatenate([[0.0], np.geomspace(1.0, 2e5, 80)])
    state = start(train, inlet, steady=False, T_start_K=473.15)
    r = simulate(train, t, [inlet] * len(t), state=state, settings=TIGHT)
    assert r.all_converged
    out = r.outlet_F[-1]
    for sp in ("NO", "NH3"):
        assert out[INDEX[sp]] == pytest.approx(steady.outlet.F[INDEX[sp]], rel=1e-6)
    prob = problem_for(steady.bricks[0].brick)
    assert state.stored_nh3_mol()[0] == pytest.approx(prob.stored_nh3_mol(steady.bricks[0].state),
                                                      rel=1e-6)
    np.testing.assert_allclose(state.solid_T_K()[0], steady.bricks[0].T_solid, atol=1e-6)


def test_adsorption_breakthrough_matches_the_stored_capacity(make_catalyst):
    """NH3 step onto a clean, isothermal brick (storage only): the NH3 taken up, the integral of
    (in - out), equals capacity x volume x the Langmuir equilibrium coverage theta = Kc/(1+Kc),
    K = k_ads/k_des (first moment of the breakthrough curve: Ruthven 1984, Principles of
    Adsorption and Adsorption Processes, ch. 8), and the mean breakthrough time t = stored/F_in
    falls between the first NH3 at the outlet and full breakthrough."""
    k_ads, k_des = 2e3, 0.5
    cat = _storage_catalyst(make_catalyst, k_ads=k_ads, k_des=k_des, E_des=0.0)
    brick = _brick(cat, cells=20)
    train = at.Train([brick])
    T = 473.15
    feed = _stream(T, 300.0, total=0.02)
    clean = _stream(T, 0.0, total=0.02)
    state = start(train, clean, steady=False, T_start_K=T)
    t = np.arange(0.0, 6000.0, 5.0)
    r = simulate(train, t, [clean] + [feed] * (len(t) - 1), state=state, settings=TIGHT)
    assert r.all_converged
    c = feed.F[INDEX["NH3"]] / feed.total * feed.p / (R_GAS * T)          # mol/m3 in the gas
    theta = k_ads * c / (k_des + k_ads * c)
    layer = sum(SUB.layer_volume_fractions) * brick.volume
    expected = CAP * layer * theta
    acc = r.nh3_account()                       # in and out as the time steps sum them
    taken = acc["in_mol"] - acc["out_mol"]
    assert r.stored_nh3_mol[-1, 0] == pytest.approx(expected, rel=1e-6)
    assert taken == pytest.approx(expected, rel=1e-6)
    frac = r.outlet_F[:, INDEX["NH3"]] / feed.F[INDEX["NH3"]]
    t_mean = expected / feed.F[INDEX["NH3"]]
    t_first = r.t_s[np.argmax(frac > 0.05)]
    t_full = r.t_s[np.argmax(frac > 0.95)]
    assert t_first < t_mean < t_full


def _redhead_peak(E, A, beta):
    """Redhead (1962), first order: E/(R Tp^2) = (A/beta) exp(-E/(R Tp))."""
    return brentq(lambda T: E / (R_GAS * T ** 2) - A / beta * np.exp(-E / (R_GAS * T)), 300, 1200)


@pytest.mark.parametrize("beta_K_min", [5.0, 20.0])
def test_tpd_peak_follows_redhead(make_catalyst, beta_K_min):
    """Temperature-programmed desorption of a full, desorption-only brick heated at beta: the
    outlet NH3 peaks where the Redhead (1962) condition for first-order desorption holds,
    E/(R Tp^2) = (A/beta) exp(-E/(R Tp)), within 2 K (the solid follows the gas within ~1 K at
    this small heat capacity); a faster ramp shifts the peak up as Redhead predicts."""
    E, k_ref, T_ref = 110e3, 2.0, 573.15
    cat = _storage_catalyst(make_catalyst, k_des=k_ref, E_des=E / 1e3, T_ref_C=T_ref - 273.15,
                            adsorb=False)
    train = at.Train([_brick(cat, cells=4, length=0.02, heat_capacity=20.0)])
    T0, beta = 423.15, beta_K_min / 60.0
    t = np.arange(0.0, (800.0 - T0) / beta, 1.0)
    streams = [_stream(T0 + beta * ti, 0.0, total=0.05) for ti in t]
    state = start(train, streams[0], steady=False, T_start_K=T0)
    state.set_coverage(1.0)                                 # saturated before the ramp
    r = simulate(train, t, streams, state=state, settings=TransientSettings(tol=1e-10))
    assert r.all_converged
    i = int(np.argmax(r.outlet_F[:, INDEX["NH3"]]))
    Tp_model = r.solid_T_mean_K[i, 0]
    A = k_ref * np.exp(E / (R_GAS * T_ref)) / CAP   # rates are per m3 of layer: d theta/dt = r/CAP
    Tp = _redhead_peak(E, A, beta)
    assert Tp_model == pytest.approx(Tp, abs=2.0)
