"""Duty-cycle case files: engine, fuel, cycle, engine-out exhaust per mode, dosing, train, limits.

Validated before any computation; mistakes are one :class:`InputError` naming file, key, value and
what was expected. Per-mode values are lists in cycle order (one number applies to every mode).

Layout (our own key names; see ``cases/*.toml`` for complete examples)::

    title = "..."
    [engine]
    application = "auxiliary genset"   # marine propulsion | auxiliary genset |
                                       # stationary engine | gas turbine
    rated_power_kW = 2000
    rated_speed_rpm = 720
    [fuel]                             # shares of fuel energy, summing to 1
    NH3 = 0.95
    H2 = 0.05
    cracked_H2 = true                  # the H2 is cracked from NH3 on board (adds its N2)
    [cycle]
    iso8178 = "D2"                     # or: [[cycle.mode]] name, weight, power_pct
    [engine_out]
    method = "combustion"              # or "measured"
    brake_efficiency = [0.44, 0.45, 0.44, 0.41, 0.35]
    lambda = [2.0, 2.1, 2.3, 2.6, 3.0]
    idle_fuel_pct = 5                  # idle (zero-power) modes: fuel energy flow, % of that
                                       # at the highest-power mode (their efficiency unused)
    T_C = [390, 370, 355, 340, 320]
    p_kPa = 104
    NOx_ppm = [...]; NO2_fraction = 0.05; NH3_ppm = [...]; N2O_ppm = [...]; H2_ppm = 0
    # (engine-out wet ppm; NO2_fraction is NO2/NOx)
    # measured: mass_flow_kg_h = [...], O2_pct = [...], H2O_pct = [...], basis = "wet"
    [dosing]
    method = "none"                    # "NH3" (gas from the fuel tank) or "urea"
    ANR = 1.0
    [[brick]] ...                      # as in point cases (aftertreat.case)
    [limits]
    sets = ["imo_tier_iii"]
    gwp = "AR6"
    co2e_rise_warn_pct = 10            # warn when the train adds more CO2e (N2O) than this
    [[limits.custom]]                  # name, quantity, value, unit, o2_ref_pct, source
    [sizing]                           # for 'aftertreat size' (all optional)
    design_margin = 0.1                # every limit tightened by 10 %
    dp_max_kPa = 5.0                   # back-pressure budget of the train, worst mode
    max_length_mm = 3000               # space envelope: total train length ...
    max_diameter_mm = 1500             # ... and diameter
    face_velocity_m_s = 4.0            # diameter from the face velocity at the largest flow,
    # or: ghsv_per_h = 20000 with length_to_diameter = 1.0 (SCR section of volume Q_N / GHSV
    # at the largest flow, that slender); one diameter rule at most
    diameter_from_dp = true            # then raise the diameter until dp_max_kPa is met
    cost_per_L = { vanadia_extruded = 0.05, asc_dual_layer = 0.4 }
    choose_ANR = true                  # with dosing: ANR per mode to the NOx target + excess,
    ANR_excess = 0.05                  # at most the [dosing] ANR of the case
    N2O_max_g_kWh = 0.5                # caps for the sizing only (cycle values, with the
    CO2e_max_g_kWh = 300               # design margin): N2O, CO2 + N2O as CO2e, and the CO2e
    CO2e_rise_max_pct = 10             # the train may add, % of the engine-out value
    objective = "volume"               # or "CO2e": least CO2e within the smallest volume
    volume_allowance_pct = 0           # (+ this %), see aftertreat.sizing
    [study]                            # for 'aftertreat study' (aftertreat.study_spec)
    design = "monte_carlo"             # or "lhs", "sobol", "grid"; samples, seed, chunk_size
    [[study.uncertain]]                # path (a --set path or catalyst.<key>...), how,
    path = "engine_out.NOx_ppm"        # distribution and its parameters; [[study.sweep]]
    how = "scale"                      # takes values or lo..hi; [[study.correlated]] a
    distribution = "lognormal"         # mean vector and covariance over catalyst parameters
    median = 1.0
    sigma = 0.1
    [sizing.build.extruded]            # buildable brick lengths per substrate kind (extruded,
    step_mm = 50                       # plate, coated): whole steps within [min_mm, max_mm];
    min_mm = 200                       # defaults in aftertreat/data/build_rules.toml
    max_mm = 1300
"""
from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from . import schema
from .build import parse_build_rules
from .case import _unknown, apply_set, parse_brick, read_toml
from .transient_run import parse_transient
from .checks import choice, flag, number
from .errors import InputError, did_you_mean
from .train import Train
from .units import P_ATM_PA, ZERO_C_K

__all__ = ["RunCase", "EngineSpec", "SizingSpec", "load_run_case", "parse_run_case", "APPLICATIONS"]

APPLICATIONS = ("marine propulsion", "auxiliary genset", "stationary engine", "gas turbine")
# the keys each table accepts: declared once, with their meaning, in aftertreat.schema
_TOP = set(schema.keys("", case=schema.CYCLE))
_ENGINE = set(schema.keys("engine"))
_FUEL = set(schema.keys("fuel"))
_CYCLE = set(schema.keys("cycle"))
_OUT_COMMON = set(schema.keys("engine_out", key_set=""))
_OUT_COMBUSTION = set(schema.keys("engine_out", key_set="combustion"))
#: Fuel energy flow of an idle (zero-power) mode, as a percentage of the fuel energy flow at
#: the highest-power mode, when the case does not give ``engine_out.idle_fuel_pct``: low idle
#: of a diesel-cycle engine burns a few percent of its rated fuel flow (from memory; pass the
#: engine's own value).
IDLE_FUEL_PCT_DEFAULT = 5.0
_OUT_MEASURED = set(schema.keys("engine_out", key_set="measured"))
_DOSING = set(schema.keys("dosing"))
_LIMITS = set(schema.keys("limits"))
#: A run warns when the train raises the cycle's greenhouse-gas emission (CO2 + N2O as CO2e)
#: by more than this percentage of the engine-out value ([limits] co2e_rise_warn_pct): N2O
#: made by SCR and slip catalysts is the real trade-off of an ammonia engine (our default).
CO2E_RISE_WARN_PCT = 10.0
_SIZING = set(schema.keys("sizing"))
#: every numeric [sizing] key -> its closed range (lo, hi), from the schema
_SIZING_BOUNDS = schema.bounds("sizing")
#: what ``aftertreat size`` minimises ([sizing] objective)
SIZING_OBJECTIVES = ("volume", "CO2e")


@dataclass
class EngineSpec:
    application: str
    rated_power_kW: float
    rated_speed_rpm: float | None
    name: str = ""


@dataclass
class RunCase:
    """A validated duty-cycle case."""
    title: str
    engine: EngineSpec
    fuel: dict
    cycle: object                        # aftertreat.cycle.DutyCycle
    engine_out: dict                     # method + per-mode arrays (SI)
    dosing: dict                         # method, ANR per mode, urea_mass_fraction
    train: Train
    limit_sets: list
    gwp_set: str
    sizing: "SizingSpec"
    file: str
    data: dict
    notes: list[str] = field(default_factory=list)
    #: the validated [transient] table (aftertreat.transient_run), or None
    transient: dict | None = None
    #: warn when the train adds more than this % of the engine-out CO2e (cycle value)
    co2e_rise_warn_pct: float = CO2E_RISE_WARN_PCT
    #: the --set assignments applied to the file, as typed (echoed in outputs and reports)
    overrides: list[str] = field(default_factory=list)
    #: the validated [study] table (aftertreat.study_spec.StudySpec), or None
    study: object = None

    @property
    def n_modes(self) -> int:
        return 0 if self.cycle is None else len(self.cycle.modes)


def _per_mode(table: dict, key: str, n: int, file: str, pre: str, *, lo=None, hi=None,
              required=True, default=None) -> np.ndarray | None:
    """A per-mode value: a number for every mode or a list of n numbers, within [lo, hi]."""
    if key not in table:
        if required:
            raise InputError(f"missing; expected a number or a list of {n} numbers (one per "
                             "mode)", key=pre + key, file=file)
        return None if default is None else np.full(n, float(default))
    v = table[key]
    vals = v if isinstance(v, list) else [v] * n
    if len(vals) != n or not all(isinstance(a, (int, float)) and not isinstance(a, bool)
                                 for a in vals):
        raise InputError(f"expected a number or a list of {n} numbers (one per mode)",
                         key=pre + key, value=v, file=file)
    arr = np.array(vals, dtype=float)
    if not np.all(np.isfinite(arr)) or (lo is not None and np.any(arr < lo)) or \
            (hi is not None and np.any(arr > hi)):
        raise InputError(f"expected values within [{lo}, {hi}]", key=pre + key, value=v, file=file)
    return arr


def _engine(data, file) -> EngineSpec:
    e = data.get("engine")
    if not isinstance(e, dict):
        raise InputError("missing the [engine] table", key="engine", file=file)
    _unknown(e, _ENGINE, file, "engine.")
    app = e.get("application")
    if app not in APPLICATIONS:
        raise InputError("expected one of " + ", ".join(APPLICATIONS)
                         + did_you_mean(app, APPLICATIONS), key="engine.application", value=app,
                         file=file)
    p = e.get("rated_power_kW")
    if not isinstance(p, (int, float)) or isinstance(p, bool) or not 0 < p <= 2e6:
        raise InputError("expected a rated power within (0, 2e6] kW", key="engine.rated_power_kW",
                         value=p, file=file)
    n = e.get("rated_speed_rpm")
    if n is not None and (not isinstance(n, (int, float)) or isinstance(n, bool) or not n > 0):
        raise InputError("expected a rated speed > 0 rpm", key="engine.rated_speed_rpm",
                         value=n, file=file)
    return EngineSpec(app, float(p), None if n is None else float(n), str(e.get("name", "")))


def _fuel(data, file) -> dict:
    f = data.get("fuel", {"NH3": 1.0})
    if not isinstance(f, dict):
        raise InputError("expected a [fuel] table of energy shares", key="fuel", file=file)
    _unknown(f, _FUEL, file, "fuel.")
    shares = {k: v for k, v in f.items() if k != "cracked_H2"}
    for k, v in shares.items():
        if not isinstance(v, (int, float)) or isinstance(v, bool) or not 0 <= v <= 1:
            raise InputError("expected an energy share in [0, 1]", key=f"fuel.{k}", value=v,
                             file=file)
    if abs(sum(shares.values()) - 1.0) > 1e-6:
        raise InputError("expected energy shares that sum to 1", key="fuel",
                         value=round(sum(shares.values()), 6), file=file)
    return {"shares": {k: float(v) for k, v in shares.items() if v > 0},
            "cracked_H2": flag(f.get("cracked_H2", False), "fuel.cracked_H2", file)}


def _cycle(data, file):
    from . import cycle as cy
    c = data.get("cycle")
    if not isinstance(c, dict):
        raise InputError("missing the [cycle] table (iso8178 = \"D2\" or [[cycle.mode]])",
                         key="cycle", file=file)
    _unknown(c, _CYCLE, file, "cycle.")
    if ("iso8178" in c) == ("mode" in c):
        raise InputError("give either iso8178 = \"<cycle>\" or a list of [[cycle.mode]]",
                         key="cycle", file=file)
    if "iso8178" in c:
        try:
            return cy.load_cycle(c["iso8178"])
        except InputError as exc:
            raise InputError(exc.expected, key="cycle.iso8178", value=c["iso8178"],
                             file=file) from None
    return cy.custom_cycle(c["mode"], file=file)


def _engine_out(data, n, file, names=None) -> dict:
    e = data.get("engine_out")
    if not isinstance(e, dict):
        raise InputError("missing the [engine_out] table", key="engine_out", file=file)
    method = e.get("method", "combustion")
    pre = "engine_out."
    if method not in ("combustion", "measured"):
        raise InputError("expected 'combustion' or 'measured'", key=pre + "method", value=method,
                         file=file)
    _unknown(e, _OUT_COMBUSTION if method == "combustion" else _OUT_MEASURED, file, pre)
    out = {"method": method,
           "T_K": _per_mode(e, "T_C", n, file, pre, lo=0.0, hi=900.0) + ZERO_C_K,
           "p_Pa": _per_mode(e, "p_kPa", n, file, pre, lo=50.0, hi=1000.0, required=False,
                             default=P_ATM_PA / 1e3) * 1e3,
           "NOx_ppm": _per_mode(e, "NOx_ppm", n, file, pre, lo=0.0, hi=1e5),
           "NO2_fraction": _per_mode(e, "NO2_fraction", n, file, pre, lo=0.0, hi=1.0,
                                     required=False, default=0.05),
           "NH3_ppm": _per_mode(e, "NH3_ppm", n, file, pre, lo=0.0, hi=1e5, required=False,
                                default=0.0),
           "N2O_ppm": _per_mode(e, "N2O_ppm", n, file, pre, lo=0.0, hi=1e5, required=False,
                                default=0.0),
           "H2_ppm": _per_mode(e, "H2_ppm", n, file, pre, lo=0.0, hi=1e5, required=False,
                               default=0.0)}
    if method == "combustion":
        out["brake_efficiency"] = _per_mode(e, "brake_efficiency", n, file, pre, lo=0.05,
                                            hi=0.7)
        out["lambda"] = _per_mode(e, "lambda", n, file, pre, lo=1.0, hi=10.0)
        out["intake_humidity_g_kg"] = _per_mode(e, "intake_humidity_g_kg", n, file, pre, lo=0.0,
                                                hi=60.0, required=False, default=10.71)
        v = e.get("idle_fuel_pct", IDLE_FUEL_PCT_DEFAULT)
        if not isinstance(v, (int, float)) or isinstance(v, bool) or not 0 < v <= 50:
            raise InputError("expected a percentage of the rated fuel energy flow within "
                             "(0, 50]", key=pre + "idle_fuel_pct", value=v, file=file)
        out["idle_fuel_pct"] = float(v)
        out["idle_fuel_pct_given"] = "idle_fuel_pct" in e
    else:
        out["mass_flow_kg_s"] = _per_mode(e, "mass_flow_kg_h", n, file, pre, lo=1e-6) / 3600.0
        out["O2_pct"] = _per_mode(e, "O2_pct", n, file, pre, lo=0.0, hi=21.0)
        out["H2O_pct"] = _per_mode(e, "H2O_pct", n, file, pre, lo=0.0, hi=60.0)
        basis = e.get("basis", "wet")
        if basis not in ("wet", "dry"):
            raise InputError("expected 'wet' or 'dry'", key=pre + "basis", value=basis, file=file)
        out["basis"] = basis
        # a dry O2 above that of air cannot come out of an engine: refused at load, by mode
        from .combustion import check_dry_o2
        dry = out["O2_pct"] / (1.0 - out["H2O_pct"] / 100.0) if basis == "wet" \
            else out["O2_pct"]
        for i, o2 in enumerate(dry):
            check_dry_o2(float(o2), key=pre + "O2_pct", value=float(out["O2_pct"][i]), file=file,
                         where=f"mode '{names[i] if names else i + 1}': ")
    return out


def _dosing(data, n, file) -> dict:
    d = data.get("dosing", {"method": "none"})
    if not isinstance(d, dict):
        raise InputError("expected a [dosing] table", key="dosing", file=file)
    _unknown(d, _DOSING, file, "dosing.")
    method = d.get("method", "none")
    if method not in ("none", "NH3", "urea"):
        raise InputError("expected 'none', 'NH3' or 'urea'" + did_you_mean(method, (
            "none", "NH3", "urea")), key="dosing.method", value=method, file=file)
    anr = _per_mode(d, "ANR", n, file, "dosing.", lo=0.0, hi=3.0, required=method != "none",
                    default=0.0)
    frac = d.get("urea_mass_fraction", 0.325)
    if not isinstance(frac, (int, float)) or not 0 < frac < 0.6:
        raise InputError("expected a urea mass fraction in (0, 0.6), e.g. 0.325",
                         key="dosing.urea_mass_fraction", value=frac, file=file)
    return {"method": method, "ANR": anr, "urea_mass_fraction": float(frac)}


def _limits(data, file):
    from . import limits as lm
    from .emissions import GWP100
    L = data.get("limits", {})
    if not isinstance(L, dict):
        raise InputError("expected a [limits] table", key="limits", file=file)
    _unknown(L, _LIMITS, file, "limits.")
    sets = []
    names = L.get("sets", [])
    if not isinstance(names, list):
        raise InputError("expected a list of limit-set keys", key="limits.sets", value=names,
                         file=file)
    for k in names:
        if not isinstance(k, str):
            raise InputError("expected the key of a limit set (text)", key="limits.sets",
                             value=k, file=file)
        try:
            sets.append(lm.load_limit_set(k))
        except InputError as exc:
            raise InputError(exc.expected, key="limits.sets", value=k, file=file) from None
    if "custom" in L:
        sets.append(lm.custom_limits(L["custom"], file=file))
    gwp = choice(L.get("gwp", "AR6"), GWP100, "limits.gwp", file)
    warn = L.get("co2e_rise_warn_pct", CO2E_RISE_WARN_PCT)
    if not isinstance(warn, (int, float)) or isinstance(warn, bool) or not 0 <= warn <= 1000:
        raise InputError("expected a percentage within [0, 1000]",
                         key="limits.co2e_rise_warn_pct", value=warn, file=file)
    return sets, gwp, float(warn)


@dataclass(frozen=True)
class SizingSpec:
    """The validated ``[sizing]`` table, every default here (docs/case-file.md gives each key's
    meaning and range). Lengths in mm, as in the case file; None: not given."""
    design_margin: float = 0.0
    dp_max_kPa: float | None = None
    max_length_mm: float | None = None
    max_diameter_mm: float | None = None
    face_velocity_m_s: float | None = None
    ghsv_per_h: float | None = None
    length_to_diameter: float = 1.0
    diameter_from_dp: bool = False
    scr_length_max_mm: float = 4000.0
    asc_length_max_mm: float = 1000.0
    choose_ANR: bool = True
    ANR_excess: float = 0.05
    cost_per_L: dict | None = None
    N2O_max_g_kWh: float | None = None
    CO2e_max_g_kWh: float | None = None
    CO2e_rise_max_pct: float | None = None
    objective: str = "volume"
    volume_allowance_pct: float = 0.0
    build: dict = field(default_factory=dict)      # substrate kind -> build.BuildRule


def _sizing(data, file) -> SizingSpec:
    """The [sizing] table: design margin, back-pressure budget, space envelope, diameter rule,
    costs and search bounds (all optional)."""
    s = data.get("sizing", {})
    if not isinstance(s, dict):
        raise InputError("expected a [sizing] table", key="sizing", file=file)
    _unknown(s, _SIZING, file, "sizing.")
    out = {"design_margin": 0.0, "scr_length_max_mm": 4000.0, "asc_length_max_mm": 1000.0}
    # ANR_excess is checked below, after the objective
    bounds = {k: b for k, b in _SIZING_BOUNDS.items() if k != "ANR_excess"}
    for k, (lo, hi) in bounds.items():
        if k in s:
            v = s[k]
            if not isinstance(v, (int, float)) or isinstance(v, bool) or not lo <= v <= hi:
                raise InputError(f"expected a number within [{lo}, {hi}]", key=f"sizing.{k}",
                                 value=v, file=file)
            out[k] = float(v)
    if "face_velocity_m_s" in out and "ghsv_per_h" in out:
        raise InputError("give one diameter rule: face_velocity_m_s or ghsv_per_h, not both",
                         key="sizing.ghsv_per_h", value=out["ghsv_per_h"], file=file)
    if "length_to_diameter" in out and "ghsv_per_h" not in out:
        raise InputError("length_to_diameter belongs to the GHSV diameter rule: give ghsv_per_h "
                         "too", key="sizing.length_to_diameter", value=out["length_to_diameter"],
                         file=file)
    for name in ("choose_ANR", "diameter_from_dp"):
        if name in s:
            out[name] = flag(s[name], f"sizing.{name}", file)
    if out.get("diameter_from_dp") and "dp_max_kPa" not in out:
        raise InputError("diameter_from_dp raises the diameter to meet dp_max_kPa: give "
                         "dp_max_kPa too", key="sizing.diameter_from_dp", value=True, file=file)
    obj = s.get("objective", "volume")
    if obj not in SIZING_OBJECTIVES:
        raise InputError("expected one of " + ", ".join(SIZING_OBJECTIVES)
                         + did_you_mean(obj, SIZING_OBJECTIVES), key="sizing.objective",
                         value=obj, file=file)
    out["objective"] = obj
    if "volume_allowance_pct" in out and obj != "CO2e":
        raise InputError("volume_allowance_pct belongs to objective = \"CO2e\"",
                         key="sizing.volume_allowance_pct", value=out["volume_allowance_pct"],
                         file=file)
    if "ANR_excess" in s:
        v = s["ANR_excess"]
        lo, hi = _SIZING_BOUNDS["ANR_excess"]
        if not isinstance(v, (int, float)) or isinstance(v, bool) or not lo <= v <= hi:
            raise InputError(f"expected a number within [{lo}, {hi}]", key="sizing.ANR_excess",
                             value=v, file=file)
        out["ANR_excess"] = float(v)
    if "cost_per_L" in s:
        c = s["cost_per_L"]
        if not isinstance(c, dict):
            raise InputError("expected a table of catalyst key = cost per litre >= 0",
                             key="sizing.cost_per_L", value=c, file=file)
        used = {str(b.get("catalyst")) for b in data.get("brick", []) if isinstance(b, dict)}
        for k, v in c.items():
            number(v, f"sizing.cost_per_L.{k}", file, lo=0.0, what="a cost per litre")
            if used and k not in used:
                raise InputError("no brick of the case uses this catalyst; costs are keyed by "
                                 "the catalysts of the bricks: " + ", ".join(sorted(used))
                                 + did_you_mean(k, used), key=f"sizing.cost_per_L.{k}",
                                 file=file)
        out["cost_per_L"] = {k: float(v) for k, v in c.items()}
    out["build"] = parse_build_rules(s.get("build"), file)
    return SizingSpec(**out)


def parse_run_case(data: dict, file: str) -> RunCase:
    """Validate a duty-cycle case dictionary (as read from TOML)."""
    if "exhaust" in data and "cycle" not in data:
        raise InputError("this is a single-point case (it has [exhaust]): use 'aftertreat "
                         "point', or give [engine], [cycle] and [engine_out] for a duty cycle",
                         key="exhaust", file=file)
    _unknown(data, _TOP, file, "")
    engine = _engine(data, file)
    fuel = _fuel(data, file)
    trace_only = isinstance(data.get("transient"), dict) and "trace" in data["transient"] \
        and "cycle" not in data
    if trace_only:             # a measured time trace stands in for the cycle and engine-out map
        for k in ("engine_out", "sizing", "study"):
            if k in data:
                raise InputError("a trace case (transient.trace, no [cycle]) has no "
                                 f"[{k}]: the trace gives the engine-out exhaust", key=k,
                                 file=file)
        cycle, engine_out, n = None, None, 1
    else:
        cycle = _cycle(data, file)
        n = len(cycle.modes)
        engine_out = _engine_out(data, n, file, [m.name for m in cycle.modes])
    dosing = _dosing(data, n, file)
    bricks = data.get("brick")
    if not isinstance(bricks, list) or not bricks:
        raise InputError("expected at least one [[brick]]", key="brick", file=file)
    train = Train([parse_brick(b, i, file) for i, b in enumerate(bricks)])
    sets, gwp, co2e_warn = _limits(data, file)
    study = None
    if "study" in data:
        from .study_spec import parse_study
        study = parse_study(data, file, n, [m.name for m in cycle.modes], train)
    return RunCase(title=str(data.get("title", Path(file).stem)), engine=engine, fuel=fuel,
                   cycle=cycle, engine_out=engine_out, dosing=dosing, train=train,
                   limit_sets=sets, gwp_set=gwp, sizing=_sizing(data, file), file=file, data=data,
                   transient=parse_transient(data, file, has_cycle=cycle is not None,
                                             dosing_method=dosing["method"]),
                   co2e_rise_warn_pct=co2e_warn, study=study)


def load_run_case(path, sets: list[str] | None = None) -> RunCase:
    """Read, override (``--set``) and validate a duty-cycle case file."""
    file = str(path)
    data = read_toml(path)
    for s in sets or []:
        data = apply_set(data, s, file)
    case = parse_run_case(data, file)
    case.overrides = list(sets or [])
    return case
