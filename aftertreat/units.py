"""Reading quantities that carry units, once, at load time.

Users may write ``"450 mm"``, ``"380 degC"`` or ``"8.2 t/h"``, or a bare number under a key whose
suffix names the unit (``length_mm = 450``). Everything is converted to SI here, by pint; the
library works in SI (and mol) from then on.
"""
from __future__ import annotations

from functools import lru_cache

from .errors import InputError

__all__ = ["ureg", "to_si", "from_si", "MIL", "ZERO_C_K", "P_ATM_PA", "T_NORMAL_K",
           "P_NORMAL_PA", "NORMAL_CONDITIONS", "R_GAS"]

#: Molar gas constant [J/(mol K)] (CODATA 2018, exact by SI definition).
R_GAS = 8.314462618
#: 0 degC in kelvin (SI definition), for every conversion between degC and K.
ZERO_C_K = 273.15
#: The standard atmosphere [Pa] (exact by definition): the default pressure of streams.
P_ATM_PA = 101325.0
#: Default normal conditions for GHSV and normal volumes: 0 degC and 101.325 kPa (common practice;
#: limit sets may choose others), and how outputs name them.
T_NORMAL_K = ZERO_C_K
P_NORMAL_PA = P_ATM_PA
NORMAL_CONDITIONS = f"{T_NORMAL_K - ZERO_C_K:g} C, {P_NORMAL_PA / 1e3:g} kPa"
#: One "mil" (thousandth of an inch), the trade unit of honeycomb wall thickness [m].
MIL = 25.4e-6


@lru_cache(maxsize=1)
def _registry():
    import pint
    try:    # pint caches its parsed definitions on disk: ~15 ms instead of ~0.5 s at start-up
        reg = pint.UnitRegistry(autoconvert_offset_to_baseunit=True, cache_folder=":auto:")
    except Exception:
        reg = pint.UnitRegistry(autoconvert_offset_to_baseunit=True)
    reg.define("cpsi = 1 / inch**2")
    if "ppm" not in reg:                 # recent pint releases define ppm themselves
        reg.define("ppm = 1e-6 = ppmv")
    elif "ppmv" not in reg:
        reg.define("ppmv = 1e-6")
    return reg


_POWER = None


def checked_unit_text(text: str) -> bool:
    """True when a unit or quantity text is safe to hand to pint: pint evaluates arithmetic, so
    a text such as ``2**1000**1000`` would run for ever. Powers must be small literal numbers
    (at most two digits), with no chained powers, and the text at most 80 characters. Long
    digit runs are refused as whole numbers (huge integers) but allowed in plain decimals, such
    as a full-precision length written back by the tool (``"0.9553796329614969 m"``)."""
    import re
    global _POWER
    if _POWER is None:
        _POWER = re.compile(r"(\*\*|\^)\s*\(?\s*(-?[0-9.]+)\s*\)?(\s*(\*\*|\^))?")
    if len(text) > 80 or re.search(r"(?<![0-9.])[0-9]{16,}(?![0-9.])", text):
        return False
    for m in _POWER.finditer(text):
        if m.group(3) or len(m.group(2).lstrip("-").split(".")[0]) > 2:
            return False
    n_pow = len(re.findall(r"\*\*|\^", text))
    return n_pow == len(_POWER.findall(text))


def ureg():
    """The shared pint registry (built on first use; importing this module stays cheap)."""
    return _registry()


def to_si(value, unit: str, *, key: str | None = None, file: str | None = None) -> float:
    """Convert ``value`` to the SI unit ``unit`` (e.g. ``"m"``, ``"K"``, ``"kg/s"``).

    A bare number is taken to be in ``unit`` already. A string is parsed with its own unit, which
    must be dimensionally compatible with ``unit``. Errors are :class:`InputError` naming the key.
    """
    if isinstance(value, bool):
        raise InputError(f"expected a number or a quantity in units of {unit}", key=key,
                         value=value, file=file)
    if isinstance(value, (int, float)):
        return float(value)
    reg = _registry()                     # only for texts: building it costs ~0.3 s
    if isinstance(value, str):
        import re
        # the trade's "mil" (wall thickness) is pint's "thou"; pint's own "mil" is not a length
        text = re.sub(r"\bmils?\b", "thou", value)
        if not checked_unit_text(text):
            raise InputError(f"expected a plain quantity such as '450 mm' (units of {unit}); "
                             "powers must be small numbers", key=key, value=value, file=file)
        try:
            q = reg.Quantity(text)
        except Exception:
            raise InputError(f"expected a quantity such as '450 mm' (units of {unit})",
                             key=key, value=value, file=file) from None
        try:
            if not hasattr(q, "to"):
                return float(q)
            return float(q.to(unit).magnitude)
        except Exception:
            raise InputError(f"expected units compatible with {unit}", key=key, value=value,
                             file=file) from None
    raise InputError(f"expected a number or a quantity in units of {unit}", key=key,
                     value=value, file=file)


def from_si(value: float, unit: str, si_unit: str) -> float:
    """Convert an SI value to a display unit (e.g. ``from_si(T, "degC", "K")``)."""
    reg = _registry()
    return float(reg.Quantity(value, si_unit).to(unit).magnitude)
