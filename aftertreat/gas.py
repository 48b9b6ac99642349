"""Transport and thermal properties of one exhaust composition over a temperature range.

Cantera (GRI-Mech 3.0 transport data, ``gri30.yaml``, mixture-averaged model) is called only in
the constructor, on a small temperature table; every later evaluation is vectorised numpy.

Interpolation: viscosity, conductivity and the mixture-averaged diffusivities are close to power
laws in T, so ``ln(property)`` is interpolated linearly in ``ln(T)``. Outside the table the end
segment's power law is extrapolated (no clipping): accurate a little beyond the ends, increasingly
rough far beyond them. Heat capacity is evaluated exactly from the NASA polynomials
(:mod:`aftertreat.thermo`) and density exactly from the ideal-gas law, so neither is interpolated.

Equations (ideal-gas mixture with mole fractions x_i)::

    M      = sum_i x_i M_i                   [kg/mol]
    rho    = p M / (R T)                     [kg/m3]
    cp     = sum_i x_i cp_i(T)               [J/(mol K)],  cp_mass = cp / M  [J/(kg K)]
    Pr     = cp_mass mu / k                  [-]
    Sc_i   = mu / (rho D_i)                  [-]   (independent of p since D_i ~ 1/p)
    D_i(p) = D_i(p_table) p_table / p        [m2/s]

The mixture-averaged diffusivity is D_i = (1 - y_i) / sum_{j!=i} (x_j / D_ij) (Kee, Coltrin &
Glarborg 2003, ch. 12), with binary D_ij from Chapman-Enskog theory. It is finite for trace
species (x_i -> 0). For a species that is the whole mixture (e.g. pure N2) it is 0/0; there the
table is built with every absent species at a mole fraction of 1e-12, which gives the dilute
limit of the other species unchanged and a finite weighted-mean value for the dominant one.

References
----------
Kee, R. J., Coltrin, M. E., Glarborg, P. (2003). Chemically Reacting Flow. Wiley, ch. 12.
Smith, G. P. et al. GRI-Mech 3.0, http://combustion.berkeley.edu/gri-mech/ (transport data).
"""
from __future__ import annotations

from functools import lru_cache

import numpy as np

from . import thermo
from .errors import InputError
from .species import CANTERA_NAME, MOLAR_MASS, SPECIES
from .units import P_ATM_PA, R_GAS

__all__ = ["GasProperties"]

_X_TRACE = 1e-12
#: Mole-fraction step to which :meth:`GasProperties.for_stream` rounds a composition.
COMPOSITION_STEP = 1e-3


@lru_cache(maxsize=1)
def _solution():
    """The Cantera gri30 Solution with mixture-averaged transport and our species indices.

    Cached: loading the mechanism costs ~0.1 s. Shared state; not for concurrent threads.
    """
    import cantera as ct  # lazy: only the constructor of GasProperties needs it

    gas = ct.Solution("gri30.yaml", transport_model="mixture-averaged")
    idx = np.array([gas.species_index(CANTERA_NAME[s]) for s in SPECIES])
    return gas, idx


def _cantera_table(x: np.ndarray, T: np.ndarray, p: float) -> np.ndarray:
    """Rows [mu (Pa s), k (W/(m K)), D_1..D_nsp (m2/s)] from Cantera at each T [K], p [Pa]."""
    gas, idx = _solution()
    X = np.zeros(gas.n_species)
    X[idx] = x
    rows = np.empty((T.size, 2 + len(SPECIES)))
    for n, Tn in enumerate(T):
        gas.TPX = Tn, p, X
        rows[n, 0] = gas.viscosity
        rows[n, 1] = gas.thermal_conductivity
        rows[n, 2:] = gas.mix_diff_coeffs[idx]
    return rows


class GasProperties:
    """Properties of a fixed gas composition, tabulated once from Cantera, evaluated in numpy.

    Parameters
    ----------
    x : array (nsp,)
        Mole fractions (or any non-negative amounts) in :data:`SPECIES` order; normalised here.
    p : float
        Pressure of the table [Pa]; density and diffusivity accept other pressures.
    T_min, T_max : float
        Table range [K]; outside it the end power laws are extrapolated.
    n_points : int
        Table points, spaced uniformly in ln(T).
    """

    def __init__(self, x, p: float = P_ATM_PA, T_min: float = 300.0, T_max: float = 1300.0,
                 n_points: int = 12):
        x = np.asarray(x, dtype=float)
        if x.shape != (len(SPECIES),) or not np.all(np.isfinite(x)) or np.any(x < 0) \
                or x.sum() <= 0:
            raise InputError(f"mole fractions: {len(SPECIES)} finite non-negative numbers "
                             f"({', '.join(SPECIES)}) with a positive sum", key="x", value=x)
        if not (p > 0 and np.isfinite(p)):
            raise InputError("a positive pressure in Pa", key="p", value=p)
        if not (0 < T_min < T_max and np.isfinite(T_max)) or n_points < 2:
            raise InputError("0 < T_min < T_max [K] and n_points >= 2", key="T_min/T_max",
                             value=(T_min, T_max, n_points))
        self.x = x / x.sum()
        self.p = float(p)
        #: Mean molar mass [kg/mol].
        self.mean_molar_mass = float(self.x @ MOLAR_MASS)
        self.T_table = np.geomspace(T_min, T_max, n_points)
        self._lnT = np.log(self.T_table)
        table = _cantera_table(self.x, self.T_table, self.p)
        if not np.all(np.isfinite(table) & (table > 0)):
            # Pure (or nearly pure) gas: the mixture-averaged D of the dominant species is 0/0.
            x_eval = np.maximum(self.x, _X_TRACE)
            table = _cantera_table(x_eval / x_eval.sum(), self.T_table, self.p)
        if not np.all(np.isfinite(table) & (table > 0)):
            raise ValueError("Cantera returned non-positive transport properties")
        self._lnprop = np.log(table)

    @classmethod
    def from_flows(cls, F, p: float = P_ATM_PA, **kwargs) -> "GasProperties":
        """From molar flows F [mol/s] in SPECIES order (only their ratios matter)."""
        return cls(F, p, **kwargs)

    @classmethod
    def for_stream(cls, F) -> "GasProperties":
        """Shared tables for a stream of molar flows F [mol/s], from its mole fractions rounded
        to ``COMPOSITION_STEP``; the table pressure is 1 atm, so callers pass their pressure to
        :meth:`density` and :meth:`diffusivity` (D ~ 1/p is exact in Chapman-Enskog theory;
        viscosity and conductivity do not depend on p).

        The rounding changes mixture properties by at most ~2e-3 relative over typical exhaust
        compositions (measured on random ones), far inside the accuracy of the transport data,
        and lets the many nearly equal streams of a sizing loop or a time trace share one table
        (the Cantera evaluations cost ~0.3 ms per table).
        """
        F = np.asarray(F, dtype=float)
        tot = F.sum()
        x = F / tot if tot > 0 else F
        xq = np.round(x / COMPOSITION_STEP) * COMPOSITION_STEP
        if not np.all(np.isfinite(xq)) or xq.sum() <= 0:
            return cls(F)                     # let the constructor report the bad input
        return _shared_table(tuple(xq.tolist()))

    # -- interpolation ----------------------------------------------------------------------
    def _interp(self, T, cols: slice) -> np.ndarray:
        """exp of ln(property) linear in ln(T), end segments extended; shape T.shape + (ncol,)."""
        lnT = np.log(np.asarray(T, dtype=float))
        k = np.clip(np.searchsorted(self._lnT, lnT, side="right") - 1, 0, self._lnT.size - 2)
        t = (lnT - self._lnT[k]) / (self._lnT[k + 1] - self._lnT[k])
        y0, y1 = self._lnprop[k, cols], self._lnprop[k + 1, cols]
        return np.exp(y0 + t[..., np.newaxis] * (y1 - y0))

    # -- exact properties -------------------------------------------------------------------
    def density(self, T, p=None) -> np.ndarray:
        """Ideal-gas density rho = p M / (R T) [kg/m3]; p [Pa] defaults to the table pressure."""
        p = self.p if p is None else np.asarray(p, dtype=float)
        return p * self.mean_molar_mass / (R_GAS * np.asarray(T, dtype=float))

    def cp_molar(self, T) -> np.ndarray:
        """Mixture molar heat capacity sum x_i cp_i(T) [J/(mol K)] (NASA-7, exact)."""
        return thermo.cp_molar(T) @ self.x

    def cp_mass(self, T) -> np.ndarray:
        """Mixture specific heat capacity cp / M [J/(kg K)]."""
        return self.cp_molar(T) / self.mean_molar_mass

    # -- interpolated transport properties --------------------------------------------------
    def viscosity(self, T) -> np.ndarray:
        """Dynamic viscosity [Pa s]; shape T.shape."""
        return self._interp(T, slice(0, 1))[..., 0]

    def conductivity(self, T) -> np.ndarray:
        """Thermal conductivity [W/(m K)]; shape T.shape."""
        return self._interp(T, slice(1, 2))[..., 0]

    def diffusivity(self, T, p=None) -> np.ndarray:
        """Mixture-averaged diffusivity of each species in this gas [m2/s]; T.shape + (nsp,).

        Scaled as 1/p from the table pressure when ``p`` [Pa] is given (scalar or broadcastable
        to T.shape).
        """
        D = self._interp(T, slice(2, None))
        if p is None:
            return D
        return D * (self.p / np.asarray(p, dtype=float))[..., np.newaxis]

    def transport(self, T, p) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(viscosity [Pa s], conductivity [W/(m K)], diffusivities [m2/s] at pressure ``p``
        [Pa]) from one interpolation; the same values as the single-property methods."""
        P = self._interp(T, slice(None))
        return P[..., 0], P[..., 1], P[..., 2:] * (self.p / np.asarray(p, dtype=float))[..., None]

    def prandtl(self, T) -> np.ndarray:
        """Prandtl number cp_mass mu / k [-]; shape T.shape."""
        return self.cp_mass(T) * self.viscosity(T) / self.conductivity(T)

    def schmidt(self, T) -> np.ndarray:
        """Schmidt number of each species mu / (rho D_i) [-] (pressure-independent); T.shape+(nsp,)."""
        T = np.asarray(T, dtype=float)
        rho_D = self.density(T)[..., np.newaxis] * self.diffusivity(T)
        return self.viscosity(T)[..., np.newaxis] / rho_D

    def __repr__(self) -> str:
        comp = ", ".join(f"{s}={v:.4g}" for s, v in zip(SPECIES, self.x) if v > 0)
        return (f"GasProperties({comp}; p={self.p:.6g} Pa, "
                f"T table {self.T_table[0]:.1f}..{self.T_table[-1]:.1f} K)")


@lru_cache(maxsize=512)
def _shared_table(x: tuple) -> GasProperties:
    return GasProperties(np.array(x))
