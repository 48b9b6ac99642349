"""Steady-state test duty cycles (ISO 8178-4 and user-defined), read from ``data/cycles.toml``.

A duty cycle is a list of modes, each a speed point, a load point and a weighting factor W_F.
Power-defined cycles (E2, E3, D2, D1, E5) give the load as a percentage of rated power;
torque-defined cycles (C1, C2, E1, E4) give it as a percentage of the maximum torque at the
mode's speed (NTC 2008 3.2.7). Speeds are percentages of rated speed; the named speed points
``rated``, ``intermediate`` and ``idle`` are resolved on load (defaults in the data file, which
the caller may override with the engine's own values).

The weighted specific emission over a cycle is (NTC 2008 5.12.5)::

    e [g/kWh] = sum_i(W_F,i * q_m,i [g/h]) / sum_i(W_F,i * P_i [kW])

(:func:`aftertreat.emissions.weighted_specific_emission`).

References
----------
- MARPOL Annex VI Appendix II; NOx Technical Code 2008 3.2 (test cycles and weighting factors)
  and 3.1.4 (modes exempt from the Tier III per-mode cap).
- ISO 8178-4 (steady-state test cycles); ISO 8178-1 (intermediate speed).
- DieselNet summary of the ISO 8178 cycles (D1, C2, D2, C1).
"""
from __future__ import annotations

import math
import tomllib
from dataclasses import dataclass, field
from functools import lru_cache
from importlib import resources

from . import schema
from .checks import flag
from .errors import InputError, did_you_mean

__all__ = ["Mode", "DutyCycle", "load_cycle", "available_cycles", "custom_cycle",
           "mode_power_fraction", "WEIGHT_SUM_TOL"]

#: Tolerance on the sum of weighting factors (the data give 2-decimal weights that sum to 1
#: exactly in decimal; 1e-6 absorbs binary rounding and user-typed 6-decimal weights).
WEIGHT_SUM_TOL = 1e-6
_DATA_FILE = "cycles.toml"
_MODE_KEYS = schema.keys("cycle.mode[]")      # in the order error messages list them


@dataclass
class Mode:
    """One steady-state mode: weight W_F [-], power [% rated] or torque [% of max. torque at the
    mode speed], speed [% rated], and whether it is exempt from the Tier III per-mode cap."""
    name: str
    weight: float
    power_pct: float | None
    speed_pct: float
    torque_pct: float | None = None
    cap_exempt: bool = False
    speed_label: str | None = None


@dataclass
class DutyCycle:
    """A named list of modes with its provenance."""
    key: str
    name: str
    modes: list[Mode]
    application: str
    source: str
    confidence: str
    clause: str = ""
    speed_sources: dict = field(default_factory=dict)

    @property
    def weights(self) -> list[float]:
        """The weighting factors W_F of the modes, in order."""
        return [m.weight for m in self.modes]

    def power_fractions(self) -> list[float]:
        """P_i / P_rated for every mode (see :func:`mode_power_fraction`)."""
        return [mode_power_fraction(m) for m in self.modes]


def mode_power_fraction(mode: Mode) -> float:
    """Fraction of rated power at a mode [-].

    Power-defined modes: ``power_pct / 100``. Torque-defined modes:
    ``P/P_rated = (T/T_max(n)) * (n/n_rated) = torque_pct * speed_pct / 1e4``, which assumes the
    maximum torque at every speed equals the rated torque (a flat torque curve). This is a
    simplification (common practice for a first estimate); with a real torque curve multiply by
    T_max(n)/T_rated.
    """
    if mode.power_pct is not None:
        return mode.power_pct / 100.0
    if mode.torque_pct is None:
        raise InputError("expected power_pct or torque_pct", key=f"mode {mode.name}")
    return mode.torque_pct * mode.speed_pct / 1e4


@lru_cache(maxsize=1)
def _data() -> dict:
    with resources.files("aftertreat.data").joinpath(_DATA_FILE).open("rb") as fh:
        return tomllib.load(fh)


def available_cycles() -> list[str]:
    """Keys of the shipped cycles (e.g. ``["C1", "C2", "D1", "D2", ...]``)."""
    return sorted(_data()["cycle"])


def _number(value, key: str, file, *, lo: float | None = None) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise InputError("expected a finite number", key=key, value=value, file=file)
    if lo is not None and value < lo:
        raise InputError(f"expected a number >= {lo}", key=key, value=value, file=file)
    return float(value)


def _parse_modes(rows, speeds: dict[str, float], file, prefix: str) -> list[Mode]:
    if not isinstance(rows, list) or not rows:
        raise InputError("expected a non-empty list of modes", key=prefix, value=rows, file=file)
    modes = []
    for i, row in enumerate(rows):
        where = f"{prefix}[{i}]"
        if not isinstance(row, dict):
            raise InputError("expected a table with weight and power_pct or torque_pct",
                             key=where, value=row, file=file)
        for k in row:
            if k not in _MODE_KEYS:
                raise InputError(f"unknown mode key; valid: {', '.join(_MODE_KEYS)}"
                                 + did_you_mean(k, _MODE_KEYS), key=f"{where}.{k}", file=file)
        if "weight" not in row:
            raise InputError("missing weight (weighting factor W_F)", key=f"{where}.weight",
                             file=file)
        w = _number(row["weight"], f"{where}.weight", file)
        if not w > 0:
            raise InputError("expected a weight > 0", key=f"{where}.weight", value=w, file=file)
        has_p, has_t = "power_pct" in row, "torque_pct" in row
        if has_p == has_t:
            raise InputError("expected exactly one of power_pct or torque_pct", key=where,
                             file=file)
        load_key = "power_pct" if has_p else "torque_pct"
        load = _number(row[load_key], f"{where}.{load_key}", file, lo=0.0)
        label = row.get("speed")
        if "speed_pct" in row:
            speed = _number(row["speed_pct"], f"{where}.speed_pct", file, lo=0.0)
        elif label is not None:
            if not isinstance(label, str) or label not in speeds:
                raise InputError(f"unknown speed point; valid: {', '.join(speeds)}"
                                 + did_you_mean(str(label), speeds), key=f"{where}.speed",
                                 value=label, file=file)
            speed = speeds[label]
        else:
            speed = 100.0
        modes.append(Mode(name=str(row.get("name", i + 1)), weight=w,
                          power_pct=load if has_p else None, speed_pct=speed,
                          torque_pct=None if has_p else load,
                          cap_exempt=flag(row.get("cap_exempt", False), f"{where}.cap_exempt",
                                          file), speed_label=label))
    seen: dict[str, int] = {}
    for i, m in enumerate(modes):
        if m.name in seen:
            raise InputError(f"expected a unique mode name; mode {seen[m.name] + 1} has it too",
                             key=f"{prefix}[{i}].name", value=m.name, file=file)
        seen[m.name] = i
    total = sum(m.weight for m in modes)
    if abs(total - 1.0) > WEIGHT_SUM_TOL:
        raise InputError(f"expected weights that sum to 1 (within {WEIGHT_SUM_TOL:g}); "
                         f"they sum to {total:.9g}", key=f"{prefix}.weight", file=file)
    return modes


def _speed_points(intermediate_speed_pct, idle_speed_pct) -> dict[str, float]:
    speeds = {k: float(v["speed_pct"]) for k, v in _data()["speed_points"].items()}
    if intermediate_speed_pct is not None:
        speeds["intermediate"] = _number(intermediate_speed_pct, "intermediate_speed_pct", None,
                                         lo=0.0)
    if idle_speed_pct is not None:
        speeds["idle"] = _number(idle_speed_pct, "idle_speed_pct", None, lo=0.0)
    return speeds


def load_cycle(key: str, *, intermediate_speed_pct: float | None = None,
               idle_speed_pct: float | None = None) -> DutyCycle:
    """A shipped cycle by key (``"E2"``, ``"E3"``, ``"D2"``, ``"C1"``, ...; case-insensitive).

    ``intermediate_speed_pct`` and ``idle_speed_pct`` [% of rated speed] override the data
    file's default speed points for torque-defined cycles (ISO 8178-1: intermediate speed is the
    speed of maximum torque, clamped to 60-75 % of rated).
    """
    data = _data()["cycle"]
    match = {k.upper(): k for k in data}.get(str(key).strip().upper())
    if match is None:
        raise InputError(f"unknown duty cycle; shipped: {', '.join(available_cycles())}"
                         + did_you_mean(str(key).upper(), data), key="cycle", value=key)
    c = data[match]
    speeds = _speed_points(intermediate_speed_pct, idle_speed_pct)
    modes = _parse_modes(c["mode"], speeds, _DATA_FILE, f"cycle.{match}.mode")
    return DutyCycle(key=match, name=c["name"], modes=modes, application=c["application"],
                     source=c["source"], confidence=c["confidence"], clause=c.get("clause", ""),
                     speed_sources={k: v for k, v in _data()["speed_points"].items()})


def custom_cycle(modes: list[dict], file: str | None = None, *, key: str = "custom",
                 name: str = "user-defined cycle", source: str = "user input",
                 intermediate_speed_pct: float | None = None,
                 idle_speed_pct: float | None = None) -> DutyCycle:
    """A user-defined cycle from a list of tables (as read from a case file).

    Each table: ``weight`` (> 0), exactly one of ``power_pct`` or ``torque_pct``, optionally
    ``name``, ``speed_pct`` (default 100) or ``speed`` (``"rated"``, ``"intermediate"``,
    ``"idle"``) and ``cap_exempt`` (default false). The weights must sum to 1 within
    :data:`WEIGHT_SUM_TOL`; otherwise :class:`InputError`.
    """
    speeds = _speed_points(intermediate_speed_pct, idle_speed_pct)
    parsed = _parse_modes(modes, speeds, file, "cycle.mode")
    return DutyCycle(key=key, name=name, modes=parsed, application="user-defined",
                     source=source, confidence="user input")
