"""Manufacturing rules: the lengths a catalyst brick can be built in.

A brick of substrate kind ``k`` is built in whole multiples of ``step_mm`` between ``min_mm``
and ``max_mm`` (one layer of extruded or plate elements, or one coated brick). The defaults per
kind are in ``data/build_rules.toml`` (common practice, from memory); a case overrides any of
them in ``[sizing.build.<kind>]``. Sizing searches the lengths continuously within
[min, max] and then rounds every sized brick up to its next buildable length
(:func:`BuildRule.round_up`); the keys are listed with the other ``[sizing]`` keys in
:mod:`aftertreat.cyclecase`.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, replace
from functools import lru_cache

from .errors import InputError
from .geometry import KINDS

__all__ = ["BuildRule", "default_rules", "parse_build_rules"]

_KEYS = ("step_mm", "min_mm", "max_mm")


@dataclass(frozen=True)
class BuildRule:
    """Buildable lengths of one substrate kind: k x ``step_mm`` within [``min_mm``, ``max_mm``]."""
    kind: str
    step_mm: float
    min_mm: float
    max_mm: float
    provenance: str

    @property
    def shortest_m(self) -> float:
        """The shortest buildable length [m]."""
        return math.ceil(self.min_mm / self.step_mm - 1e-9) * self.step_mm / 1e3

    @property
    def longest_m(self) -> float:
        """The longest buildable length [m]."""
        return math.floor(self.max_mm / self.step_mm + 1e-9) * self.step_mm / 1e3

    def round_up(self, length_m: float) -> float:
        """The shortest buildable length >= ``length_m`` [m] (the longest one if none is)."""
        k = math.ceil(length_m * 1e3 / self.step_mm - 1e-6)
        return min(max(k * self.step_mm / 1e3, self.shortest_m), self.longest_m)

    def round_down(self, length_m: float) -> float:
        """The longest buildable length <= ``length_m`` [m] (the shortest one if none is)."""
        k = math.floor(length_m * 1e3 / self.step_mm + 1e-6)
        return max(min(k * self.step_mm / 1e3, self.longest_m), self.shortest_m)

    def next_up(self, length_m: float) -> float:
        """The buildable length one step above ``length_m`` [m] (capped at the longest)."""
        return min(self.round_up(length_m) + self.step_mm / 1e3, self.longest_m)

    def describe(self) -> str:
        return (f"{self.kind}: {self.step_mm:g} mm steps, {self.min_mm:g}-{self.max_mm:g} mm "
                f"per brick ({self.provenance})")


@lru_cache(maxsize=1)
def _table() -> dict:
    import tomllib
    from importlib import resources
    return tomllib.loads(resources.files("aftertreat").joinpath("data/build_rules.toml")
                         .read_text(encoding="utf-8"))


def default_rules() -> dict[str, BuildRule]:
    """The shipped rule of every substrate kind (``data/build_rules.toml``)."""
    return {k: BuildRule(kind=k, step_mm=float(v["step_mm"]), min_mm=float(v["min_mm"]),
                         max_mm=float(v["max_mm"]), provenance=v["provenance"])
            for k, v in _table().items()}


def parse_build_rules(table, file) -> dict[str, BuildRule]:
    """The rules of a case: the defaults with ``[sizing.build.<kind>]`` overrides applied."""
    rules = default_rules()
    if table is None:
        return rules
    if not isinstance(table, dict):
        raise InputError("expected a table of substrate kinds", key="sizing.build", value=table,
                         file=file)
    for kind, over in table.items():
        if kind not in KINDS:
            raise InputError(f"expected a substrate kind, one of {', '.join(KINDS)}",
                             key=f"sizing.build.{kind}", value=kind, file=file)
        if not isinstance(over, dict):
            raise InputError("expected a table with step_mm, min_mm, max_mm",
                             key=f"sizing.build.{kind}", value=over, file=file)
        for k, v in over.items():
            if k not in _KEYS:
                raise InputError(f"expected one of {', '.join(_KEYS)}",
                                 key=f"sizing.build.{kind}.{k}", value=k, file=file)
            if not isinstance(v, (int, float)) or isinstance(v, bool) or not 0 < v <= 1e5:
                raise InputError("expected a length in mm within (0, 100000]",
                                 key=f"sizing.build.{kind}.{k}", value=v, file=file)
        r = replace(rules[kind], **{k: float(v) for k, v in over.items()},
                    provenance="from the case")
        if r.shortest_m > r.longest_m + 1e-12:
            raise InputError(f"no whole step of {r.step_mm:g} mm lies within "
                             f"[{r.min_mm:g}, {r.max_mm:g}] mm", key=f"sizing.build.{kind}",
                             value=over, file=file)
        rules[kind] = r
    return rules
