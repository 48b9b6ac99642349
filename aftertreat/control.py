"""NH3 dosing control for transient runs: a feed-forward ANR map and a stored-NH3 controller.

Both decide the target ANR at the brick inlet (NH3/NOx, counting the engine's own NH3, as
:func:`aftertreat.dosing.dose` does); dosing adds only what the engine's own NH3 lacks, and
never removes NH3.

Feed-forward map (``ANR_map``): ANR as a function of the exhaust temperature at the brick inlet,
interpolated linearly and held flat beyond the ends. Common practice: no dosing below the
temperature where the reagent or ammonium salts would deposit, about stoichiometric above the
SCR light-off.

Stored-NH3 controller (``storage``): the map gives the feed-forward, and a proportional term
steers the NH3 stored on the SCR bricks toward a target::

    NH3 dosed [mol/s] = ANR_ff(T) NOx_in + (S_target(T) - S) / tau,   0 <= ANR <= ANR_max

with S the NH3 stored on the SCR bricks now [mol], S_target = f(T) x their capacity (a target
fill fraction falling with temperature, since a warm catalyst holds less and releases it as
slip), and tau the response time. Tuning: with the feed-forward carrying the steady demand, the
storage error then decays as exp(-t/tau) (dS/dt = dosing - use, and the correction is the error
over tau); tau of 30-60 s, several times the step and shorter than the brick's thermal time
constant, is common practice. There is no integral term: the map removes most of the offset,
and an integrator would wind up while the brick is too cold to store. ANR_max caps over-dosing
when the storage cannot be filled (hot brick, full catalyst).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .errors import InputError
from .units import ZERO_C_K

__all__ = ["AnrMap", "StorageController", "parse_map"]


@dataclass
class AnrMap:
    """y(T) by linear interpolation in T [K], flat beyond the ends."""
    T_K: np.ndarray
    value: np.ndarray

    def __call__(self, T_K: float) -> float:
        return float(np.interp(T_K, self.T_K, self.value))


def parse_map(table, key: str, column: str, file: str | None, lo: float, hi: float) -> AnrMap:
    """A ``{T_C = [...], <column> = [...]}`` table as an :class:`AnrMap` (T ascending)."""
    if not isinstance(table, dict) or set(table) != {"T_C", column}:
        raise InputError(f"expected a table {{ T_C = [...], {column} = [...] }}", key=key,
                         value=table, file=file)
    T, v = table["T_C"], table[column]
    ok = (isinstance(T, list) and isinstance(v, list) and len(T) == len(v) >= 1
          and all(isinstance(a, (int, float)) and not isinstance(a, bool) for a in T + v))
    if not ok:
        raise InputError(f"expected two lists of numbers of the same length (T_C and {column})",
                         key=key, value=table, file=file)
    T, v = np.array(T, dtype=float), np.array(v, dtype=float)
    if np.any(np.diff(T) <= 0) or T.min() < 0 or T.max() > 900:
        raise InputError("expected T_C ascending within 0..900", key=key + ".T_C",
                         value=T.tolist(), file=file)
    if np.any(v < lo) or np.any(v > hi):
        raise InputError(f"expected {column} within [{lo}, {hi}]", key=key + "." + column,
                         value=v.tolist(), file=file)
    return AnrMap(T + ZERO_C_K, v)


@dataclass
class StorageController:
    """Target ANR from the feed-forward map plus a proportional correction on stored NH3.

    ``feed_forward`` ANR(T); ``target_fraction`` f(T) of the SCR capacity; ``response_s`` tau;
    ``anr_max`` the cap.
    """
    feed_forward: AnrMap
    target_fraction: AnrMap
    response_s: float = 30.0
    anr_max: float = 1.5

    def anr(self, T_in_K: float, nox_mol_s: float, stored_mol: float,
            capacity_mol: float) -> float:
        if nox_mol_s <= 0:
            return 0.0
        target = self.target_fraction(T_in_K) * capacity_mol
        nh3 = self.feed_forward(T_in_K) * nox_mol_s + (target - stored_mol) / self.response_s
        return float(min(max(nh3 / nox_mol_s, 0.0), self.anr_max))
