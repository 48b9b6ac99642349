"""An exhaust stream: molar flows of every species, temperature and pressure.

Molar flows [mol/s] are the conserved state; concentrations, wet and dry ppm and mass flows are
derived from them, so element balances close exactly by construction.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .errors import InputError
from .species import ELEMENT_MATRIX, INDEX, MOLAR_MASS, NOX, SPECIES
from .units import P_ATM_PA, R_GAS

__all__ = ["Stream"]


@dataclass(frozen=True)
class Stream:
    """Molar flows ``F`` [mol/s] in :data:`~aftertreat.species.SPECIES` order, ``T`` [K], ``p`` [Pa]."""
    F: np.ndarray
    T: float
    p: float = P_ATM_PA

    def __post_init__(self):
        F = np.asarray(self.F, dtype=float)
        if F.shape != (len(SPECIES),):
            raise InputError(f"expected {len(SPECIES)} molar flows in the order {SPECIES}",
                             key="F", value=F.shape)
        bad = [s for s, f in zip(SPECIES, F) if not np.isfinite(f) or f < 0]
        if bad:
            raise InputError("expected molar flows >= 0", key=f"flow of {bad[0]}",
                             value=float(F[INDEX[bad[0]]]))
        if F.sum() <= 0:
            raise InputError("expected a positive total flow", key="F", value=float(F.sum()))
        if not (np.isfinite(self.T) and self.T > 0):
            raise InputError("expected a temperature > 0 K", key="T", value=self.T)
        if not (np.isfinite(self.p) and self.p > 0):
            raise InputError("expected a pressure > 0 Pa", key="p", value=self.p)
        object.__setattr__(self, "F", F)

    # ---- constructors -----------------------------------------------------------------------
    @classmethod
    def from_mole_fractions(cls, x: dict[str, float], *, T: float, p: float = P_ATM_PA,
                            total_mol_s: float | None = None, mass_kg_s: float | None = None,
                            balance: str = "N2") -> "Stream":
        """Build a stream from wet mole fractions; ``balance`` takes what is left up to 1.

        Give the size as ``total_mol_s`` or ``mass_kg_s``. Unknown species are an error.
        """
        y = np.zeros(len(SPECIES))
        for k, v in x.items():
            if k not in INDEX:
                from .errors import did_you_mean
                raise InputError(f"unknown species; valid: {', '.join(SPECIES)}"
                                 + did_you_mean(k, SPECIES), key=k, value=v)
            if not (np.isfinite(v) and v >= 0):
                raise InputError("expected a mole fraction >= 0", key=k, value=v)
            y[INDEX[k]] = v
        rest = 1.0 - y.sum() + y[INDEX[balance]]
        if rest < -1e-12:
            raise InputError("mole fractions add up to more than 1", key=balance, value=y.sum())
        y[INDEX[balance]] = max(rest, 0.0)
        if (total_mol_s is None) == (mass_kg_s is None):
            raise InputError("give exactly one of total_mol_s and mass_kg_s", key="flow")
        if total_mol_s is None:
            total_mol_s = mass_kg_s / float(y @ MOLAR_MASS)
        return cls(F=y * total_mol_s, T=T, p=p)

    # ---- derived quantities -----------------------------------------------------------------
    @property
    def total(self) -> float:
        """Total molar flow [mol/s]."""
        return float(self.F.sum())

    @property
    def x(self) -> np.ndarray:
        """Wet mole fractions [-]."""
        return self.F / self.F.sum()

    @property
    def mass_flow(self) -> float:
        """Mass flow [kg/s] from the real composition."""
        return float(self.F @ MOLAR_MASS)

    @property
    def molar_mass(self) -> float:
        """Mean molar mass [kg/mol]."""
        return self.mass_flow / self.total

    def volume_flow(self, T: float | None = None, p: float | None = None) -> float:
        """Volumetric flow [m^3/s] at (T, p), ideal gas; defaults to the stream's own state."""
        return self.total * R_GAS * (self.T if T is None else T) / (self.p if p is None else p)

    def ppm_wet(self) -> dict[str, float]:
        """Wet mole fractions in ppm, per species."""
        return {s: float(v) for s, v in zip(SPECIES, self.x * 1e6)}

    def ppm_dry(self) -> dict[str, float]:
        """Dry-basis mole fractions in ppm (water removed), per species (H2O reported as 0)."""
        dry = self.F.copy()
        dry[INDEX["H2O"]] = 0.0
        return {s: float(v) for s, v in zip(SPECIES, dry / dry.sum() * 1e6)}

    def ppm(self, species: str) -> float:
        """Wet ppm of one species, or of ``"NOx"`` (NO + NO2, :data:`~aftertreat.species.NOX`)."""
        if species == "NOx":
            return float(sum(self.F[INDEX[s]] for s in NOX) / self.F.sum() * 1e6)
        return float(self.F[INDEX[species]] / self.F.sum() * 1e6)

    def atoms(self) -> np.ndarray:
        """Element flows [mol/s] in :data:`~aftertreat.species.ELEMENTS` order."""
        return ELEMENT_MATRIX @ self.F

    def with_flows(self, F=None, T=None, p=None) -> "Stream":
        """A copy with some fields replaced."""
        return Stream(F=self.F if F is None else F, T=self.T if T is None else T,
                      p=self.p if p is None else p)
