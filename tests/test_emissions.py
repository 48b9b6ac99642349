"""Emission arithmetic, custom cycles and custom limits: values, vectorisation and bad input.

Sources are named per test; "dossier" is the project's reference note on standards (§ given).
"""
import numpy as np
import pytest

from aftertreat.cycle import available_cycles, custom_cycle, load_cycle, mode_power_fraction
from aftertreat.emissions import (GWP100, co2e_g, dry_ppm, mass_flow_g_h, mg_Nm3_to_ppm,
                                  nox_g_h, o2_reference, ppm_to_mg_Nm3,
                                  weighted_specific_emission, wet_ppm)
from aftertreat.errors import InputError
from aftertreat.limits import (ModeEmissions, available_limit_sets, custom_limits, cycle_values,
                               evaluate, imo_nox_limit, load_limit_set, round_half_up)


def _mode(name="1", weight=1.0, power_kW=1000.0, NOx_g_h=1000.0, N2O_g_h=0.0, NH3_g_h=0.0,
          CO2_g_h=0.0, ppmvd=None, O2_dry_pct=15.0, x_H2O=None, cap_exempt=False):
    return ModeEmissions(name=name, weight=weight, power_kW=power_kW, cap_exempt=cap_exempt,
                         NOx_g_h=NOx_g_h, N2O_g_h=N2O_g_h, NH3_g_h=NH3_g_h, CO2_g_h=CO2_g_h,
                         ppmvd=ppmvd or {}, O2_dry_pct=O2_dry_pct, x_H2O=x_H2O)


# ---- dry/wet, O2 reference ----------------------------------------------------------------------
def test_dry_wet_round_trip():
    """Dry basis c_d = c_w / (1 - x_H2O) (definition of a dry mole fraction; NTC 2008 eq. 5 has
    the form c_w = k_w c_d, seen in the dossier §2.2). 100 ppm wet at x_H2O = 0.19 (NH3-air
    exhaust at lambda 2, dossier §2.2 derived) -> 123.457 ppmvd. Tolerance 1e-3: 6 figures."""
    assert dry_ppm(100.0, 0.19) == pytest.approx(123.457, abs=1e-3)
    arr = np.array([10.0, 50.0, 200.0])
    np.testing.assert_allclose(wet_ppm(dry_ppm(arr, 0.138), 0.138), arr, rtol=1e-14)
    with pytest.raises(InputError) as e:
        dry_ppm(10.0, 1.0)
    assert e.value.key == "x_H2O"


def test_o2_reference_vectorised_and_guarded():
    """C_ref = C (O2_air - O2_ref)/(O2_air - O2) (13. BImSchV Anlage 4, seen; dossier §3.1):
    at the reference O2 the value is unchanged; arrays work element-wise; O2 at or above the
    O2 of air is refused (dossier §3.1: the denominator diverges)."""
    got = o2_reference(np.array([25.0, 25.0, 50.0]), np.array([15.0, 13.0, 11.0]), 15.0)
    np.testing.assert_allclose(got, [25.0, 25 * 5.9 / 7.9, 50 * 5.9 / 9.9], rtol=1e-14)
    with pytest.raises(InputError) as e:
        o2_reference(10.0, 20.9, 15.0)
    assert e.value.key == "O2_dry_pct"
    with pytest.raises(InputError):
        o2_reference(10.0, 10.0, 21.5, o2_air_pct=21.0)


# ---- mass flows and concentrations --------------------------------------------------------------
def test_nox_counted_as_no2():
    """NOx mass is computed as NO2 (40 CFR 1065.1005 and NTC 2008 3.1.2, seen in dossier §2.1 and
    [S47]); M_NO2 = 46.0055 g/mol (40 CFR 1065.1005, from memory). Tolerance rel 2e-5: the
    library's IUPAC conventional atomic weights carry 4-5 significant figures."""
    assert nox_g_h(0.6, 0.4) == pytest.approx(46.0055 * 3600, rel=2e-5)
    assert nox_g_h(0.6, 0.4) == mass_flow_g_h(1.0, "NO2")
    assert mass_flow_g_h(1.0, "NO") < mass_flow_g_h(1.0, "NOx")


def test_b1_molar_cross_check():
    """Dossier §7.B B1 (derived arithmetic check from the reference note, not a standard's own
    example): 172.35 mol/h of NOx (500 ppm of 344 700 mol/h) x 46.0055 g/mol = 7929 g/h.
    Tolerance 1 g/h: the note prints whole g/h."""
    assert mass_flow_g_h(500e-6 * 344_700 / 3600, "NOx") == pytest.approx(7929, abs=1.0)


@pytest.mark.parametrize("value, species, expected, direction", [
    (25, "NOx", 51.31, "to_mg"), (42, "NOx", 86.21, "to_mg"), (15, "NOx", 30.79, "to_mg"),
    (50, "NOx", 24.36, "to_ppm"), (190, "NOx", 92.57, "to_ppm"), (10, "NH3", 13.16, "to_ppm"),
    (30, "NH3", 39.5, "to_ppm")])
def test_ppm_mg_Nm3_conversions(value, species, expected, direction):
    """Dossier §3.7 and §4.1 conversion table (derived, 0 degC and 101.325 kPa, V_m = 22.414
    L/mol, M_NO2 = 46.0055, M_NH3 = 17.031). Tolerance 5e-3 relative: the table prints 3-4
    significant figures and our atomic weights differ in the 5th."""
    f = ppm_to_mg_Nm3 if direction == "to_mg" else mg_Nm3_to_ppm
    assert f(value, species) == pytest.approx(expected, rel=5e-3)


def test_eu_normal_pressure():
    """EU normal conditions 273.15 K and 101.3 kPa (IED Annex V Part 1, seen; dossier §3.2): V_m =
    22.41950 L/mol, so 1 ppm NOx = 46.0055/22.4195 = 2.0520 mg/Nm3, 0.025 % below the 101.325 kPa
    value. Tolerance rel 2e-5: atomic-weight precision."""
    assert ppm_to_mg_Nm3(1.0, "NOx", 273.15, 101300.0) == pytest.approx(46.0055 / 22.4195,
                                                                         rel=2e-5)
    ratio = ppm_to_mg_Nm3(1.0, "NOx", 273.15, 101300.0) / ppm_to_mg_Nm3(1.0, "NOx")
    assert ratio == pytest.approx(101300 / 101325, rel=1e-14)


def test_unknown_species_did_you_mean():
    """Species names come from aftertreat.species (one place); a typo gets a suggestion
    (common practice)."""
    with pytest.raises(InputError) as e:
        ppm_to_mg_Nm3(1.0, "NH4")
    assert "did you mean" in str(e.value) and "NH3" in str(e.value)


# ---- weighting and CO2e -------------------------------------------------------------------------
def test_weighted_specific_emission_bad_input():
    """sum(W P) must be positive and the lists equal in length (NTC 2008 5.12.5 formula)."""
    with pytest.raises(InputError):
        weighted_specific_emission([1.0, 2.0], [0.0, 0.0], [0.5, 0.5])
    with pytest.raises(InputError):
        weighted_specific_emission([1.0, 2.0], [1.0], [0.5, 0.5])


def test_co2e_n2o():
    """Dossier §4.2 (derived): 0.10 g/kWh N2O is 27.3 g CO2e/kWh with AR6 (GWP 273, from memory)
    and 26.5 with AR5 (265, from memory); AR4 298 (seen, secondary table)."""
    assert co2e_g(0.10) == pytest.approx(27.3, abs=1e-12)
    assert co2e_g(0.10, "AR5") == pytest.approx(26.5, abs=1e-12)
    assert GWP100["AR4"] == 298
    with pytest.raises(InputError) as e:
        co2e_g(1.0, "AR7")
    assert "did you mean" in str(e.value)


def test_cycle_values_ghg():
    """GHG_CO2e = CO2 + GWP100 N2O (IPCC AR6 GWP, from memory) over the weighted cycle
    (NTC 2008 5.12.5 form): 2 modes, derived by hand: N2O (0.5*100+0.5*300)/(0.5*1000+0.5*500)
    = 0.26667 g/kWh."""
    modes = [_mode("1", 0.5, 1000.0, N2O_g_h=100.0, CO2_g_h=5000.0),
             _mode("2", 0.5, 500.0, N2O_g_h=300.0, CO2_g_h=2500.0)]
    v = cycle_values(modes)
    assert v["N2O_g_kWh"] == pytest.approx(200 / 750, rel=1e-12)
    assert v["GHG_CO2e_g_kWh"] == pytest.approx(5.0 + 273 * 200 / 750, rel=1e-12)


# ---- custom cycles ------------------------------------------------------------------------------
def test_custom_cycle_valid_and_torque_mode():
    """A user cycle with power- and torque-defined modes; the flat-torque power fraction
    T% n% / 1e4 (common practice simplification)."""
    cyc = custom_cycle([{"weight": 0.6, "power_pct": 80}, {"weight": 0.4, "torque_pct": 50,
                                                          "speed_pct": 70, "cap_exempt": True}])
    assert [mode_power_fraction(m) for m in cyc.modes] == pytest.approx([0.8, 0.35], abs=1e-15)
    assert cyc.modes[1].cap_exempt and cyc.modes[0].speed_pct == 100.0


@pytest.mark.parametrize("modes, key", [
    ([{"weight": 0.5, "power_pct": 100}, {"weight": 0.4, "power_pct": 50}], "cycle.mode.weight"),
    ([{"weight": 1.0, "power_pct": 100}, {"weight": 0.0, "power_pct": 50}], "cycle.mode[1].weight"),
    ([{"weight": 1.2, "power_pct": 100}, {"weight": -0.2, "power_pct": 50}],
     "cycle.mode[1].weight"),
    ([{"weight": 1.0}], "cycle.mode[0]"),
    ([{"weight": 1.0, "power_pct": 100, "torque_pct": 100}], "cycle.mode[0]"),
])
def test_custom_cycle_weight_errors(modes, key):
    """Weights > 0 summing to 1 within 1e-6 (ISO 8178-4 weights sum to 1; dossier §1.2), and
    exactly one of power or torque per mode (NTC 2008 3.2.7 defines C1 by torque)."""
    with pytest.raises(InputError) as e:
        custom_cycle(modes, file="case.toml")
    assert e.value.key == key and e.value.file == "case.toml"


def test_custom_cycle_typo_did_you_mean():
    """Unknown keys and speed points are refused with a suggestion (common practice)."""
    with pytest.raises(InputError) as e:
        custom_cycle([{"wieght": 1.0, "power_pct": 100}])
    assert "did you mean weight" in str(e.value)
    with pytest.raises(InputError) as e:
        custom_cycle([{"weight": 1.0, "torque_pct": 100, "speed": "intermediat"}])
    assert "did you mean intermediate" in str(e.value)


def test_unknown_cycle_and_limit_set_did_you_mean():
    """Unknown shipped keys list the valid ones with a suggestion (common practice)."""
    with pytest.raises(InputError) as e:
        load_cycle("E22")
    assert "did you mean E2" in str(e.value) and e.value.key == "cycle"
    assert load_cycle("e3").key == "E3" and "D2" in available_cycles()
    with pytest.raises(InputError) as e:
        load_limit_set("imo_tier_3")
    assert "did you mean" in str(e.value) and "imo_tier_iii" in str(e.value)
    assert {"imo_tier_ii", "imo_tier_iii"} <= set(available_limit_sets())


# ---- limit evaluation ---------------------------------------------------------------------------
def test_imo_limit_needs_speed_and_valid_tier():
    """Reg. 13 limits depend on rated speed (dossier §2.1); Tiers I-III only."""
    with pytest.raises(InputError):
        evaluate(load_limit_set("imo_tier_ii"), [_mode()])
    with pytest.raises(InputError) as e:
        imo_nox_limit("IV", 720)
    assert e.value.key == "tier"
    with pytest.raises(InputError):
        imo_nox_limit("II", 0.0)


def test_round_half_up():
    """NTC 2008 3.1.3 rounds to one decimal (seen); halves go up (common practice), unlike
    Python's binary round(2.25, 1) = 2.2."""
    assert round_half_up(2.25, 1) == 2.3 and round_half_up(1.2929, 1) == 1.3
    assert round_half_up(9.649999, 1) == 9.6


def test_ied_gas_turbine_mg_and_load_gate():
    """IED Annex V Part 2 gas turbines (seen, dossier §3.4): 50 mg/Nm3 NOx @ 15 % O2, 273.15 K,
    101.3 kPa, dry, applying above 70 % load only. 20 ppmvd @ 15 % -> 41.04 mg/Nm3 (pass);
    30 ppmvd at 13 % O2 (O2_air 21) -> 22.5 ppmvd -> 46.17 mg/Nm3 (pass); the 50 % mode with
    60 ppmvd is not assessed. Expected values derived by hand with V_m = 22.4195 L/mol;
    tolerance 0.02 mg/Nm3 for the 4-figure arithmetic."""
    modes = [_mode("100%", 0.5, 10000.0, ppmvd={"NOx": 20.0}, O2_dry_pct=15.0),
             _mode("75%", 0.3, 7500.0, ppmvd={"NO": 28.0, "NO2": 2.0}, O2_dry_pct=13.0),
             _mode("50%", 0.2, 5000.0, ppmvd={"NOx": 60.0}, O2_dry_pct=15.0)]
    rows = evaluate(load_limit_set("eu_ied_gas_turbine"), modes)
    assert [r.mode for r in rows] == ["100%", "75%", "50%"]
    assert rows[0].value == pytest.approx(20 * 46.0055 / 22.4195, abs=0.02)
    assert rows[1].value == pytest.approx(22.5 * 46.0055 / 22.4195, abs=0.02)
    assert rows[0].passed and rows[1].passed and rows[2].limit is None
    assert rows[0].unit == "mg/Nm3" and rows[0].confidence == "seen"


def test_nh3_slip_ppmvd_and_wet():
    """NH3 slip 10 ppmvd @ 15 % O2 (common permit value, from memory; dossier §4.1): 12 ppmvd at
    13 % O2 -> 12 x 5.9/7.9 = 8.96 (pass, O2_air 20.9); wet max needs x_H2O; custom wet limit
    5 ppm: 8 ppmvd x (1 - 0.19) = 6.48 ppm wet (fail)."""
    m = _mode(ppmvd={"NH3": 12.0}, O2_dry_pct=13.0)
    (row,) = evaluate(load_limit_set("nh3_slip_permit_10ppm"), [m])
    assert row.value == pytest.approx(12 * 5.9 / 7.9, rel=1e-12) and row.passed
    wet = custom_limits([{"name": "NH3 wet", "quantity": "NH3_ppm_wet_max", "value": 5.0,
                          "unit": "ppm", "source": "test permit"}])
    with pytest.raises(InputError):
        evaluate(wet, [m])
    (row,) = evaluate(wet, [_mode(ppmvd={"NH3": 8.0}, x_H2O=0.19)])
    assert row.value == pytest.approx(6.48, rel=1e-12) and not row.passed


def test_custom_limits_co2e_and_errors():
    """User rows (case file) with name, quantity, value, unit, o2_ref_pct, source; N2O CO2e with
    AR6 GWP 273 (from memory): 0.1 g/kWh N2O -> 27.3 g/kWh CO2e fails a 25 g/kWh limit."""
    ls = custom_limits([{"name": "N2O CO2e", "quantity": "N2O_CO2e_g_kWh", "value": 25.0,
                         "unit": "g/kWh", "source": "owner specification"}], file="case.toml")
    (row,) = evaluate(ls, [_mode(N2O_g_h=100.0)])
    assert row.value == pytest.approx(27.3, rel=1e-12) and not row.passed
    assert row.mode is None and row.source == "owner specification"
    bad = [({"quantity": "NOx_ppmv", "value": 5, "unit": "ppmvd", "source": "x",
             "o2_ref_pct": 15}, "did you mean NOx_ppmvd"),
           ({"quantity": "NOx_ppmvd", "value": 5, "unit": "mg/Nm3", "source": "x",
             "o2_ref_pct": 15}, "expected unit 'ppmvd'"),
           ({"quantity": "NOx_ppmvd", "value": 5, "unit": "ppmvd", "source": "x"}, "reference O2"),
           ({"quantity": "NOx_ppmvd", "value": 5, "unit": "ppmvd", "o2_ref_pct": 15}, "source"),
           ({"quantity": "NOx_g_kWh", "value": -1, "unit": "g/kWh", "source": "x"}, ">= 0")]
    for row, text in bad:
        with pytest.raises(InputError) as e:
            custom_limits([row], file="case.toml")
        assert text in str(e.value) and e.value.file == "case.toml"
