"""The transient brick model against an independent method-of-lines reference.

``mol_transient.py`` (this folder; it does not import aftertreat) solves the continuous
equations of the transient model -- quasi-steady gas along the brick, NH3 coverage and solid
temperature in time -- by finite volumes in z with an exponential Runge-Kutta gas march inside
each cell and scipy's error-controlled BDF in time (rtol 1e-8). Here it is run on a scenario of
our own and compared with :func:`aftertreat.transient.simulate` through the public API.

Scenario (invented numbers, ours): one Cu-zeolite-like SCR brick, 100 mm long and 100 mm across,
on a coated 400 cpsi / 6 mil substrate with a 40 um washcoat (geometry from
``aftertreat.Substrate.coated``), heat capacity 665 kJ/(m3 K) of brick (about (1 - OFA) x
2.0 MJ/(m3 K), the coated-cordierite value of ``aftertreat/data/materials.toml``, from memory),
kinetic limit (no film, no washcoat diffusion, Nu = 2.976 fully developed: Shah & London 1978).
Kinetics: the numbers of ``catalysts/cu_chabazite.toml`` for adsorption, Temkin desorption,
standard SCR and NH3 oxidation (provenance there). Feed 0.5 mol/s with 400 ppm NH3, 300 ppm NO,
10 % O2, 8 % H2O, balance N2, at 1 atm. The brick starts in its steady state at 200 C; the inlet
then ramps to 350 C within 1 s and stays there for 300 s. The brick heats over ~30 s and
releases most of its stored NH3: the outlet NH3 rises from 230 ppm to a peak of ~3600 ppm at
t = 17.8 s.

Measured (2 shared CPUs, so wall times are rough):

* reference, peak of the outlet NH3 flow (t_peak s, F_peak mol/s): N = 50: 17.78386,
  1.796923e-3; N = 100: 17.79052, 1.798484e-3; N = 200: 17.79218, 1.798876e-3; N = 400:
  17.79260, 1.798975e-3 (second order in dz: changes 8.7e-4, 2.2e-4, 5.5e-5 in the peak
  value, 3.7e-4, 9.3e-5, 2.3e-5 in its time; whole curve, largest change / peak: 1.3e-3,
  3.2e-4, 7.9e-5). rtol 1e-8 -> 1e-9: peak changes < 1e-6 (N = 100 and 200), curve 1.6e-7.
  Wall time at rtol 1e-8: 3-6 s (N = 100), 10 s (200), 19 s (400), steady start included.
* aftertreat, 200 cells, one implicit-Euler step per sample, against the N = 100 reference
  (peak time by a parabola through the largest sample and its neighbours): steps of 0.05 s:
  peak value -0.22 %, peak time +0.25 %, outlet NH3 within 0.38 % of the peak everywhere
  (largest at 13.9 s, on the rise), outlet T within 0.24 K; steps of 1 s: peak value -4.5 %,
  peak time +4.3 %. The 0.05 s error is implicit Euler's, first order in dt (0.1 / 0.05 /
  0.025 s: peak 1.79032e-3 / 1.79431e-3 / 1.79629e-3 at 11453d0); extrapolated to dt -> 0
  and to fine cells, aftertreat's peak is within ~2e-4 of the reference's.
* aftertreat at df3b403 (error-controlled sub-steps, default settings, 1 s samples): from
  t = 1.85 s on, steps whose Newton residual is below 1e-8 are rejected by the solver's energy
  account (0.063 -> 0.075 K against its 0.051 K tolerance), so (a) reports 677 of 1200 steps
  "not converged" and (b) shrinks its sub-steps towards dt_min (over 6 min for 60 s). The
  account prices the NH3 released from storage at the mean solid temperature; priced at each
  cell's own temperature, the difference is 0.07 K at 2 s and 0.26 K at 10 s on the reference's
  state, which is the gap seen. With that acceptance loosened to 1 K (outside the suite): (a)
  unchanged and all converged; (b) 142 sub-steps accepted and 2031 rejected in the first 60 s,
  peak value -1.75 %, peak time +2.7 %.

The default run uses the N = 100 reference (converged to 3e-4 of the peak, above) and a 60 s
window (the release and most of its tail) for the 0.05 s comparison; the N = 200/400 reference
and the full 300 s comparison at 0.05 s are ``slow``.
"""
from __future__ import annotations

import dataclasses
import math
import pathlib
import sys

import numpy as np
import pytest

import aftertreat as at
from aftertreat.catalyst import parse_catalyst
from aftertreat.species import INDEX
from aftertreat.transient import TransientSettings, simulate, start

sys.path.insert(0, str(pathlib.Path(__file__).parent))
import mol_transient as mt  # noqa: E402

# --- scenario: invented numbers (ours) ---------------------------------------------------------
SUB = at.Substrate.coated(cpsi=400, wall_mil=6, washcoat_um=(40,))
LENGTH_M, DIAMETER_M = 0.10, 0.10
HEAT_CAPACITY_KJ_M3K = 665.0
TOTAL_MOL_S = 0.5
X_IN = {"NH3": 400e-6, "NO": 300e-6, "O2": 0.10, "H2O": 0.08}          # balance N2
P_PA = 101325.0
T_COLD_K, T_HOT_K, RAMP_S, T_END_S = 473.15, 623.15, 1.0, 300.0
WINDOW_S = 60.0                 # default-suite window of the 0.05 s comparison
FINE_DT_S, TRACE_DT_S = 0.05, 1.0
AT_CELLS = 200
REF_CELLS, REF_CELLS_FINE = 100, 200

# --- kinetics: catalysts/cu_chabazite.toml (provenance there) ----------------------------------
CAPACITY = 1500.0
K = dict(k1=5000.0, T1_C=300.0, k2=0.0908, E2=150.0, alpha=0.4, T2_C=300.0,
         k3=300.0, E3=65.0, T3_C=250.0, k4=0.008, E4=150.0, T4_C=300.0)
_FIT = "fitted: test value (numbers of catalysts/cu_chabazite.toml)"


def _catalyst():
    """The four reactions as an aftertreat catalyst, built from a dict by parse_catalyst (as
    tests/conftest.py does)."""
    rx = [
        {"name": "NH3 adsorption", "equation": "NH3 -> NH3(S1)", "form": "mass_action",
         "k_ref": K["k1"], "E_kJ_mol": 0.0, "T_ref_C": K["T1_C"], "orders": {"NH3": 1},
         "free_sites": {"S1": 1}},
        {"name": "NH3 desorption", "equation": "NH3(S1) -> NH3", "form": "temkin_desorption",
         "k_ref": K["k2"], "E_kJ_mol": K["E2"], "alpha": K["alpha"], "T_ref_C": K["T2_C"]},
        {"name": "standard SCR", "equation": "4 NH3(S1) + 4 NO + O2 -> 4 N2 + 6 H2O",
         "form": "mass_action", "k_ref": K["k3"], "E_kJ_mol": K["E3"], "T_ref_C": K["T3_C"],
         "orders": {"NO": 1}, "coverage": {"S1": 1}},
        {"name": "NH3 oxidation", "equation": "4 NH3(S1) + 3 O2 -> 2 N2 + 6 H2O",
         "form": "mass_action", "k_ref": K["k4"], "E_kJ_mol": K["E4"], "T_ref_C": K["T4_C"],
         "coverage": {"S1": 1}},
    ]
    for r in rx:
        r["provenance"] = {p: _FIT for p in ("k_ref", "E_kJ_mol", "alpha", "orders",
                                             "coverage", "free_sites") if p in r}
    table = {
        "name": "Cu-zeolite-like test catalyst", "valid_T_C": [100.0, 700.0],
        "source": [{"key": "test", "authors": "aftertreat test suite", "year": 2024}],
        "pores": {"porosity": 0.4, "tortuosity": 3.0, "pore_diameter_nm": 200.0,
                  "provenance": {"porosity": _FIT, "tortuosity": _FIT,
                                 "pore_diameter_nm": _FIT}},
        "site": [{"name": "S1", "capacity_mol_m3": CAPACITY,
                  "provenance": {"capacity_mol_m3": _FIT}}],
        "reaction": rx,
    }
    return parse_catalyst(table, key="cu_zeolite_test", file="<test catalyst>")


def _inlet_T(t: float) -> float:
    return T_COLD_K + (T_HOT_K - T_COLD_K) * min(max(t / RAMP_S, 0.0), 1.0)


def _stream(T: float) -> at.Stream:
    return at.Stream.from_mole_fractions(X_IN, T=T, p=P_PA, total_mol_s=TOTAL_MOL_S)


def _times(dt: float, t_end: float) -> np.ndarray:
    return np.linspace(0.0, t_end, int(round(t_end / dt)) + 1)


# --- the reference ------------------------------------------------------------------------------
def _reference_config():
    brick = mt.BrickConfig(length_m=LENGTH_M, frontal_area_m2=math.pi / 4 * DIAMETER_M ** 2,
                           ofa=SUB.ofa, gsa_m2_m3=SUB.gsa, d_h_m=SUB.d_h,
                           layer_fraction=SUB.layer_volume_fractions[0],
                           heat_capacity_J_m3K=HEAT_CAPACITY_KJ_M3K * 1e3)
    kin = mt.Kinetics(capacity_mol_m3=CAPACITY, k1=K["k1"], T_ref1=K["T1_C"] + 273.15,
                      k2=K["k2"], E2=K["E2"] * 1e3, alpha=K["alpha"], T_ref2=K["T2_C"] + 273.15,
                      k3=K["k3"], E3=K["E3"] * 1e3, T_ref3=K["T3_C"] + 273.15,
                      k4=K["k4"], E4=K["E4"] * 1e3, T_ref4=K["T4_C"] + 273.15)
    s = _stream(T_COLD_K)
    flows = {sp: float(s.F[INDEX[sp]]) for sp in ("NH3", "NO", "O2", "H2O", "N2")}
    assert abs(sum(flows.values()) - s.total) < 1e-15 * s.total          # nothing else in it
    inlet = mt.PiecewiseLinearInlet(t_s=(0.0, RAMP_S), T_K=(T_COLD_K, T_HOT_K), flows=flows,
                                    p_Pa=P_PA)
    return brick, kin, inlet


def _reference(cells: int, rtol: float = 1e-8, t_end: float = T_END_S):
    brick, kin, inlet = _reference_config()
    return mt.simulate(brick, kin, inlet, _times(FINE_DT_S, t_end), cells=cells, rtol=rtol)


@pytest.fixture(scope="module")
def reference():
    return _reference(REF_CELLS)


# --- aftertreat --------------------------------------------------------------------------------
def _fixed_steps() -> TransientSettings:
    """Settings with one implicit-Euler step per sample interval (error control off where the
    model has it)."""
    names = {f.name for f in dataclasses.fields(TransientSettings)}
    return TransientSettings(error_control=False) if "error_control" in names \
        else TransientSettings()


def _aftertreat(dt: float, t_end: float, settings: TransientSettings):
    brick = at.Brick("SCR", SUB, _catalyst(), length=LENGTH_M, diameter=DIAMETER_M,
                     washcoat="none", sherwood="fully_developed", film=False, cells=AT_CELLS,
                     heat_capacity_kJ_m3K=HEAT_CAPACITY_KJ_M3K)
    train = at.Train([brick])
    t = _times(dt, t_end)
    state = start(train, _stream(T_COLD_K), steady=True, settings=settings)
    return simulate(train, t, [_stream(_inlet_T(ti)) for ti in t], state=state,
                    settings=settings)


@pytest.fixture(scope="module")
def aftertreat_fine_window():
    return _aftertreat(FINE_DT_S, WINDOW_S, _fixed_steps())


def _sample_peak(t, y):
    """(time, value) of the largest sample, refined by the parabola through it and its two
    neighbours (three-point interpolation of a smooth maximum)."""
    j = int(np.argmax(y))
    if j == 0 or j == len(y) - 1:
        return float(t[j]), float(y[j])
    tt, yy = t[j - 1:j + 2] - t[j], y[j - 1:j + 2]
    a, b, c = np.polyfit(tt, yy, 2)
    if a >= 0:
        return float(t[j]), float(y[j])
    tv = min(max(-b / (2.0 * a), tt[0]), tt[2])
    return float(t[j] + tv), float(c + b * tv + a * tv * tv)


def _compare_peaks(ref, res):
    tr, yr = ref.peak("NH3")
    ta, ya = _sample_peak(res.t_s, res.outlet_F[:, INDEX["NH3"]])
    return (ya / yr - 1.0), (ta / tr - 1.0), (tr, yr, ta, ya)


# --- checks of the reference itself ------------------------------------------------------------
def test_reference_gas_march_matches_adaptive_integration():
    """The in-cell gas integration of the reference (Lawson exponential RK4, one step per cell)
    against scipy's DOP853 at rtol 1e-13 on the continuous gas equations, for a strongly non-
    uniform coverage and temperature profile on 100 cells with a 623 K gas entering a 560 K
    brick: outlet NH3 and NO flows within 1e-7 relative, the gas temperature change within
    1e-9, the heat given to the gas in every cell within 1e-6 (source: DOP853, Hairer, Norsett &
    Wanner 1993, as implemented in scipy; measured 1.1e-8, 5e-9, 2e-11, 7e-8; fourth order: 16x
    smaller on 200 cells)."""
    brick, kin, inlet = _reference_config()
    n = REF_CELLS
    z = (np.arange(n) + 0.5) / n
    theta = 0.95 - 0.6 * z ** 0.7
    Ts = 560.0 - 80.0 * z + 15.0 * np.sin(6.0 * z)
    err = mt.gas_check(brick, kin, inlet, theta, Ts, t=2.0)
    assert err["NH3"] < 1e-7 and err["NO"] < 1e-7
    assert err["Tg"] < 1e-9
    assert err["Q"] < 1e-6


def test_reference_steady_start_agrees_with_steady_solver(reference):
    """The reference's own steady state at 200 C (damped Newton to |dy/dt| < 1e-10) against
    aftertreat's steady solver on the same brick: outlet NH3 and NO within 0.1 % and outlet
    temperature within 0.02 K (two discretisations of the same continuous steady state; the
    reference at 100 cells is converged to ~1e-4, its docstring)."""
    assert reference.extra["steady_residual"] < 1e-10
    brick = at.Brick("SCR", SUB, _catalyst(), length=LENGTH_M, diameter=DIAMETER_M,
                     washcoat="none", sherwood="fully_developed", film=False, cells=AT_CELLS,
                     heat_capacity_kJ_m3K=HEAT_CAPACITY_KJ_M3K)
    sol = at.Train([brick]).solve(_stream(T_COLD_K))
    out = sol.outlet
    for sp in ("NH3", "NO"):
        assert reference.flow(sp)[0] == pytest.approx(out.F[INDEX[sp]], rel=1e-3), sp
    assert reference.outlet_T_K[0] == pytest.approx(out.T, abs=0.02)


@pytest.mark.slow
def test_reference_converged_in_cells_and_rtol():
    """Refining the reference: N 200 -> 400 and rtol 1e-8 -> 1e-9 (at N = 200) change the
    outlet NH3 release peak (value and time) and the whole outlet NH3 curve (largest change
    over the peak value) by less than 0.1 % (source: the reference itself; measured 5.5e-5,
    2.3e-5 and 7.9e-5 for N, < 1e-6 and 1.7e-7 for rtol)."""
    base = _reference(REF_CELLS_FINE)
    for other in (_reference(2 * REF_CELLS_FINE), _reference(REF_CELLS_FINE, rtol=1e-9)):
        (t0, y0), (t1, y1) = base.peak("NH3"), other.peak("NH3")
        assert abs(y1 / y0 - 1.0) < 1e-3
        assert abs(t1 / t0 - 1.0) < 1e-3
        assert np.max(np.abs(other.flow("NH3") - base.flow("NH3"))) < 1e-3 * y0


@pytest.mark.slow
def test_default_reference_is_converged():
    """The default-suite reference (N = 100) against N = 200: peak value and time, and the
    curve, within 0.1 % (source: the reference itself; measured 2.2e-4, 9.3e-5, 3.2e-4)."""
    base, fine = _reference(REF_CELLS), _reference(REF_CELLS_FINE)
    (t0, y0), (t1, y1) = base.peak("NH3"), fine.peak("NH3")
    assert abs(y1 / y0 - 1.0) < 1e-3 and abs(t1 / t0 - 1.0) < 1e-3
    assert np.max(np.abs(fine.flow("NH3") - base.flow("NH3"))) < 1e-3 * y1


def test_reference_shows_the_release_peak(reference):
    """Physics sanity of the scenario: the outlet NH3 peaks well above the feed (stored NH3
    released as the brick heats) between 5 and 60 s, and at the end the brick holds less NH3
    and is hotter than at the start (source: the reference; NH3 storage falls with temperature,
    Temkin isotherm)."""
    t_pk, y_pk = reference.peak("NH3")
    feed = TOTAL_MOL_S * X_IN["NH3"]
    assert y_pk > 3.0 * feed
    assert 5.0 < t_pk < 60.0
    assert reference.theta.mean() < 0.7 * reference.theta0.mean()
    assert reference.Ts_K.min() > T_HOT_K - 1.0 > reference.Ts0_K.max()


# --- (a) aftertreat with small fixed steps ------------------------------------------------------
def _check_fine(ref, res):
    dv, dt, nums = _compare_peaks(ref, res)
    assert abs(dv) < 5e-3, nums                     # peak value within 0.5 %
    assert abs(dt) < 5e-3, nums                     # peak time within 0.5 %
    t_ref = ref.t_s
    y_ref = ref.flow("NH3")
    n = len(res.t_s)
    np.testing.assert_allclose(res.t_s, t_ref[:n], rtol=0, atol=1e-9)
    dev = np.abs(res.outlet_F[:, INDEX["NH3"]] - y_ref[:n])
    worst = int(np.argmax(dev))
    assert dev[worst] < 1e-2 * nums[1], (float(dev[worst] / nums[1]), float(res.t_s[worst]))


def test_fine_steps_match_reference(reference, aftertreat_fine_window):
    """(a) aftertreat (200 cells, one implicit-Euler step per 0.05 s sample) over the first 60 s
    against the method-of-lines reference (source: mol_transient.py, N = 100, rtol 1e-8):
    outlet NH3 peak value and time within 0.5 %, the outlet NH3 within 1 % of the peak value
    at every sample (measured: -0.22 %, +0.25 %, 0.38 %)."""
    _check_fine(reference, aftertreat_fine_window)


@pytest.mark.slow
def test_fine_steps_match_fine_reference_over_the_whole_run():
    """(a) as above over the whole 300 s against the N = 200 reference (source:
    mol_transient.py, N = 200, rtol 1e-8)."""
    _check_fine(_reference(REF_CELLS_FINE), _aftertreat(FINE_DT_S, T_END_S, _fixed_steps()))


def test_fine_steps_report_converged(aftertreat_fine_window):
    """Every 0.05 s step of (a) is reported converged by the solver (its own flags). The
    states agree with the reference (test above), so a step flagged as failed here is one the
    solver's acceptance test rejects, not a wrong state."""
    res = aftertreat_fine_window
    bad = np.flatnonzero(~np.asarray(res.converged, bool))
    assert bad.size == 0, (f"{bad.size} of {len(res.t_s) - 1} steps flagged not converged, "
                           f"first at t = {res.t_s[bad[0]]:.2f} s, largest residual "
                           f"{float(np.max(res.residual)):.1e}")


# --- (b) aftertreat at the trace's own interval with default settings ---------------------------
def test_trace_steps_match_reference(reference, deadline):
    """(b) aftertreat with the trace's 1 s interval and default TransientSettings (error-
    controlled sub-steps) against the reference (source: mol_transient.py, N = 100, rtol
    1e-8): peak value and time within 2 %. Run over the first 60 s, which hold the peak (a run
    is causal: later samples do not change it). One fixed implicit-Euler step per second is
    first order in time and misses the release (measured: peak value -4.5 %, peak time
    +4.3 %); with the sub-steps (BDF2): +0.27 % and -0.27 %, 89 sub-steps for the 60 samples."""
    with deadline(60):
        res = _aftertreat(TRACE_DT_S, WINDOW_S, TransientSettings())
    assert res.all_converged
    dv, dt, nums = _compare_peaks(reference, res)
    assert abs(dv) < 2e-2, nums
    assert abs(dt) < 2e-2, nums
    assert res.substeps.sum() > len(res.t_s)         # the release asked for sub-steps


def test_fixed_trace_steps_miss_the_peak(reference):
    """The same run with one implicit-Euler step per 1 s sample (error control off) is outside
    2 % on the peak time (measured +4.3 %): the accuracy of (b) comes from the sub-steps."""
    res = _aftertreat(TRACE_DT_S, WINDOW_S, _fixed_steps())
    dv, dt, nums = _compare_peaks(reference, res)
    assert abs(dt) > 2e-2, nums
