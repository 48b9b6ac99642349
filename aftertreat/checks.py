"""Typed reads of case values: a number, a flag, a choice or a text, or one clear
:class:`~aftertreat.errors.InputError` naming the key (never a ``ValueError`` or
``TypeError`` from deep inside). Used by the parsers wherever a value is read."""
from __future__ import annotations

import math

from .errors import InputError, did_you_mean

__all__ = ["number", "flag", "choice", "text"]


def number(v, key: str, file: str | None = None, *, lo: float | None = None,
           hi: float | None = None, lo_open: bool = False, what: str = "a number") -> float:
    """``v`` as a finite float within [lo, hi] (``lo_open``: (lo, hi]); true/false, text and
    lists are refused."""
    ok = isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)
    if ok and lo is not None:
        ok = v > lo if lo_open else v >= lo
    if ok and hi is not None:
        ok = v <= hi
    if not ok:
        rng = ""
        if lo is not None or hi is not None:
            rng = (f" within {'(' if lo_open else '['}{'-inf' if lo is None else f'{lo:g}'}, "
                   f"{'inf' if hi is None else f'{hi:g}'}]")
        raise InputError(f"expected {what}{rng}", key=key, value=v, file=file)
    return float(v)


def flag(v, key: str, file: str | None = None) -> bool:
    """``v`` as true or false (TOML booleans only: "no" or 0 are refused, not read as true)."""
    if not isinstance(v, bool):
        raise InputError("expected true or false", key=key, value=v, file=file)
    return v


def choice(v, options, key: str, file: str | None = None) -> str:
    """``v`` as one of ``options`` (texts)."""
    options = tuple(options)
    if not isinstance(v, str) or v not in options:
        hint = did_you_mean(v, options) if isinstance(v, str) else ""
        raise InputError("expected one of " + ", ".join(options) + hint, key=key, value=v,
                         file=file)
    return v


def text(v, key: str, file: str | None = None) -> str:
    """``v`` as a text (numbers are written as they are; lists and tables are refused)."""
    if isinstance(v, (list, dict)):
        raise InputError("expected a text", key=key, value=v, file=file)
    return str(v)
