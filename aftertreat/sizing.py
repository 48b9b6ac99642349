"""Size the catalyst train: the smallest SCR and slip-catalyst volumes that meet every limit.

The SCR section (all SCR bricks, scaled together in their case proportions) and the slip-catalyst
section (ASC or oxidation bricks after the SCR) are sized separately, at the case's aged activity,
with a design margin on every limit:

1. SCR length: the smallest one for which every NOx, N2O and greenhouse-gas limit holds at
   every mode and over the cycle (and the NH3 limits too when the train has no slip catalyst).
   N2O belongs here because a longer SCR uses more NH3, so less reaches the slip catalyst,
   whose platinum layer turns part of it into N2O.
2. Slip-catalyst length: likewise for the NH3 limits, with the SCR at its size.
3. Steps 1 and 2 are repeated until neither moves (the slip catalyst's SCR layer reduces NOx
   and its oxidation layer makes NO and N2O). The back-pressure budget, the space envelope and
   every limit are checked on the result; what fails is reported, not hidden.

Search: every ratio value/(limit x (1 - margin)) falls as a section grows, and in plug flow
its logarithm is nearly linear in the length (outlet/inlet ~ exp(-k L)); the worst ratio is
their maximum, with kinks where the binding limit changes. So each limit row gets its own
secant and the root of the maximum is predicted as the largest row root; steps aim just past
it from alternating ends of the bracket, which closes to 0.5 % (``SIZING_TOL``) in 2-4
evaluations once bracketed (:func:`_smallest`). The search runs on a coarse grid
(``COARSE_GRID``); its answer is then confirmed on the case's own grid and grown there if it
does not comply, so it is the smallest to within the coarse grid's error (1-2 %).

Buildable answer: the search keeps every sized brick within its substrate kind's buildable
lengths (:mod:`aftertreat.build`: whole steps within [min, max] per brick), and below the
length at which its pressure drop would reach 40 % of the inlet pressure (beyond that the model
refuses a brick as implausible, so such a candidate is out of bounds, not a user error). The
continuous optimum is then rounded up brick by brick to whole steps; while the rounded train
misses a limit with its margin, the shortest brick of the failing section grows by one step.
The answer is the rounded train; the continuous optimum is reported beside it.

Each design is evaluated with :func:`aftertreat.evaluate.run_case`, warm-started from the
nearest design already solved (its states, by position along each brick, and its Jacobians).
The diameter is the case's, or set by a face-velocity or GHSV rule at the largest exhaust flow
of the cycle, or raised to meet the back-pressure budget.
"""
from __future__ import annotations

import dataclasses
import math
import time
from dataclasses import dataclass, field

import numpy as np

from .errors import InputError
from .reactor import SolverSettings
from .evaluate import mode_inlets, run_case
from .limits import governing
from .brick import Brick
from .train import Train

__all__ = ["SizingResult", "DesignMargin", "size_case", "SIZING_TOL"]

#: Relative tolerance on each sized length.
SIZING_TOL = 0.005
#: A design is accepted when value/limit <= 1 - 1e-5, so that it still passes when re-solved
#: from another start (solver tolerance) and is not decided by round-off at the boundary.
_ACCEPT = 1.0 - 1e-5
#: (cells, washcoat nodes per layer) of the coarse search grid; the answer is polished on the
#: case's own grid.
COARSE_GRID = (8, 4)
#: Largest pressure drop of one brick, as a fraction of its inlet pressure, that the search
#: may reach (the model refuses a brick above half the inlet pressure as implausible).
_DP_PLAUSIBLE = 0.4


@dataclass(frozen=True)
class DesignMargin:
    """The margin left on one limit check at the sized design: ``margin_pct`` = 100 (1 -
    value/limit), and whether the value is within the limit less the design margin."""
    check: object                      # aftertreat.limits.LimitCheck
    margin_pct: float | None
    pass_with_design_margin: bool

    def to_dict(self) -> dict:
        c = self.check
        return {"name": c.name, "mode": c.mode, "value": c.value, "limit": c.limit,
                "unit": c.unit, "o2_ref_pct": c.o2_ref_pct, "margin_pct": self.margin_pct,
                "pass_with_design_margin": self.pass_with_design_margin}


@dataclass
class SizingResult:
    """The sized train, the run at that size, the limits that bind and the sizing curves."""
    case: object
    feasible: bool
    train: Train
    run: object                        # CycleResult at the sized design
    binding: list[str]
    curves: list[dict]                 # one row per design evaluated
    problems: list[str] = field(default_factory=list)
    suggestions: list[str] = field(default_factory=list)
    margins: list[DesignMargin] = field(default_factory=list)
    evaluations: int = 0
    train_solves: int = 0
    seconds: float = 0.0
    cost: float | None = None
    continuous: list[dict] = field(default_factory=list)    # brick rows of the continuous optimum
    build_rules: list[str] = field(default_factory=list)    # the rules applied, in words
    diameter_reason: str = ""
    objective: str = ""                # what was minimised, and what that search did
    layers: str = ""                   # bricks added or dropped within the build rules

    def brick_rows(self) -> list[dict]:
        return _brick_rows(self.train)

    def to_json(self) -> dict:
        """The ``aftertreat.size/1`` object."""
        return {"schema": "aftertreat.size/1", "case": self.case.title,
                "overrides": list(getattr(self.case, "overrides", [])),
                "bricks": self.brick_rows(), "total_volume_L": self.train.volume * 1e3,
                "binding": self.binding, "feasible": self.feasible, "problems": self.problems,
                "suggestions": self.suggestions,
                "margins": [x.to_dict() for x in self.margins],
                "design_margin": self.case.sizing.design_margin, "cost": self.cost,
                "continuous_optimum": self.continuous, "build_rules": self.build_rules,
                "diameter_reason": self.diameter_reason, "objective": self.objective,
                "layers": self.layers,
                "train_N2O": self.run.train_n2o(),
                "ANR_per_mode": {m.name: float(m.anr) for m in self.run.modes},
                "curves": self.curves, "evaluations": self.evaluations,
                "train_solves": self.train_solves, "solve_s": self.seconds,
                "run": self.run.to_json()}

    def sized_data(self) -> dict:
        """The case data (as read, after its overrides) with the sized design put in: every
        brick's length and diameter, and the per-mode ANR when the sizing chose it. Running
        this data reproduces :attr:`run`."""
        import copy
        data = copy.deepcopy(self.case.data)
        for b, row in zip(self.train.bricks, data["brick"]):
            for key in ("length", "length_mm", "diameter", "diameter_mm"):
                row.pop(key, None)
            row["length"] = f"{_mm_text(b.length)} mm"
            row["diameter"] = f"{_mm_text(b.diameter)} mm"
        if self.case.dosing["method"] != "none":
            data.setdefault("dosing", {})["ANR"] = [float(a) for a in self.case.dosing["ANR"]]
        return data

    def curve_table(self):
        import pandas as pd
        return pd.DataFrame(self.curves).sort_values(["SCR_length_mm", "ASC_length_mm"])


def _mm_text(length_m: float) -> str:
    """A length [m] as millimetres, with as few digits as read back (units.to_si) to the same
    length within 1e-12 (a length differs from its text by round-off only)."""
    from .units import to_si
    mm = length_m * 1e3
    for digits in range(6, 18):
        text = f"{mm:.{digits}g}"
        if abs(to_si(f"{text} mm", "m") - length_m) <= 1e-12 * abs(length_m):
            return text
    return repr(mm)


def _brick_rows(train) -> list[dict]:
    return [{"name": b.name, "role": b.role, "volume_L": b.volume * 1e3,
             "length_mm": b.length * 1e3, "diameter_mm": b.diameter * 1e3}
            for b in train.bricks]


def _design_value(res, r) -> float:
    """The value a design margin applies to: unrounded (a limit set may round the reported
    cycle value, e.g. to one decimal for IMO; the margin should not profit from that)."""
    if r.mode is None and r.quantity in res.cycle:
        return max(float(res.cycle[r.quantity]), float(r.value))
    return float(r.value)


def _ratios(res, quantities: tuple[str, ...], margin: float):
    """(row, value/(limit x (1 - margin))) for the applicable limit rows whose quantity starts
    with one of ``quantities``."""
    for r in res.limits:
        if r.quantity.startswith(quantities) and r.limit is not None:
            v = _design_value(res, r)
            yield r, (v / (r.limit * (1.0 - margin)) if r.limit > 0 else
                      (0.0 if v <= 0 else math.inf))


def _worst(res, quantities: tuple[str, ...], margin: float) -> float:
    """The worst value/(limit with margin) of a group of limits (0 if none applies)."""
    return max((q for _, q in _ratios(res, quantities, margin)), default=0.0)


def _rows(res, quantities: tuple[str, ...], margin: float) -> dict:
    """value/(limit with margin) per limit row of a group, keyed by name and mode."""
    return {(r.name, r.mode): q for r, q in _ratios(res, quantities, margin)}


class _Designs:
    """Evaluate designs (SCR length, slip-catalyst length) with caching and warm starts."""

    def __init__(self, case, diameter, grid=None, inlets=None, settings=None):
        self.case, self.D, self.grid, self.settings = case, diameter, grid, settings
        self.inlets = mode_inlets(case) if inlets is None else inlets
        b = case.train.bricks
        sec = self.sections(case)
        self.scr, self.asc = sec["SCR"], sec["ASC"]
        if not self.scr:
            raise InputError("the train has no SCR brick to size", key="brick", file=case.file)
        self.L_scr0 = sum(b[i].length for i in self.scr)
        self.L_asc0 = sum(b[i].length for i in self.asc)
        self.cache: dict[tuple[float, float], object] = {}
        self.solves = 0
        self.extra = 0                  # explicit trains evaluated (:meth:`run`)
        self.limits: dict[int, tuple[float, float]] = {}   # brick -> (shortest, longest) [m]
        self.seed = None                # warm-start guesses for the first design (per mode)

    @staticmethod
    def sections(case) -> dict[str, list[int]]:
        """Brick indices of the SCR section and of the slip-catalyst section after it."""
        b = case.train.bricks
        scr = [i for i, x in enumerate(b) if x.role == "SCR"]
        last = max(scr) if scr else -1
        return {"SCR": scr, "ASC": [i for i, x in enumerate(b)
                                    if i > last and x.role in ("ASC", "oxidation")]}

    def train(self, L_scr: float, L_asc: float) -> Train:
        b = self.case.train.bricks
        new = []
        for i, x in enumerate(b):
            L = x.length
            if i in self.scr:
                L = self.brick_length(i, L_scr, self.L_scr0)
            elif i in self.asc and self.L_asc0 > 0:
                L = self.brick_length(i, L_asc, self.L_asc0)
            new.append(dataclasses.replace(x, length=L, diameter=self.D, **self._grid(x)))
        return Train(new)

    def _grid(self, brick) -> dict:
        """Grid keywords of ``brick`` on this evaluator's grid: cells and washcoat nodes at
        most those of the coarse search grid, if it has one."""
        if self.grid is None:
            return {}
        return {"cells": min(brick.cells, self.grid[0]),
                "nodes_per_layer": min(brick.nodes_per_layer, self.grid[1])}

    def on_grid(self, train: Train) -> Train:
        """``train`` on this evaluator's grid (:meth:`_grid`)."""
        return Train([dataclasses.replace(x, **self._grid(x)) for x in train.bricks])

    def run(self, train: Train, like=None):
        """Evaluate an explicit train (same bricks and grids as :meth:`train`), warm-started
        from the result ``like``."""
        guesses = [m.solution for m in like.modes] if like is not None and like.converged \
            else None
        res = run_case(self.case, train=train, guesses=guesses, inlets=self.inlets,
                       settings=self.settings)
        self.solves += len(res.modes)
        self.extra += 1
        return res

    def brick_limits(self, idx, rules, fraction: float = _DP_PLAUSIBLE) -> dict:
        """(shortest, longest) length [m] of each brick ``idx``: its substrate kind's buildable
        range (``rules``), the longest also kept below the length at which the brick would lose
        ``fraction`` of a mode's inlet pressure (at the inlet temperature, every mode; above
        half of it the model refuses a brick as implausible, :func:`aftertreat.reactor.package`);
        and the name of the bound that sets the longest."""
        from .gas import GasProperties
        from .transport import pressure_drop
        b = self.case.train.bricks
        gases = [(m.inlet, GasProperties.for_stream(m.inlet.F)) for m in self.inlets]
        out = {}
        for i in idx:
            rule = rules[b[i].substrate.kind]
            lo, hi = rule.length_range_m(self.D)
            why = (f"sizing.build.{rule.kind}.max_mm" if hi >= rule.longest_m - 1e-12 else
                   f"sizing.build.{rule.kind}.L_D_max")
            if lo > hi:                    # the L/D bounds leave no buildable length here
                out[i] = (lo, hi, why)
                continue
            x = dataclasses.replace(b[i], diameter=self.D)
            sub = x.substrate
            for inl, gas in gases:
                rho, mu = float(gas.density(inl.T, inl.p)), float(gas.viscosity(inl.T))

                def dp(L):
                    return pressure_drop(sub.d_h, sub.ofa, sub.shape, L, inl.mass_flow,
                                         x.frontal_area, rho, mu,
                                         apparent=x.apparent_friction).total_Pa

                if dp(hi) <= fraction * inl.p:
                    continue
                a, c = 1e-5, hi                      # bisection in log L: dp rises with L
                for _ in range(40):
                    mid = math.sqrt(a * c)
                    a, c = (mid, c) if dp(mid) <= fraction * inl.p else (a, mid)
                hi, why = a, "pressure drop (40 % of the inlet pressure)"
            out[i] = (lo, hi, why)
        return out

    def brick_length(self, i: int, scale: float, L0: float) -> float:
        """Length [m] of brick ``i`` at its section's scale ``scale`` (section length ``L0`` in
        the case): the case's share of the section, held within the brick's buildable range
        once :attr:`limits` has it."""
        L = scale * self.case.train.bricks[i].length / L0
        if i in self.limits:
            L = min(max(L, self.limits[i][0]), self.limits[i][1])
        return L

    def section_length(self, idx, scale: float, L0: float) -> float:
        """Total length [m] of the bricks ``idx`` at the section scale ``scale``."""
        return sum(self.brick_length(i, scale, L0) for i in idx)

    def __call__(self, L_scr: float, L_asc: float):
        key = (round(L_scr, 9), round(L_asc, 9))
        if key in self.cache:
            return self.cache[key]
        guesses = self.seed if not self.cache else None
        if self.cache:                  # warm start from the nearest design solved
            near = min(self.cache, key=lambda k: abs(math.log(k[0] / L_scr))
                       + abs(math.log(max(k[1], 1e-9) / max(L_asc, 1e-9))))
            prev = self.cache[near]
            if prev.converged:
                guesses = [m.solution for m in prev.modes]
        res = run_case(self.case, train=self.train(L_scr, L_asc), guesses=guesses,
                       inlets=self.inlets, settings=self.settings)
        self.solves += len(res.modes)
        self.cache[key] = res
        return res


def _as_rows(v) -> dict:
    """A ratio (float) or ratios per limit row (dict) as a dict of log ratios."""
    rows = v if isinstance(v, dict) else {"": v}
    return {k: (math.log(r) if r > 0 else -math.inf) for k, r in rows.items()}


def _predict(a, b, slopes, thr: float):
    """Root of max over rows of the log ratios, each taken linear in x through the points ``a``
    and ``b`` ((x, {row: log ratio}); ``b`` may be None, then ``slopes`` gives the slopes).
    None when no row falls with x."""
    roots = []
    for k, ga in a[1].items():
        if not math.isfinite(ga):
            continue
        gb = b[1].get(k, math.nan) if b is not None else math.nan
        if math.isfinite(gb) and b[0] != a[0]:
            s = (gb - ga) / (b[0] - a[0])
        elif slopes and k in slopes:
            s = slopes[k]
        else:
            continue
        if s < 0:
            roots.append(a[0] + (thr - ga) / s)
    return max(roots) if roots else None


def _slopes(a, b) -> dict:
    """d(log ratio)/dx per row between the points a and b."""
    if a is None or b is None or a[0] == b[0]:
        return {}
    return {k: (b[1][k] - g) / (b[0] - a[0]) for k, g in a[1].items()
            if k in b[1] and math.isfinite(g) and math.isfinite(b[1][k])}


def _smallest(f, x0: float, lo: float, hi: float, tol: float = SIZING_TOL, step: float = 2.0,
              slopes: dict | None = None):
    """Smallest x in [lo, hi] at which f(x) <= 1, for an f that falls as x grows.

    ``f`` returns a ratio value/limit, or a dict of ratios, one per limit row, which is better:
    each row's log ratio is nearly linear in x (plug flow: outlet/inlet ~ exp(-k L)), while
    their maximum has kinks where the binding row changes. Each row gets its own secant through
    the two latest points (the bracket ends once there is a bracket), and the root of the
    maximum is predicted as the largest row root. Each step aims just past that prediction, on
    the side of the bracket end that lies further away (a third of ``tol`` past it), so the
    bracket closes from both ends; a bracket that has not halved (in log x) in two steps is
    bisected instead. Before a bracket exists, steps grow by at most ``step``. ``slopes`` (per
    row, from an earlier search on a neighbouring problem) lets the first step be predicted from
    one point. Stops when the bracket [infeasible, feasible] is narrower than ``tol``
    (relative) and returns (x, feasible, f at x, slopes per row at the answer).
    """
    thr = math.log(_ACCEPT)
    good = bad = None                           # (x, {row: log ratio})
    last = []
    widths = []

    def worst(p):
        return max(p[1].values(), default=-math.inf)

    x = min(max(x0, lo), hi)
    for _ in range(100):
        p = (x, _as_rows(f(x)))
        last = [p] + last[:1]
        if worst(p) <= thr:
            if good is None or x < good[0]:
                good = p
        elif bad is None or x > bad[0]:
            bad = p
        if good is not None and bad is not None and good[0] <= bad[0] * (1.0 + tol):
            break
        if good is None and bad[0] >= hi * (1 - 1e-12):
            return bad[0], False, math.exp(worst(bad)), _slopes(*last) if len(last) > 1 else {}
        if bad is None and good[0] <= lo * (1 + 1e-12):
            break
        if good is not None and bad is not None:
            xl, xh = bad[0], good[0]
            R = _predict(bad, good, slopes, thr)
            widths.append(math.log(xh / xl))
            if R is None or not xl < R < xh or (len(widths) > 2 and widths[-1] > 0.5 * widths[-3]):
                R = math.sqrt(xl * xh)
                x = R
            else:
                x = R * (1 + tol / 3) if xh / R - 1 > R / xl - 1 else R * (1 - tol / 3)
            x = min(max(x, xl * (1 + tol / 4)), xh / (1 + tol / 4))
        elif bad is None:                       # every point so far complies: go down
            xg = good[0]
            R = _predict(last[0], last[1] if len(last) > 1 else None, slopes, thr)
            x = xg / step if R is None else max(R * (1 - tol / 3), xg / step)
            x = max(min(x, xg / (1 + 0.98 * tol)), lo)
        else:                                   # every point so far fails: go up
            xb = bad[0]
            R = _predict(last[0], last[1] if len(last) > 1 else None, slopes, thr)
            x = xb * step if R is None else min(R * (1 + tol / 3), xb * step)
            x = min(max(x, xb * (1 + 0.98 * tol)), hi)
    out = _slopes(bad, good) or (_slopes(*last) if len(last) > 1 else {}) or dict(slopes or {})
    return good[0], True, math.exp(worst(good)), out


def _refine_guesses(res, train) -> list:
    """Coarse-grid states mapped onto ``train``'s grid (along each brick and across its
    washcoat nodes, :meth:`aftertreat.solver.WarmStart.onto`), as warm-start guesses."""
    from .problem import problem_for
    out = []
    for m in res.modes:
        row = []
        for sol, b in zip(m.solution.bricks, train.bricks):
            prob = problem_for(b)
            row.append(sol.warm_start.onto(prob.layout, prob.z_edges))
        out.append(row)
    return out


def _grow(f, x0: float, hi: float, slopes: dict | None = None, max_evals: int = 8) -> float:
    """The answer of the coarse search, confirmed on the fine grid: ``x0`` if it complies there,
    else grown until it does, by per-row secant steps (see :func:`_smallest`) that start from
    the coarse search's slopes and aim a third of the tolerance past the predicted root."""
    thr = math.log(_ACCEPT)
    p = (x0, _as_rows(f(x0)))
    prev = None
    for _ in range(max_evals):
        if max(p[1].values(), default=-math.inf) <= thr or p[0] >= hi:
            return p[0]
        R = _predict(p, prev, slopes, thr)
        x = p[0] * 1.02 if R is None else R * (1 + SIZING_TOL / 3)
        x = min(max(x, p[0] * 1.002), p[0] * 1.25, hi)
        prev, p = p, (x, _as_rows(f(x)))
    return p[0]


def _face_velocity_diameter(case, inlets, v: float) -> float:
    q = max(inl.inlet.volume_flow() for inl in inlets)     # actual m3/s at the brick inlet
    return math.sqrt(4.0 * q / (math.pi * v))


def ghsv_diameter(inlets, ghsv_per_h: float, length_to_diameter: float = 1.0) -> float:
    """Diameter [m] of an SCR section that has the design GHSV at the largest flow of the cycle
    and the given length/diameter ratio: V = pi D^2/4 (r D) with V the volume that gives
    ``ghsv_per_h`` (:func:`aftertreat.train.ghsv_per_h`, normal conditions, walls included), so
    D = (4 V / (pi r))^(1/3). A design GHSV is the usual first estimate of SCR volume (common
    practice); the lengths are then sized by the kinetics at this diameter."""
    from . import train
    stream = max((inl.inlet for inl in inlets), key=lambda s: s.total)
    V = train.ghsv_per_h(stream, 1.0) / ghsv_per_h        # GHSV x V is fixed by the flow
    return (4.0 * V / (math.pi * length_to_diameter)) ** (1.0 / 3.0)


def choose_anr(case, margin: float, excess: float) -> np.ndarray:
    """ANR per mode for dosing to a NOx-conversion target (common practice in SCR design).

    At each mode the conversion needed is the largest of 1 - limit (1 - margin) / engine-out
    value over the NOx limits that apply to that mode (per-mode rows) and to the cycle (the
    cycle row asks the same conversion of every mode). The ANR doses that conversion plus
    ``excess``, never more than the case's ANR (the upper bound the owner allows) and never less
    than the engine's own NH3 already gives (ANR counts engine-out NH3). A mode that no NOx limit
    covers (below a load gate, say) keeps the case's ANR.
    """
    from . import dosing, limits as lm
    from .evaluate import engine_out_stream, mode_emissions
    n = case.n_modes
    heads, own = [], np.zeros(n)
    for i, mode in enumerate(case.cycle.modes):
        power, eo, air_co2 = engine_out_stream(case, i)
        heads.append(mode_emissions(mode.name, mode.weight, power,
                                    bool(getattr(mode, "cap_exempt", False)), eo, air_co2))
        # the engine's own ANR; without NOx any ANR doses nothing, so count it as 0
        own[i] = np.nan_to_num(dosing.anr(eo), nan=0.0, posinf=0.0)
    need = np.full(n, np.nan)          # NaN: no NOx limit applies to the mode
    for ls in case.limit_sets:
        for r in lm.evaluate(ls, heads, rated_speed_rpm=case.engine.rated_speed_rpm,
                             gwp_set=case.gwp_set, rated_power_kW=case.engine.rated_power_kW):
            if not r.quantity.startswith("NOx") or r.limit is None or r.value <= 0:
                continue
            x = max(0.0, 1.0 - r.limit * (1.0 - margin) / r.value)
            if r.mode is None:
                need = np.fmax(need, x)
            else:
                names = [mode.name for mode in case.cycle.modes]
                idx = names.index(r.mode) if r.mode in names else None
                if idx is not None:
                    need[idx] = np.fmax(need[idx], x)
    # a mode no NOx limit covers (e.g. below a load gate) keeps the case's ANR
    anr = np.where(np.isnan(need), case.dosing["ANR"], need + excess)
    return np.minimum(np.maximum(anr, own), case.dosing["ANR"])


#: the [sizing] caps and the limit-vocabulary quantity each one becomes
_CAPS = (("N2O_max_g_kWh", "N2O_g_kWh", "N2O over the cycle (sizing cap)"),
         ("CO2e_max_g_kWh", "GHG_CO2e_g_kWh", "CO2 + N2O as CO2e over the cycle (sizing cap)"))


def with_sizing_caps(case):
    """``case`` with its ``[sizing]`` greenhouse caps added as a limit set "sizing caps" (cycle
    g/kWh rows, checked like every limit, with the design margin): ``N2O_max_g_kWh``,
    ``CO2e_max_g_kWh`` and ``CO2e_rise_max_pct``, which caps GHG_CO2e at the engine-out value
    x (1 + pct/100), i.e. the CO2e the train may add (its N2O, and CO2 of a urea reagent)."""
    from .limits import custom_limits
    sz = case.sizing
    rows = [{"name": name, "quantity": q, "value": getattr(sz, key), "unit": "g/kWh",
             "source": f"sizing.{key} of the case"} for key, q, name in _CAPS
            if getattr(sz, key) is not None]
    if sz.CO2e_rise_max_pct is not None:
        from .evaluate import engine_out_cycle
        g0 = engine_out_cycle(case)["GHG_CO2e_g_kWh"]
        pct = sz.CO2e_rise_max_pct
        rows.append({"name": f"CO2e added by the train at most {pct:g} % (sizing cap)",
                     "quantity": "GHG_CO2e_g_kWh", "value": g0 * (1.0 + pct / 100.0),
                     "unit": "g/kWh", "source": f"sizing.CO2e_rise_max_pct of the case "
                     f"({pct:g} % over the engine-out {g0:.1f} g/kWh)"})
    if not rows:
        return case
    caps = custom_limits(rows, file=case.file, name="sizing caps")
    return dataclasses.replace(case, limit_sets=list(case.limit_sets) + [caps])


def size_case(case, *, progress=None, curves: bool = True) -> SizingResult:
    """Size the SCR and slip-catalyst sections of ``case`` (a duty-cycle case with ``[sizing]``).

    Where dosing is allowed and ``[sizing] choose_ANR`` is true (the default), the ANR of each
    mode is chosen first (:func:`choose_anr`, excess ``ANR_excess``, default 0.05) and the case's
    ANR acts as the upper bound; if dosing to the target cannot comply within the envelope, the
    upper bound itself is sized.

    Diameter: the case's, or from ``face_velocity_m_s`` at the largest flow of the cycle, or from
    a design GHSV (``ghsv_per_h`` with ``length_to_diameter``, :func:`ghsv_diameter`), capped
    by ``max_diameter_mm``. With ``diameter_from_dp = true`` the diameter is then raised until
    the sized train meets ``dp_max_kPa``: in laminar channels at a given catalyst volume the
    pressure drop scales as V/D^4 (Hagen-Poiseuille), so D <- D (dp/budget)^(1/4), repeated
    until within 2 % (at most four sizings).

    Layers: where ``[sizing.build.<kind>]`` allows more or fewer bricks than the case has
    (``max_layers``, ``min_layers``), :func:`_size_layers` adds a brick to a section that
    cannot comply at its longest, or drops one when the train with fewer is smaller.
    """
    if case.cycle is None:
        raise InputError("sizing works on the modes of a [cycle]; this case is a time trace "
                         "(run it with 'aftertreat run', or add a cycle)", key="transient.trace",
                         file=case.file)
    t0 = time.perf_counter()
    case = with_sizing_caps(case)
    sz = case.sizing
    m = sz.design_margin
    if case.dosing["method"] != "none" and sz.choose_ANR:
        anr = choose_anr(case, m, sz.ANR_excess)
        if np.any(anr < case.dosing["ANR"] - 1e-12):
            chosen = dataclasses.replace(case, dosing=dict(case.dosing, ANR=anr))
            res = _size_layers(chosen, progress, curves)
            if res.feasible:
                res.seconds = time.perf_counter() - t0
                return res
            # dosing to the target is not enough within the envelope: try the case's upper bound
            if progress:
                progress("ANR at the case's upper bound")
    res = _size_layers(case, progress, curves)
    res.seconds = time.perf_counter() - t0
    return res


def _layer_bounds(case, idx) -> tuple[int, int]:
    """(fewest, most) bricks of the section ``idx`` (brick indices) allowed by the build rules
    of its substrate kind; the case's count where the rules say nothing."""
    rules = case.sizing.build
    kinds = {case.train.bricks[i].substrate.kind for i in idx}
    n = len(idx)
    if len(kinds) != 1:                   # mixed kinds: keep the case's bricks
        return n, n
    r = rules[kinds.pop()]
    lo = r.min_layers if r.min_layers is not None else n
    hi = r.max_layers if r.max_layers is not None else n
    return min(lo, n), max(hi, n)


def _relayer(case, idx, add: bool):
    """``case`` with one more brick in the section ``idx`` (a copy of its last brick, after it)
    or one fewer (its last brick removed), in the train and in the case data."""
    import copy
    bricks = list(case.train.bricks)
    rows = copy.deepcopy(case.data["brick"])
    last = idx[-1]
    if add:
        names = {b.name for b in bricks}
        base = bricks[last].name.rstrip("0123456789").rstrip()
        k = len(idx) + 1
        name = f"{base} {k}"
        while name in names:
            k += 1
            name = f"{base} {k}"
        bricks.insert(last + 1, dataclasses.replace(bricks[last], name=name))
        rows.insert(last + 1, dict(rows[last], name=name))
    else:
        del bricks[last]
        del rows[last]
    return dataclasses.replace(case, train=Train(bricks), data=dict(case.data, brick=rows))


def _size_layers(case, progress, curves: bool = True) -> SizingResult:
    """:func:`_size_with_diameter`, then layers within the build rules: while a section at its
    longest still fails and may have another brick, add one and size again; while a section
    may lose a brick and the train sized with one fewer complies and is smaller, take it."""
    res = _size_with_diameter(case, progress, curves)
    notes = []
    for role in ("SCR", "ASC"):
        d = _Designs.sections(res.case)
        idx = d[role]
        if not idx:
            continue
        fewest, most = _layer_bounds(res.case, idx)
        n0 = len(idx)
        while not res.feasible and len(idx) < most:
            if progress:
                progress(f"{role}: {len(idx) + 1} bricks")
            trial = _size_with_diameter(_relayer(res.case, idx, add=True), progress, curves)
            res = trial
            idx = _Designs.sections(res.case)[role]
        while res.feasible and len(idx) > fewest:
            if progress:
                progress(f"{role}: {len(idx) - 1} bricks")
            trial = _size_with_diameter(_relayer(res.case, idx, add=False), progress, curves)
            if not (trial.feasible and trial.train.volume < res.train.volume * (1 - 1e-9)):
                break
            res = trial
            idx = _Designs.sections(res.case)[role]
        if len(idx) != n0:
            notes.append(f"{'SCR' if role == 'SCR' else 'slip-catalyst'} section in "
                         f"{len(idx)} brick{'s' if len(idx) > 1 else ''} instead of the case's "
                         f"{n0} (sizing.build.<kind>.min_layers / max_layers)")
    res.layers = "; ".join(notes)
    return res


def _size_with_diameter(case, progress, curves: bool = True) -> SizingResult:
    """Diameter rule, then the lengths (see :func:`size_case`)."""
    sz = case.sizing
    D = case.train.bricks[0].diameter
    why = f"the case's diameter ({D * 1e3:.0f} mm)"
    if sz.face_velocity_m_s:
        D = _face_velocity_diameter(case, mode_inlets(case), sz.face_velocity_m_s)
        why = (f"{D * 1e3:.0f} mm for a face velocity of {sz.face_velocity_m_s:g} m/s at the "
               "largest exhaust flow of the cycle (sizing.face_velocity_m_s; the case's "
               f"{case.train.bricks[0].diameter * 1e3:.0f} mm is not used)")
    elif sz.ghsv_per_h:
        D = ghsv_diameter(mode_inlets(case), sz.ghsv_per_h, sz.length_to_diameter)
        why = (f"{D * 1e3:.0f} mm from the design GHSV {sz.ghsv_per_h:g} 1/h at the largest "
               f"flow with L/D {sz.length_to_diameter:g} (sizing.ghsv_per_h)")
    D_max = sz.max_diameter_mm / 1e3 if sz.max_diameter_mm else math.inf
    if D > D_max:
        why += f", capped at sizing.max_diameter_mm = {D_max * 1e3:.0f} mm"
    D = min(D, D_max)
    res = _size_at(case, D, progress, curves)
    D0 = D
    if sz.diameter_from_dp and sz.dp_max_kPa:
        budget = sz.dp_max_kPa
        for _ in range(3):
            dp = res.run.dp_kPa_max
            if dp <= budget * 1.0 or D >= D_max:
                break
            D = min(D * (dp / (0.98 * budget)) ** 0.25, D_max)
            if progress:
                progress(f"diameter {D * 1e3:.0f} mm for the back-pressure budget")
            res = _size_at(case, D, progress, curves)
        if D > D0:
            why += (f"; raised from {D0 * 1e3:.0f} to {D * 1e3:.0f} mm for the back-pressure "
                    f"budget {budget:g} kPa (sizing.diameter_from_dp"
                    + (", at sizing.max_diameter_mm)" if D >= D_max else ")"))
    res.diameter_reason = why
    return res


def _size_at(case, D: float, progress, want_curves: bool = True) -> SizingResult:
    """Size the SCR and slip-catalyst lengths of ``case`` at diameter ``D`` [m]."""
    t0 = time.perf_counter()
    sz = case.sizing
    m = sz.design_margin
    designs = _Designs(case, D)
    has_asc = bool(designs.asc)
    # the search runs on a coarse grid (see the module docstring)
    coarse = _Designs(case, D, grid=COARSE_GRID, inlets=designs.inlets,
                      settings=SolverSettings(tol=1e-9, tol_accept=1e-8))
    fixed = sum(b.length for i, b in enumerate(case.train.bricks)
                if i not in designs.scr and i not in designs.asc)
    max_total = sz.max_length_mm
    rules = sz.build

    reported = set()                          # limit rows already named in a problem
    dp_capped = []                            # bricks whose longest length the dp bound sets

    def bounds(section, idx, L0, key_max, room=math.inf, room_key=""):
        """(shortest, longest) section scale: every brick ``idx`` goes from its shortest to its
        longest buildable length (:meth:`_Designs.brick_limits`) as the scale grows, and the
        section's total length stays within ``key_max`` and the room left in the envelope."""
        lim = designs.brick_limits(idx, rules)
        if any(lo > hi for lo, hi, _ in lim.values()):
            i = next(i for i, (lo, hi, _) in lim.items() if lo > hi)
            rule = rules[case.train.bricks[i].substrate.kind]
            if rule.L_D_min is not None or rule.L_D_max is not None:
                lo_, hi_ = rule.length_range_m(designs.D)
                if lo_ > hi_:
                    raise InputError(
                        f"brick '{case.train.bricks[i].name}' cannot be built at a diameter of "
                        f"{designs.D * 1e3:.0f} mm: its L/D bounds allow "
                        f"{(rule.L_D_min or 0) * designs.D * 1e3:.0f}-"
                        f"{(rule.L_D_max or math.inf) * designs.D * 1e3:.0f} mm and its whole "
                        f"steps {rule.shortest_m * 1e3:.0f}-{rule.longest_m * 1e3:.0f} mm",
                        key=f"sizing.build.{rule.kind}", value=f"L/D {rule.L_D_min}-"
                        f"{rule.L_D_max}", file=case.file)
            raise InputError(f"brick '{case.train.bricks[i].name}' cannot be built: its "
                             f"shortest buildable length {lim[i][0] * 1e3:.0f} mm would lose "
                             "over 40 % of the inlet pressure", key=f"brick '{case.train.bricks[i].name}'",
                             value=f"diameter {designs.D * 1e3:.0f} mm", file=case.file)
        for d in (designs, coarse):
            d.limits.update({i: (lo, hi) for i, (lo, hi, _) in lim.items()})
        dp_capped.extend(f"brick '{case.train.bricks[i].name}' at {hi * 1e3:.0f} mm"
                         for i, (lo, hi, why) in lim.items() if why.startswith("pressure"))
        b = case.train.bricks
        lo = min(lim[i][0] * L0 / b[i].length for i in idx)
        hi = max(lim[i][1] * L0 / b[i].length for i in idx)
        cap, key, value = min((getattr(sz, key_max) / 1e3, f"sizing.{key_max}",
                               getattr(sz, key_max)),
                              (room, room_key, max_total), key=lambda t: t[0])
        shortest = designs.section_length(idx, lo, L0)
        if shortest > cap * (1 + 1e-9):
            raise InputError(f"no buildable {section} fits: its shortest bricks add up to "
                             f"{shortest * 1e3:.0f} mm, this bound allows "
                             f"{max(cap, 0.0) * 1e3:.0f} mm", key=key, value=value,
                             file=case.file)
        if designs.section_length(idx, hi, L0) > cap:
            a, c = lo, hi                            # the largest scale within the cap
            for _ in range(60):
                mid = 0.5 * (a + c)
                a, c = (mid, c) if designs.section_length(idx, mid, L0) <= cap else (a, mid)
            hi = a
        return lo, hi

    asc_lo = asc_hi = 0.0
    asc_min = 0.0
    if has_asc:
        asc_lo, asc_hi = bounds("slip catalyst", designs.asc, designs.L_asc0,
                                "asc_length_max_mm")
        asc_min = designs.section_length(designs.asc, asc_lo, designs.L_asc0)
    room = (max_total / 1e3 - fixed - asc_min) if max_total else math.inf
    scr_lo, scr_hi = bounds("SCR", designs.scr, designs.L_scr0, "scr_length_max_mm",
                            room, "sizing.max_length_mm")
    # the SCR carries NOx, and N2O and greenhouse limits too: a longer SCR uses more NH3, so less
    # of it reaches the slip catalyst to be oxidised (partly to N2O)
    nox = ("NOx", "N2O", "GHG") if has_asc else ("NOx", "NH3", "N2O", "GHG")
    problems, suggestions, binding = [], [], []
    feasible = True
    slopes = {"scr": None, "asc": None}       # per limit row, carried between passes

    def search(designs, L_scr, L_asc, first_step, passes):
        """Alternate SCR and slip-catalyst sizing on ``designs``; returns lengths and status."""

        def f_scr(L):
            if progress:
                progress(f"SCR {L * 1e3:.0f} mm")
            return _rows(designs(L, L_asc), nox, m)

        def f_asc(L):
            if progress:
                progress(f"slip catalyst {L * 1e3:.0f} mm")
            return _rows(designs(L_scr, L), ("NH3",), m)

        def cannot_meet(section: str, L_scr, L_asc, quantities) -> None:
            """Record that ``section`` at its largest still fails ``quantities``."""
            nonlocal feasible
            feasible = False
            res = designs(L_scr, L_asc)
            problems.append(f"with {section} these limits still fail (best values reachable): "
                            + "; ".join(_failing(res, quantities, m)))
            reported.update((r.name, r.mode) for r, q in _ratios(res, quantities, m)
                            if q > 1.0)
            suggestions.extend(_suggest(res, quantities, m, case))
            if dp_capped:
                suggestions.append("a larger diameter: the pressure drop caps "
                                   + ", ".join(dp_capped))

        for k in range(passes):
            step = first_step if k == 0 else 1.05   # later passes start next to the answer
            L_scr, ok, _, slopes["scr"] = _smallest(f_scr, L_scr, scr_lo, scr_hi, step=step,
                                                    slopes=slopes["scr"])
            if not ok:
                cannot_meet("an SCR up to "
                            f"{designs.section_length(designs.scr, scr_hi, designs.L_scr0) * 1e3:.0f}"
                            " mm long", L_scr, L_asc, nox)
                break
            if not has_asc:
                break
            L_prev = L_asc
            L_asc, ok_a, _, slopes["asc"] = _smallest(f_asc, L_asc, asc_lo, asc_hi, step=step,
                                                      slopes=slopes["asc"])
            if not ok_a:
                cannot_meet("a slip catalyst up to "
                            f"{designs.section_length(designs.asc, asc_hi, designs.L_asc0) * 1e3:.0f}"
                            " mm long", L_scr, L_asc, ("NH3",))
                break
            if _worst(designs(L_scr, L_asc), nox, m) <= _ACCEPT \
                    and abs(L_asc / max(L_prev, 1e-9) - 1) < 4 * SIZING_TOL:
                break
        return L_scr, L_asc

    # search on a coarse grid (about 1-2 % from the case's grid), then confirm on the case's grid:
    # the coarse answer is kept when it complies there, else grown until it does
    L_scr, L_asc = search(coarse, designs.L_scr0, designs.L_asc0, 2.0, 3)
    if feasible:    # seed the case's grid with the coarse states (bricks whose layout matches)
        designs.seed = _refine_guesses(coarse(L_scr, L_asc), designs.train(L_scr, L_asc))
    for _ in range(3):
        if not feasible:
            break
        L_scr = _grow(lambda L: _rows(designs(L, L_asc), nox, m), L_scr, scr_hi, slopes["scr"])
        if has_asc:
            L_asc = _grow(lambda L: _rows(designs(L_scr, L), ("NH3",), m), L_asc, asc_hi,
                          slopes["asc"])
        if _worst(designs(L_scr, L_asc), nox, m) <= _ACCEPT:
            break
    for name, L, lo in (("SCR", L_scr, scr_lo), ("slip catalyst", L_asc, asc_lo)):
        if has_asc or name == "SCR":
            if feasible and L <= lo * (1 + SIZING_TOL):
                binding.append(f"shortest buildable {name} bricks (sizing.build)")
    cont_res = designs(L_scr, L_asc)
    continuous = designs.train(L_scr, L_asc)
    train, res = _round_up(designs, continuous, cont_res, rules, nox, m, has_asc,
                           {"scr": sz.scr_length_max_mm / 1e3,
                            "asc": sz.asc_length_max_mm / 1e3,
                            "total": max_total / 1e3 if max_total else math.inf})
    objective_note = "smallest buildable volume (sizing.objective)"
    if sz.objective == "CO2e" and feasible:
        if progress:
            progress("least CO2e within the volume")
        train, res, objective_note = _least_co2e(designs, coarse, train, res, rules, m, sz,
                                                 max_total)
    # every other limit, the back-pressure budget and the envelope, on the result
    margins = []
    for r in res.limits:
        if r.limit is None:
            continue
        lim_m = r.limit * (1.0 - m)
        ratio = _design_value(res, r) / lim_m if lim_m > 0 else math.inf
        margins.append(DesignMargin(check=r, margin_pct=100.0 * (1.0 - r.value / r.limit)
                                    if r.limit > 0 else None,
                                    pass_with_design_margin=ratio <= 1.0))
        if ratio > 1.0:
            feasible = False
            if (r.name, r.mode) in reported:
                continue
            problems.append(f"{r.name}" + (f" at mode {r.mode}" if r.mode and
                                              str(r.mode) not in r.name else "")
                            + f": {_design_value(res, r):.3g} > {lim_m:.3g} {r.unit} "
                            "(limit with margin)")
            suggestions += _suggest(res, (r.quantity,), m, case)
        elif ratio > 1.0 - 3 * SIZING_TOL - 0.01:
            binding.append(r.name)
    stuck = sorted({(b.brick.name, b.brick.cells) for mr in res.modes
                    for b in mr.solution.bricks if not b.converged})
    if stuck:                      # the sized design itself could not be solved: say where
        problems.append("the solver did not converge at the sized design in brick(s) "
                        + ", ".join(f"'{n}' ({c} cells)" for n, c in stuck)
                        + "; its numbers are flagged")
        default_cells = Brick.__dataclass_fields__["cells"].default
        suggestions += [f"more cells in brick '{n}' (it has {c}; the default is "
                        f"{default_cells}): a long brick on very few cells is a stiff problem"
                        for n, c in stuck if c < default_cells]
    dp = res.dp_kPa_max
    if sz.dp_max_kPa and dp > sz.dp_max_kPa:
        feasible = False
        problems.append(f"back-pressure {dp:.2f} kPa exceeds the budget {sz.dp_max_kPa:.2f} kPa")
        suggestions.append("a larger diameter or a lower cell density")
    total = sum(b.length for b in train.bricks)
    if max_total and total > max_total / 1e3 * (1 + 1e-9):
        feasible = False
        problems.append(f"train length {total * 1e3:.0f} mm exceeds the envelope "
                        f"{max_total:.0f} mm")
    # sizing curves, on the search grid: the SCR swept with the slip catalyst at its size, and
    # the slip catalyst swept with the SCR at its size
    for f_ in ((0.6, 0.8, 1.0, 1.25, 1.6) if want_curves else ()):
        if progress:
            progress(f"sizing curves: x {f_}")
        coarse(L_scr * f_, L_asc)
        if has_asc:
            coarse(L_scr, L_asc * f_)
    curves = _curves(coarse, m, L_scr, L_asc)
    cost = None
    if sz.cost_per_L:
        # keyed by the catalyst each [[brick]] names (a layered file's own key, not a layer's)
        keys = [str(row.get("catalyst")) for row in case.data["brick"]]
        cost = sum(b.volume * 1e3 * sz.cost_per_L.get(k, 0.0)
                   for b, k in zip(train.bricks, keys))
    used = sorted({b.substrate.kind for i, b in enumerate(case.train.bricks)
                   if i in designs.scr or i in designs.asc})
    return SizingResult(case=case, feasible=feasible and res.converged, train=train, run=res,
                        binding=sorted(set(binding)), curves=curves,
                        problems=list(dict.fromkeys(problems)),
                        suggestions=sorted(set(suggestions)), margins=margins,
                        evaluations=len(designs.cache) + len(coarse.cache) + designs.extra,
                        train_solves=designs.solves + coarse.solves,
                        seconds=time.perf_counter() - t0, cost=cost,
                        continuous=_brick_rows(continuous),
                        build_rules=[rules[k].describe() for k in used],
                        objective=objective_note)


def _round_up(designs, continuous: Train, res, rules, nox, margin, has_asc, caps=None):
    """The continuous optimum ``continuous`` (result ``res``) rounded up to buildable lengths,
    then grown one step at a time (the shortest brick of the section whose limits fail) until
    it meets its limits with the margin, or no brick can grow. No brick goes past its longest
    length (:meth:`_Designs.brick_limits`: a pressure-drop bound may cut the buildable range),
    and no step takes a section past its length bound or the train past the envelope
    (``caps``: ``scr``, ``asc`` and ``total`` lengths [m]); where rounding up would, the
    longest bricks of the section are rounded down instead. Returns (train, result)."""
    b = list(continuous.bricks)
    sized = designs.scr + designs.asc
    caps = caps or {}
    section = {i: ("scr", designs.scr) for i in designs.scr}
    section.update({i: ("asc", designs.asc) for i in designs.asc})

    def top(i):                                  # the longest buildable length allowed
        return rules[b[i].substrate.kind].round_down(designs.limits[i][1])

    def fits(i, L) -> bool:                      # brick i at L keeps its section and the train
        name, idx = section[i]
        sec = sum(L if k == i else b[k].length for k in idx)
        tot = sum(L if k == i else x.length for k, x in enumerate(b))
        return sec <= caps.get(name, math.inf) * (1 + 1e-9) and \
            tot <= caps.get("total", math.inf) * (1 + 1e-9)

    for i in sized:
        rule = rules[b[i].substrate.kind]
        b[i] = dataclasses.replace(b[i], length=min(rule.round_up(b[i].length), top(i)))
    for i in sorted(sized, key=lambda k: -b[k].length):      # back within the bounds
        if not fits(i, b[i].length):
            rule = rules[b[i].substrate.kind]
            down = rule.next_down(b[i].length)
            if down >= designs.limits[i][0] - 1e-12:
                b[i] = dataclasses.replace(b[i], length=down)
    if all(x.length == y.length for x, y in zip(b, continuous.bricks)):
        return continuous, res
    like = res
    for _ in range(12):
        train = Train(b)
        res = designs.run(train, like=like)
        like = res
        groups = [(designs.scr, nox)] + ([(designs.asc, ("NH3",))] if has_asc else [])
        failing = [idx for idx, q in groups if _worst(res, q, margin) > _ACCEPT]
        if not failing:
            break
        grown = False
        for idx in failing:
            up = {i: min(rules[b[i].substrate.kind].next_up(b[i].length), top(i))
                  for i in idx}
            can = [i for i in idx if up[i] > b[i].length + 1e-9 and fits(i, up[i])]
            if can:
                i = min(can, key=lambda k: b[k].length)
                b[i] = dataclasses.replace(b[i], length=up[i])
                grown = True
        if not grown:
            break
    return train, res


def _complies(res, margin: float, sz, max_total_mm) -> bool:
    """Every limit with its margin, the back-pressure budget and the length envelope."""
    if not res.converged or _worst(res, ("",), margin) > _ACCEPT:
        return False
    if sz.dp_max_kPa and res.dp_kPa_max > sz.dp_max_kPa:
        return False
    total = sum(b.length for b in res.train.bricks)
    return not (max_total_mm and total > max_total_mm / 1e3 * (1 + 1e-9))


def _least_co2e(designs, coarse, train: Train, res, rules, margin: float, sz,
                max_total_mm, max_moves: int = 12):
    """``[sizing] objective = "CO2e"``: from the smallest buildable train, move catalyst
    between the sized bricks one buildable step at a time (one brick up and another down, or
    one brick down) while the total volume stays within that train's volume x (1 +
    ``volume_allowance_pct``/100) (or one brick up, when the allowance leaves room), every
    limit, the back-pressure budget and the envelope still hold, and the cycle CO2e (CO2 + N2O
    as CO2e) falls; the best move is taken each time. Moves are screened on the coarse search
    grid (``coarse``) and the best one is confirmed on the case's grid before it is taken.
    Returns (train, result, a note of what it did)."""
    V_max = train.volume * (1.0 + sz.volume_allowance_pct / 100.0) * (1 + 1e-9)
    sized = designs.scr + designs.asc
    best, best_res = train, res
    g_start = res.cycle["GHG_CO2e_g_kWh"]
    moves = 0
    like = None                          # a coarse result to warm-start the screening from
    for _ in range(max_moves):
        b = best.bricks

        def stepped(i, up):
            rule = rules[b[i].substrate.kind]
            L = rule.next_up(b[i].length) if up else rule.next_down(b[i].length)
            lo, hi = designs.limits.get(i, (rule.shortest_m, rule.longest_m))
            return L if lo - 1e-12 <= L <= hi + 1e-12 and abs(L - b[i].length) > 1e-9 else None

        cands = []
        for i in sized:
            for up in (True, False):
                Li = stepped(i, up)
                if Li is None:
                    continue
                cands.append({i: Li})
                if up:
                    for j in sized:
                        Lj = stepped(j, False) if j != i else None
                        if Lj is not None:
                            cands.append({i: Li, j: Lj})
        trial = []
        for c in cands:
            t = Train([dataclasses.replace(x, length=c.get(k, x.length))
                       for k, x in enumerate(b)])
            if t.volume <= V_max:
                trial.append(t)
        screened = []
        for t in trial:
            r = coarse.run(coarse.on_grid(t), like=like)
            if r.converged and like is None:
                like = r
            if _complies(r, margin, sz, max_total_mm):
                screened.append((r.cycle["GHG_CO2e_g_kWh"], len(screened), t))
        improved = None
        for _, _, t in sorted(screened)[:3]:          # confirm on the case's grid
            r = designs.run(t, like=best_res)
            if _complies(r, margin, sz, max_total_mm) and \
                    r.cycle["GHG_CO2e_g_kWh"] < best_res.cycle["GHG_CO2e_g_kWh"] - 1e-9:
                improved = (t, r)
                break
        if improved is None:
            break
        best, best_res = improved
        moves += 1
    g_end = best_res.cycle["GHG_CO2e_g_kWh"]
    note = (f"least CO2e within {V_max * 1e3:.0f} L (sizing.objective): {moves} step(s) from "
            f"the smallest train, {g_start:.1f} -> {g_end:.1f} g CO2e/kWh")
    return best, best_res, note


def _failing(res, quantities, margin) -> list[str]:
    out = []
    for r, q in _ratios(res, quantities, margin):
        if q > 1.0:
            where = f" at mode {r.mode}" if r.mode and str(r.mode) not in \
                r.name else ""
            out.append(f"{r.name}{where}: {_design_value(res, r):.3g} {r.unit} against "
                       f"{r.limit * (1.0 - margin):.3g} with the design margin")
    return out


def _suggest(res, quantities, margin, case) -> list[str]:
    """What would change an infeasible answer, by the kind of limit that fails."""
    kinds = {r.quantity.split("_")[0] for r, q in _ratios(res, quantities, margin) if q > 1.0}
    out = []
    if "NOx" in kinds:
        out += ["a more active catalyst or a higher cell density",
                "a larger space envelope (length or diameter)"]
        if case.dosing["method"] == "none":
            out.append("NH3 dosing from the fuel tank where the engine's own NH3 falls short "
                       "of the NOx")
        else:
            cap = np.asarray(case.dosing["ANR"], dtype=float)
            out.append(f"a higher ANR cap ([dosing] ANR, now {float(cap.max()):.2f} at most), "
                       "where NH3 is what the NOx reduction lacks")
    if "NH3" in kinds:
        out += ["a lower ANR, so less NH3 reaches the slip catalyst",
                "a longer slip catalyst or a more active oxidation layer"]
    if kinds & {"N2O", "GHG"}:
        out += ["less NH3 reaching the slip catalyst (lower ANR or lower engine-out NH3)",
                "a slip catalyst more selective to N2, or lower engine-out N2O"]
    return out


def _curves(designs: _Designs, margin: float, L_scr: float, L_asc: float) -> list[dict]:
    """Rows for every design evaluated on the search grid; ``sweep`` says which length varies
    around the answer (``search``: points of the search itself)."""
    rows = []
    for (Ls, La), res in designs.cache.items():
        same_asc = abs(La - L_asc) <= 1e-6 * max(L_asc, 1e-9)
        same_scr = abs(Ls - L_scr) <= 1e-6 * L_scr
        # the sized design itself belongs to both sweeps
        sweeps = [s for s, on in (("SCR", same_asc), ("ASC", same_scr)) if on] or ["search"]
        c = res.cycle
        gov = {}                     # the governing check of each limit group, on its basis
        for g, chk in governing(res.limits).items():
            gov[f"{g}_value"], gov[f"{g}_limit"] = chk.value, chk.limit
        t = designs.train(Ls, La)
        scr_mm = sum(t.bricks[i].length for i in designs.scr) * 1e3
        asc_mm = sum(t.bricks[i].length for i in designs.asc) * 1e3
        rows += [{"sweep": sweep, "SCR_length_mm": scr_mm, "ASC_length_mm": asc_mm,
                  "SCR_volume_L": sum(b.volume for b in t.bricks if b.role == "SCR") * 1e3,
                  "ASC_volume_L": sum(b.volume for b in t.bricks if b.role != "SCR") * 1e3,
                  "total_volume_L": t.volume * 1e3, "NOx_g_kWh": c["NOx_g_kWh"],
                  "NH3_slip_ppmvd_max": c["NH3_slip_ppmvd_max"], "N2O_g_kWh": c["N2O_g_kWh"],
                  "dp_kPa_max": res.dp_kPa_max,
                  "NOx_ratio": _worst(res, ("NOx",), margin),
                  "NH3_ratio": _worst(res, ("NH3",), margin),
                  **gov, "converged": res.converged} for sweep in sweeps]
    return sorted(rows, key=lambda r: (r["SCR_length_mm"], r["ASC_length_mm"]))
