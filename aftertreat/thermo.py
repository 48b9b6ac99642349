"""Ideal-gas thermodynamic data of the exhaust species, from NASA 7-coefficient polynomials.

The coefficients are read once from Cantera's bundled GRI-Mech 3.0 file (``gri30.yaml``) and
cached; every evaluation afterwards is plain, vectorised numpy. Cantera is imported lazily inside
the extraction so that ``import aftertreat`` stays fast.

For each species and temperature range the NASA-7 form is (McBride, Gordon & Reno 1993)::

    cp/R   = a1 + a2 T + a3 T^2 + a4 T^3 + a5 T^4
    h/(RT) = a1 + a2 T/2 + a3 T^2/3 + a4 T^3/4 + a5 T^4/5 + a6/T
    s0/R   = a1 ln T + a2 T + a3 T^2/2 + a4 T^3/3 + a5 T^4/4 + a7

with the low-range coefficients used for T < T_mid and the high-range ones for T >= T_mid. The
enthalpy includes the enthalpy of formation at 298.15 K (elements in their reference states = 0);
s0 is the standard entropy at p0 = 101325 Pa (the reference pressure of ``gri30.yaml``).

For a reaction with stoichiometric vector nu over :data:`~aftertreat.species.SPECIES` (negative
for reactants)::

    dH = sum_i nu_i h_i,   dG = sum_i nu_i (h_i - T s0_i)
    Kp = exp(-dG / (R T))                       [pressures in units of p0]
    Kc = Kp (p0 / (R T))^(sum_i nu_i)           [(mol/m3)^(sum nu)]

Element balance of ``nu`` is not checked here. The gri30 fits are valid from 200 (300 for
some species) to 3500-6000 K; T is not range-checked, polynomials extrapolate silently.

References
----------
McBride, B. J., Gordon, S., Reno, M. A. (1993). Coefficients for calculating thermodynamic and
    transport properties of individual species. NASA TM-4513.
Smith, G. P. et al. GRI-Mech 3.0, http://combustion.berkeley.edu/gri-mech/ (thermo data file).
"""
from __future__ import annotations

from functools import lru_cache

import numpy as np

from .species import CANTERA_NAME, SPECIES
from .units import P_ATM_PA, R_GAS

__all__ = ["P0_PA", "nasa7_coefficients", "cp_molar", "h_molar", "s0_molar", "g0_molar",
           "reaction_enthalpy", "reaction_entropy", "reaction_gibbs",
           "equilibrium_constant_p", "equilibrium_constant_c"]

#: Standard-state pressure of the thermodynamic data [Pa] (1 atm, as in gri30.yaml).
P0_PA = P_ATM_PA


@lru_cache(maxsize=1)
def nasa7_coefficients() -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """NASA-7 coefficients of every species in :data:`SPECIES`, read once from ``gri30.yaml``.

    Returns
    -------
    (low, high, T_mid)
        ``low`` and ``high`` are read-only arrays of shape (nsp, 7) holding a1..a7 of the low and
        high temperature ranges; ``T_mid`` [K], shape (nsp,), is the switch temperature.

    Cantera's ``NasaPoly2.coeffs`` is laid out as [T_mid, high a1..a7, low a1..a7].
    """
    import cantera as ct  # lazy: only needed once

    gas = ct.Solution("gri30.yaml", transport_model=None)
    low = np.empty((len(SPECIES), 7))
    high = np.empty((len(SPECIES), 7))
    t_mid = np.empty(len(SPECIES))
    for i, name in enumerate(SPECIES):
        thermo = gas.species(CANTERA_NAME[name]).thermo
        if not isinstance(thermo, ct.NasaPoly2):
            raise TypeError(f"{name}: expected NASA-7 thermo data, got {type(thermo).__name__}")
        if abs(thermo.reference_pressure - P0_PA) > 1e-6:
            raise ValueError(f"{name}: reference pressure {thermo.reference_pressure} Pa != p0")
        c = np.asarray(thermo.coeffs, dtype=float)
        t_mid[i], high[i], low[i] = c[0], c[1:8], c[8:15]
    for a in (low, high, t_mid):
        a.setflags(write=False)
    return low, high, t_mid


def _coeffs(T, n: int) -> tuple[np.ndarray, list[np.ndarray]]:
    """T [K] as shape T.shape + (1,), and coefficients a1..an, each of shape T.shape + (nsp,)."""
    T = np.asarray(T, dtype=float)[..., np.newaxis]
    low, high, t_mid = nasa7_coefficients()
    is_low = T < t_mid
    return T, [np.where(is_low, low[:, k], high[:, k]) for k in range(n)]


def cp_molar(T) -> np.ndarray:
    """Molar isobaric heat capacity of each species [J/(mol K)]; shape ``T.shape + (nsp,)``."""
    T, (a1, a2, a3, a4, a5) = _coeffs(T, 5)
    return R_GAS * (a1 + T * (a2 + T * (a3 + T * (a4 + T * a5))))


def h_molar(T) -> np.ndarray:
    """Molar enthalpy of each species incl. enthalpy of formation [J/mol]; shape T.shape+(nsp,)."""
    T, (a1, a2, a3, a4, a5, a6) = _coeffs(T, 6)
    return R_GAS * (T * (a1 + T * (a2 / 2 + T * (a3 / 3 + T * (a4 / 4 + T * a5 / 5)))) + a6)


def s0_molar(T) -> np.ndarray:
    """Standard molar entropy of each species at p0 [J/(mol K)]; shape ``T.shape + (nsp,)``."""
    T, (a1, a2, a3, a4, a5, _, a7) = _coeffs(T, 7)
    return R_GAS * (a1 * np.log(T) + T * (a2 + T * (a3 / 2 + T * (a4 / 3 + T * a5 / 4))) + a7)


def g0_molar(T) -> np.ndarray:
    """Standard molar Gibbs energy g0 = h - T s0 of each species [J/mol]."""
    Tn = np.asarray(T, dtype=float)[..., np.newaxis]
    return h_molar(T) - Tn * s0_molar(T)


def _nu(nu) -> np.ndarray:
    nu = np.asarray(nu, dtype=float)
    if nu.shape != (len(SPECIES),):
        raise ValueError(f"nu must be a vector of length {len(SPECIES)} in SPECIES order, "
                         f"got shape {nu.shape}")
    return nu


def reaction_enthalpy(nu, T) -> np.ndarray:
    """Standard reaction enthalpy dH = sum nu_i h_i [J per reaction as written]; shape T.shape."""
    return h_molar(T) @ _nu(nu)


def reaction_entropy(nu, T) -> np.ndarray:
    """Standard reaction entropy dS = sum nu_i s0_i [J/K per reaction as written]."""
    return s0_molar(T) @ _nu(nu)


def reaction_gibbs(nu, T) -> np.ndarray:
    """Standard reaction Gibbs energy dG = dH - T dS [J per reaction as written]; shape T.shape."""
    return g0_molar(T) @ _nu(nu)


def equilibrium_constant_p(nu, T) -> np.ndarray:
    """Kp = exp(-dG/(R T)) [-], partial pressures in units of p0 = 101325 Pa (atm^sum(nu))."""
    T = np.asarray(T, dtype=float)
    return np.exp(-reaction_gibbs(nu, T) / (R_GAS * T))


def equilibrium_constant_c(nu, T) -> np.ndarray:
    """Kc = Kp (p0/(R T))^sum(nu) [(mol/m3)^sum(nu)], concentration-based equilibrium constant."""
    T = np.asarray(T, dtype=float)
    dn = float(np.sum(_nu(nu)))
    return equilibrium_constant_p(nu, T) * (P0_PA / (R_GAS * T)) ** dn


class ReactionTable:
    """Reaction enthalpies and ln Kc of several reactions, tabulated on a 1 K grid (200-2000 K).

    Built once from the NASA-7 functions above, then evaluated by linear interpolation, which is
    what the solvers call per cell. ln Kc is interpolated as T ln Kc, which is nearly linear in T
    (van 't Hoff), so with a 1 K step both tables agree with direct evaluation to about 1e-7
    relative (a unit test checks it).
    ``nu`` has shape (nsp, nrxn): one stoichiometric column per reaction.
    """
    T0, T1, DT = 200.0, 2000.0, 1.0

    def __init__(self, nu):
        nu = np.asarray(nu, dtype=float).reshape(len(SPECIES), -1)
        grid = np.arange(self.T0, self.T1 + self.DT / 2, self.DT)
        self._dH = h_molar(grid) @ nu                                   # [ngrid, nrxn]
        g = g0_molar(grid) @ nu
        dn = nu.sum(axis=0)
        self._TlnKc = -g / R_GAS + dn[None, :] * grid[:, None] * np.log(
            P0_PA / (R_GAS * grid[:, None]))

    def _weights(self, T):
        T = np.asarray(T, dtype=float)
        x = np.clip((T - self.T0) / self.DT, 0.0, (self._dH.shape[0] - 1) - 1e-9)
        bad = ~np.isfinite(x)
        x = np.where(bad, 0.0, x)
        i = x.astype(int)
        w = np.where(bad, np.nan, x - i)        # a non-finite T gives NaN, not an index error
        return i, w[..., None]

    def enthalpy(self, T):
        """Reaction enthalpies [J per reaction as written], shape T.shape + (nrxn,)."""
        i, w = self._weights(T)
        return self._dH[i] * (1.0 - w) + self._dH[i + 1] * w

    def log_kc(self, T):
        """ln Kc with Kc in (mol/m^3)^sum(nu), shape T.shape + (nrxn,)."""
        i, w = self._weights(T)
        T = np.asarray(T, dtype=float)[..., None]
        return (self._TlnKc[i] * (1.0 - w) + self._TlnKc[i + 1] * w) / T
