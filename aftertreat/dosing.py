"""Reductant dosing ahead of the SCR: gaseous NH3 or aqueous urea, with the mixing temperature.

The ammonia-to-NOx ratio at the brick inlet counts the NH3 already in the exhaust (unburned
fuel)::

    ANR = F_NH3 / (F_NO + F_NO2)                       [mol/mol]
    NH3 added = max(0, ANR_target (F_NO + F_NO2) - F_NH3)

``"NH3"``: gaseous NH3 from the fuel system at ``T_supply_K``. ``"urea"``: urea-water solution
(mass fraction w) at ``T_supply_K``; the water evaporates and the urea decomposes completely
before the brick (thermolysis and hydrolysis lumped)::

    CO(NH2)2 + H2O -> 2 NH3 + CO2

so per mole of urea the gas gains 2 NH3, 1 CO2 and n_w - 1 H2O, with n_w = (1-w)/w M_urea/M_H2O
the solution water. The mixed temperature T solves the adiabatic energy balance::

    sum_i (F_i + r_i) h_i(T) = sum_i F_i h_i(T_in) + H_reagent(T_supply)

with h_i from :mod:`aftertreat.thermo` (formation enthalpies included) and, for urea::

    H_reagent = n_u [dfH(urea,s) + dH_sol + cp_u (T_s - 298.15)]
              + n_w [h_H2O,gas(298.15) - L_298 + cp_l (T_s - 298.15)]

(data in ``fuels.toml``), solved by Newton steps on T with the mixture cp = sum (F+r)_i cp_i(T).

References
----------
Koebel, M., Elsener, M., Kleemann, M. (2000). Urea-SCR: a promising technique to reduce NOx
    emissions from automotive diesel engines. Catal. Today 59, 335-345 (urea decomposition).
McBride, Gordon & Reno (1993), NASA TM-4513 (NASA-7 enthalpies).
"""
from __future__ import annotations

import numpy as np

from .combustion import fuel_data
from .errors import ConvergenceError, InputError, did_you_mean
from .species import INDEX, MOLAR_MASS, SPECIES
from .species import nox as nox_of
from .stream import Stream
from .thermo import cp_molar, h_molar

__all__ = ["METHODS", "anr", "urea_molar_mass", "reagent_enthalpy", "dose"]

METHODS = ("none", "NH3", "urea")
_T_REF = 298.15


def anr(stream: Stream) -> float:
    """Ammonia-to-NOx ratio F_NH3 / (F_NO + F_NO2) [-].

    inf with NH3 and no NOx, nan with neither.
    """
    nox = float(nox_of(stream.F))
    nh3 = stream.F[INDEX["NH3"]]
    if nox > 0:
        return float(nh3 / nox)
    return float("inf") if nh3 > 0 else float("nan")


def urea_molar_mass() -> float:
    """M(CO(NH2)2) [kg/mol] = M(CO2) + 2 M(NH3) - M(H2O) (the same atoms; one place for
    atomic weights)."""
    return float(MOLAR_MASS[INDEX["CO2"]] + 2 * MOLAR_MASS[INDEX["NH3"]]
                 - MOLAR_MASS[INDEX["H2O"]])


def reagent_enthalpy(method: str, n_reagent_mol_s: float, *, T_supply_K: float = _T_REF,
                     urea_mass_fraction: float = 0.325) -> float:
    """Enthalpy flow [W] of the reagent as supplied (formation enthalpies included).

    n_reagent_mol_s: NH3 [mol/s] for ``"NH3"`` (ideal gas, h from thermo), urea [mol/s] for
    ``"urea"`` (solution, module docstring). 0 for ``"none"``.
    """
    if method == "none" or n_reagent_mol_s == 0:
        return 0.0
    h = h_molar(T_supply_K)
    if method == "NH3":
        return float(n_reagent_mol_s * h[INDEX["NH3"]])
    d, w = fuel_data(), urea_mass_fraction
    dT = T_supply_K - _T_REF
    u, wat = d["urea"], d["water"]
    h_urea = (u["formation_enthalpy_solid_kJ_mol"] + u["dissolution_enthalpy_kJ_mol"]) * 1e3 \
        + u["cp_solid_J_mol_K"] * dT
    h_liq = float(h_molar(_T_REF)[INDEX["H2O"]]) - wat["latent_heat_298_kJ_mol"] * 1e3 \
        + wat["cp_liquid_J_mol_K"] * dT
    n_w = (1 - w) / w * urea_molar_mass() / MOLAR_MASS[INDEX["H2O"]]
    return float(n_reagent_mol_s * (h_urea + n_w * h_liq))


def _mix_temperature(F_out: np.ndarray, H_in: float, T_guess: float) -> float:
    """T with F_out . h(T) = H_in [W], Newton on T with dH/dT = F_out . cp(T)."""
    T = T_guess
    for _ in range(50):
        g = float(F_out @ h_molar(T)) - H_in
        step = g / float(F_out @ cp_molar(T))
        T = max(T - step, 0.5 * T)
        if abs(step) < 1e-9 * T:
            return T
    raise ConvergenceError("dosing energy balance did not converge", residual=abs(step))


def dose(stream: Stream, method: str, target_anr: float, *, urea_mass_fraction: float = 0.325,
         T_supply_K: float = _T_REF) -> tuple[Stream, np.ndarray]:
    """Dose NH3 or urea solution to reach ``target_anr`` at the brick inlet (module docstring).

    Returns ``(dosed_stream, reagent)``: reagent [mol/s over SPECIES] is what the gas gains (NH3;
    for urea also CO2 and the net water n_w - 1 per urea). The temperature drop is
    ``stream.T - dosed_stream.T`` [K]; the pressure is unchanged.
    """
    if method not in METHODS:
        raise InputError(f"expected a dosing method among {', '.join(METHODS)}"
                         + did_you_mean(method, METHODS), key="method", value=method)
    reagent = np.zeros(len(SPECIES))
    if method == "none":
        return stream, reagent
    if isinstance(target_anr, bool) or not (np.isfinite(target_anr) and target_anr >= 0):
        raise InputError("expected an ANR >= 0", key="target_anr", value=target_anr)
    if not (np.isfinite(T_supply_K) and 200.0 <= T_supply_K <= 400.0):
        raise InputError("expected a reagent supply temperature in 200..400 K",
                         key="T_supply_K", value=T_supply_K)
    nox = float(nox_of(stream.F))
    nh3_add = max(0.0, target_anr * nox - stream.F[INDEX["NH3"]])
    if nh3_add == 0.0:
        return stream, reagent
    if method == "NH3":
        n = nh3_add
        reagent[INDEX["NH3"]] = nh3_add
    else:
        w = urea_mass_fraction
        if not (np.isfinite(w) and 0 < w <= 0.7):
            raise InputError("expected a urea mass fraction in (0, 0.7] (water for the hydrolysis)",
                             key="urea_mass_fraction", value=w)
        n = nh3_add / 2.0
        n_w = (1 - w) / w * urea_molar_mass() / MOLAR_MASS[INDEX["H2O"]]
        reagent[INDEX["NH3"]] = 2.0 * n
        reagent[INDEX["CO2"]] = n
        reagent[INDEX["H2O"]] = n * (n_w - 1.0)
    H_in = float(stream.F @ h_molar(stream.T)) + reagent_enthalpy(
        method, n, T_supply_K=T_supply_K, urea_mass_fraction=urea_mass_fraction)
    F_out = stream.F + reagent
    T = _mix_temperature(F_out, H_in, stream.T)
    return stream.with_flows(F=F_out, T=T), reagent
