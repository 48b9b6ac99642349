"""Emission limit sets (``data/limits.toml`` or user-defined) and their evaluation over a cycle.

Quantity vocabulary (the ``quantity`` of a limit row; unit in brackets):

Cycle quantities (weighted over the modes, e = sum(W m)/sum(W P), NTC 2008 5.12.5) [g/kWh]:
``NOx_g_kWh`` (NOx as NO2), ``N2O_g_kWh``, ``NH3_g_kWh``, ``CO2_g_kWh``,
``N2O_CO2e_g_kWh`` (= GWP100 * N2O_g_kWh), ``GHG_CO2e_g_kWh`` (= CO2_g_kWh + N2O_CO2e_g_kWh).
A g/kWh row with ``scope = "mode"`` checks each mode's own specific emission m_i/P_i instead
(e.g. the Tier III per-mode cap, NTC 2008 3.1.4).

Per-mode quantities (one check per mode):
``NOx_ppmvd``, ``NH3_ppmvd``, ``N2O_ppmvd`` [ppmvd] at the row's ``o2_ref_pct``,
C_ref = C_dry (O2_air - O2_ref)/(O2_air - O2_dry) with the set's ``o2_air_pct``;
``NOx_mg_Nm3``, ``NH3_mg_Nm3``, ``N2O_mg_Nm3`` [mg/Nm3] the same at the set's normal conditions
(NOx as NO2); ``NH3_ppm_wet_max`` [ppm] the wet NH3 concentration, not O2-corrected (needs
``ModeEmissions.x_H2O``; every mode must be below, i.e. the maximum over modes).

IMO weighted NOx: the weighted value is rounded to ``round_decimals`` (1, NTC 2008 3.1.3; half
up, common practice) before comparison with the limit; the limit itself is rounded only if
``round_limit`` (default false: NTC 3.1.3 does not say the formula limit is rounded).

References
----------
- MARPOL Annex VI Reg. 13 (Tier I-III limits); NOx Technical Code 2008 3.1.1-3.1.4, 5.12.5.
- 40 CFR 60 Subpart KKKK; Directive 2010/75/EU Annex V; Directive (EU) 2015/2193 Annex II;
  district BACT guidelines (see each set's ``source`` in the data file).
"""
from __future__ import annotations

import math
import tomllib
from dataclasses import dataclass, field
from decimal import ROUND_HALF_UP, Decimal
from functools import lru_cache
from importlib import resources

from . import schema
from .emissions import co2e_g, o2_reference, ppm_to_mg_Nm3, weighted_specific_emission, wet_ppm
from .checks import flag, number
from .errors import InputError, did_you_mean
from .species import NOX
from .units import P_NORMAL_PA, T_NORMAL_K

__all__ = ["QUANTITIES", "LimitRow", "LimitSet", "LimitCheck", "basis_label", "group_label",
           "governing", "ModeEmissions",
           "load_limit_set", "available_limit_sets", "custom_limits", "imo_nox_limit", "cycle_values", "evaluate",
           "round_half_up"]

_G = "g/kWh"
#: quantity -> (unit, default scope, O2-referenced?)
QUANTITIES: dict[str, tuple[str, str, bool]] = {
    **{q: (_G, "cycle", False) for q in ("NOx_g_kWh", "N2O_g_kWh", "NH3_g_kWh", "CO2_g_kWh",
                                         "N2O_CO2e_g_kWh", "GHG_CO2e_g_kWh")},
    **{f"{s}_ppmvd": ("ppmvd", "mode", True) for s in ("NOx", "NH3", "N2O")},
    **{f"{s}_mg_Nm3": ("mg/Nm3", "mode", True) for s in ("NOx", "NH3", "N2O")},
    "NH3_ppm_wet_max": ("ppm", "mode", False),
}
_ROW_KEYS = schema.keys("limits.custom[]")    # in the order error messages list them
_DATA_FILE = "limits.toml"


@dataclass
class ModeEmissions:
    """Tailpipe emissions at one mode: mass flows [g/h], power [kW] (brake + auxiliary), dry
    concentrations at the measured O2 ``ppmvd`` (keys ``"NOx"`` or ``"NO"``+``"NO2"``, ``"NH3"``,
    ``"N2O"``) [ppm], dry O2 [%] and, optionally, the water mole fraction [mol/mol]."""
    name: str
    weight: float
    power_kW: float
    cap_exempt: bool
    NOx_g_h: float
    N2O_g_h: float
    NH3_g_h: float
    CO2_g_h: float
    ppmvd: dict[str, float]
    O2_dry_pct: float
    x_H2O: float | None = None


@dataclass
class LimitRow:
    """One limit: a quantity of the vocabulary, its unit and scope, and a fixed ``value`` or an
    IMO ``imo_tier`` formula (times ``factor``) at the rated speed."""
    name: str
    quantity: str
    unit: str
    scope: str
    value: float | None = None
    o2_ref_pct: float | None = None
    imo_tier: str | None = None
    factor: float = 1.0
    apply_exemptions: bool = False
    min_load_pct: float | None = None
    source: str = ""
    clause: str = ""
    confidence: str = ""


@dataclass(frozen=True)
class LimitCheck:
    """One check of one limit row: over the cycle (``mode`` None) or at one mode.

    ``value`` and ``limit`` are on the row's own basis (``unit``, at ``o2_ref_pct`` for
    concentration rows); ``limit`` is None where the row does not apply (an idle or exempt
    mode, below a load gate: ``note`` says why), and such a check passes."""
    row_name: str
    quantity: str
    unit: str
    value: float
    limit: float | None
    passed: bool
    mode: str | None = None
    o2_ref_pct: float | None = None
    source: str = ""
    confidence: str = ""
    clause: str = ""
    note: str = ""

    @property
    def name(self) -> str:
        """The row's name, with the mode for a per-mode check."""
        return self.row_name if self.mode is None else f"{self.row_name}, mode {self.mode}"

    @property
    def basis(self) -> str:
        """The unit with its reference O2, e.g. ``ppmvd @15% O2``."""
        return basis_label(self.unit, self.o2_ref_pct)

    @property
    def ratio(self) -> float | None:
        """value / limit (None where the row does not apply)."""
        if self.limit is None:
            return None
        return self.value / self.limit if self.limit > 0 else (0.0 if self.value <= 0
                                                               else math.inf)

    def to_dict(self) -> dict:
        """The JSON/CSV row (``aftertreat.run/1`` ``limits``)."""
        return {"name": self.name, "quantity": self.quantity, "value": self.value,
                "limit": self.limit, "unit": self.unit, "o2_ref_pct": self.o2_ref_pct,
                "pass": self.passed, "mode": self.mode, "source": self.source,
                "confidence": self.confidence, "clause": self.clause, "note": self.note}


def group_label(check) -> str:
    """A column-safe name for the group of checks a panel or a sizing curve shows: the quantity,
    its reference O2 and whether it is checked per mode or over the cycle, e.g.
    ``NH3_ppmvd_at_15pctO2_per_mode`` or ``NOx_g_kWh_cycle``."""
    o2 = "" if check.o2_ref_pct is None else f"_at_{check.o2_ref_pct:g}pctO2"
    return f"{check.quantity}{o2}_{'cycle' if check.mode is None else 'per_mode'}"


def governing(checks) -> dict:
    """The check with the highest value/limit in each group (:func:`group_label`), over the
    checks that apply (limit not None), in the order the groups first appear."""
    out: dict = {}
    for c in checks:
        if c.limit is None:
            continue
        g = group_label(c)
        if g not in out or c.ratio > out[g].ratio:
            out[g] = c
    return out


def basis_label(unit: str, o2_ref_pct: float | None) -> str:
    """A unit with its reference O2: ``"ppmvd @15% O2"``, or the unit alone."""
    return unit if o2_ref_pct is None else f"{unit} @{o2_ref_pct:g}% O2"


@dataclass
class LimitSet:
    """Limit rows with the set's conventions: O2 of air [%], normal conditions [K, Pa] for
    mg/Nm3, rounding of cycle values (decimals; limit rounded too if ``round_limit``)."""
    key: str
    name: str
    source: str
    clause: str
    confidence: str
    o2_air_pct: float
    T_normal_K: float
    p_normal_Pa: float
    rows: list[LimitRow] = field(default_factory=list)
    round_decimals: int | None = None
    round_limit: bool = False
    note: str = ""


@lru_cache(maxsize=1)
def _data() -> dict:
    with resources.files("aftertreat.data").joinpath(_DATA_FILE).open("rb") as fh:
        return tomllib.load(fh)


def round_half_up(x: float, decimals: int) -> float:
    """``x`` rounded to ``decimals`` places, halves away from zero (of the shortest decimal
    repr of the float, so 2.25 -> 2.3, unlike binary ``round``)."""
    return float(Decimal(repr(float(x))).quantize(Decimal(1).scaleb(-decimals), ROUND_HALF_UP))


def imo_nox_limit(tier, rated_speed_rpm: float) -> float:
    """MARPOL Annex VI Reg. 13 NOx limit [g/kWh] at rated speed n [r/min]:
    n < 130: constant; 130 <= n < 2000: a n^b; n >= 2000: constant (Tier I 17.0 / 45 n^-0.2 /
    9.8; Tier II 14.4 / 44 n^-0.23 / 7.7; Tier III 3.4 / 9 n^-0.2 / 2.0). ``tier``: "I", "II",
    "III" (or 1, 2, 3, "Tier II"). The function is discontinuous at 2000 r/min, as written."""
    tiers = _data()["imo_nox_tier"]
    t = str(tier).strip().upper().removeprefix("TIER").strip()
    t = {"1": "I", "2": "II", "3": "III"}.get(t, t)
    if t not in tiers:
        raise InputError(f"unknown IMO tier; valid: {', '.join(tiers)}"
                         + did_you_mean(t, tiers), key="tier", value=tier)
    n = rated_speed_rpm
    if isinstance(n, bool) or not isinstance(n, (int, float)) or not math.isfinite(n) or n <= 0:
        raise InputError("expected a rated speed > 0 r/min", key="rated_speed_rpm", value=n)
    d = tiers[t]
    if n < d["below_speed_rpm"]:
        return float(d["low_speed_limit_g_kWh"])
    if n >= d["above_speed_rpm"]:
        return float(d["high_speed_limit_g_kWh"])
    return float(d["coefficient_g_kWh"] * n ** d["exponent"])


def _min_load(v, key: str, file) -> float | None:
    return None if v is None else number(v, key, file, lo=0.0, hi=100.0,
                                         what="a load in % of rated power")


def _parse_row(r, i: int, file, defaults: dict, o2_air: float,
               prefix: str = "row") -> LimitRow:
    where = f"{prefix}[{i}]"
    if not isinstance(r, dict):
        raise InputError("expected a table", key=where, value=r, file=file)
    for k in r:
        if k not in _ROW_KEYS:
            raise InputError(f"unknown limit key; valid: {', '.join(_ROW_KEYS)}"
                             + did_you_mean(k, _ROW_KEYS), key=f"{where}.{k}", file=file)
    q = r.get("quantity")
    if not isinstance(q, str) or q not in QUANTITIES:
        raise InputError(f"unknown quantity; valid: {', '.join(QUANTITIES)}"
                         + did_you_mean(str(q), QUANTITIES), key=f"{where}.quantity", value=q,
                         file=file)
    unit, scope, o2_based = QUANTITIES[q]
    if r.get("unit", unit) != unit:
        raise InputError(f"expected unit {unit!r} for {q}", key=f"{where}.unit",
                         value=r.get("unit"), file=file)
    scope = r.get("scope", scope)
    if scope not in ("cycle", "mode") or (scope == "cycle" and unit != _G):
        raise InputError("expected scope 'mode' (or 'cycle' for a g/kWh quantity)",
                         key=f"{where}.scope", value=scope, file=file)
    value, tier = r.get("value"), r.get("imo_tier")
    if (value is None) == (tier is None):
        raise InputError("expected exactly one of value or imo_tier", key=where, file=file)
    if value is not None and (isinstance(value, bool) or not isinstance(value, (int, float))
                              or not math.isfinite(value) or value < 0):
        raise InputError("expected a limit value >= 0", key=f"{where}.value", value=value,
                         file=file)
    o2_ref = r.get("o2_ref_pct")
    if o2_based and (not isinstance(o2_ref, (int, float)) or isinstance(o2_ref, bool)
                     or not 0 <= o2_ref < o2_air):
        raise InputError(f"expected a reference O2 in [0, {o2_air}) % for {q}",
                         key=f"{where}.o2_ref_pct", value=o2_ref, file=file)
    return LimitRow(name=str(r.get("name", q)), quantity=q, unit=unit, scope=scope,
                    value=None if value is None else float(value),
                    o2_ref_pct=None if o2_ref is None else float(o2_ref), imo_tier=tier,
                    factor=number(r.get("factor", 1.0), f"{where}.factor", file, lo=0.0,
                                  lo_open=True),
                    apply_exemptions=flag(r.get("apply_exemptions", False),
                                          f"{where}.apply_exemptions", file),
                    min_load_pct=_min_load(r.get("min_load_pct", defaults.get("min_load_pct")),
                                           f"{where}.min_load_pct", file),
                    source=str(r.get("source", defaults.get("source", ""))),
                    clause=str(r.get("clause", defaults.get("clause", ""))),
                    confidence=str(r.get("confidence", defaults.get("confidence", ""))))


def available_limit_sets() -> list[str]:
    """Keys of the shipped limit sets."""
    return sorted(_data()["set"])


def load_limit_set(key: str) -> LimitSet:
    """A shipped limit set by key (e.g. ``"imo_tier_iii"``)."""
    sets = _data()["set"]
    if key not in sets:
        raise InputError(f"unknown limit set; shipped: {', '.join(available_limit_sets())}"
                         + did_you_mean(key, sets), key="limits", value=key)
    s = sets[key]
    rows = [_parse_row(r, i, _DATA_FILE, s, s["o2_air_pct"]) for i, r in enumerate(s["row"])]
    return LimitSet(key=key, name=s["name"], source=s["source"], clause=s.get("clause", ""),
                    confidence=s["confidence"], o2_air_pct=float(s["o2_air_pct"]),
                    T_normal_K=float(s["T_normal_K"]), p_normal_Pa=float(s["p_normal_Pa"]),
                    rows=rows, round_decimals=s.get("round_decimals"),
                    round_limit=bool(s.get("round_limit", False)), note=s.get("note", ""))


def custom_limits(rows: list[dict], file: str | None = None, *, name: str = "custom limits",
                  o2_air_pct: float = 20.9, T_normal_K: float = T_NORMAL_K,
                  p_normal_Pa: float = P_NORMAL_PA, round_decimals: int | None = None) -> LimitSet:
    """A user-defined limit set. Each row: ``name``, ``quantity`` (see the vocabulary),
    ``value``, ``unit`` (must match the quantity), ``o2_ref_pct`` (for ppmvd and mg/Nm3
    quantities), ``source``; optional ``scope``, ``clause``, ``confidence``, ``min_load_pct``."""
    if not isinstance(rows, list) or not rows:
        raise InputError("expected a non-empty list of limit rows", key="limits", value=rows,
                         file=file)
    parsed = []
    for i, r in enumerate(rows):
        if isinstance(r, dict) and "source" not in r:
            raise InputError("expected a source for every limit",
                             key=f"limits.custom[{i}].source", file=file)
        parsed.append(_parse_row(r, i, file, {"confidence": "user input"}, o2_air_pct,
                                 prefix="limits.custom"))
    return LimitSet(key="custom", name=name, source="user input", clause="",
                    confidence="user input", o2_air_pct=float(o2_air_pct),
                    T_normal_K=float(T_normal_K), p_normal_Pa=float(p_normal_Pa), rows=parsed,
                    round_decimals=round_decimals)


def _mode_g_h(m: ModeEmissions, gwp_set: str) -> dict[str, float]:
    n2o_co2e = float(co2e_g(m.N2O_g_h, gwp_set))
    return {"NOx_g_kWh": m.NOx_g_h, "N2O_g_kWh": m.N2O_g_h, "NH3_g_kWh": m.NH3_g_h,
            "CO2_g_kWh": m.CO2_g_h, "N2O_CO2e_g_kWh": n2o_co2e,
            "GHG_CO2e_g_kWh": m.CO2_g_h + n2o_co2e}


def cycle_values(modes: list[ModeEmissions], gwp_set: str = "AR6") -> dict[str, float]:
    """Weighted specific emissions [g/kWh] over the modes: NOx (as NO2), N2O, NH3, CO2,
    N2O_CO2e (GWP100 of ``gwp_set``) and GHG_CO2e = CO2 + N2O_CO2e."""
    if not modes:
        raise InputError("expected at least one mode", key="modes")
    P = [m.power_kW for m in modes]
    W = [m.weight for m in modes]
    per = [_mode_g_h(m, gwp_set) for m in modes]
    return {q: weighted_specific_emission([d[q] for d in per], P, W) for q in per[0]}


def _ppm(m: ModeEmissions, species: str) -> float:
    c = m.ppmvd
    if species in c:
        return float(c[species])
    if species == "NOx" and "NO" in c and "NO2" in c:
        return sum(float(c[s]) for s in NOX)
    raise InputError(f"mode has no dry concentration of {species}", key=f"mode {m.name}.ppmvd",
                     value=sorted(c))


def _mode_value(ls: LimitSet, row: LimitRow, m: ModeEmissions, gwp_set: str) -> float:
    q = row.quantity
    if q.endswith("_g_kWh"):
        g_h = _mode_g_h(m, gwp_set)[q]
        if m.power_kW > 0:
            return g_h / m.power_kW
        return math.inf if g_h > 0 else 0.0     # zero power (idle): undefined unless no mass
    sp = q.split("_", 1)[0]
    if q == "NH3_ppm_wet_max":
        if m.x_H2O is None:
            raise InputError("NH3_ppm_wet_max needs the water mole fraction x_H2O",
                             key=f"mode {m.name}.x_H2O")
        return float(wet_ppm(_ppm(m, "NH3"), m.x_H2O))
    c = float(o2_reference(_ppm(m, sp), m.O2_dry_pct, row.o2_ref_pct, ls.o2_air_pct))
    if q.endswith("_mg_Nm3"):
        return float(ppm_to_mg_Nm3(c, sp, ls.T_normal_K, ls.p_normal_Pa))
    return c


def _limit(row: LimitRow, rated_speed_rpm) -> float:
    if row.imo_tier is None:
        return row.value
    if rated_speed_rpm is None:
        raise InputError("an IMO limit needs the engine's rated speed", key="rated_speed_rpm")
    return imo_nox_limit(row.imo_tier, rated_speed_rpm)


def evaluate(limit_set: LimitSet, modes: list[ModeEmissions], *, rated_speed_rpm=None,
             gwp_set: str = "AR6", rated_power_kW: float | None = None,
             round_limit: bool | None = None) -> list[dict]:
    """Check ``modes`` against every row of ``limit_set``.

    Returns one :class:`LimitCheck` per check (``mode`` None for cycle rows). Cycle values are rounded per
    the set's ``round_decimals`` before comparison; the limit is rounded too only if
    ``round_limit`` (argument, else the set's default). Per-mode rows skip modes flagged
    ``cap_exempt`` when the row applies exemptions, and modes below ``min_load_pct`` of
    ``rated_power_kW`` (default: the largest mode power); such rows pass with limit None.
    """
    rl = limit_set.round_limit if round_limit is None else round_limit
    nd = limit_set.round_decimals
    p_rated = rated_power_kW if rated_power_kW is not None else max(m.power_kW for m in modes)
    out, cyc = [], None
    for row in limit_set.rows:
        base = {"row_name": row.name, "unit": row.unit, "o2_ref_pct": row.o2_ref_pct,
                "source": row.source, "confidence": row.confidence, "quantity": row.quantity,
                "clause": row.clause}
        lim = _limit(row, rated_speed_rpm) * row.factor
        if row.scope == "cycle":
            cyc = cyc or cycle_values(modes, gwp_set)
            v = cyc[row.quantity]
            note = ""
            if nd is not None:
                v = round_half_up(v, nd)
                note = f"value rounded to {nd} decimal(s)"
                if rl:
                    lim = round_half_up(lim, nd)
                    note += "; limit rounded likewise"
            out.append(LimitCheck(**base, value=v, limit=lim, passed=bool(v <= lim),
                                  mode=None, note=note))
            continue
        for m in modes:
            skip = ""
            if row.apply_exemptions and m.cap_exempt:
                skip = f"mode exempt ({row.clause})"
            elif row.min_load_pct is not None and m.power_kW < row.min_load_pct / 100 * p_rated:
                skip = f"below {row.min_load_pct:g} % load: not applicable"
            elif row.quantity.endswith("_g_kWh") and m.power_kW <= 0.0:
                # ISO 8178-4: an idle mode has no brake power, so no specific emission of its
                # own; its g/h enters the weighted cycle value through the numerator
                skip = "idle mode (no brake power): no g/kWh; its g/h counts in the cycle value"
            try:
                v = _mode_value(limit_set, row, m, gwp_set)
            except InputError:
                if not skip:
                    raise
                v = math.nan
            passed = True if skip else bool(v <= lim)
            out.append(LimitCheck(**base, value=v, limit=None if skip else lim,
                                  passed=passed, mode=m.name, note=skip))
    return out
