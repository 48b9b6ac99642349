"""Rate-law forms against hand calculations, equation parsing, and the tabulated thermo."""
import numpy as np
import pytest

from aftertreat import thermo
from aftertreat.errors import InputError
from aftertreat.kinetics import FORMS, build_reaction, parse_equation
from aftertreat.species import INDEX, SPECIES
from aftertreat.units import R_GAS

SITES = ["S1"]
PROV = "fitted: test value"


def _c(**ppm_like):
    c = np.zeros(len(SPECIES))
    for k, v in ppm_like.items():
        c[INDEX[k]] = v
    return c


def test_parse_equation_stored_nh3_and_reversible():
    nu, nus, rev = parse_equation("4 NH3(S1) + 4 NO + O2 -> 4 N2 + 6 H2O", SITES)
    assert nus.tolist() == [-4.0]
    assert nu[INDEX["NO"]] == -4 and nu[INDEX["O2"]] == -1 and nu[INDEX["N2"]] == 4
    assert not rev
    nu, nus, rev = parse_equation("NO + 0.5 O2 <-> NO2", SITES)
    assert rev and nu[INDEX["O2"]] == -0.5


def test_mass_action_hand_calculation():
    """r = k_ref exp(-E/R (1/T - 1/T_ref)) c_NO theta (Olsson et al. 2008 global form)."""
    rx = build_reaction({"name": "std", "equation": "4 NH3(S1) + 4 NO + O2 -> 4 N2 + 6 H2O",
                         "form": "mass_action", "k_ref": 10.0, "E_kJ_mol": 80.0, "T_ref_C": 300.0,
                         "orders": {"NO": 1}, "coverage": {"S1": 1}}, SITES)
    T = 623.15
    k = 10.0 * np.exp(-80e3 / R_GAS * (1 / T - 1 / 573.15))
    r = rx.law(_c(NO=0.02), np.array([0.3]), np.array(T))
    assert r == pytest.approx(k * 0.02 * 0.3, rel=1e-12)


def test_temkin_desorption_hand_calculation():
    """r = A exp(-E0 (1 - alpha theta)/(R T)) theta with A = k_ref exp(E0/(R T_ref))
    (Temkin form, Nova et al. 2000)."""
    rx = build_reaction({"name": "des", "equation": "NH3(S1) -> NH3", "form": "temkin_desorption",
                         "k_ref": 0.5, "E_kJ_mol": 100.0, "alpha": 0.3, "T_ref_C": 350.0}, SITES)
    T, th = 700.0, 0.4
    A = 0.5 * np.exp(100e3 / (R_GAS * 623.15))
    expect = A * np.exp(-100e3 * (1 - 0.3 * th) / (R_GAS * T)) * th
    assert rx.law(_c(), np.array([th]), np.array(T)) == pytest.approx(expect, rel=1e-10)


def test_eley_rideal_critical_coverage_limits():
    """theta* (1 - exp(-theta/theta*)): linear in theta at low coverage, flat above theta*."""
    rx = build_reaction({"name": "er", "equation": "4 NH3(S1) + 4 NO + O2 -> 4 N2 + 6 H2O",
                         "form": "eley_rideal_critical_coverage", "k_ref": 1.0, "E_kJ_mol": 0.0,
                         "orders": {"NO": 1}, "theta_star": 0.2}, SITES)
    c = _c(NO=1.0)
    low = rx.law(c, np.array([1e-4]), np.array(600.0))
    high = rx.law(c, np.array([1.0]), np.array(600.0))
    assert low == pytest.approx(1e-4, rel=1e-3)
    assert high == pytest.approx(0.2 * (1 - np.exp(-5.0)), rel=1e-12)


def test_reversible_rate_vanishes_at_equilibrium():
    """NO + 0.5 O2 <-> NO2 with Kc from NASA-7 data: zero net rate at the equilibrium ratio."""
    rx = build_reaction({"name": "nox", "equation": "NO + 0.5 O2 <-> NO2", "form": "reversible",
                         "k_ref": 3.0, "E_kJ_mol": 40.0}, [])
    T = 650.0
    nu = rx.nu_gas
    kc = thermo.equilibrium_constant_c(nu, T)
    c_no, c_o2 = 0.01, 2.0
    c = _c(NO=c_no, O2=c_o2, NO2=kc * c_no * np.sqrt(c_o2))
    r = rx.law(c, np.zeros(0), np.array(T))
    assert abs(r) < 1e-9 * 3.0 * c_no * np.sqrt(c_o2) * 10
    c[INDEX["NO2"]] = 0.0
    assert rx.law(c, np.zeros(0), np.array(T)) > 0


def test_langmuir_hinshelwood_denominator():
    """r = k c / (1 + K c)^p with K(T) = K_ref exp(-dH/R (1/T - 1/T_ref))."""
    rx = build_reaction({"name": "ox", "equation": "4 NH3 + 3 O2 -> 2 N2 + 6 H2O",
                         "form": "langmuir_hinshelwood", "k_ref": 100.0, "E_kJ_mol": 0.0,
                         "T_ref_C": 300.0, "orders": {"NH3": 1},
                         "inhibition": {"NH3": {"K_ref": 20.0, "dH_kJ_mol": -40.0,
                                                "T_ref_C": 300.0}},
                         "inhibition_order": 2.0}, [])
    T = 673.15
    K = 20.0 * np.exp(40e3 / R_GAS * (1 / T - 1 / 573.15))
    c = 0.05
    assert rx.law(_c(NH3=c), np.zeros(0), np.array(T)) == pytest.approx(
        100.0 * c / (1 + K * c) ** 2, rel=1e-12)


def test_rates_finite_at_zero_concentration_and_bounds():
    for name in FORMS:
        assert name in ("power_law", "mass_action", "temkin_desorption",
                        "eley_rideal_critical_coverage", "reversible", "langmuir_hinshelwood")
    rx = build_reaction({"name": "p", "equation": "N2O -> N2 + 0.5 O2", "form": "power_law",
                         "k_ref": 1.0, "orders": {"N2O": 0.5}}, [])
    assert rx.law(_c(N2O=-1e-9), np.zeros(0), np.array(600.0)) == 0.0


@pytest.mark.parametrize("spec,needle", [
    ({"equation": "4 NH3(S1) + 4 NO + O2 -> 4 N2 + 5 H2O", "form": "mass_action", "k_ref": 1},
     "does not balance"),
    ({"equation": "NH3 -> NH3(S1)", "form": "mass_actoin", "k_ref": 1}, "did you mean mass_action"),
    ({"equation": "NH3 -> NH4", "form": "mass_action", "k_ref": 1}, "unknown species"),
    ({"equation": "NH3 -> NH3(S2)", "form": "mass_action", "k_ref": 1}, "unknown site"),
    ({"equation": "NH3 -> NH3(S1)", "form": "mass_action", "k_ref": 1, "theta_star": 0.1},
     "unknown key"),
    ({"equation": "NH3 -> NH3(S1)", "form": "mass_action"}, "rate constant"),
])
def test_bad_reactions_name_file_and_key(spec, needle):
    with pytest.raises(InputError) as err:
        build_reaction(dict(spec, name="bad"), SITES, file="cat.toml", where="reaction[2]")
    text = str(err.value)
    assert needle in text and "cat.toml" in text and "reaction[2]" in text


def test_reaction_table_matches_direct_evaluation():
    """1 K interpolation of dH and ln Kc agrees with the NASA-7 evaluation (consistency)."""
    nu = np.zeros((len(SPECIES), 2))
    nu[[INDEX["NO"], INDEX["O2"], INDEX["NO2"]], 0] = [-1, -0.5, 1]
    nu[[INDEX["NH3"], INDEX["O2"], INDEX["N2"], INDEX["H2O"]], 1] = [-4, -3, 2, 6]
    tab = thermo.ReactionTable(nu)
    T = np.linspace(300.0, 1100.0, 97) + 0.37
    for j in range(2):
        direct_h = thermo.reaction_enthalpy(nu[:, j], T)
        direct_k = np.log(thermo.equilibrium_constant_c(nu[:, j], T))
        assert np.allclose(tab.enthalpy(T)[:, j], direct_h, rtol=1e-6)
        assert np.allclose(tab.log_kc(T)[:, j], direct_k, rtol=1e-6, atol=1e-6)


def test_grouped_rates_equal_each_law():
    """Mechanism.rates evaluates mass-action and power-law reactions together; the result equals
    each reaction's own rate law to round-off for every shipped catalyst, on random states that
    include slightly negative concentrations and coverages outside [0, 1] (consistency of our
    two evaluation paths; arithmetic)."""
    from aftertreat.catalyst import available_catalysts, load_layers
    rng = np.random.default_rng(0)
    for key in available_catalysts():
        for cat, _ in load_layers(key):
            m = cat.mechanism
            c = rng.uniform(-1e-4, 5e-2, (40, 3, len(SPECIES)))
            th = rng.uniform(-0.1, 1.1, (40, 3, len(m.sites)))
            T = rng.uniform(450.0, 800.0, (40, 1))
            fast = m.rates(c, th, T)
            slow = np.stack([r.law(c, th, np.broadcast_to(T, (40, 3))) for r in m.reactions],
                            axis=-1)
            np.testing.assert_allclose(fast, slow, rtol=1e-13, atol=0.0)
