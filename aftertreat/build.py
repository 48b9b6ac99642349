"""Manufacturing rules: the lengths a catalyst brick can be built in.

A brick of substrate kind ``k`` is built in whole multiples of ``step_mm`` between ``min_mm``
and ``max_mm`` (one layer of extruded or plate elements, or one coated brick), optionally with
its length-to-diameter ratio within [``L_D_min``, ``L_D_max``] (canning and flow
distribution). A sized section of that kind may have between ``min_layers`` and
``max_layers`` bricks (default: as many as the case has): the sizer adds a layer when the
section cannot comply at its longest, and drops one when fewer make a smaller train. The
defaults per kind are in ``data/build_rules.toml`` (common practice, from memory); a case
overrides any of them in ``[sizing.build.<kind>]``. Sizing searches the lengths continuously within
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

_LENGTH_KEYS = ("step_mm", "min_mm", "max_mm")
_RATIO_KEYS = ("L_D_min", "L_D_max")
_LAYER_KEYS = ("min_layers", "max_layers")
_KEYS = _LENGTH_KEYS + _RATIO_KEYS + _LAYER_KEYS


@dataclass(frozen=True)
class BuildRule:
    """Buildable lengths of one substrate kind: k x ``step_mm`` within [``min_mm``, ``max_mm``]."""
    kind: str
    step_mm: float
    min_mm: float
    max_mm: float
    provenance: str
    L_D_min: float | None = None          # bounds on length / diameter of one brick
    L_D_max: float | None = None
    min_layers: int | None = None         # bricks of this kind in a sized section (None: the
    max_layers: int | None = None         # case's count)

    def length_range_m(self, diameter_m: float) -> tuple[float, float]:
        """(shortest, longest) buildable length [m] of one brick at ``diameter_m``: whole
        steps within [min_mm, max_mm] and within the L/D bounds."""
        lo, hi = self.shortest_m, self.longest_m
        if self.L_D_min is not None:
            lo = max(lo, self.round_up_free(self.L_D_min * diameter_m))
        if self.L_D_max is not None:
            hi = min(hi, self.round_down_free(self.L_D_max * diameter_m))
        return lo, hi

    def round_up_free(self, length_m: float) -> float:
        """The next whole step >= ``length_m`` [m], without the [min, max] clamp."""
        return math.ceil(length_m * 1e3 / self.step_mm - 1e-6) * self.step_mm / 1e3

    def round_down_free(self, length_m: float) -> float:
        """The last whole step <= ``length_m`` [m], without the [min, max] clamp."""
        return math.floor(length_m * 1e3 / self.step_mm + 1e-6) * self.step_mm / 1e3

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

    def next_down(self, length_m: float) -> float:
        """The buildable length one step below ``length_m`` [m] (held at the shortest)."""
        return self.round_down(length_m - self.step_mm / 1e3 * (1 - 1e-6))

    def describe(self) -> str:
        extra = []
        if self.L_D_min is not None or self.L_D_max is not None:
            extra.append(f"L/D {self.L_D_min if self.L_D_min is not None else 0:g}-"
                         + (f"{self.L_D_max:g}" if self.L_D_max is not None else "any"))
        if self.min_layers is not None or self.max_layers is not None:
            lo = self.min_layers if self.min_layers is not None else "the case's count"
            hi = self.max_layers if self.max_layers is not None else "the case's count"
            extra.append(f"from {lo} to {hi} bricks per section")
        return (f"{self.kind}: {self.step_mm:g} mm steps, {self.min_mm:g}-{self.max_mm:g} mm "
                f"per brick" + "".join(f", {e}" for e in extra) + f" ({self.provenance})")


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
            where = f"sizing.build.{kind}.{k}"
            if k in _LAYER_KEYS:
                if not isinstance(v, int) or isinstance(v, bool) or not 1 <= v <= 20:
                    raise InputError("expected a whole number of bricks within [1, 20]",
                                     key=where, value=v, file=file)
            elif k in _RATIO_KEYS:
                if not isinstance(v, (int, float)) or isinstance(v, bool) or not 0 < v <= 50:
                    raise InputError("expected a length/diameter ratio within (0, 50]",
                                     key=where, value=v, file=file)
            elif not isinstance(v, (int, float)) or isinstance(v, bool) or not 0 < v <= 1e5:
                raise InputError("expected a length in mm within (0, 100000]", key=where,
                                 value=v, file=file)
        for a, b in (("L_D_min", "L_D_max"), ("min_layers", "max_layers")):
            if a in over and b in over and over[a] > over[b]:
                raise InputError(f"expected {a} <= {b}", key=f"sizing.build.{kind}.{a}",
                                 value=over[a], file=file)
        r = replace(rules[kind], **{k: (int(v) if k in _LAYER_KEYS else float(v))
                                    for k, v in over.items()}, provenance="from the case")
        if r.shortest_m > r.longest_m + 1e-12:
            raise InputError(f"no whole step of {r.step_mm:g} mm lies within "
                             f"[{r.min_mm:g}, {r.max_mm:g}] mm", key=f"sizing.build.{kind}",
                             value=over, file=file)
        rules[kind] = r
    return rules
