"""Validation of aftertreat.combustion: stoichiometry, element balance, heating values, air/fuel.

Stoichiometry: 4 NH3 + 3 O2 -> 2 N2 + 6 H2O, CH4 + 2 O2 -> CO2 + 2 H2O, H2 + 1/2 O2 -> H2O,
CH_y + (1 + y/4) O2 -> CO2 + y/2 H2O; cracking 2 NH3 -> N2 + 3 H2. Tolerances of 1e-12 relative
are round-off of a 6x6 linear solve on O(1..100) mol/s numbers.
"""
import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings, strategies as st

from aftertreat.combustion import (FuelBlend, combustion, dry_air, exhaust_from_measurements,
                                   fuel_data, fuel_molar_mass, lhv_J_mol, lhv_MJ_kg)
from aftertreat.errors import InputError
from aftertreat.species import ELEMENT_MATRIX, INDEX, MOLAR_MASS

REL = 1e-12
# Atoms per mole of fuel (N, H, O, C, Ar) and O2 for complete combustion, written out by hand.
_Y = float(fuel_data()["diesel"]["H_per_C"])
FUEL_ATOMS = {"NH3": [1, 3, 0, 0, 0], "H2": [0, 2, 0, 0, 0], "natural_gas": [0, 4, 0, 1, 0],
              "diesel": [0, _Y, 0, 1, 0]}
FUEL_O2 = {"NH3": 0.75, "H2": 0.5, "natural_gas": 2.0, "diesel": 1.0 + _Y / 4}


def _x(s):
    return float(dry_air()[INDEX[s]])


@pytest.mark.parametrize("lam", [1.0, 2.0])
def test_pure_nh3_stoichiometry(lam):
    """Pure NH3, dry air, complete combustion: 4 NH3 + 3 O2 -> 2 N2 + 6 H2O (stoichiometry).

    Per mol NH3: 0.75 lam O2 supplied with air (x_N2/x_O2 N2, x_Ar/x_O2 Ar, x_CO2/x_O2 CO2);
    exhaust H2O = 1.5, N2 = 0.5 + air N2, O2 = 0.75 (lam - 1) (the excess). Fuel flow
    n = P / (eta LHV). Tolerance 1e-12 relative (round-off).
    """
    P_kW, eta = 2000.0, 0.44
    c = combustion(P_kW, eta, FuelBlend({"NH3": 1.0}), lam, T_K=700.0,
                   intake_humidity_g_kg=0.0)
    n = P_kW * 1e3 / eta / lhv_J_mol("NH3")
    assert c.fuel_mol_s["NH3"] == pytest.approx(n, rel=REL)
    air_o2 = 0.75 * lam * n
    F = c.exhaust.F
    assert F[INDEX["H2O"]] == pytest.approx(1.5 * n, rel=REL)
    assert F[INDEX["N2"]] == pytest.approx(0.5 * n + air_o2 * _x("N2") / _x("O2"), rel=REL)
    assert F[INDEX["Ar"]] == pytest.approx(air_o2 * _x("Ar") / _x("O2"), rel=REL)
    assert F[INDEX["CO2"]] == pytest.approx(air_o2 * _x("CO2") / _x("O2"), rel=REL)
    assert F[INDEX["O2"]] == pytest.approx(0.75 * (lam - 1.0) * n, rel=REL, abs=1e-12 * n)
    assert c.CO2_from_fuel_kg_s == 0.0


def test_unburned_nh3_leaves_oxygen_and_less_water():
    """Unburned NH3 (a minor species) is fuel that did not burn (stoichiometry of
    4 NH3 + 3 O2 -> 2 N2 + 6 H2O): relative to complete combustion the exhaust keeps 0.75 O2 more
    and 1.5 H2O and 0.5 N2 less per mol NH3 slipped. Tolerance 1e-10 relative to the flows
    (differences of O(10) mol/s numbers)."""
    kw = dict(T_K=650.0, intake_humidity_g_kg=8.0)
    a = combustion(1500.0, 0.42, FuelBlend({"NH3": 1.0}), 1.8, **kw).exhaust.F
    b = combustion(1500.0, 0.42, FuelBlend({"NH3": 1.0}), 1.8, minor={"NH3": 5000.0},
                   **kw).exhaust.F
    s = b[INDEX["NH3"]]
    tol = 1e-10 * a.sum()
    assert b[INDEX["O2"]] - a[INDEX["O2"]] == pytest.approx(0.75 * s, abs=tol)
    assert a[INDEX["H2O"]] - b[INDEX["H2O"]] == pytest.approx(1.5 * s, abs=tol)
    assert a[INDEX["N2"]] - b[INDEX["N2"]] == pytest.approx(0.5 * s, abs=tol)


_shares = st.lists(st.floats(0.0, 1.0), min_size=4, max_size=4).filter(lambda v: sum(v) > 0.1)
_ppm = st.floats(0.0, 3000.0)


@settings(max_examples=25, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(shares=_shares, lam=st.floats(1.2, 4.0), hum=st.floats(0.0, 25.0),
       cracked=st.booleans(), no=_ppm, no2=_ppm, nh3=_ppm, n2o=_ppm, h2=_ppm)
def test_element_balance(shares, lam, hum, cracked, no, no2, nh3, n2o, h2):
    """Atoms in (fuels, NH3 fed to the cracker, dry air, humidity) = atoms out, for N, H, O, C, Ar,
    to 1e-12 relative (conservation of elements). Inputs counted by hand: fuel atoms from the
    formulas, humidity as H g/kg times the dry-air mass, cracking 2 NH3 -> N2 + 3 H2 (the H2
    burned comes from 2/3 mol NH3 per mol). Also: the minor species come out at the given wet ppm
    and the air matches lambda times the stoichiometric O2."""
    fuels = ("NH3", "H2", "natural_gas", "diesel")
    blend = FuelBlend({f: s / sum(shares) for f, s in zip(fuels, shares)}, cracked_H2=cracked)
    minor = {"NO": no, "NO2": no2, "NH3": nh3, "N2O": n2o, "H2": h2}
    c = combustion(800.0, 0.4, blend, lam, T_K=600.0, intake_humidity_g_kg=hum, minor=minor)
    n = dict(c.fuel_mol_s)
    atoms_in = np.zeros(5)
    for f, v in n.items():
        if f == "H2" and cracked:
            atoms_in += (2.0 / 3.0 * v) * np.array(FUEL_ATOMS["NH3"], float)
        else:
            atoms_in += v * np.array(FUEL_ATOMS[f], float)
    h2o = c.air_dry_kg_s * hum * 1e-3 / MOLAR_MASS[INDEX["H2O"]]
    assert c.intake_H2O_mol_s == pytest.approx(h2o, rel=REL, abs=1e-300)
    atoms_in += ELEMENT_MATRIX @ (c.air_dry_mol_s * dry_air())
    atoms_in += ELEMENT_MATRIX[:, INDEX["H2O"]] * h2o
    out = c.exhaust.atoms()
    np.testing.assert_allclose(out, atoms_in, rtol=REL, atol=REL * atoms_in.max())
    for s, v in minor.items():
        assert c.exhaust.ppm(s) == pytest.approx(v, rel=1e-10, abs=1e-9)
    o2_need = sum(v * FUEL_O2[f] for f, v in n.items())
    assert c.air_dry_mol_s * _x("O2") == pytest.approx(lam * o2_need, rel=REL)


@pytest.mark.parametrize("fuel, ref", [("NH3", 18.6), ("H2", 120.0), ("natural_gas", 50.0)])
def test_lower_heating_values(fuel, ref):
    """LHV from thermo at 298.15 K. NH3 18.6 MJ/kg: IEA AMF fuel information 'Ammonia' (seen in
    the project's standards dossier). H2 120.0 and CH4 50.0 MJ/kg: combustion handbooks (e.g.
    Turns 2012, App. B), from memory. Tolerance 0.5 %: the references are given to 3 significant
    figures (18.6 = +-0.27 %) and the GRI fits differ from JANAF by < 0.1 kJ/mol."""
    assert lhv_MJ_kg(fuel) == pytest.approx(ref, rel=5e-3)


def test_diesel_lhv_from_data_file():
    """Diesel LHV comes from fuels.toml (IMO EEDI guideline 42.7 MJ/kg, from memory) and lies in
    the stated range; J/mol and MJ/kg agree through M(CH_y) = 12.011 + 1.008 y g/mol (IUPAC
    atomic weights, from memory), to 1e-4 (rounding of the atomic weights)."""
    d = fuel_data()["diesel"]
    lo, hi = d["lhv_range_MJ_kg"]
    assert lo <= lhv_MJ_kg("diesel") <= hi
    assert 41.0 < lhv_MJ_kg("diesel") < 44.5      # distillate fuels, from memory
    M = (12.011 + 1.008 * d["H_per_C"]) * 1e-3
    assert lhv_J_mol("diesel") == pytest.approx(d["lhv_MJ_kg"] * 1e6 * M, rel=1e-4)


def test_stoichiometric_air_fuel_ratio_nh3():
    """Stoichiometric air/fuel mass ratio of NH3 = 6.09 kg/kg, derived in the project's dossier
    from 4 NH3 + 3 O2 -> 2 N2 + 6 H2O with air of 20.95 % O2. Tolerance 0.5 % (the reference is
    given to 3 figures; air CO2/Ar composition moves it by < 0.1 %)."""
    c = combustion(1000.0, 0.45, FuelBlend({"NH3": 1.0}), 1.0, T_K=700.0,
                   intake_humidity_g_kg=0.0)
    assert c.air_dry_kg_s / c.fuel_kg_s["NH3"] == pytest.approx(6.09, rel=5e-3)


def test_fossil_co2_of_natural_gas_share():
    """CO2 from fuel carbon: CH4 + 2 O2 -> CO2 + 2 H2O, so m_CO2 = s P/(eta LHV_CH4) M_CO2
    (stoichiometry; air CO2 not counted). M_CO2 = 44.009 g/mol (IUPAC, from memory): 1e-4."""
    P, eta, s = 1000.0, 0.45, 0.3
    c = combustion(P, eta, FuelBlend({"NH3": 1 - s, "natural_gas": s}), 2.0, T_K=650.0)
    assert c.CO2_from_fuel_kg_s == pytest.approx(
        s * P * 1e3 / eta / lhv_J_mol("natural_gas") * 44.009e-3, rel=1e-4)
    assert fuel_molar_mass("natural_gas") == pytest.approx(16.043e-3, rel=1e-4)


def test_measured_row_dry_to_wet():
    """Dry -> wet: y_wet = y_dry (1 - y_H2O) (NTC 2008 eq. 5 with k_w = 1 - y_H2O for a measured
    water content); NOx split by NO2/NOx; N2 is the balance; the mass flow is kept (Stream mass
    from molar masses). Exact arithmetic: 1e-12."""
    s = exhaust_from_measurements(T_K=620.0, mass_flow_kg_s=2.5, H2O_pct=12.0, O2_pct=10.0,
                                  NOx_ppm=1000.0, NO2_fraction=0.1, NH3_ppm=50.0, N2O_ppm=20.0,
                                  basis="dry")
    w = s.ppm_wet()
    assert w["O2"] == pytest.approx(10.0e4 * 0.88, rel=REL)
    assert w["NO"] == pytest.approx(900.0 * 0.88, rel=REL)
    assert w["NO2"] == pytest.approx(100.0 * 0.88, rel=REL)
    assert w["NH3"] == pytest.approx(50.0 * 0.88, rel=REL)
    assert w["H2O"] == pytest.approx(12.0e4, rel=REL)
    assert s.x.sum() == pytest.approx(1.0, rel=REL)
    assert s.mass_flow == pytest.approx(2.5, rel=REL)


def test_measured_row_from_lambda():
    """O2 from lambda for pure NH3 (stoichiometry): per mol NH3 the dry exhaust holds
    O2 = 0.75 (lam-1), N2 = 0.5 + 0.75 lam x_N2/x_O2, Ar and CO2 from air; dry O2 fraction is
    their ratio; wet = dry (1 - y_H2O). Exact arithmetic: 1e-12."""
    lam = 2.0
    a = 0.75 * lam / _x("O2")
    dry = 0.75 * (lam - 1) + 0.5 + a * (_x("N2") + _x("Ar") + _x("CO2"))
    s = exhaust_from_measurements(T_K=620.0, molar_flow_mol_s=10.0, H2O_pct=15.0, lambda_=lam,
                                  blend=FuelBlend({"NH3": 1.0}))
    assert s.ppm("O2") == pytest.approx(0.75 * (lam - 1) / dry * 0.85 * 1e6, rel=REL)
    assert s.total == pytest.approx(10.0, rel=REL)


@pytest.mark.parametrize("kw", [
    dict(blend={"NH3": 0.5, "H2": 0.4}),                       # shares sum to 0.9
    dict(blend={"NH3": 1.0, "petrol": 0.0}),                   # unknown fuel
    dict(blend={"NH3": 1.2, "H2": -0.2}),                      # negative share
    dict(lam=0.9),                                             # too little air
    dict(minor={"CO": 10.0}),                                  # not a minor species
])
def test_bad_input(kw):
    """Invalid blends, lambda below 1 without unburned fuel (complete combustion impossible:
    negative O2 by the stoichiometry) and unknown minor species are InputErrors."""
    with pytest.raises(InputError):
        blend = FuelBlend(kw.get("blend", {"NH3": 1.0}))
        combustion(1000.0, 0.45, blend, kw.get("lam", 2.0), T_K=650.0, minor=kw.get("minor"))
