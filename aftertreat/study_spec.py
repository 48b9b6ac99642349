"""The ``[study]`` table of a case: what a study varies, and how a sample changes the case.

A study varies the case through the same dotted paths ``--set`` takes (:func:`aftertreat.case.
apply_set`), plus the parameters of the case's catalysts:

- ``[[study.sweep]]``: a design variable, over a list of ``values`` (numbers or texts, e.g.
  catalyst keys) or a range ``lo``..``hi`` (``points`` levels on a grid);
- ``[[study.uncertain]]``: an uncertain input with a distribution (:mod:`aftertreat.sampling`);
- ``[[study.correlated]]``: parameters drawn together from a multivariate normal (mean vector and
  covariance matrix, e.g. those of a catalyst fit).

Each item names one ``path`` or a list of paths that take the same value (a shared ageing of
several bricks), and ``how`` the value acts: ``set`` (it replaces the case value; ``unit`` is
written after it, for quantities such as lengths), ``scale`` (it multiplies the case value: an
engine-out scale factor) or ``shift`` (it is added: an inlet-temperature shift on
``engine_out.T_C``). A per-mode key can be changed at one ``mode`` only (its position from 0, or
its name in the cycle). Catalyst parameters are ``catalyst.<key>.<reaction>.k_ref`` (rate
constant at T_ref, SI units of its law), ``.ln_k_ref`` (its natural logarithm),
``.E_kJ_mol`` (activation energy) and ``catalyst.<key>.site.<site>.capacity_mol_m3``; ``<key>``
is the key of a plain catalyst of the train (a layer of a layered one counts).

Every item is checked when the case is read: its path is applied at the centre and ends of its
range (the 0.1 % and 99.9 % points of a distribution) and the changed case validated as
``--set`` would, so a path the case does not have, a value out of the key's range, a negative
spread or an unknown distribution is one :class:`~aftertreat.errors.InputError` naming the
item's key.
"""
from __future__ import annotations

import copy
import dataclasses
import hashlib
import json
import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from . import schema
from .checks import choice, number
from .errors import InputError, did_you_mean
from .sampling import DESIGNS, DISTRIBUTIONS, Covariance, Distribution, sobol_layout, unit_rows

__all__ = ["Variable", "CorrelatedBlock", "StudySpec", "parse_study", "apply_inputs",
           "perturb_train", "case_hash", "strip_study", "HOWS", "CATALYST_PARAMS",
           "DEFAULT_SAMPLES", "DEFAULT_SEED", "DEFAULT_POINTS"]

_STUDY = set(schema.keys("study"))
_SWEEP = set(schema.item_keys("study.sweep[]"))
_UNCERTAIN = set(schema.item_keys("study.uncertain[]"))
_CORRELATED = set(schema.item_keys("study.correlated[]"))
#: how a sampled value acts on the case value
HOWS = ("set", "scale", "shift")
#: catalyst parameters a study may vary: reaction parameters, and the site capacity
CATALYST_PARAMS = ("k_ref", "ln_k_ref", "E_kJ_mol", "capacity_mol_m3", "ln_capacity_mol_m3")
#: samples of a study that does not say (a power of 2, so that a Sobol design takes it too)
DEFAULT_SAMPLES = 256
#: the seed of a study that does not say (recorded with every row)
DEFAULT_SEED = 0
#: levels of a ``lo``..``hi`` sweep on a grid when ``points`` is not given
DEFAULT_POINTS = 5
#: the quantiles of a distribution at which its item is checked against the case
_CHECK_Q = (0.001, 0.5, 0.999)


@dataclass(frozen=True)
class Variable:
    """One swept or uncertain input: the paths it changes, how, and where its values come
    from (``values`` or ``lo``..``hi`` for a sweep, ``dist`` for an uncertain input)."""
    key: str                       # where it is declared, e.g. "study.sweep[0]"
    name: str                      # its column in the dataset, without the "x." prefix
    paths: tuple[str, ...]
    how: str = "set"
    mode: int | None = None
    unit: str = ""
    values: tuple | None = None
    lo: float | None = None
    hi: float | None = None
    points: int = DEFAULT_POINTS
    dist: Distribution | None = None
    n_modes: int = 1               # modes of the cycle (a scalar per-mode value at one mode)

    @property
    def is_text(self) -> bool:
        return self.values is not None and any(isinstance(v, str) for v in self.values)

    def levels(self) -> list:
        """The grid levels: ``values``, or ``points`` evenly spaced from lo to hi."""
        if self.values is not None:
            return list(self.values)
        return [float(v) for v in np.linspace(self.lo, self.hi, self.points)]

    def value(self, u: float):
        """The value at the unit-cube coordinate ``u``: F^-1(u) of the distribution, a value
        of the list (the k-th of n for u in [k/n, (k+1)/n)), or lo + u (hi - lo)."""
        if self.dist is not None:
            return float(self.dist.ppf(u))
        if self.values is not None:
            k = min(int(u * len(self.values)), len(self.values) - 1)
            v = self.values[k]
            return v if isinstance(v, str) else float(v)
        return float(self.lo + u * (self.hi - self.lo))

    def check_values(self) -> list:
        """The values this item is checked at when the case is read."""
        if self.dist is not None:
            return [float(self.dist.ppf(q)) for q in _CHECK_Q]
        if self.values is not None:
            return list(self.values)
        return [self.lo, self.hi]


@dataclass(frozen=True)
class CorrelatedBlock:
    """Parameters drawn together from a multivariate normal (``cov``), acting by ``how``."""
    key: str
    cov: Covariance
    how: str = "set"

    @property
    def names(self) -> tuple[str, ...]:
        return self.cov.names


@dataclass(frozen=True)
class StudySpec:
    """The validated ``[study]`` table. ``samples``: Monte Carlo and Latin-hypercube samples,
    the base n of a Sobol design (n (k + 2) runs), or the replicas per grid point of the
    uncertain inputs (1 when there are none)."""
    design: str = "monte_carlo"
    samples: int = DEFAULT_SAMPLES
    seed: int = DEFAULT_SEED
    chunk_size: int | None = None
    sweeps: tuple[Variable, ...] = ()
    uncertain: tuple[Variable, ...] = ()
    correlated: tuple[CorrelatedBlock, ...] = ()
    table: dict = field(default_factory=dict, compare=False)   # as written, for the record

    # ---- layout ------------------------------------------------------------------------
    @property
    def variables(self) -> tuple[Variable, ...]:
        return self.sweeps + self.uncertain

    @property
    def groups(self) -> list[list[int]]:
        """Unit-cube columns of each group: one per variable, one per correlated block."""
        out, col = [], 0
        for _ in self.variables:
            out.append([col])
            col += 1
        for b in self.correlated:
            out.append(list(range(col, col + len(b.names))))
            col += len(b.names)
        return out

    @property
    def group_names(self) -> list[str]:
        """The input column(s) of each group, joined by ' + ' for a correlated block."""
        return [v.name for v in self.variables] + [" + ".join(b.names) for b in self.correlated]

    @property
    def dims(self) -> int:
        return len(self.variables) + sum(len(b.names) for b in self.correlated)

    @property
    def replicas(self) -> int:
        """Samples per grid point (grid designs)."""
        return self.samples if (self.uncertain or self.correlated) else 1

    @property
    def grid_shape(self) -> tuple[int, ...]:
        return tuple(len(v.levels()) for v in self.sweeps)

    @property
    def n_samples(self) -> int:
        """Number of cycle runs of the study."""
        if self.design == "grid":
            return int(np.prod(self.grid_shape, dtype=np.int64)) * self.replicas
        if self.design == "sobol":
            return sobol_layout(self.samples, self.groups)
        return self.samples

    def input_names(self) -> list[str]:
        """Every input column (without the "x." prefix), in dimension order."""
        return [v.name for v in self.variables] + [n for b in self.correlated for n in b.names]

    def text_inputs(self) -> set[str]:
        return {v.name for v in self.variables if v.is_text}

    def inputs(self, indices) -> list[dict]:
        """The inputs of the samples ``indices``: ``{column: value}`` each, from (seed, index)
        alone (:mod:`aftertreat.sampling`)."""
        idx = [int(i) for i in indices]
        out = []
        if self.design == "grid":
            shape, R = self.grid_shape, self.replicas
            levels = [v.levels() for v in self.sweeps]
            nu = self.dims - len(self.sweeps)
            for i in idx:
                cell, r = divmod(i, R)
                at = np.unravel_index(cell, shape) if shape else ()
                row = {v.name: levels[k][at[k]] for k, v in enumerate(self.sweeps)}
                u = unit_rows("monte_carlo", self.seed, [r], nu)[0] if nu else np.empty(0)
                row.update(self._from_unit(u, skip=len(self.sweeps)))
                out.append(row)
            return out
        U = unit_rows(self.design, self.seed, idx, self.dims, n=self.samples,
                      groups=self.groups)
        return [self._from_unit(u) for u in U]

    def _from_unit(self, u, skip: int = 0) -> dict:
        """Values of the variables after the first ``skip`` (and of the correlated blocks) from
        their unit-cube coordinates ``u``."""
        row, col = {}, 0
        for v in self.variables[skip:]:
            row[v.name] = v.value(float(u[col]))
            col += 1
        for b in self.correlated:
            k = len(b.names)
            vals = b.cov.values(u[col:col + k])[0]
            row.update({n: float(x) for n, x in zip(b.names, vals)})
            col += k
        return row

    def actions(self) -> list[tuple]:
        """(column, paths, how, mode, unit, modes of the cycle) for every input column."""
        out = [(v.name, v.paths, v.how, v.mode, v.unit, v.n_modes) for v in self.variables]
        for b in self.correlated:
            out += [(n, (n,), b.how, None, "", 1) for n in b.names]
        return out

    def record(self) -> dict:
        """What defines the samples (compared on --resume): design, samples, seed and the items
        as written (the chunk size changes no value and is left out)."""
        t = {k: v for k, v in self.table.items() if k != "chunk_size"}
        return {"design": self.design, "samples": self.samples, "seed": self.seed,
                "sweep": t.get("sweep", []), "uncertain": t.get("uncertain", []),
                "correlated": t.get("correlated", [])}


# ---- reading the case data ----------------------------------------------------------------
def strip_study(data: dict) -> dict:
    """The case data without its [study] table (what one sample evaluates)."""
    return {k: v for k, v in data.items() if k != "study"}


def _walk(data: dict, path: str):
    """The value at a dotted path (list items by index or ``name``, as ``--set``), or raise
    KeyError."""
    node = data
    for k in [p.strip() for p in path.split(".")]:
        if isinstance(node, list):
            names = [item.get("name") for item in node if isinstance(item, dict)]
            if k.lstrip("-").isdigit() and -len(node) <= int(k) < len(node):
                node = node[int(k)]
            elif k in names:
                node = node[names.index(k)]
            else:
                raise KeyError(k)
        elif isinstance(node, dict) and k in node:
            node = node[k]
        else:
            raise KeyError(k)
    return node


def _toml(v) -> str:
    """``v`` as a TOML value for :func:`aftertreat.case.apply_set`."""
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, (int, float, np.floating, np.integer)):
        return repr(float(v))
    if isinstance(v, str):
        return json.dumps(v)
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_toml(x) for x in v) + "]"
    raise TypeError(v)


def _number_and_unit(v):
    """(number, unit text) of a number or of a quantity text such as "700 mm"; else None."""
    if isinstance(v, (int, float)) and not isinstance(v, bool):
        return float(v), ""
    if isinstance(v, str):
        head, _, unit = v.strip().partition(" ")
        try:
            return float(head), unit.strip()
        except ValueError:
            return None
    return None


def _changed(current, how: str, value, mode: int | None, unit: str):
    """The new case value: ``value`` set, or the current value scaled or shifted (a per-mode
    list at every mode, or at ``mode`` only)."""
    if how == "set":
        new = f"{value:.12g} {unit}" if unit and not isinstance(value, str) else value
        if mode is not None and isinstance(current, list):
            out = list(current)
            out[mode] = new
            return out
        return new

    def one(x):
        nu = _number_and_unit(x)
        if nu is None:
            raise ValueError(x)
        n, u = nu
        n = n * value if how == "scale" else n + value
        return f"{n:.12g} {u}" if u else n
    if isinstance(current, list):
        return [one(x) if mode is None or k == mode else x for k, x in enumerate(current)]
    return one(current)


def _catalyst_target(path: str):
    """(catalyst key, item, parameter) of a ``catalyst.`` path; item is a reaction name or
    ``site.<name>``."""
    parts = path.split(".")
    if len(parts) < 4:
        raise ValueError(path)
    return parts[1], ".".join(parts[2:-1]), parts[-1]


def apply_inputs(data: dict, file: str, actions, row: dict):
    """The case data with one sample's inputs put in, and the catalyst changes
    ``{catalyst key: {(item, parameter): (how, value)}}`` to make on the parsed train."""
    from .case import apply_set
    cat: dict = {}
    for name, paths, how, mode, unit, n_modes in actions:
        value = row[name]
        for path in paths:
            if path.startswith("catalyst."):
                key, item, param = _catalyst_target(path)
                cat.setdefault(key, {})[(item, param)] = (how, value)
                continue
            current = None
            if how != "set" or mode is not None:
                current = _walk(data, path)
                if mode is not None and not isinstance(current, list):
                    current = [current] * n_modes      # one value for every mode, as given
            new = _changed(current, how, value, mode, unit)
            data = apply_set(data, f"{path}={_toml(new)}", file)
    return data, cat


def _perturbed(cat, changes: dict):
    """A copy of the plain catalyst ``cat`` with its parameters changed: ``changes`` maps
    (reaction name or ``site.<name>``, parameter) to (how, value). k_ref and the capacity
    in SI as held; E_kJ_mol in kJ/mol (held as J/mol); ln_k_ref sets k_ref = exp(value)."""
    from .kinetics import Mechanism
    mech = cat.mechanism

    def act(current, how, value):
        return value if how == "set" else current * value if how == "scale" else current + value
    reactions = []
    for r in mech.reactions:
        kw = {}
        for (item, param), (how, value) in changes.items():
            if item != r.name:
                continue
            if param == "k_ref":
                kw["k_ref"] = act(r.law.k_ref, how, value)
            elif param == "ln_k_ref":
                kw["k_ref"] = math.exp(act(math.log(r.law.k_ref), how, value))
            elif param == "E_kJ_mol":
                kw["E"] = act(r.law.E / 1e3, how, value) * 1e3
        reactions.append(dataclasses.replace(r, law=dataclasses.replace(r.law, **kw))
                         if kw else r)
    cap = np.array(mech.capacity, dtype=float)
    for (item, param), (how, value) in changes.items():
        if item.startswith("site.") and param == "capacity_mol_m3":
            s = mech.sites.index(item[5:])
            cap[s] = act(cap[s], how, value)
        elif item.startswith("site.") and param == "ln_capacity_mol_m3":
            s = mech.sites.index(item[5:])
            cap[s] = math.exp(act(math.log(cap[s]), how, value))
    for r in reactions:
        if not (math.isfinite(r.law.k_ref) and r.law.k_ref > 0 and r.law.E >= 0):
            raise InputError(f"reaction '{r.name}': expected k_ref > 0 and E_kJ_mol >= 0, got "
                             f"k_ref = {r.law.k_ref:.6g}, E_kJ_mol = {r.law.E / 1e3:.6g}",
                             key=f"catalyst.{cat.key}", file=cat.file)
    if not np.all(cap > 0):
        raise InputError("expected site capacities > 0", key=f"catalyst.{cat.key}",
                         value=[float(c) for c in cap], file=cat.file)
    new = Mechanism(reactions=reactions, sites=list(mech.sites), capacity=cap)
    return dataclasses.replace(cat, mechanism=new)


def perturb_train(train, changes: dict):
    """``train`` with every catalyst named in ``changes`` replaced by its changed copy (one
    copy per key, shared by the bricks that use it)."""
    if not changes:
        return train
    from .train import Train
    made = {}
    bricks = []
    for b in train.bricks:
        if any(c.key in changes for c in b.catalysts):
            cats = tuple(made.setdefault(c.key, _perturbed(c, changes[c.key]))
                         if c.key in changes else c for c in b.catalysts)
            b = dataclasses.replace(b, catalysts=cats)
        bricks.append(b)
    return Train(bricks)


def case_hash(data: dict, train) -> str:
    """SHA-256 of the case data (without [study], after --set) and of the catalyst files its
    train reads: two studies of one hash evaluate the same case."""
    h = hashlib.sha256(json.dumps(strip_study(data), sort_keys=True, default=str).encode())
    seen = set()
    for b in train.bricks:
        for c in b.catalysts:
            if c.file not in seen:
                seen.add(c.file)
                try:
                    h.update(Path(c.file).read_bytes())
                except OSError:
                    h.update(str(c.file).encode())
    return h.hexdigest()


# ---- parsing [study] ----------------------------------------------------------------------
def _whole(v, key, file, lo, hi) -> int:
    if not isinstance(v, int) or isinstance(v, bool) or not lo <= v <= hi:
        raise InputError(f"expected a whole number within [{lo}, {hi}]", key=key, value=v,
                         file=file)
    return v


def _paths(item, key, file) -> tuple[str, ...]:
    p = item.get("path")
    if p is None:
        raise InputError("missing; expected the dotted path of a case value (as --set takes), "
                         "or a list of them", key=key + ".path", file=file)
    paths = p if isinstance(p, list) else [p]
    if not paths or not all(isinstance(x, str) and x.strip() for x in paths):
        raise InputError("expected a dotted path (text) or a list of them", key=key + ".path",
                         value=p, file=file)
    if any(x.strip().startswith("study") for x in paths):
        raise InputError("a study cannot vary its own [study] table", key=key + ".path",
                         value=p, file=file)
    return tuple(x.strip() for x in paths)


def _common(item, key, file, n_modes, mode_names):
    how = choice(item.get("how", "set"), HOWS, key + ".how", file)
    mode = item.get("mode")
    if mode is not None:
        if isinstance(mode, int) and not isinstance(mode, bool):
            if not 0 <= mode < n_modes:
                raise InputError(f"expected a mode position within [0, {n_modes - 1}] or a "
                                 "mode name: " + ", ".join(mode_names), key=key + ".mode",
                                 value=mode, file=file)
        elif isinstance(mode, str) and mode in mode_names:
            mode = mode_names.index(mode)
        else:
            raise InputError("expected a mode position (from 0) or a mode name: "
                             + ", ".join(mode_names) + did_you_mean(mode, mode_names),
                             key=key + ".mode", value=mode, file=file)
    unit = item.get("unit", "")
    if not isinstance(unit, str):
        raise InputError("expected a unit text, e.g. \"mm\"", key=key + ".unit", value=unit,
                         file=file)
    if unit and how != "set":
        raise InputError("unit is written after a value that is set; a scale factor has no "
                         "unit and a shift takes the unit of the case value",
                         key=key + ".unit", value=unit, file=file)
    return how, mode, unit


def _name(item, key, file, paths, how, mode, unit, mode_names) -> str:
    if "name" in item:
        if not isinstance(item["name"], str) or not item["name"].strip():
            raise InputError("expected a column name (text)", key=key + ".name",
                             value=item["name"], file=file)
        return item["name"].strip()
    name = paths[0] + ({"scale": "_scale", "shift": "_shift"}.get(how, ""))
    if unit:
        name += f"_{unit}"
    if mode is not None:
        name += f" [mode {mode_names[mode]}]"
    return name


def _distribution(item, key, file) -> Distribution:
    kind = item.get("distribution")
    if kind is None:
        raise InputError("missing; expected one of " + ", ".join(DISTRIBUTIONS),
                         key=key + ".distribution", file=file)
    kind = choice(kind, DISTRIBUTIONS, key + ".distribution", file)
    params = []
    for p in DISTRIBUTIONS[kind]:
        if p not in item:
            raise InputError(f"missing; a {kind} distribution takes "
                             + ", ".join(DISTRIBUTIONS[kind]), key=f"{key}.{p}", file=file)
        params.append(number(item[p], f"{key}.{p}", file))
    others = {q for ps in DISTRIBUTIONS.values() for q in ps} - set(DISTRIBUTIONS[kind])
    for q in sorted(others & set(item)):
        raise InputError(f"a {kind} distribution takes " + ", ".join(DISTRIBUTIONS[kind])
                         + f", not {q}", key=f"{key}.{q}", value=item[q], file=file)
    if kind == "normal" and params[1] < 0:
        raise InputError("expected a standard deviation >= 0", key=key + ".sd",
                         value=params[1], file=file)
    if kind == "lognormal":
        if params[0] <= 0:
            raise InputError("expected a median > 0", key=key + ".median", value=params[0],
                             file=file)
        if params[1] < 0:
            raise InputError("expected a sigma (of ln x) >= 0", key=key + ".sigma",
                             value=params[1], file=file)
    if kind == "uniform" and not params[0] < params[1]:
        raise InputError("expected lo < hi", key=key + ".hi", value=params[1], file=file)
    if kind == "triangular" and not (params[0] <= params[1] <= params[2]
                                     and params[0] < params[2]):
        raise InputError("expected lo <= peak <= hi and lo < hi", key=key + ".peak",
                         value=params[1], file=file)
    return Distribution(kind, tuple(params))


def _items(s, name, file) -> list:
    v = s.get(name, [])
    if not isinstance(v, list) or not all(isinstance(x, dict) for x in v):
        raise InputError(f"expected a list of tables ([[study.{name}]])", key=f"study.{name}",
                         value=v, file=file)
    return v


def _sweep(item, i, file, n_modes, mode_names, design) -> Variable:
    key = f"study.sweep[{i}]"
    from .case import _unknown
    _unknown(item, _SWEEP, file, key + ".")
    paths = _paths(item, key, file)
    how, mode, unit = _common(item, key, file, n_modes, mode_names)
    has_values, has_range = "values" in item, ("lo" in item or "hi" in item)
    if has_values == has_range:
        raise InputError("give either values = [...] or lo and hi", key=key, file=file)
    values = lo = hi = None
    points = DEFAULT_POINTS
    if has_values:
        values = item["values"]
        if not isinstance(values, list) or not values or not all(
                isinstance(v, str) or (isinstance(v, (int, float)) and not isinstance(v, bool)
                                       and math.isfinite(v)) for v in values):
            raise InputError("expected a non-empty list of numbers or texts", key=key + ".values",
                             value=values, file=file)
        if any(isinstance(v, str) for v in values) and (
                how != "set" or not all(isinstance(v, str) for v in values)):
            raise InputError("texts are set as they are: give all texts, with how = \"set\"",
                             key=key + ".values", value=values, file=file)
        if "points" in item:
            raise InputError("points belongs to a lo..hi sweep", key=key + ".points",
                             value=item["points"], file=file)
        values = tuple(values)
    else:
        for p in ("lo", "hi"):
            if p not in item:
                raise InputError("missing; a range sweep takes lo and hi", key=f"{key}.{p}",
                                 file=file)
        lo = number(item["lo"], key + ".lo", file)
        hi = number(item["hi"], key + ".hi", file)
        if not lo < hi:
            raise InputError("expected lo < hi", key=key + ".hi", value=hi, file=file)
        if "points" in item:
            points = _whole(item["points"], key + ".points", file, 2, 10000)
            if design != "grid":
                raise InputError("points sets the levels of a grid; other designs sample the "
                                 "range", key=key + ".points", value=points, file=file)
    name = _name(item, key, file, paths, how, mode, unit, mode_names)
    return Variable(key=key, name=name, paths=paths, how=how, mode=mode, unit=unit,
                    values=values, lo=lo, hi=hi, points=points, n_modes=n_modes)


def _uncertain(item, i, file, n_modes, mode_names) -> Variable:
    key = f"study.uncertain[{i}]"
    from .case import _unknown
    _unknown(item, _UNCERTAIN, file, key + ".")
    paths = _paths(item, key, file)
    how, mode, unit = _common(item, key, file, n_modes, mode_names)
    dist = _distribution(item, key, file)
    name = _name(item, key, file, paths, how, mode, unit, mode_names)
    return Variable(key=key, name=name, paths=paths, how=how, mode=mode, unit=unit, dist=dist,
                    n_modes=n_modes)


def _from_fit(item, key: str, file: str, train) -> dict:
    """``from_fit = "<catalyst key>"``: the parameters, mean and covariance of that catalyst's
    ``[fit]`` table (what ``aftertreat fit`` wrote), as study paths: a fitted ``k_ref`` in ln
    coordinates becomes ``.ln_k_ref``, a capacity ``.ln_capacity_mol_m3``; ``parameters``, if
    given, picks some of them (by study path)."""
    ck = item.get("from_fit")
    cats = {c.key: c for b in train.bricks for c in b.catalysts}
    if not isinstance(ck, str) or ck not in cats:
        raise InputError("expected the key of a catalyst of the train; its catalysts: "
                         + ", ".join(sorted(cats)) + did_you_mean(str(ck), cats),
                         key=key + ".from_fit", value=ck, file=file)
    fit = cats[ck].fit
    if not fit:
        raise InputError("this catalyst file has no [fit] table (write one with aftertreat "
                         "fit), so there is no covariance to sample", key=key + ".from_fit",
                         value=ck, file=cats[ck].file)
    if "mean" in item or "covariance" in item:
        raise InputError("give from_fit or mean and covariance, not both", key=key,
                         file=file)
    paths = []
    for label, coord in zip(fit["parameters"], fit["coordinates"]):
        head, param = label.rsplit(": ", 1)
        ln = coord == "ln"
        if head.startswith("site "):
            base = f"catalyst.{ck}.site.{head[5:]}."
            paths.append(base + ("ln_capacity_mol_m3" if ln else param))
        elif param in ("k_ref", "E_kJ_mol"):
            paths.append(f"catalyst.{ck}.{head}." + ("ln_k_ref" if ln and param == "k_ref"
                                                     else param))
        else:
            paths.append(None)                   # a fitted parameter a study cannot vary
    mean = np.asarray(fit["mean"], dtype=float)
    C = np.asarray(fit["covariance"], dtype=float)
    want = item.get("parameters")
    if want is None:
        keep = [j for j, p in enumerate(paths) if p is not None]
    else:
        if not isinstance(want, list) or not all(w in paths for w in want):
            raise InputError("expected study paths of the catalyst's fitted parameters: "
                             + ", ".join(p for p in paths if p), key=key + ".parameters",
                             value=want, file=file)
        keep = [paths.index(w) for w in want]
    return {"parameters": [paths[j] for j in keep], "mean": [float(mean[j]) for j in keep],
            "covariance": [[float(C[a, b]) for b in keep] for a in keep],
            "how": item.get("how", "set")}


def _correlated(item, i, file, train=None) -> CorrelatedBlock:
    key = f"study.correlated[{i}]"
    from .case import _unknown
    _unknown(item, _CORRELATED, file, key + ".")
    if isinstance(item, dict) and "from_fit" in item:
        item = _from_fit(item, key, file, train)
    names = item.get("parameters")
    if not isinstance(names, list) or not names or not all(
            isinstance(n, str) and n.startswith("catalyst.") for n in names) \
            or len(set(names)) != len(names):
        raise InputError("expected a list of distinct catalyst parameter paths "
                         "(catalyst.<key>.<reaction>.<parameter>)", key=key + ".parameters",
                         value=names, file=file)
    k = len(names)
    mean = item.get("mean")
    if not isinstance(mean, list) or len(mean) != k:
        raise InputError(f"expected a list of {k} numbers (one per parameter)", key=key + ".mean",
                         value=mean, file=file)
    mean = [number(m, key + ".mean", file) for m in mean]
    C = item.get("covariance")
    if not isinstance(C, list) or len(C) != k or not all(
            isinstance(r, list) and len(r) == k for r in C):
        raise InputError(f"expected a {k} x {k} matrix (a list of {k} lists of {k} numbers)",
                         key=key + ".covariance", value=C, file=file)
    M = np.array([[number(x, key + ".covariance", file) for x in r] for r in C])
    if not np.allclose(M, M.T, rtol=1e-9, atol=1e-300):
        raise InputError("expected a symmetric matrix", key=key + ".covariance", value=C,
                         file=file)
    w = np.linalg.eigvalsh(M)
    if w.min() < -1e-9 * max(abs(w.max()), 1e-300):
        raise InputError("expected a positive semi-definite covariance (a negative variance "
                         f"direction: eigenvalue {w.min():.3g})", key=key + ".covariance",
                         value=C, file=file)
    how = choice(item.get("how", "set"), HOWS, key + ".how", file)
    cov = Covariance(tuple(names), tuple(mean), tuple(tuple(float(x) for x in r) for r in M))
    return CorrelatedBlock(key=key, cov=cov, how=how)


def _check_catalyst_path(path, how, train, key, file) -> None:
    try:
        ck, item, param = _catalyst_target(path)
    except ValueError:
        raise InputError("expected catalyst.<key>.<reaction>.<parameter> or "
                         "catalyst.<key>.site.<site>.capacity_mol_m3", key=key + ".path",
                         value=path, file=file) from None
    cats = {c.key: c for b in train.bricks for c in b.catalysts}
    if ck not in cats:
        raise InputError("no catalyst of the train has this key; its catalysts: "
                         + ", ".join(sorted(cats)) + did_you_mean(ck, cats), key=key + ".path",
                         value=path, file=file)
    mech = cats[ck].mechanism
    if item.startswith("site."):
        if item[5:] not in mech.sites or param not in ("capacity_mol_m3", "ln_capacity_mol_m3"):
            raise InputError("expected catalyst.<key>.site.<site>.capacity_mol_m3 (or "
                             "ln_capacity_mol_m3) with a site "
                             "of the catalyst: " + ", ".join(mech.sites), key=key + ".path",
                             value=path, file=file)
        return
    names = [r.name for r in mech.reactions]
    if item not in names:
        raise InputError("no reaction of that name in the catalyst; its reactions: "
                         + ", ".join(names) + did_you_mean(item, names), key=key + ".path",
                         value=path, file=file)
    if param not in CATALYST_PARAMS[:3]:
        raise InputError("expected one of " + ", ".join(CATALYST_PARAMS[:3]) + " for a reaction"
                         + did_you_mean(param, CATALYST_PARAMS), key=key + ".path", value=path,
                         file=file)


def _check_against_case(data, file, actions, base_train, where: dict) -> None:
    """Apply each input at its check values and validate the changed case (as --set would),
    turning a refusal into one error naming the study item."""
    from .cyclecase import parse_run_case
    base = strip_study(data)
    method = (base.get("dosing") or {}).get("method", "none")
    for name, paths, how, mode, unit, n_modes, values in actions:
        key = where[name]
        for path in paths:
            if path == "dosing.ANR" and method == "none" and not any(
                    "dosing.method" in a[1] for a in actions):
                # the case would accept it and every sample would be the same: a study input
                # that changes nothing is a mistake to say, not to run
                raise InputError("the ANR has no effect while dosing.method is \"none\" (the "
                                 "engine's own NH3 is the only reductant): set dosing.method to "
                                 "\"NH3\" or \"urea\", or vary something else",
                                 key=key + ".path", value=path, file=file)
            if path.startswith("catalyst."):
                _check_catalyst_path(path, how, base_train, key, file)
            elif how != "set" or mode is not None:
                try:
                    cur = _walk(base, path)
                except KeyError:
                    raise InputError("the case has no value at this path to "
                                     + ("change at one mode" if how == "set" else how),
                                     key=key + ".path", value=path, file=file) from None
                nums = cur if isinstance(cur, list) else [cur]
                if not nums or any(_number_and_unit(x) is None for x in nums):
                    raise InputError(f"{how} needs a number, a quantity or a per-mode list at "
                                     "the path", key=key + ".path", value=path, file=file)
        for v in values:
            row = {name: v}
            try:
                changed, cat = apply_inputs(base, file, [(name, paths, how, mode, unit, n_modes)],
                                            row)
                case = parse_run_case(changed, file)
                if cat:
                    perturb_train(case.train, cat)
            except InputError as exc:
                what = "" if isinstance(v, str) else f" (at {v:.6g})"
                raise InputError(f"the case refuses this input{what}: {exc}",
                                 key=key + ".path", value=paths[0] if len(paths) == 1
                                 else list(paths), file=file) from None
            except (KeyError, ValueError, TypeError) as exc:
                raise InputError(f"cannot apply this input ({exc!r})", key=key + ".path",
                                 value=list(paths), file=file) from None


def parse_study(data: dict, file: str, n_modes: int, mode_names: list[str],
                train) -> StudySpec:
    """Validate the ``[study]`` table of case ``data`` (read with the rest of the case)."""
    s = data.get("study")
    if not isinstance(s, dict):
        raise InputError("expected a [study] table", key="study", value=s, file=file)
    from .case import _unknown
    _unknown(s, _STUDY, file, "study.")
    design = choice(s.get("design", "monte_carlo"), DESIGNS, "study.design", file)
    samples = _whole(s.get("samples", DEFAULT_SAMPLES), "study.samples", file, 1, 10_000_000)
    if design == "sobol" and samples & (samples - 1):
        raise InputError("a Sobol design takes a power of 2 (its base n; the study runs "
                         "n (k + 2) samples for k inputs)", key="study.samples", value=samples,
                         file=file)
    seed = _whole(s.get("seed", DEFAULT_SEED), "study.seed", file, 0, 2 ** 63 - 1)
    chunk = None
    if "chunk_size" in s:
        chunk = _whole(s["chunk_size"], "study.chunk_size", file, 1, 100_000)
    sweeps = tuple(_sweep(x, i, file, n_modes, mode_names, design)
                   for i, x in enumerate(_items(s, "sweep", file)))
    unc = tuple(_uncertain(x, i, file, n_modes, mode_names)
                for i, x in enumerate(_items(s, "uncertain", file)))
    cor = tuple(_correlated(x, i, file, train)
                for i, x in enumerate(_items(s, "correlated", file)))
    spec = StudySpec(design=design, samples=samples, seed=seed, chunk_size=chunk, sweeps=sweeps,
                     uncertain=unc, correlated=cor, table=copy.deepcopy(s))
    names = spec.input_names()
    dup = sorted({n for n in names if names.count(n) > 1})
    if dup:
        raise InputError("two study inputs share a column name: give each a distinct name",
                         key="study", value=dup[0], file=file)
    where = {v.name: v.key for v in spec.variables}
    where.update({n: b.key for b in cor for n in b.names})
    acts = [(v.name, v.paths, v.how, v.mode, v.unit, v.n_modes, v.check_values())
            for v in spec.variables]
    for b in cor:
        cen = np.asarray(b.cov.mean)
        sd = np.sqrt(np.clip(np.diag(np.array(b.cov.matrix)), 0.0, None))
        for k, n in enumerate(b.names):
            acts.append((n, (n,), b.how, None, "", 1,      # the 0.1 %, 50 % and 99.9 % points
                         [float(cen[k] - 3.09 * sd[k]), float(cen[k]),
                          float(cen[k] + 3.09 * sd[k])]))
    _check_against_case(data, file, acts, train, where)
    return spec
