"""Dosing of NH3 and urea solution: ANR, reagent stoichiometry, element balance, temperature.

Stoichiometry: CO(NH2)2 + H2O -> 2 NH3 + CO2 (urea hydrolysis, overall). Hand energy balances
use constant cp evaluated at the mean temperature of each stream; the 1 % tolerance on the
temperature drop covers the curvature of cp over the range (cp of the exhaust changes by < 0.1 %
over the 5-20 K drop; the reagent gases are heated over ~300 K, where a midpoint cp is within
~0.5 % of the exact mean and that term is a minor part of the total).
"""
import numpy as np
import pytest

from aftertreat.dosing import anr, dose
from aftertreat.errors import InputError
from aftertreat.species import ELEMENT_MATRIX, INDEX
from aftertreat.stream import Stream
from aftertreat.thermo import cp_molar

# Molar masses [g/mol] (IUPAC atomic weights, from memory): urea CH4N2O and water.
M_UREA, M_H2O = 60.056, 18.015


def _exhaust(nh3_ppm=0.0, T=623.15):
    x = {"NO": 900e-6, "NO2": 100e-6, "NH3": nh3_ppm * 1e-6, "O2": 0.10, "H2O": 0.15,
         "Ar": 0.008}
    return Stream.from_mole_fractions(x, T=T, total_mol_s=50.0)


def test_nh3_dosing_reaches_target_anr():
    """ANR = NH3/(NO + NO2) at the brick inlet, counting engine-out NH3 (definition): gaseous NH3
    dosing adds exactly ANR NOx - NH3_in, nothing else; 1e-12 relative (round-off)."""
    s = _exhaust(nh3_ppm=200.0)
    d, r = dose(s, "NH3", 1.05)
    assert anr(d) == pytest.approx(1.05, rel=1e-12)
    nox = s.F[INDEX["NO"]] + s.F[INDEX["NO2"]]
    assert r[INDEX["NH3"]] == pytest.approx(1.05 * nox - s.F[INDEX["NH3"]], rel=1e-12)
    assert np.count_nonzero(r) == 1
    np.testing.assert_allclose(d.F, s.F + r, rtol=1e-15)


def test_no_dosing_when_engine_out_nh3_exceeds_target():
    """Engine-out NH3 above ANR NOx: added = max(0, ...) = 0, stream unchanged (definition)."""
    s = _exhaust(nh3_ppm=1500.0)          # ANR 1.5 already
    for method in ("NH3", "urea"):
        d, r = dose(s, method, 1.0)
        assert not r.any()
        assert d.T == s.T and np.array_equal(d.F, s.F)
    d, r = dose(s, "none", 1.0)
    assert d is s and not r.any()


def test_nh3_dosing_temperature_hand_balance():
    """NH3 gas at 298.15 K mixing into exhaust at 623.15 K (first law, no reaction):
    F cp_ex (T_in - T) = n cp_NH3 (T - 298.15), cp at the mean temperatures; dT within 1 %."""
    s = _exhaust()
    d, r = dose(s, "NH3", 1.0)
    n, T = r[INDEX["NH3"]], d.T
    cp_ex = s.F @ cp_molar(0.5 * (s.T + T))
    cp_n = cp_molar(0.5 * (T + 298.15))[INDEX["NH3"]]
    T_hand = (cp_ex * s.T + n * cp_n * 298.15) / (cp_ex + n * cp_n)
    assert s.T - T > 0
    assert s.T - T == pytest.approx(s.T - T_hand, rel=1e-2)


def test_urea_stoichiometry_and_element_balance():
    """Urea: 2 NH3 and 1 CO2 per urea; water gained = solution water - 1 (hydrolysis); solution
    water per urea = (1-w)/w M_urea/M_H2O (32.5 % solution: 6.925 mol/mol). Elements N, H, O, C:
    stream + urea (C1 H4 N2 O1) + solution water = dosed stream, 1e-12 (round-off); the molar-mass
    ratio to 1e-4 (atomic weights from memory)."""
    s = _exhaust()
    w = 0.325
    d, r = dose(s, "urea", 0.9, urea_mass_fraction=w)
    n_u = r[INDEX["CO2"]]
    assert r[INDEX["NH3"]] == pytest.approx(2 * n_u, rel=1e-14)
    assert anr(d) == pytest.approx(0.9, rel=1e-12)
    n_w = (1 - w) / w * M_UREA / M_H2O
    assert r[INDEX["H2O"]] == pytest.approx(n_u * (n_w - 1), rel=1e-4)
    n_w_code = r[INDEX["H2O"]] / n_u + 1      # the code's own water, for the exact atom count
    urea_atoms = np.array([2, 4, 1, 1, 0], float)                 # N, H, O, C, Ar
    atoms_in = s.atoms() + n_u * urea_atoms + n_u * n_w_code * ELEMENT_MATRIX[:, INDEX["H2O"]]
    np.testing.assert_allclose(d.atoms(), atoms_in, rtol=1e-12, atol=1e-14)


def test_urea_temperature_drop_hand_balance():
    """Urea solution (32.5 %, 25 degC) into exhaust at 350 degC, first law by hand, path: solution
    -> crystallise urea (- dH_sol = -15.4 kJ/mol, CRC, from memory) + evaporate water (44.0 kJ/mol
    at 25 degC, steam tables 2442 kJ/kg, from memory) -> CO(NH2)2(s) + H2O(g) -> 2 NH3 + CO2 at
    25 degC (thermolysis +185.5, HNCO hydrolysis -95.9 kJ/mol: Koebel et al. 2000, from memory)
    -> heat the gases to T. Energy taken from the exhaust cooling from T_in to T, constant cp at
    the means. The drop must agree within 1 % and be a plausible few kelvin per 1000 ppm NOx."""
    s = _exhaust()
    d, r = dose(s, "urea", 1.0)
    n_u = r[INDEX["CO2"]]
    n_w = 0.675 / 0.325 * M_UREA / M_H2O
    T = d.T
    q_298 = n_u * (-15.4e3 + 185.5e3 - 95.9e3) + n_u * n_w * 44.0e3     # W, at 298.15 K
    cp_r = r @ cp_molar(0.5 * (T + 298.15))
    cp_ex = s.F @ cp_molar(0.5 * (s.T + T))
    T_hand = (cp_ex * s.T + cp_r * 298.15 - q_298) / (cp_ex + cp_r)
    dT = s.T - T
    assert dT == pytest.approx(s.T - T_hand, rel=1e-2)
    assert 2.0 < dT < 30.0        # 1000 ppm NOx, ANR 1: a few K (common practice)


@pytest.mark.parametrize("kw", [dict(method="adblue"), dict(target_anr=-1.0),
                                dict(method="urea", urea_mass_fraction=0.9),
                                dict(T_supply_K=1000.0)])
def test_bad_input(kw):
    """Unknown method, negative ANR, urea too concentrated for its own hydrolysis water
    (w > 0.7, stoichiometry: 1 H2O per urea) and an implausible supply temperature."""
    args = dict(method="NH3", target_anr=1.0)
    args.update(kw)
    with pytest.raises(InputError):
        dose(_exhaust(), args.pop("method"), args.pop("target_anr"), **args)

