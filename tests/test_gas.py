"""Unit and consistency tests of aftertreat.gas.GasProperties (no external data basis).

The reference in the consistency tests is a direct Cantera evaluation at the same state.
"""
import numpy as np
import pytest

import aftertreat.gas as gas_mod
from aftertreat.errors import InputError
from aftertreat.gas import GasProperties, _cantera_table
from aftertreat.species import INDEX, SPECIES

NSP = len(SPECIES)


def _x(**fractions):
    x = np.zeros(NSP)
    for name, v in fractions.items():
        x[INDEX[name]] = v
    return x


# Exhaust of an NH3/H2-fuelled engine upstream of SCR (illustrative, common practice).
EXHAUST = _x(NO=8e-4, NO2=8e-5, NH3=6e-4, N2O=2e-5, O2=0.11, H2O=0.14, N2=0.74, H2=3e-3, Ar=9e-3)
COMPOSITIONS = {"exhaust": EXHAUST, "pure_N2": _x(N2=1.0), "H2_rich": _x(H2=0.3, N2=0.7),
                "steam": _x(H2O=0.5, N2=0.5)}


@pytest.fixture(scope="module")
def exhaust():
    return GasProperties(EXHAUST, p=1.2e5)


@pytest.mark.parametrize("name", sorted(COMPOSITIONS))
def test_interpolation_within_0p2_percent(name):
    """Off-grid (mid-segment in ln T, where the error peaks) values agree with Cantera < 0.2 %.

    Consistency check of the default 12-point ln-ln table; measured maximum ~0.06 %.
    """
    g = GasProperties(COMPOSITIONS[name])
    T = np.concatenate([np.sqrt(g.T_table[:-1] * g.T_table[1:]), np.linspace(310, 1290, 23)])
    x_ref = np.maximum(g.x, 1e-12) if name == "pure_N2" else g.x
    ref = _cantera_table(x_ref / x_ref.sum(), T, g.p)
    got = np.column_stack([g.viscosity(T), g.conductivity(T), g.diffusivity(T)])
    assert np.max(np.abs(got / ref - 1.0)) < 2e-3


def test_extrapolation_is_end_power_law(exhaust):
    """Beyond the table, ln(property) continues the end segment linearly in ln(T)."""
    T = exhaust.T_table
    for Ta, Tb, Tout in ((T[-2], T[-1], 1500.0), (T[1], T[0], 250.0)):
        mu_a, mu_b = exhaust.viscosity(Ta), exhaust.viscosity(Tb)
        slope = np.log(mu_b / mu_a) / np.log(Tb / Ta)
        assert exhaust.viscosity(Tout) == pytest.approx(mu_b * (Tout / Tb) ** slope, rel=1e-12)
    # ... and stays a fair approximation a little outside (documented; 1 % here).
    ref = _cantera_table(exhaust.x, np.array([250.0, 1500.0]), exhaust.p)
    assert exhaust.viscosity(np.array([250.0, 1500.0])) == pytest.approx(ref[:, 0], rel=0.01)


def test_cp_matches_cantera(exhaust):
    """Mixture cp from the NASA polynomials equals Cantera's cp_mole (same data)."""
    gas, idx = gas_mod._solution()
    X = np.zeros(gas.n_species)
    X[idx] = exhaust.x
    for T in (320.0, 777.0, 1250.0):
        gas.TPX = T, exhaust.p, X
        assert exhaust.cp_molar(T) == pytest.approx(gas.cp_mole / 1e3, rel=1e-8)


def test_shapes(exhaust):
    """T of any shape -> same shape (or + (nsp,) for per-species properties)."""
    T = np.linspace(400.0, 900.0, 12).reshape(3, 4)
    for f in (exhaust.density, exhaust.cp_molar, exhaust.cp_mass, exhaust.viscosity,
              exhaust.conductivity, exhaust.prandtl):
        assert np.shape(f(T)) == (3, 4)
        assert np.shape(f(500.0)) == ()
    assert exhaust.diffusivity(T).shape == (3, 4, NSP)
    assert exhaust.schmidt(T).shape == (3, 4, NSP)
    assert exhaust.diffusivity(500.0).shape == (NSP,)
    np.testing.assert_allclose(exhaust.viscosity(T)[1, 2], exhaust.viscosity(T[1, 2]))


def test_pressure_scaling(exhaust):
    """rho ~ p (ideal gas), D ~ 1/p (kinetic theory), so Sc is independent of p."""
    T = np.array([500.0, 700.0])
    assert exhaust.density(T, 2 * exhaust.p) == pytest.approx(2 * exhaust.density(T))
    np.testing.assert_allclose(exhaust.diffusivity(T, 2 * exhaust.p),
                               exhaust.diffusivity(T) / 2, rtol=1e-14)
    # against Cantera at another pressure (0.5 %: the binary D in Cantera are exactly ~1/p)
    ref = _cantera_table(exhaust.x, np.array([600.0]), 3e5)[0, 2:]
    np.testing.assert_allclose(exhaust.diffusivity(600.0, 3e5), ref, rtol=2e-3)


def test_trace_and_dominant_species_have_valid_diffusivity():
    """Zero-fraction species and the only present species get finite, positive D."""
    for x in (_x(N2=1.0), _x(O2=0.21, N2=0.79), EXHAUST):
        D = GasProperties(x).diffusivity(np.array([300.0, 600.0, 1200.0]))
        assert np.all(np.isfinite(D)) and np.all(D > 0)


def test_normalisation_and_from_flows():
    """Amounts are normalised; from_flows (mol/s) equals the mole-fraction constructor."""
    F = EXHAUST * 3.7
    a, b = GasProperties.from_flows(F, 1e5), GasProperties(EXHAUST, 1e5)
    assert a.x.sum() == pytest.approx(1.0)
    np.testing.assert_allclose(a.x, b.x)
    np.testing.assert_allclose(a.conductivity([400.0, 800.0]), b.conductivity([400.0, 800.0]))


def test_shared_tables_for_streams():
    """for_stream rounds the composition to COMPOSITION_STEP: nearly equal streams share one
    table, and its properties (at the caller's pressure) stay within 1e-3 of the exact
    composition's (consistency of our own rounding, no external basis)."""
    F = EXHAUST * 2.5
    F2 = F.copy()
    F2[0] *= 1.0 + 1e-6
    a, b = GasProperties.for_stream(F), GasProperties.for_stream(F2)
    assert a is b
    exact = GasProperties(EXHAUST, 1.3e5)
    T = np.array([450.0, 700.0, 950.0])
    np.testing.assert_allclose(a.diffusivity(T, 1.3e5), exact.diffusivity(T, 1.3e5), rtol=1e-3)
    np.testing.assert_allclose(a.density(T, 1.3e5), exact.density(T), rtol=1e-3)
    np.testing.assert_allclose(a.viscosity(T), exact.viscosity(T), rtol=1e-3)
    np.testing.assert_allclose(a.conductivity(T), exact.conductivity(T), rtol=1e-3)


def test_no_cantera_after_construction(exhaust, monkeypatch):
    """Evaluation needs no Cantera: all calls work with the Cantera accessors disabled."""
    def forbidden(*args, **kwargs):
        raise AssertionError("Cantera called after construction")
    monkeypatch.setattr(gas_mod, "_solution", forbidden)
    monkeypatch.setattr(gas_mod, "_cantera_table", forbidden)
    T = np.linspace(300.0, 1300.0, 50)
    for f in (exhaust.viscosity, exhaust.conductivity, exhaust.diffusivity, exhaust.prandtl,
              exhaust.schmidt, exhaust.cp_mass, exhaust.density):
        assert np.all(np.isfinite(f(T)))


@pytest.mark.parametrize("x", [np.zeros(NSP), -EXHAUST, np.ones(3), np.full(NSP, np.nan)])
def test_bad_composition_rejected(x):
    """Negative, empty, wrong-length or non-finite compositions raise InputError."""
    with pytest.raises(InputError):
        GasProperties(x)


def test_bad_range_rejected():
    with pytest.raises(InputError):
        GasProperties(EXHAUST, T_min=900.0, T_max=400.0)
    with pytest.raises(InputError):
        GasProperties(EXHAUST, p=-1.0)
