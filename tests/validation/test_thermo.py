"""Validation of aftertreat.thermo (NASA-7 data from gri30.yaml) against published tables.

Reference values marked ``from memory`` are recalled from the NIST-JANAF Thermochemical Tables
(Chase, M. W., 4th ed., J. Phys. Chem. Ref. Data Monograph 9, 1998) and CODATA Key Values for
Thermodynamics (Cox, Wagman & Medvedev, 1989); they were not looked up while writing these tests.
"""
import numpy as np
import pytest

from aftertreat import thermo
from aftertreat.species import INDEX, MOLAR_MASS, SPECIES
from aftertreat.units import R_GAS

T298 = 298.15


def _nu(**coeffs):
    nu = np.zeros(len(SPECIES))
    for name, v in coeffs.items():
        nu[INDEX[name]] = v
    return nu


NO_OX = _nu(NO=-1.0, O2=-0.5, NO2=1.0)                # NO + 1/2 O2 -> NO2
NH3_OX = _nu(NH3=-4.0, O2=-3.0, N2=2.0, H2O=6.0)       # 4 NH3 + 3 O2 -> 2 N2 + 6 H2O

# JANAF, from memory: dfH(298.15) [kJ/mol] and S°(298.15, 1 bar) [J/(mol K)].
DFH_NO, DFH_NO2 = 91.27, 34.19
S_NO, S_NO2, S_O2 = 210.76, 240.03, 205.15
# CODATA/JANAF, from memory: dfH(298.15) [kJ/mol].
DFH_NH3, DFH_H2O_G = -45.90, -241.83


def test_no_oxidation_enthalpy_entropy_298():
    """NO + 1/2 O2 -> NO2 at 298.15 K: dH and dS vs NIST-JANAF (Chase 1998), values from memory.

    JANAF: dH = 34.19 - 91.27 = -57.08 kJ; dS = 240.03 - 210.76 - 205.15/2 = -73.31 J/K.
    Tolerances: 0.3 kJ (the JANAF uncertainty of dfH(NO2) is ~0.8 kJ/mol, from memory) and
    0.3 J/K (entropy differences of the GRI fits vs JANAF are ~0.15 J/(mol K) for NO2). The
    1 bar (JANAF) vs 1 atm (gri30) standard state changes S° by R ln(1.01325) = 0.11 J/(mol K)
    per species, i.e. 0.055 J/K net on dS here (sum nu = -1/2), inside the tolerance.
    """
    dH = thermo.reaction_enthalpy(NO_OX, T298)
    dS = thermo.reaction_entropy(NO_OX, T298)
    assert dH == pytest.approx((DFH_NO2 - DFH_NO) * 1e3, abs=300.0)
    assert dS == pytest.approx(S_NO2 - S_NO - 0.5 * S_O2, abs=0.3)


def test_no_oxidation_kp_298():
    """Kp(298.15 K) of NO + 1/2 O2 -> NO2 from JANAF dH, S° (Chase 1998; from memory) ~ 1.48e6.

    Kp = exp(-(dH - T dS)/(R T)). Tolerance 5 % on Kp = 0.05 in ln Kp = 0.12 kJ/mol in dG,
    which covers the GRI-vs-JANAF entropy difference of NO2 (0.14 J/(mol K) -> 1.7 % in Kp)
    and rounding of the tabulated values; it is well inside the JANAF uncertainty of dfH(NO2).
    JANAF's standard state is 1 bar, ours 1 atm: Kp(atm) = Kp(bar) (1.01325)^(+1/2), a 0.7 %
    difference, also inside the tolerance.
    """
    dG = (DFH_NO2 - DFH_NO) * 1e3 - T298 * (S_NO2 - S_NO - 0.5 * S_O2)
    kp_janaf = np.exp(-dG / (R_GAS * T298))
    assert thermo.equilibrium_constant_p(NO_OX, T298) == pytest.approx(kp_janaf, rel=0.05)


def test_no_oxidation_van_t_hoff_600_800():
    """d ln Kp/dT = dH/(R T^2) at 600 and 800 K (van 't Hoff; thermodynamic identity).

    Consistency check (no external data): NIST-JANAF log10 Kf values of NO and NO2 at 600 and
    800 K could not be recalled reliably, so they are not used. Central difference with
    dT = 0.5 K; its truncation error is ~1e-6 relative, tolerance 1e-4.
    """
    for T in (600.0, 800.0):
        dlnK = (np.log(thermo.equilibrium_constant_p(NO_OX, T + 0.5))
                - np.log(thermo.equilibrium_constant_p(NO_OX, T - 0.5)))
        assert dlnK == pytest.approx(thermo.reaction_enthalpy(NO_OX, T) / (R_GAS * T**2),
                                     rel=1e-4)
    # Exothermic: the equilibrium shifts back to NO as T rises (Kp(800) < 1 < Kp(600)).
    assert thermo.equilibrium_constant_p(NO_OX, 800.0) < 1.0 < \
        thermo.equilibrium_constant_p(NO_OX, 600.0)


def test_kc_from_kp():
    """Kc = Kp (p0/(R T))^sum(nu) (ideal-gas definition, e.g. Atkins, Physical Chemistry)."""
    T = np.array([500.0, 900.0])
    kc = thermo.equilibrium_constant_c(NO_OX, T)
    kp = thermo.equilibrium_constant_p(NO_OX, T)
    np.testing.assert_allclose(kc, kp * (101325.0 / (R_GAS * T)) ** -0.5, rtol=1e-12)


def test_ammonia_combustion_enthalpy_298():
    """4 NH3 + 3 O2 -> 2 N2 + 6 H2O(g): dH(298.15) vs CODATA/JANAF dfH (from memory).

    6 (-241.83) - 4 (-45.90) = -1267.4 kJ. Tolerance 1 kJ (0.08 %): the CODATA uncertainties
    are 0.04 kJ/mol for H2O(g) and 0.35 kJ/mol for NH3 (from memory), times 4.
    """
    expected = (6 * DFH_H2O_G - 4 * DFH_NH3) * 1e3
    assert thermo.reaction_enthalpy(NH3_OX, T298) == pytest.approx(expected, abs=1000.0)


def test_lower_heating_values():
    """LHV at 298.15 K: NH3 18.6 MJ/kg, H2 120.0 MJ/kg (engineering handbooks, from memory).

    LHV = -(sum nu_i h_i) / M_fuel with water as vapour. Tolerance 0.5 % (handbooks round the
    values to three or four figures).
    """
    lhv_nh3 = -thermo.reaction_enthalpy(_nu(NH3=-1, O2=-0.75, N2=0.5, H2O=1.5), T298) \
        / MOLAR_MASS[INDEX["NH3"]]
    lhv_h2 = -thermo.reaction_enthalpy(_nu(H2=-1, O2=-0.5, H2O=1), T298) / MOLAR_MASS[INDEX["H2"]]
    assert lhv_nh3 == pytest.approx(18.6e6, rel=0.005)
    assert lhv_h2 == pytest.approx(120.0e6, rel=0.005)


def test_cp_298_vs_janaf():
    """Cp°(298.15 K) of every species vs NIST-JANAF (Chase 1998), values from memory [J/(mol K)].

    Tolerance 0.5 %: the GRI polynomial fits reproduce JANAF Cp within ~0.2 % at 298 K.
    """
    janaf = {"NO": 29.85, "NO2": 37.18, "NH3": 35.63, "N2O": 38.62, "O2": 29.38,
             "H2O": 33.59, "N2": 29.12, "H2": 28.84, "CO2": 37.13, "Ar": 20.79}
    cp = thermo.cp_molar(T298)
    for name, value in janaf.items():
        assert cp[INDEX[name]] == pytest.approx(value, rel=0.005), name


def test_cp_is_dh_dt():
    """cp = dh/dT (definition) by central difference over 300..1500 K, both polynomial ranges.

    Points straddle T_mid = 1000 K on both sides but not at it (a 5 mJ/mol step of h at T_mid,
    see the continuity test, divided by 2 dT would dominate there).
    dT = 0.01 K: truncation ~1e-9 relative, round-off ~1e-7; tolerance 1e-5.
    """
    T = np.linspace(300.0, 1500.0, 61) + 0.5
    dT = 0.01
    fd = (thermo.h_molar(T + dT) - thermo.h_molar(T - dT)) / (2 * dT)
    np.testing.assert_allclose(fd, thermo.cp_molar(T), rtol=1e-5)


def test_continuity_at_t_mid():
    """The two NASA-7 ranges meet at T_mid (McBride, Gordon & Reno 1993 fit constraint).

    Measured jumps for gri30: |dh| <= 0.005 J/mol, |dcp|, |ds| < 1e-3 J/(mol K). Limits: h
    0.02 J/mol, cp and s0 0.002 J/(mol K) (far below any effect on sizing).
    """
    t_mid = thermo.nasa7_coefficients()[2]
    assert np.all(t_mid == t_mid[0])
    below, above = np.nextafter(t_mid[0], 0.0), t_mid[0]
    for f, tol in ((thermo.h_molar, 0.02), (thermo.cp_molar, 2e-3), (thermo.s0_molar, 2e-3)):
        np.testing.assert_allclose(f(below), f(above), rtol=0, atol=tol)


def test_entropy_derivative_is_cp_over_t():
    """ds0/dT = cp/T at constant p (second law for a reversible isobaric process)."""
    T = np.linspace(300.0, 1500.0, 31) + 0.5
    dT = 0.01
    fd = (thermo.s0_molar(T + dT) - thermo.s0_molar(T - dT)) / (2 * dT)
    np.testing.assert_allclose(fd, thermo.cp_molar(T) / T[:, None], rtol=1e-5)


def test_array_shape():
    """Evaluation at T of shape (3, 4) returns (3, 4, nsp); reactions return (3, 4)."""
    T = np.linspace(300.0, 1400.0, 12).reshape(3, 4)
    nsp = len(SPECIES)
    for f in (thermo.cp_molar, thermo.h_molar, thermo.s0_molar, thermo.g0_molar):
        assert f(T).shape == (3, 4, nsp)
        # element-wise equal to scalar evaluation (the range switch is per element)
        assert np.allclose(f(T)[2, 3], f(float(T[2, 3])))
    assert thermo.reaction_gibbs(NO_OX, T).shape == (3, 4)
    assert thermo.equilibrium_constant_c(NO_OX, T).shape == (3, 4)
    assert thermo.cp_molar(300.0).shape == (nsp,)


def test_bad_nu_rejected():
    """A stoichiometric vector of the wrong length is an error, not a silent broadcast."""
    with pytest.raises(ValueError):
        thermo.reaction_enthalpy(np.ones(3), 500.0)
