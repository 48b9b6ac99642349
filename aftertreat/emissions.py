"""Emission arithmetic: dry/wet basis, O2 reference, mass flows, ppm <-> mg/Nm3, weighted
specific emissions over a duty cycle and CO2-equivalents. Pure functions; numpy arrays accepted.

Equations (concentrations are mole fractions in ppm = umol/mol):

- dry/wet:     c_dry = c_wet / (1 - x_H2O),  c_wet = c_dry * (1 - x_H2O)
- O2 reference (dry basis, dilution by excess air):
  C_ref = C_dry (O2_air - O2_ref) / (O2_air - O2_dry)
- mass flow:   m_dot [g/h] = F [mol/s] * M [g/mol] * 3600; NOx is counted as NO2
  (M_NOx = M_NO2, 40 CFR 1065.1005; NTC 2008 3.1.2)
- mg/Nm3:      rho = c[ppm] * 1e-6 * M * p_N / (R T_N)  (ideal gas; 1 mg/m3 = 1e-3 g/m3)
- weighted specific emission: e [g/kWh] = sum(W_i m_i [g/h]) / sum(W_i P_i [kW])
- CO2-equivalent: m_CO2e = GWP100 * m_N2O

References
----------
- NOx Technical Code 2008 3.1.2 (NOx as NO2), 5.12.5 (weighted specific emission).
- 40 CFR 1065.650 (emission calculations; worked examples (b)(1), (b)(2)); 40 CFR 1065.1005
  (NOx molar mass is that of NO2).
- 13. BImSchV Anlage 4 and 40 CFR 60.284 (O2 correction with 21 %); US gas-turbine practice with
  20.9 % (from memory).
- IPCC AR6 WG1 Table 7.15 (N2O GWP100 = 273, from memory), AR5 WG1 Table 8.7 (265, from
  memory), AR4 (298, seen in a secondary table).
"""
from __future__ import annotations

import numpy as np

from .errors import InputError, did_you_mean
from .species import INDEX, MOLAR_MASS, SPECIES
from .units import P_NORMAL_PA, R_GAS, T_NORMAL_K

__all__ = ["dry_ppm", "wet_ppm", "o2_reference", "molar_mass_kg_mol", "mass_flow_g_h", "nox_g_h",
           "ppm_to_mg_Nm3", "mg_Nm3_to_ppm", "weighted_specific_emission", "shaft_power_kW",
           "GWP100", "GWP100_SOURCES", "co2e_g"]

#: GWP over 100 years of N2O, by IPCC assessment report.
GWP100: dict[str, float] = {"AR6": 273.0, "AR5": 265.0, "AR4": 298.0}
GWP100_SOURCES: dict[str, str] = {
    "AR6": "IPCC AR6 WG1 Ch. 7 Table 7.15 / 7.SM.7 (from memory)",
    "AR5": "IPCC AR5 WG1 Table 8.7, without climate-carbon feedback (from memory)",
    "AR4": "IPCC AR4 WG1 Table 2.14 (seen, secondary table)",
}


def _scalar_or_array(x):
    return float(x) if np.ndim(x) == 0 else x


def dry_ppm(ppm_wet, x_h2o):
    """Dry-basis concentration [ppm] from wet [ppm] and water mole fraction x_H2O [mol/mol]:
    c_dry = c_wet / (1 - x_H2O)."""
    x = np.asarray(x_h2o, dtype=float)
    if np.any(~np.isfinite(x)) or np.any(x < 0) or np.any(x >= 1):
        raise InputError("expected a water mole fraction in [0, 1)", key="x_H2O", value=x_h2o)
    return _scalar_or_array(np.asarray(ppm_wet, dtype=float) / (1.0 - x))


def wet_ppm(ppm_dry, x_h2o):
    """Wet-basis concentration [ppm] from dry [ppm]: c_wet = c_dry (1 - x_H2O)."""
    x = np.asarray(x_h2o, dtype=float)
    if np.any(~np.isfinite(x)) or np.any(x < 0) or np.any(x >= 1):
        raise InputError("expected a water mole fraction in [0, 1)", key="x_H2O", value=x_h2o)
    return _scalar_or_array(np.asarray(ppm_dry, dtype=float) * (1.0 - x))


def o2_reference(c_dry, o2_dry_pct, o2_ref_pct, o2_air_pct=20.9):
    """Concentration corrected to a reference O2 [same unit as ``c_dry``], dry basis:
    C_ref = C_dry (O2_air - O2_ref) / (O2_air - O2_dry). O2 values in % (dry).

    ``o2_air_pct`` is 20.9 (US gas-turbine practice, from memory) or 21 (13. BImSchV Anlage 4,
    40 CFR 60.284). The measured O2 must be below ``o2_air_pct`` (the factor diverges there).
    """
    o2 = np.asarray(o2_dry_pct, dtype=float)
    if np.any(~np.isfinite(o2)) or np.any(o2 < 0) or np.any(o2 >= o2_air_pct):
        raise InputError(f"expected a dry O2 in [0, {o2_air_pct}) % (the O2 correction "
                         "diverges as O2 approaches air)", key="O2_dry_pct", value=o2_dry_pct)
    if not 0 <= o2_ref_pct < o2_air_pct:
        raise InputError(f"expected a reference O2 in [0, {o2_air_pct}) %", key="o2_ref_pct",
                         value=o2_ref_pct)
    return _scalar_or_array(np.asarray(c_dry, dtype=float) * (o2_air_pct - o2_ref_pct)
                            / (o2_air_pct - o2))


def molar_mass_kg_mol(species: str) -> float:
    """Molar mass [kg/mol] of a species of :data:`aftertreat.species.SPECIES`; ``"NOx"`` is
    counted as NO2 (40 CFR 1065.1005)."""
    name = "NO2" if species == "NOx" else species
    if name not in INDEX:
        valid = (*SPECIES, "NOx")
        raise InputError(f"unknown species; valid: {', '.join(valid)}"
                         + did_you_mean(species, valid), key="species", value=species)
    return float(MOLAR_MASS[INDEX[name]])


def mass_flow_g_h(mol_s, species: str | None = None, *, molar_mass: float | None = None):
    """Mass flow [g/h] of a molar flow ``mol_s`` [mol/s]: m = F M 3600 (M in g/mol).

    ``species`` names a species of the library (``"NOx"`` counts as NO2); a species outside it
    (e.g. CO in a regulation's worked example) is given by ``molar_mass`` [kg/mol] instead.
    """
    if molar_mass is None:
        if species is None:
            raise InputError("expected a species or a molar_mass", key="species")
        molar_mass = molar_mass_kg_mol(species)
    return _scalar_or_array(np.asarray(mol_s, dtype=float) * molar_mass * 1e3 * 3600.0)


def nox_g_h(F_NO, F_NO2):
    """NOx mass flow [g/h] from NO and NO2 molar flows [mol/s], as NO2:
    m = (F_NO + F_NO2) M_NO2 3600."""
    return mass_flow_g_h(np.asarray(F_NO, dtype=float) + np.asarray(F_NO2, dtype=float), "NOx")


def ppm_to_mg_Nm3(ppm, species: str, T_normal: float = T_NORMAL_K,
                  p_normal: float = P_NORMAL_PA):
    """Mass concentration [mg/m3 at (T_normal [K], p_normal [Pa])] of a mole fraction [ppm]:
    rho = ppm 1e-6 M p / (R T) with M in mg/mol. NOx is expressed as NO2.

    The basis (dry, reference O2) is carried over unchanged from ``ppm``. EU normal conditions
    are 273.15 K and 101.3 kPa (IED Annex V); DIN 1343 uses 101.325 kPa.
    """
    M_mg_mol = molar_mass_kg_mol(species) * 1e6
    return _scalar_or_array(np.asarray(ppm, dtype=float) * 1e-6 * M_mg_mol * p_normal
                            / (R_GAS * T_normal))


def mg_Nm3_to_ppm(mg_Nm3, species: str, T_normal: float = T_NORMAL_K,
                  p_normal: float = P_NORMAL_PA):
    """Inverse of :func:`ppm_to_mg_Nm3`: ppm = rho R T / (M p) * 1e6."""
    return _scalar_or_array(np.asarray(mg_Nm3, dtype=float)
                            / ppm_to_mg_Nm3(1.0, species, T_normal, p_normal))


def weighted_specific_emission(mass_g_h, power_kW, weights) -> float:
    """Weighted specific emission [g/kWh] over a cycle (NTC 2008 5.12.5):
    e = sum_i(W_i m_i) / sum_i(W_i P_i), with m_i [g/h], P_i [kW] (brake power plus auxiliary
    power, NTC 5.12.5) and W_i the weighting factors. With a single interval and W = 1 this is
    total mass [g] over total work [kWh] (40 CFR 1065.650(b)(1))."""
    m = np.asarray(mass_g_h, dtype=float)
    P = np.asarray(power_kW, dtype=float)
    W = np.asarray(weights, dtype=float)
    if not (m.shape == P.shape == W.shape) or m.ndim != 1:
        raise InputError("expected mass_g_h, power_kW and weights as 1-D lists of equal length",
                         key="weights", value=(m.shape, P.shape, W.shape))
    if np.any(W < 0) or np.any(P < 0) or not np.all(np.isfinite(m)):
        raise InputError("expected weights >= 0, powers >= 0 and finite mass flows",
                         key="weights")
    work = float(np.sum(W * P))
    if not work > 0:
        raise InputError("expected a positive weighted power sum(W P)", key="power_kW",
                         value=work)
    return float(np.sum(W * m)) / work


def shaft_power_kW(torque_Nm, speed_rpm):
    """Shaft power [kW] = T [N m] * 2 pi n [r/min] / 60 / 1000 (40 CFR 1065.650(b)(2))."""
    return _scalar_or_array(np.asarray(torque_Nm, dtype=float)
                            * np.asarray(speed_rpm, dtype=float) * 2 * np.pi / 60.0 / 1e3)


def co2e_g(n2o_g, gwp_set: str = "AR6"):
    """CO2-equivalent [g] of an N2O mass [g] (or g/h, g/kWh): m_CO2e = GWP100[gwp_set] m_N2O."""
    if gwp_set not in GWP100:
        raise InputError(f"unknown GWP set; valid: {', '.join(GWP100)}"
                         + did_you_mean(gwp_set, GWP100), key="gwp_set", value=gwp_set)
    return _scalar_or_array(np.asarray(n2o_g, dtype=float) * GWP100[gwp_set])
