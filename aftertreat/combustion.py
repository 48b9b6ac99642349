"""Engine-out exhaust of an ammonia-fuelled engine or turbine, by atom balance.

Fuels (``FUELS``): ``NH3``; ``H2`` (optionally cracked on board from NH3, 2 NH3 -> N2 + 3 H2);
``natural_gas`` (taken as CH4); ``diesel`` (pilot fuel, CH_y per carbon atom).

Lower heating values at 298.15 K, products H2O (gas), N2, CO2::

    C_c H_h N_n + (c + h/4) O2 -> c CO2 + h/2 H2O + n/2 N2
    LHV = h_fuel + (c + h/4) h_O2 - c h_CO2 - h/2 h_H2O - n/2 h_N2          [J/mol fuel]

with h from :func:`aftertreat.thermo.h_molar` (CH4 from the same gri30 NASA-7 data through
Cantera); diesel from ``data/fuels.toml``. Fuel flows follow from the fuel power P/eta_b split
by energy shares: n_i = s_i P / (eta_b LHV_i). Air follows from lambda = O2 supplied / O2 needed
for complete combustion of all the fuel. With wet mole fractions y_j of the minor species given,
the major species (N2, O2, H2O, CO2, Ar) and the total n are the solution of the linear system::

    E_major n_major + (E y_minor) n = atoms_in     (N, H, O, C, Ar)
    sum(n_major) + (sum y_minor - 1) n = 0

so the exhaust balances every element exactly with fuel + air + humidity in. Unburned NH3 or H2
given as minor species leave less H2O and more O2 by the same balance.

References
----------
McBride, Gordon & Reno (1993), NASA TM-4513 (NASA-7 form); GRI-Mech 3.0 thermo data.
Turns, S. R. An Introduction to Combustion, 3rd ed., McGraw-Hill 2012, ch. 2 (stoichiometry,
    equivalence ratio, heating values).
"""
from __future__ import annotations

import tomllib
from dataclasses import dataclass, field
from functools import lru_cache
from importlib.resources import files

import numpy as np

from .errors import InputError, did_you_mean
from .species import ELEMENT_MATRIX, ELEMENTS, INDEX, MOLAR_MASS, SPECIES
from .stream import Stream
from .units import P_ATM_PA

__all__ = ["FUELS", "MINOR_SPECIES", "FuelBlend", "Combustion", "fuel_data", "fuel_elements",
           "fuel_molar_mass", "lhv_J_mol", "lhv_MJ_kg", "stoich_O2_mol_per_mol", "dry_air",
           "dry_air_o2_pct", "check_dry_o2",
           "humidity_mol_per_mol_dry_air", "combustion", "combustion_products",
           "exhaust_from_measurements"]

FUELS: tuple[str, ...] = ("NH3", "H2", "natural_gas", "diesel")
MINOR_SPECIES: tuple[str, ...] = ("NO", "NO2", "NH3", "N2O", "H2")
_MAJOR = ("N2", "O2", "H2O", "CO2", "Ar")
_T_REF = 298.15


@lru_cache(maxsize=1)
def fuel_data() -> dict:
    """The parsed ``aftertreat/data/fuels.toml`` (air, humidity, diesel, water, urea)."""
    return tomllib.loads(files("aftertreat.data").joinpath("fuels.toml").read_text("utf-8"))


def fuel_elements(fuel: str) -> np.ndarray:
    """Atoms per mole of fuel in :data:`ELEMENTS` order (diesel per mole of CH_y)."""
    _check_fuel(fuel)
    if fuel in ("NH3", "H2"):
        return ELEMENT_MATRIX[:, INDEX[fuel]].copy()
    h = 4.0 if fuel == "natural_gas" else float(fuel_data()["diesel"]["H_per_C"])
    out = np.zeros(len(ELEMENTS))
    out[ELEMENTS.index("C")], out[ELEMENTS.index("H")] = 1.0, h
    return out


def fuel_molar_mass(fuel: str) -> float:
    """Molar mass [kg/mol] (diesel: per CH_y unit), from the atomic weights behind MOLAR_MASS."""
    # atomic weights recovered from the species table: M(el) of N2/2, H2/2, O2/2, Ar; C = CO2 - O2
    m_el = {"N": MOLAR_MASS[INDEX["N2"]] / 2, "H": MOLAR_MASS[INDEX["H2"]] / 2,
            "O": MOLAR_MASS[INDEX["O2"]] / 2, "Ar": MOLAR_MASS[INDEX["Ar"]],
            "C": MOLAR_MASS[INDEX["CO2"]] - MOLAR_MASS[INDEX["O2"]]}
    return float(fuel_elements(fuel) @ np.array([m_el[e] for e in ELEMENTS]))


def stoich_O2_mol_per_mol(fuel: str) -> float:
    """O2 needed for complete combustion [mol O2 / mol fuel] = c + h/4 - o/2."""
    a = dict(zip(ELEMENTS, fuel_elements(fuel)))
    return a["C"] + a["H"] / 4 - a["O"] / 2


@lru_cache(maxsize=1)
def _h_ch4_298() -> float:
    import cantera as ct  # lazy; the same gri30 NASA-7 data as aftertreat.thermo
    gas = ct.Solution("gri30.yaml", transport_model=None)
    return gas.species("CH4").thermo.h(_T_REF) / 1000.0       # J/kmol -> J/mol


def lhv_J_mol(fuel: str) -> float:
    """Lower heating value at 298.15 K [J/mol of fuel] (H2O as gas; see module docstring)."""
    from .thermo import h_molar
    _check_fuel(fuel)
    if fuel == "diesel":
        return float(fuel_data()["diesel"]["lhv_MJ_kg"]) * 1e6 * fuel_molar_mass(fuel)
    h = h_molar(_T_REF)
    a = dict(zip(ELEMENTS, fuel_elements(fuel)))
    h_fuel = _h_ch4_298() if fuel == "natural_gas" else h[INDEX[fuel]]
    h_prod = a["C"] * h[INDEX["CO2"]] + a["H"] / 2 * h[INDEX["H2O"]] + a["N"] / 2 * h[INDEX["N2"]]
    return float(h_fuel + stoich_O2_mol_per_mol(fuel) * h[INDEX["O2"]] - h_prod)


def lhv_MJ_kg(fuel: str) -> float:
    """Lower heating value [MJ/kg] = lhv_J_mol / M / 1e6."""
    return lhv_J_mol(fuel) / fuel_molar_mass(fuel) / 1e6


def dry_air_o2_pct() -> float:
    """O2 of dry air [%] (fuels.toml)."""
    return 100.0 * float(dry_air()[INDEX["O2"]])


def check_dry_o2(o2_dry_pct: float, *, key: str, value=None, file=None, where: str = "") -> None:
    """Refuse an exhaust holding more O2 on a dry basis than dry air does (no engine makes
    that: the O2, water or basis given are inconsistent). ``where`` prefixes the message."""
    o2_air = dry_air_o2_pct()
    if o2_dry_pct > o2_air:
        raise InputError(f"{where}the O2 and water give {o2_dry_pct:.2f} % O2 dry, more than dry "
                         f"air holds ({o2_air:.2f} %): check O2_pct, H2O_pct and basis",
                         key=key, value=value, file=file)


def dry_air() -> np.ndarray:
    """Dry-air mole fractions over :data:`SPECIES` (from fuels.toml, normalised to sum 1)."""
    x = np.zeros(len(SPECIES))
    for s in ("O2", "N2", "Ar", "CO2"):
        x[INDEX[s]] = float(fuel_data()["air"][s])
    return x / x.sum()


def humidity_mol_per_mol_dry_air(humidity_g_kg: float) -> float:
    """Water per dry air [mol/mol] = (H/1000) M_dry_air / M_H2O, H in g water per kg dry air."""
    return humidity_g_kg * 1e-3 * float(dry_air() @ MOLAR_MASS) / MOLAR_MASS[INDEX["H2O"]]


def _check_fuel(fuel):
    if fuel not in FUELS:
        raise InputError(f"unknown fuel; valid: {', '.join(FUELS)}" + did_you_mean(fuel, FUELS),
                         key="fuel", value=fuel)


@dataclass(frozen=True)
class FuelBlend:
    """Fuel blend as shares of the fuel energy (LHV basis), each >= 0, summing to 1 (1e-9).

    ``cracked_H2``: the H2 share is made on board by cracking NH3 (2 NH3 -> N2 + 3 H2); the N2
    from the cracker then enters the exhaust (1/3 mol per mol H2) and the NH3 fed to the cracker
    (2/3 mol per mol H2) is reported. The cracking heat (endothermic) is not charged to the
    engine: eta_b refers to the LHV of the H2 burned.
    """
    energy_shares: dict = field(default_factory=lambda: {"NH3": 1.0})
    cracked_H2: bool = False

    def __post_init__(self):
        if not isinstance(self.energy_shares, dict) or not self.energy_shares:
            raise InputError("expected a table of fuel energy shares", key="energy_shares",
                             value=self.energy_shares)
        for k, v in self.energy_shares.items():
            _check_fuel(k)
            if isinstance(v, bool) or not isinstance(v, (int, float)) or not v >= 0:
                raise InputError("expected an energy share >= 0", key=k, value=v)
        total = sum(self.energy_shares.values())
        if abs(total - 1.0) > 1e-9:
            raise InputError("expected energy shares summing to 1", key="energy_shares",
                             value=total)


@dataclass(frozen=True)
class Combustion:
    """Result of :func:`combustion`: the exhaust and the flows in, for reports.

    fuel_mol_s / fuel_kg_s: fuels burned in the engine; cracker_NH3_mol_s: NH3 fed to the cracker
    (0 unless cracked_H2); air_dry_mol_s: dry air; intake_H2O_mol_s: humidity; inlet: all flows in
    over SPECIES (fuels in SPECIES, air, humidity, cracker N2) plus inlet_fuel_atoms for CH4 and
    diesel; CO2_from_fuel_kg_s: CO2 from fuel carbon (the GHG line; air CO2 excluded).
    """
    exhaust: Stream
    fuel_mol_s: dict
    fuel_kg_s: dict
    cracker_NH3_mol_s: float
    air_dry_mol_s: float
    air_dry_kg_s: float
    intake_H2O_mol_s: float
    CO2_from_fuel_kg_s: float
    inlet_atoms: np.ndarray


def combustion(power_kW: float, brake_efficiency: float, blend: FuelBlend, lambda_: float, *,
               T_K: float, p_Pa: float = P_ATM_PA, intake_humidity_g_kg: float | None = None,
               minor: dict | None = None, fuel_kW: float | None = None) -> Combustion:
    """Engine-out exhaust by atom balance (module docstring) and the fuel and air flows in.

    power_kW: brake power; brake_efficiency: P / (fuel LHV power) [-]; lambda_: air supplied /
    stoichiometric air [-]; intake_humidity_g_kg: g water per kg dry air (default: the NOx
    reference humidity 10.71 g/kg of fuels.toml); minor: wet ppm of NO, NO2, NH3 (unburned),
    N2O, H2 (unburned) in the exhaust; T_K, p_Pa: exhaust state (given, not computed).
    fuel_kW: the fuel energy flow (LHV) [kW] instead of power / efficiency, for idle modes
    (zero brake power, ``brake_efficiency`` unused).
    """
    checks = [("lambda_", lambda_, lambda_ > 0, "expected a positive value")]
    if fuel_kW is None:
        checks += [("power_kW", power_kW, power_kW > 0,
                    "expected a positive brake power (an idle mode needs its fuel flow)"),
                   ("brake_efficiency", brake_efficiency, 0 < brake_efficiency < 1,
                    "expected an efficiency within (0, 1)")]
    else:
        checks += [("fuel_kW", fuel_kW, fuel_kW > 0, "expected a positive fuel energy flow"),
                   ("power_kW", power_kW, power_kW >= 0, "expected a brake power >= 0")]
    for key, v, ok, why in checks:
        if not (np.isfinite(v) and ok):
            raise InputError(why, key=key, value=v)
    if intake_humidity_g_kg is None:
        intake_humidity_g_kg = float(fuel_data()["humidity"]["reference_g_kg"])
    if not (np.isfinite(intake_humidity_g_kg) and 0 <= intake_humidity_g_kg <= 500):
        raise InputError("expected g water per kg dry air in 0..500", key="intake_humidity_g_kg",
                         value=intake_humidity_g_kg)
    y = np.zeros(len(SPECIES))
    for k, v in (minor or {}).items():
        if k not in MINOR_SPECIES:
            raise InputError(f"expected a minor species among {', '.join(MINOR_SPECIES)}"
                             + did_you_mean(k, MINOR_SPECIES), key=f"minor.{k}", value=v)
        if not (np.isfinite(v) and v >= 0):
            raise InputError("expected wet ppm >= 0", key=f"minor.{k}", value=v)
        y[INDEX[k]] = v * 1e-6
    fuel_W = power_kW * 1e3 / brake_efficiency if fuel_kW is None else fuel_kW * 1e3
    fuel_mol = {f: s * fuel_W / lhv_J_mol(f) for f, s in blend.energy_shares.items() if s > 0}
    inlet = np.zeros(len(SPECIES))
    inlet_atoms = np.zeros(len(ELEMENTS))
    o2_need = 0.0
    for f, n in fuel_mol.items():
        inlet_atoms += n * fuel_elements(f)
        o2_need += n * stoich_O2_mol_per_mol(f)
    cracker = 2.0 / 3.0 * fuel_mol.get("H2", 0.0) if blend.cracked_H2 else 0.0
    inlet[INDEX["N2"]] += cracker / 2.0                   # 2 NH3 -> N2 + 3 H2
    air = dry_air()
    air_dry = lambda_ * o2_need / air[INDEX["O2"]]
    inlet += air_dry * air
    h2o_in = air_dry * humidity_mol_per_mol_dry_air(intake_humidity_g_kg)
    inlet[INDEX["H2O"]] += h2o_in
    inlet_atoms = inlet_atoms + ELEMENT_MATRIX @ inlet
    # linear system for the major species and the total (module docstring)
    jm = [INDEX[s] for s in _MAJOR]
    A = np.zeros((len(ELEMENTS) + 1, len(jm) + 1))
    A[:-1, :-1] = ELEMENT_MATRIX[:, jm]
    A[:-1, -1] = ELEMENT_MATRIX @ y
    A[-1, :-1] = 1.0
    A[-1, -1] = y.sum() - 1.0
    sol = np.linalg.solve(A, np.append(inlet_atoms, 0.0))
    F = y * sol[-1]
    F[jm] = sol[:-1]
    neg = [s for s in SPECIES if F[INDEX[s]] < -1e-12 * sol[-1]]
    if neg:
        raise InputError(f"no complete combustion possible: the balance leaves negative {neg[0]}"
                         " (lambda too low or minor species too high)", key="lambda_",
                         value=lambda_)
    exhaust = Stream(F=np.maximum(F, 0.0), T=T_K, p=p_Pa)
    c_fuel = sum(n * fuel_elements(f)[ELEMENTS.index("C")] for f, n in fuel_mol.items())
    return Combustion(
        exhaust=exhaust, fuel_mol_s=fuel_mol,
        fuel_kg_s={f: n * fuel_molar_mass(f) for f, n in fuel_mol.items()},
        cracker_NH3_mol_s=cracker, air_dry_mol_s=float(air_dry),
        air_dry_kg_s=float(air_dry * (air @ MOLAR_MASS)), intake_H2O_mol_s=float(h2o_in),
        CO2_from_fuel_kg_s=float(c_fuel * MOLAR_MASS[INDEX["CO2"]]), inlet_atoms=inlet_atoms)


def combustion_products(power_kW: float, brake_efficiency: float, blend: FuelBlend,
                        lambda_: float, **kw) -> Stream:
    """The exhaust :class:`Stream` of :func:`combustion` (same arguments)."""
    return combustion(power_kW, brake_efficiency, blend, lambda_, **kw).exhaust


def exhaust_from_measurements(*, T_K: float, p_Pa: float = P_ATM_PA,
                              mass_flow_kg_s: float | None = None,
                              molar_flow_mol_s: float | None = None, H2O_pct: float,
                              O2_pct: float | None = None, lambda_: float | None = None,
                              blend: FuelBlend | None = None, NOx_ppm: float = 0.0,
                              NO2_fraction: float = 0.0, NH3_ppm: float = 0.0,
                              N2O_ppm: float = 0.0, H2_ppm: float = 0.0, CO2_pct: float = 0.0,
                              Ar_pct: float = 0.0, basis: str = "dry") -> Stream:
    """One measured map row as a :class:`Stream`; N2 takes the balance.

    ``basis`` ("dry" or "wet") applies to every concentration except H2O_pct (always wet):
    y_wet = y_dry (1 - y_H2O). NOx_ppm is NO + NO2 with NO2_fraction = NO2/NOx [mol/mol].
    Give O2_pct, or lambda_ with the blend: the dry O2 fraction of complete combustion at that
    lambda (independent of power, efficiency and humidity) is then used. Ar_pct = 0 lumps argon
    into the N2 balance. Give exactly one of mass_flow_kg_s and molar_flow_mol_s.
    """
    if basis not in ("dry", "wet"):
        raise InputError("expected 'dry' or 'wet'", key="basis", value=basis)
    if not (np.isfinite(H2O_pct) and 0 <= H2O_pct < 100):
        raise InputError("expected a water content in 0..100 %", key="H2O_pct", value=H2O_pct)
    if not (np.isfinite(NO2_fraction) and 0 <= NO2_fraction <= 1):
        raise InputError("expected NO2/NOx in 0..1", key="NO2_fraction", value=NO2_fraction)
    h2o = H2O_pct / 100
    if (O2_pct is None) == (lambda_ is None):
        raise InputError("give exactly one of O2_pct and lambda_", key="O2_pct")
    if O2_pct is None:
        if blend is None:
            raise InputError("lambda_ needs the fuel blend to give O2", key="blend")
        ref = combustion(1.0, 0.5, blend, lambda_, T_K=T_K, intake_humidity_g_kg=0.0).exhaust
        o2_wet = float(ref.ppm_dry()["O2"]) * 1e-6 * (1 - h2o)
        scale_o2 = 1.0
    else:
        o2_wet, scale_o2 = O2_pct / 100, (1 - h2o if basis == "dry" else 1.0)
    scale = 1 - h2o if basis == "dry" else 1.0
    given = {"NO": NOx_ppm * (1 - NO2_fraction) * 1e-6, "NO2": NOx_ppm * NO2_fraction * 1e-6,
             "NH3": NH3_ppm * 1e-6, "N2O": N2O_ppm * 1e-6, "H2": H2_ppm * 1e-6,
             "CO2": CO2_pct / 100, "Ar": Ar_pct / 100}
    names = {"NO": "NOx_ppm", "NO2": "NOx_ppm", "NH3": "NH3_ppm", "N2O": "N2O_ppm",
             "H2": "H2_ppm", "CO2": "CO2_pct", "Ar": "Ar_pct"}
    x = {}
    for s, v in given.items():
        if not (np.isfinite(v) and v >= 0):
            raise InputError("expected a value >= 0", key=names[s], value=v)
        x[s] = v * scale
    if not (np.isfinite(o2_wet) and o2_wet >= 0):
        raise InputError("expected an O2 content >= 0", key="O2_pct", value=O2_pct)
    x["O2"], x["H2O"] = o2_wet * scale_o2, h2o
    if h2o < 1.0:
        check_dry_o2(100.0 * x["O2"] / (1.0 - h2o), key="O2_pct", value=O2_pct)
    if sum(x.values()) > 1.0:
        raise InputError("mole fractions add up to more than 100 %", key="O2_pct",
                         value=round(100 * sum(x.values()), 4))
    if (mass_flow_kg_s is None) == (molar_flow_mol_s is None):
        raise InputError("give exactly one of mass_flow_kg_s and molar_flow_mol_s",
                         key="mass_flow_kg_s")
    flow = mass_flow_kg_s if mass_flow_kg_s is not None else molar_flow_mol_s
    if not (np.isfinite(flow) and flow > 0):
        raise InputError("expected a flow > 0", key="mass_flow_kg_s" if mass_flow_kg_s
                         is not None else "molar_flow_mol_s", value=flow)
    return Stream.from_mole_fractions(x, T=T_K, p=p_Pa, total_mol_s=molar_flow_mol_s,
                                      mass_kg_s=mass_flow_kg_s, balance="N2")
