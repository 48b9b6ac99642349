"""Kinetic-limit cross-check of the steady brick solver against an independent Cantera model.

Basis: the same NH3 storage + standard SCR + fast SCR chemistry, written once as a project catalyst
table (mass-action forms of :mod:`aftertreat.kinetics`) and once as a Cantera surface mechanism
(``tests/validation/cantera_chain.py``, whose docstring derives the unit conversion: one m^2 of
Cantera surface stands for one m^3 of catalytic layer, site density Gamma = 1e-3 Omega kmol/m^2,
K1 = k1/Gamma, K2 = k2/Omega, K3 = k3/Gamma, K4 = 1e3 k4/Gamma, same stoichiometry, explicit
orders). With film and washcoat resistance switched off (``Brick(film=False, washcoat="none")``)
both models are the isothermal plug-flow reactor

    dF_i/dV = f sum_r nu_i,r r_r(c, theta),    sum_r nu_site,r r_r = 0,

where f = ``substrate.catalytic_fraction``. The project solves it with its log-mean finite-volume
scheme and Newton; Cantera as a chain of CSTRs marched in time to steady state, extrapolated to
plug flow (Richardson, from n, 2n and 4n reactors, which also checks the O(1/n) convergence).

Isothermal operation. Cantera's reactors run with the energy equation off. In the project's model
the reaction heat is always released into the solid; the brick here is made isothermal with a
very large can heat-loss coefficient to an ambient at the inlet temperature (the solid is tied to
T_in; see the temperature assertion below). Without it the ~2 K adiabatic rise of 200 ppm NOx
conversion raises k_SCR (E = 65 kJ/mol) by ~5 % and moves outlet NO by ~5 % (measured while
writing this test), which is why the comparison needs it.

Kinetic parameters (``cantera_chain.REACTIONS``): those of ``catalysts/cu_chabazite.toml``
(fitted / from memory there) with the Temkin factor set to zero (plain Arrhenius desorption,
exactly expressible in Cantera).
"""
from __future__ import annotations

import math
import pathlib
import sys

import numpy as np
import pytest

import aftertreat as at
from aftertreat.catalyst import parse_catalyst
from aftertreat.species import CANTERA_NAME
from aftertreat.units import R_GAS

sys.path.insert(0, str(pathlib.Path(__file__).parent))
import cantera_chain as cc  # noqa: E402  (aftertreat-independent helper in this folder)


def _cantera_case(brick: at.Brick, inlet: at.Stream) -> cc.KineticLimitCase:
    """The Cantera inputs: rate constants from the raw table constants (not from the parsed
    catalyst), reaction volume f V and gas volume OFA V from the brick, the inlet stream."""
    X_in = {CANTERA_NAME[s]: float(x) for s, x in zip(at.SPECIES, inlet.x) if x > 0}
    V = brick.volume
    return cc.case_from(layer_volume=brick.substrate.catalytic_fraction * V,   # f V [m^3]
                        gas_volume=brick.substrate.ofa * V,                    # transient only
                        T=inlet.T, p=inlet.p, X_in=X_in, mol_s=inlet.total)


def _catalyst():
    return parse_catalyst(cc.catalyst_table(), key="cantera_crosscheck", file="<test table>")


#: (inlet degC, total flow mol/s): NO conversion ~60-80 % at 200-250 degC (coverage ~0.9) and
#: ~40 % at 350 degC, where desorption lowers the coverage to ~0.3 and the Arrhenius conversion
#: of every rate constant away from its T_ref is exercised.
CASES = [(200.0, 0.15), (250.0, 0.3), (350.0, 3.0)]
N_CHAIN = 100          # chains of 100, 200 and 400 CSTRs


@pytest.mark.parametrize("T_C, mol_s", CASES)
def test_kinetic_limit_matches_cantera_surface_chain(T_C, mol_s):
    """Outlet NO, NO2, NH3 of one kinetically limited brick vs a Cantera CSTR chain (1 %).

    Source/basis: the project's steady solver against Cantera's reactor network with an
    equivalent surface mechanism (derivation in ``cantera_chain.py``); plug flow is the common
    limit of both discretisations.

    Tolerance 1 % (relative, per species) as set for this cross-check. Error budget (measured while
    writing the test): Cantera chain after Richardson extrapolation < 0.01 % (the 100/200/400
    differences halve to within a few %, so the O(1/n^2) remainder is ~1e-4 of the 400-chain error
    of ~0.4 %); the project's grid (60 cells) < 0.01 % (50 vs 400 cells agree to 1e-5);
    residual temperature rise with the heat sink < 0.02 K, i.e. < 0.07 % on k_SCR; solver
    tolerances 1e-10 (ours) and rtol 1e-9 (Cantera). Measured agreement: < 0.01 % on the three
    species, <= 0.1 % on the outlet coverage (our last cell sits half a cell upstream of the
    exit). A wrong factor of 4 on the standard SCR constant (checked while writing the test)
    moves outlet NO by 28 % to 6400 %, so the test is sensitive to the conversion.
    """
    T = T_C + 273.15
    inlet = at.Stream.from_mole_fractions(
        {"NO": 150e-6, "NO2": 50e-6, "NH3": 200e-6, "O2": 0.10, "H2O": 0.05}, T=T,
        total_mol_s=mol_s)
    cat = _catalyst()
    sub = at.Substrate.coated(cpsi=400, wall_mil=6, washcoat_um=30)
    # Heat sink: U = 1e6 W/(m2 K) on the can keeps the solid within 3-11 mK of T_in here. (A far
    # larger U raises the round-off floor of the scaled solid-energy residual above the
    # solver tolerance, below.)
    brick = at.Brick("xcheck", sub, cat, length=0.03, diameter=0.1, film=False,
                     washcoat="none", cells=60, heat_loss_W_m2K=1e6, T_ambient=T)
    # Tolerance 1e-10 instead of the default: with UA_can/(hA) ~ 100 the scaled solid-energy
    # residual has a round-off floor of ~100 * T * 2e-16 ~ 1e-11. 1e-10 on the scaled species
    # rows is 1e-4 ppm of these outlets, far below the 1 % compared.
    ours = at.solve_brick(brick, inlet, settings=at.SolverSettings(tol=1e-10))
    assert ours.converged, ours.residual
    # isothermal to 0.02 K: k_SCR changes by E/(R T^2) dT < 7e-4 relative (E = 65 kJ/mol,
    # T >= 473 K), and c = p/(R T) by < 5e-5, both far inside the 1 % compared
    assert np.max(np.abs(ours.T_solid - T)) < 0.02
    assert np.max(np.abs(ours.T_gas - T)) < 0.02

    case = _cantera_case(brick, inlet)
    phases = cc.load(case)
    chains = [cc.solve_chain(case, N_CHAIN * 2 ** i, phases) for i in range(3)]
    for ch in chains:
        # every CSTR at steady state: |d theta/dt| far below the gross rates (~1e-2 1/s)
        assert ch.max_surface_residual < 1e-10
    for sp, cname in (("NO", "NO"), ("NO2", "NO2"), ("NH3", "NH3")):
        y = [ch.ppm(cname) for ch in chains]
        d1, d2 = y[0] - y[1], y[1] - y[2]
        # O(1/n) convergence of the chain: each doubling halves the change (ratio 2 within 10 %)
        # unless the change is already negligible (< 1e-4 relative)
        if abs(d1) > 1e-4 * y[2]:
            assert d1 / d2 == pytest.approx(2.0, rel=0.1), (sp, y)
        plug = y[2] - d2                                 # Richardson: 2 y_4n - y_2n
        assert ours.outlet.ppm(sp) == pytest.approx(plug, rel=0.01), (sp, ours.outlet.ppm(sp), y)
    # the stored NH3 at the outlet agrees as well (same extrapolation on the coverage)
    th = [ch.coverage[-1] for ch in chains]
    th_plug = 2.0 * th[2] - th[1]
    assert ours.coverage[-1, 0, 0] == pytest.approx(th_plug, rel=0.01)


def test_cantera_mechanism_rates_equal_project_rates():
    """Pointwise: Cantera's surface rates of progress equal 1e-3 x the project's rates.

    Basis: the unit conversion of ``cantera_chain.py`` (q [kmol/m^2/s] = 1e-3 r [mol/m^3/s] per
    reaction event, one m^2 of surface per m^3 of layer), evaluated at an arbitrary state (T away
    from every T_ref, all concentrations and the coverage non-trivial). Tolerance 1e-9 relative:
    both are closed-form expressions in double precision; the gas constants differ by < 1e-9.
    """
    cat = _catalyst()
    T, p = 610.0, 1.2e5
    x = {"NO": 3.1e-4, "NO2": 1.7e-4, "NH3": 2.3e-4, "O2": 0.08, "H2O": 0.07}
    inlet = at.Stream.from_mole_fractions(x, T=T, p=p, total_mol_s=1.0)
    theta = 0.37
    c = inlet.x * p / (R_GAS * T)                        # mol/m^3
    r_ours = cat.mechanism.rates(c[None, :], np.array([[theta]]), np.array([T]))[0]

    sub = at.Substrate.coated(cpsi=400, wall_mil=6, washcoat_um=30)
    brick = at.Brick("x", sub, cat, length=0.1, diameter=0.1, film=False, washcoat="none")
    case = _cantera_case(brick, inlet)
    gas, surf = cc.load(case)
    gas.TPX = T, p, case.X_in
    surf.TP = T, p
    surf.coverages = {"S": 1.0 - theta, "NH3(S)": theta}
    q = surf.forward_rates_of_progress                            # kmol/(m^2 s)
    eqs = [surf.reaction(i).equation for i in range(surf.n_reactions)]
    assert eqs == ["NH3 + S => NH3(S)", "NH3(S) => NH3 + S",
                   "4 NH3(S) + 4 NO + O2 => 6 H2O + 4 N2 + 4 S",
                   "2 NH3(S) + NO + NO2 => 3 H2O + 2 N2 + 2 S"]
    np.testing.assert_allclose(q, 1e-3 * r_ours, rtol=1e-9)
    assert math.isclose(surf.site_density, 1e-3 * cc.SITE["capacity_mol_m3"], rel_tol=1e-15)
