"""Kinetic calibration: fit chosen catalyst parameters to lab-reactor data (``aftertreat fit``).

The spec (:mod:`aftertreat.labdata`, reference in docs/fitting.md) names the catalyst, the bench
reactor (:mod:`aftertreat.bench`), the experiments and the ``[[parameter]]`` entries to fit::

    [[parameter]]
    reaction = "standard SCR"     # or site = "S1"
    key = "k_ref"                 # k_ref, A, E_kJ_mol, alpha, theta_star; capacity_mol_m3 of a
    min = 10.0                    # site; orders.<species> only when asked for by name
    max = 1e5

Method. Weighted least squares: minimise chi2 = sum_j ((y_model,j - y_j) / sigma_j)^2 over every
measured value of every experiment, sigma_j = abs_ppm + rel |y_j| (the spec's one standard
deviation), with scipy ``least_squares`` (trust-region reflective within the bounds; Branch,
Coleman & Li, SIAM J. Sci. Comput. 21 (1999) 1). Positive scale parameters (k_ref, A, capacity)
are fitted as their logarithm, and a fitted rate constant is re-referenced to the middle of the
data (T_ref = the mean of 1/T over the experiments' rows), where it is least correlated with its
activation energy; the new catalyst file keeps that T_ref. ``multistart = n`` starts from n
Latin-hypercube points within the bounds as well (seeded) and keeps the best.

Uncertainty (Bates & Watts, "Nonlinear Regression Analysis and Its Applications", Wiley 1988,
ch. 2): the covariance of the fitted coordinates is (J^T J)^-1 with J the Jacobian of the
weighted residuals (the stated sigmas taken as true, "absolute sigma"); standard errors are its
diagonal's roots and 95 % intervals +-1.96 standard errors, mapped back through exp for log
coordinates. The reduced chi2 (chi2 / (n - p)) is reported; far from 1 it says the stated sigmas
do not match the scatter. Linearity is checked at each interval's ends along the parameter's
conditional direction (the others moved as the covariance says): where chi2 there rises by less
than 1.92 or more than 7.68 instead of 3.84, the interval is recomputed as the points along that
direction where chi2 rises by 3.84 (a profile along the linearised valley, root-found) and
flagged. Identifiability: a pair with |correlation| > 0.95, or a near-singular direction of the
column-scaled Jacobian (singular-value ratio below 1e-4), is warned about by name. A parameter
the data barely move (|J_i| (hi - lo) <= 4) is "not pinned": its interval is its bounds.

Published behaviour (experiments of kind ``published``, :mod:`aftertreat.published`): one-sided
statements enter as hinges, so the fit ends on an edge; the intervals are then the range of
each parameter, the others held at the fit, over which chi2 rises by less than 3.84 (open to a
bound where nothing stops it), and the stored covariance is diagonal from those intervals
(docs/fitting.md).
"""
from __future__ import annotations

import copy
import dataclasses
import datetime
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .bench import BenchReactor, parse_reactor, predict
from .case import _unknown, read_toml
from .catalyst import Catalyst, load_catalyst, parse_catalyst
from .checks import number
from .errors import InputError, did_you_mean
from .labdata import Experiment, read_experiment, sha256_of
from .published import predict_published, read_published
from .units import ZERO_C_K

__all__ = ["FitSpec", "FitParameter", "FitResult", "load_fit_spec", "fit"]

_SPEC_KEYS = {"title", "catalyst", "output", "reactor", "experiment", "parameter", "multistart",
              "seed"}
_PARAM_KEYS = {"reaction", "site", "key", "min", "max"}
#: fittable keys of a reaction and whether they are fitted as a logarithm
REACTION_KEYS = {"k_ref": True, "A": True, "E_kJ_mol": False, "alpha": False,
                 "theta_star": False}
SITE_KEYS = {"capacity_mol_m3": True}
Z95 = 1.959963984540054          # two-sided 95 % point of the standard normal
CORRELATION_WARN = 0.95
SINGULAR_WARN = 1e-4
#: a parameter is pinned by the data when its weighted residuals alone would give a +-2 sigma
#: range narrower than its bounds: |J_i| (hi - lo) > 4 (J_i its Jacobian column, in the fitted
#: coordinate); otherwise the bounds, not the data, hold it
UNPINNED = 4.0


@dataclass
class FitParameter:
    """One fitted parameter: where it sits in the catalyst file, its bounds and coordinate."""
    label: str                      # "standard SCR: k_ref"
    reaction: str | None
    site: str | None
    key: str                        # "k_ref", "E_kJ_mol", "capacity_mol_m3", "orders.NO" ...
    lo: float
    hi: float
    log: bool

    def to_x(self, v: float) -> float:
        return float(np.log(v)) if self.log else float(v)

    def from_x(self, x: float) -> float:
        return float(np.exp(x)) if self.log else float(x)


@dataclass
class FitSpec:
    """A validated fit spec."""
    file: str
    title: str
    catalyst: Catalyst
    catalyst_data: dict              # the catalyst file's TOML, as read
    reactor: BenchReactor
    experiments: list[Experiment]
    parameters: list[FitParameter]
    output: Path
    multistart: int = 0
    seed: int = 1
    T_mid_K: float = 0.0


def _find(items: list, name: str, what: str, key: str, file: str) -> int:
    names = [str(it.get("name", "")) for it in items]
    if name not in names:
        raise InputError(f"no {what} of that name in the catalyst; it has: " + ", ".join(names)
                         + did_you_mean(name, names), key=key, value=name, file=file)
    return names.index(name)


def _parameter(spec, i: int, cat_data: dict, file: str) -> FitParameter:
    pre = f"parameter[{i}]"
    if not isinstance(spec, dict):
        raise InputError("expected a [[parameter]] table", key=pre, file=file)
    _unknown(spec, _PARAM_KEYS, file, f"{pre}.")
    key = spec.get("key")
    rx, site = spec.get("reaction"), spec.get("site")
    if (rx is None) == (site is None):
        raise InputError("give reaction = \"<name>\" or site = \"<name>\"", key=pre, file=file)
    if rx is not None:
        j = _find(cat_data.get("reaction", []), str(rx), "reaction", f"{pre}.reaction", file)
        table = cat_data["reaction"][j]
        if isinstance(key, str) and key.startswith("orders."):
            sp = key.split(".", 1)[1]
            if sp not in table.get("orders", {}):
                raise InputError(f"the reaction has no order in {sp}; orders: "
                                 + ", ".join(table.get("orders", {})), key=f"{pre}.key",
                                 value=key, file=file)
            log = False
        elif key in REACTION_KEYS:
            if key not in table:
                raise InputError(f"the reaction '{rx}' does not use {key}; it has: " + ", ".join(
                    k for k in table if k in REACTION_KEYS), key=f"{pre}.key", value=key,
                    file=file)
            log = REACTION_KEYS[key]
        else:
            raise InputError("expected one of " + ", ".join(REACTION_KEYS) + " or orders.<species>"
                             + did_you_mean(str(key), REACTION_KEYS), key=f"{pre}.key",
                             value=key, file=file)
        label = f"{rx}: {key}"
    else:
        _find(cat_data.get("site", []), str(site), "site", f"{pre}.site", file)
        if key not in SITE_KEYS:
            raise InputError("expected one of " + ", ".join(SITE_KEYS), key=f"{pre}.key",
                             value=key, file=file)
        log, label = True, f"site {site}: {key}"
    lo = number(spec.get("min"), f"{pre}.min", file)
    hi = number(spec.get("max"), f"{pre}.max", file)
    if not lo < hi or (log and lo <= 0):
        raise InputError("expected min < max" + (" and min > 0 (fitted as a logarithm)" if log
                                                 else ""), key=f"{pre}.min", value=lo, file=file)
    return FitParameter(label=label, reaction=None if rx is None else str(rx),
                        site=None if site is None else str(site), key=str(key), lo=lo, hi=hi,
                        log=log)


def load_fit_spec(path: str | Path, output: str | Path | None = None) -> FitSpec:
    """Read and validate a fit spec and its data (every error names file, key or row)."""
    path = Path(path)
    file = str(path)
    data = read_toml(path)
    base = path.resolve().parent
    _unknown(data, _SPEC_KEYS, file, "")
    ck = data.get("catalyst")
    if not isinstance(ck, str):
        raise InputError("expected the key or file of the catalyst to calibrate",
                         key="catalyst", value=ck, file=file)
    try:
        cat = load_catalyst(ck, base=base)
    except InputError as exc:
        if exc.file:
            raise
        raise InputError(exc.expected, key="catalyst", value=ck, file=file) from None
    if not isinstance(cat, Catalyst):
        raise InputError("expected a single-layer catalyst file (fit each layer on its own)",
                         key="catalyst", value=ck, file=file)
    cat_data = read_toml(cat.file)
    reactor = (parse_reactor(data.get("reactor"), file, cat) if "reactor" in data
               or not all(isinstance(e, dict) and e.get("kind") == "published"
                          for e in data.get("experiment") or [{}]) else None)
    exps = data.get("experiment")
    if not isinstance(exps, list) or not exps:
        raise InputError("expected at least one [[experiment]]", key="experiment", file=file)
    experiments = [read_published(e, i, base, file, cat, reactor)
                   if isinstance(e, dict) and e.get("kind") == "published"
                   else read_experiment(e, i, base, file, cat.valid_T) for i, e in enumerate(exps)]
    if reactor is None:                      # every experiment brings its own test conditions
        reactor = experiments[0].reactor
    pars = data.get("parameter")
    if not isinstance(pars, list) or not pars:
        raise InputError("expected at least one [[parameter]] to fit", key="parameter",
                         file=file)
    parameters = [_parameter(p, i, cat_data, file) for i, p in enumerate(pars)]
    labels = [p.label for p in parameters]
    dup = [x for x in labels if labels.count(x) > 1]
    if dup:
        raise InputError("the same parameter is listed twice", key="parameter", value=dup[0],
                         file=file)
    out = output if output is not None else data.get("output")
    if not isinstance(out, (str, Path)) or not str(out).endswith(".toml"):
        raise InputError("expected the name of the new catalyst file (.toml), e.g. output = "
                         f"\"{Path(cat.file).stem}_fitted.toml\"", key="output", value=out,
                         file=file)
    out = Path(out) if Path(out).is_absolute() else base / out
    if out.exists():
        raise InputError("the new catalyst file exists already: it is never overwritten; give "
                         "another name", key="output", value=str(out), file=file)
    ms = data.get("multistart", 0)
    if not isinstance(ms, int) or isinstance(ms, bool) or not 0 <= ms <= 200:
        raise InputError("expected a whole number of extra starts in 0..200", key="multistart",
                         value=ms, file=file)
    seed = data.get("seed", 1)
    if not isinstance(seed, int) or isinstance(seed, bool):
        raise InputError("expected a whole number", key="seed", value=seed, file=file)
    inv_T = np.concatenate([1.0 / e.T_K for e in experiments])
    return FitSpec(file=file, title=str(data.get("title", path.stem)), catalyst=cat,
                   catalyst_data=cat_data, reactor=reactor, experiments=experiments,
                   parameters=parameters, output=out, multistart=ms, seed=seed,
                   T_mid_K=float(1.0 / inv_T.mean()))


# ---------------------------------------------------------------------------------------------
# the model as a function of the fitted coordinates
# ---------------------------------------------------------------------------------------------
def _rereferenced(spec: FitSpec) -> dict:
    """The catalyst data with every reaction whose k_ref is fitted re-referenced to T_mid
    (k_ref(T_mid) = k_ref exp(-E/R (1/T_mid - 1/T_ref)), the same rate constant)."""
    from .units import R_GAS
    data = copy.deepcopy(spec.catalyst_data)
    for p in spec.parameters:
        if p.reaction is not None and p.key == "k_ref":
            t = data["reaction"][_index(data, p.reaction)]
            E = float(t.get("E_kJ_mol", 0.0)) * 1e3
            T_ref = float(t.get("T_ref_C", 0.0)) + ZERO_C_K
            t["k_ref"] = float(t["k_ref"]) * float(np.exp(-E / R_GAS * (1.0 / spec.T_mid_K
                                                                         - 1.0 / T_ref)))
            t["T_ref_C"] = spec.T_mid_K - ZERO_C_K
    return data


def _index(data: dict, reaction: str) -> int:
    return [str(r.get("name", "")) for r in data["reaction"]].index(reaction)


def _get(table: dict, key: str):
    if key.startswith("orders."):
        return table["orders"][key.split(".", 1)[1]]
    return table[key]


def _set(table: dict, key: str, v: float) -> None:
    if key.startswith("orders."):
        table["orders"][key.split(".", 1)[1]] = v
    else:
        table[key] = v


def _with_values(data: dict, parameters: list[FitParameter], values) -> dict:
    """A copy of the catalyst ``data`` with each parameter set to its value."""
    data = copy.deepcopy(data)
    for p, v in zip(parameters, values):
        _set(_table(data, p), p.key, float(v))
    return data


def _reactor_with(spec: FitSpec, data: dict) -> BenchReactor:
    """The spec's bench reactor with the catalyst of ``data`` in its sample."""
    cat = parse_catalyst(data, key=spec.catalyst.key, file=spec.catalyst.file)
    return spec.reactor.with_catalyst(cat)


def _table(data: dict, p: FitParameter) -> dict:
    if p.reaction is not None:
        return data["reaction"][_index(data, p.reaction)]
    return data["site"][[str(s.get("name", "")) for s in data["site"]].index(p.site)]


class _Model:
    """Weighted residuals of every experiment at fitted coordinates x (counts model solves).

    With T_ref moved and a fitted E, ``k_ref`` at T_mid does not move when E does: the two
    coordinates are nearly orthogonal (module docstring)."""

    def __init__(self, spec: FitSpec):
        self.spec = spec
        self.base = _rereferenced(spec)
        self.solves = 0
        self.calls = 0
        self.y = np.concatenate([e.measured[sp] for e in spec.experiments for sp in e.measured])
        self.sigma = np.concatenate([e.sigma[sp] for e in spec.experiments
                                     for sp in e.measured])
        self.converged = True

    def data_at(self, x) -> dict:
        return _with_values(self.base, self.spec.parameters,
                            [p.from_x(xi) for p, xi in zip(self.spec.parameters, x)])

    def x0(self) -> np.ndarray:
        return np.array([p.to_x(float(_get(_table(self.base, p), p.key)))
                         for p in self.spec.parameters])

    def predict(self, x) -> list[dict]:
        reactor = _reactor_with(self.spec, self.data_at(x))
        out, ok = [], True
        cat = reactor.brick.catalysts[0]
        self.raw = []
        for e in self.spec.experiments:
            pr = (predict_published(lambda r: r.with_catalyst(cat), e) if e.kind == "published"
                  else predict(reactor, e))
            self.solves += pr.solves
            ok &= pr.converged
            out.append(pr.outlet_ppm)
            self.raw.append(getattr(pr, "raw", None))
        self.converged = ok
        return out

    def residuals(self, x) -> np.ndarray:
        self.calls += 1
        pred = self.predict(x)
        m = np.concatenate([pr[sp] for pr, e in zip(pred, self.spec.experiments)
                            for sp in e.measured])
        r = (m - self.y) / self.sigma
        return np.where(np.isfinite(r), r, 1e6)        # a failed solve is a very bad fit


# ---------------------------------------------------------------------------------------------
# results
# ---------------------------------------------------------------------------------------------
@dataclass
class FittedParameter:
    """A fitted value with its standard error (in the fitted coordinate) and 95 % interval."""
    label: str
    value: float
    start: float
    x: float
    se_x: float
    lo95: float
    hi95: float
    log: bool
    at_bound: bool = False
    profiled: bool = False           # interval from the profile (strongly non-linear)
    pinned: bool = True              # False: no active residual depends on it (bounds shown)

    def to_dict(self) -> dict:
        return {"parameter": self.label, "value": self.value, "start": self.start,
                "se_fitted_coordinate": self.se_x, "coordinate": "ln" if self.log else "linear",
                "ci95_low": self.lo95, "ci95_high": self.hi95, "at_bound": self.at_bound,
                "interval_from_profile": self.profiled, "pinned_by_data": self.pinned}


@dataclass
class ExperimentFit:
    """Goodness of fit of one experiment."""
    name: str
    kind: str
    n_points: int
    chi2: float
    rms_ppm: float
    measured: dict
    fitted: dict
    T_K: np.ndarray
    time_s: np.ndarray | None
    targets: list | None = None      # kind "published": the targets and the model's values
    model: np.ndarray | None = None

    def to_dict(self) -> dict:
        d = {"experiment": self.name, "kind": self.kind, "points": self.n_points,
             "chi2": self.chi2, "chi2_per_point": self.chi2 / max(self.n_points, 1),
             "rms_residual_ppm": self.rms_ppm if self.targets is None else None}
        if self.targets is not None:
            d["targets"] = [{"quantity": t.quantity, "T_C": t.T_K - ZERO_C_K if t.site is None
                             else None, "site": t.site, "sense": t.sense, "value": t.value,
                             "sigma": t.sigma, "model": float(m), "holds": _holds(t, m),
                             "reading": t.reading} for t, m in zip(self.targets, self.model)]
        return d


def _holds(t, m: float) -> bool:
    """Whether the model's value ``m`` meets target ``t``: within 2 sigma for "=", within
    0.1 sigma of the bound for a one-sided target (a hinge fit ends on the bound it holds)."""
    if t.sense == ">=":
        return bool(m >= t.value - 0.1 * t.sigma)
    if t.sense == "<=":
        return bool(m <= t.value + 0.1 * t.sigma)
    return bool(abs(m - t.value) <= 2.0 * t.sigma)


@dataclass
class FitResult:
    """The outcome of :func:`fit`."""
    spec: FitSpec
    parameters: list[FittedParameter]
    covariance: np.ndarray           # of the fitted coordinates
    correlation: np.ndarray
    chi2: float
    dof: int
    experiments: list[ExperimentFit]
    warnings: list[str]
    solves: int
    evaluations: int
    seconds: float
    converged: bool
    fitted_data: dict = field(default_factory=dict)
    one_sided: bool = False          # intervals conditional, covariance diagonal (see fit)

    @property
    def reduced_chi2(self) -> float:
        return self.chi2 / self.dof if self.dof > 0 else float("nan")

    def to_json(self) -> dict:
        return {"schema": "aftertreat.fit/1", "spec": self.spec.file, "title": self.spec.title,
                "catalyst": self.spec.catalyst.key, "output": str(self.spec.output),
                "T_ref_C": self.spec.T_mid_K - ZERO_C_K,
                "parameters": [p.to_dict() for p in self.parameters],
                "correlation": self.correlation.tolist(),
                "covariance_fitted_coordinates": self.covariance.tolist(),
                "chi2": self.chi2, "dof": self.dof, "reduced_chi2": self.reduced_chi2,
                "experiments": [e.to_dict() for e in self.experiments],
                "warnings": self.warnings, "model_solves": self.solves,
                "residual_evaluations": self.evaluations, "seconds": self.seconds,
                "converged": self.converged}


def _covariance(J: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(J^T J)^-1 by SVD (pseudo-inverse on a singular direction), and the singular values of
    the column-scaled J (for the identifiability check)."""
    U, s, Vt = np.linalg.svd(J, full_matrices=False)
    keep = s > s.max() * 1e-12 if s.size else s
    inv = np.where(keep, 1.0 / np.where(keep, s, 1.0) ** 2, 0.0)
    cov = (Vt.T * inv) @ Vt
    scale = np.linalg.norm(J, axis=0)
    scale[scale == 0] = 1.0
    s_scaled = np.linalg.svd(J / scale, compute_uv=False)
    return cov, s_scaled


def fit(spec: FitSpec, *, progress=None) -> FitResult:
    """Fit ``spec``'s parameters (module docstring). ``progress(text)`` after each residual
    evaluation."""
    from scipy.optimize import least_squares
    t0 = time.perf_counter()
    model = _Model(spec)
    pars = spec.parameters
    lo = np.array([p.to_x(p.lo) for p in pars])
    hi = np.array([p.to_x(p.hi) for p in pars])
    x_start = np.clip(model.x0(), lo, hi)

    def fun(x):
        r = model.residuals(x)
        if progress is not None:
            progress(f"{model.calls} evaluations, {model.solves} model solves, "
                     f"chi2 {float(r @ r):.4g}")
        return r

    starts = [x_start]
    if spec.multistart:
        from scipy.stats import qmc
        u = qmc.LatinHypercube(d=len(pars), seed=spec.seed).random(spec.multistart)
        starts += list(lo + u * (hi - lo))
    best = None
    for x0 in starts:
        res = least_squares(fun, x0, bounds=(lo, hi), method="trf", x_scale="jac",
                            diff_step=1e-4, xtol=1e-8, ftol=1e-8, gtol=1e-8, max_nfev=200)
        if best is None or res.cost < best.cost:
            best = res
    x = best.x
    r = fun(x)
    converged = bool(model.converged and best.status > 0)
    chi2 = float(r @ r)
    n, k = r.size, len(pars)
    dof = n - k
    # a parameter no active residual depends on (a statement only bounds it, or it enters no
    # target) is not pinned: its "interval" is its bounds, its stored variance that of a
    # uniform over them (so a study samples the whole allowed range), its correlations zero
    col = np.linalg.norm(best.jac, axis=0)
    pinned = col * (hi - lo) > UNPINNED
    cov = np.zeros((k, k))
    s_scaled = np.array([])
    if pinned.any():
        sub, s_scaled = _covariance(best.jac[:, pinned])
        cov[np.ix_(pinned, pinned)] = sub
    for i in np.flatnonzero(~pinned):
        cov[i, i] = (hi[i] - lo[i]) ** 2 / 12.0
    se = np.sqrt(np.maximum(np.diag(cov), 0.0))
    with np.errstate(invalid="ignore", divide="ignore"):
        corr = cov / np.outer(se, se)
    corr = np.where(np.isfinite(corr), corr, 0.0)
    np.fill_diagonal(corr, 1.0)
    warnings = []
    fitted = []
    # one-sided published statements make chi2 a hinge: the fit ends on a corner and neither
    # the covariance nor the valley profile means much; the intervals are then the range of
    # each parameter, the others held, over which chi2 rises by less than 3.84
    one_sided = any(e.kind == "published" and any(t.sense != "=" for t in e.targets)
                    for e in spec.experiments)
    if one_sided:
        warnings.append("one-sided published statements: each 95 % interval is the range of "
                        "that parameter with the others held at the fit (conditional, narrower "
                        "than a joint interval); the covariance is the local curvature only")
    for i, p in enumerate(pars):
        at_b = bool(np.isclose(x[i], lo[i], atol=1e-9 * (1 + abs(lo[i])))
                    or np.isclose(x[i], hi[i], atol=1e-9 * (1 + abs(hi[i]))))
        a, b, prof = x[i] - Z95 * se[i], x[i] + Z95 * se[i], False
        if one_sided:
            # a hinge fit ends on an edge, where the Jacobian of a one-sided step may be 0:
            # pinned is then whether the statements stop the parameter short of a bound
            a, b = _axis_interval(model, x, i, chi2, lo, hi)
            pinned[i] = a > lo[i] or b < hi[i]
        elif not pinned[i]:
            a, b = lo[i], hi[i]
        elif se[i] > 0 and np.isfinite(se[i]):
            a, b, prof = _check_linearity(model, x, cov, i, chi2, a, b)
        a, b = max(a, lo[i]), min(b, hi[i])
        fitted.append(FittedParameter(label=p.label, value=p.from_x(x[i]),
                                      start=p.from_x(x_start[i]), x=float(x[i]),
                                      se_x=float(se[i]), lo95=p.from_x(a), hi95=p.from_x(b),
                                      log=p.log, at_bound=at_b, profiled=prof,
                                      pinned=bool(pinned[i])))
        if not pinned[i]:
            warnings.append(f"{p.label} is not pinned by the data (the data barely move it, "
                            "or one-sided statements only bound it): its value is where the fit "
                            "left it, meeting the statements, and its interval is its bounds")
        elif at_b:
            warnings.append(f"{p.label} ended on its bound ({p.from_x(x[i]):.4g}): widen the "
                            "bounds or fix it; its interval is not meaningful")
        if prof:
            warnings.append(f"{p.label}: chi2 is far from quadratic over the interval; the "
                            "95 % interval is from the profile along its valley")
    if one_sided:
        # what a study samples: independent normals matching the conditional intervals (the
        # local curvature at a hinge corner can be near-singular and would sample nonsense)
        cov = np.diag([((p.to_x(f.hi95) - p.to_x(f.lo95)) / (2.0 * Z95)) ** 2
                       for p, f in zip(pars, fitted)])
    for i in range(k):
        for j in range(i + 1, k):
            if abs(corr[i, j]) > CORRELATION_WARN:
                warnings.append(f"{pars[i].label} and {pars[j].label} are correlated "
                                f"({corr[i, j]:+.3f}): the data pin down a combination of "
                                "them, not each; fix one, or add data that separates them")
    if s_scaled.size and s_scaled.min() < SINGULAR_WARN * s_scaled.max():
        Jp = best.jac[:, pinned]
        _, _, Vt = np.linalg.svd(Jp / np.maximum(np.linalg.norm(Jp, axis=0), 1e-300),
                                 full_matrices=False)
        v = Vt[-1]
        idx = np.flatnonzero(pinned)
        names = [pars[idx[i]].label for i in np.argsort(-np.abs(v))[:3] if abs(v[i]) > 0.2]
        warnings.append("a near-singular direction (singular-value ratio "
                        f"{s_scaled.min() / s_scaled.max():.1e}) mixes " + ", ".join(names)
                        + ": the data cannot tell these apart")
    measured = any(e.kind != "published" for e in spec.experiments)
    if measured and dof > 0 and not 0.25 < chi2 / dof < 4.0:   # (a reading has no scatter)
        warnings.append(f"reduced chi2 is {chi2 / dof:.3g}: the stated measurement "
                        "uncertainties do not match the scatter about the fit (the intervals "
                        "assume they are right)")
    if not converged:
        warnings.append("the fit did not converge (a model solve failed or the optimiser "
                        "stopped early): do not use its numbers")
    pred = model.predict(x)
    exps = []
    for e, pr, raw in zip(spec.experiments, pred, model.raw):
        res_e = np.concatenate([(pr[sp] - e.measured[sp]) / e.sigma[sp] for sp in e.measured])
        d = np.concatenate([pr[sp] - e.measured[sp] for sp in e.measured])
        exps.append(ExperimentFit(name=e.name, kind=e.kind, n_points=e.n_points,
                                  chi2=float(res_e @ res_e), rms_ppm=float(np.sqrt(np.mean(d ** 2))),
                                  measured=e.measured, fitted=pr, T_K=e.T_K, time_s=e.time_s,
                                  targets=e.targets, model=raw))
    return FitResult(spec=spec, parameters=fitted, covariance=cov, correlation=corr, chi2=chi2,
                     dof=dof, experiments=exps, warnings=warnings, solves=model.solves,
                     evaluations=model.calls, seconds=time.perf_counter() - t0,
                     converged=converged, fitted_data=model.data_at(x), one_sided=one_sided)


def _axis_interval(model: _Model, x, i, chi2, lo, hi) -> tuple[float, float]:
    """The range of coordinate ``i`` (the others held at ``x``) over which chi2 rises by less
    than 3.84, each end root-found, or the bound where it never does."""
    from scipy.optimize import brentq

    def rise(v):
        xt = x.copy()
        xt[i] = v
        r = model.residuals(xt)
        return float(r @ r) - chi2 - Z95 ** 2
    ends = []
    for end in (lo[i], hi[i]):
        prev, step = x[i], 1e-3 * (end - x[i])
        while True:                  # steps growing 4-fold from 1e-3 of the way to the bound
            v = x[i] + step if abs(step) < abs(end - x[i]) else end
            if rise(v) > 0:
                ends.append(float(brentq(rise, prev, v, xtol=1e-4 * (hi[i] - lo[i]))))
                break
            if v == end:
                ends.append(float(end))
                break
            prev, step = v, 4.0 * step
    return ends[0], ends[1]


def _check_linearity(model: _Model, x, cov, i, chi2, a, b):
    """The 95 % interval of coordinate ``i``: the linear one, or the profile along the
    conditional direction where chi2 is far from quadratic (module docstring)."""
    from scipy.optimize import brentq
    d = cov[:, i] / np.sqrt(cov[i, i])          # moves x_i by one standard error
    lo = np.array([p.to_x(p.lo) for p in model.spec.parameters])
    hi = np.array([p.to_x(p.hi) for p in model.spec.parameters])

    def rise(t):
        xt = np.clip(x + t * d, lo, hi)
        r = model.residuals(xt)
        return float(r @ r) - chi2 - Z95 ** 2

    target = Z95 ** 2
    ends = []
    flagged = False
    for sign in (-1.0, 1.0):
        g = rise(sign * Z95) + target
        if not 0.5 * target < g < 2.0 * target:
            flagged = True
        ends.append(g)
    if not flagged:
        return a, b, False
    out = []
    for sign in (-1.0, 1.0):
        t_hi = Z95
        for _ in range(6):                      # bracket the 3.84 rise, up to 64 standard errors
            if rise(sign * t_hi) > 0:
                break
            t_hi *= 2.0
        if rise(sign * t_hi) <= 0:
            out.append(x[i] + sign * t_hi * np.sqrt(cov[i, i]))   # open: as far as was looked
            continue
        t = brentq(lambda s: rise(sign * s), 1e-6, t_hi, xtol=1e-3)
        out.append(x[i] + sign * t * np.sqrt(cov[i, i]))
    return out[0], out[1], True


# ---------------------------------------------------------------------------------------------
# the new catalyst file
# ---------------------------------------------------------------------------------------------
def catalyst_file_text(res: FitResult) -> str:
    """The calibrated catalyst file: the original's leading comments and tables with the
    fitted values, their provenance ``fitted to <spec> (sha256 ..., date)`` and a ``[fit]``
    table holding the fitted coordinates, their covariance and the data's checksums (so that
    studies can sample it). Paths in ``[fit]`` are relative to the new file's folder."""
    import os
    from .report import to_toml
    spec = res.spec
    data = copy.deepcopy(res.fitted_data)
    day = datetime.date.today().isoformat()
    here = Path(spec.output).resolve().parent

    def rel(f) -> str:
        return Path(os.path.relpath(Path(f).resolve(), here)).as_posix()
    files = ", ".join(f"{Path(e.file).name} (sha256 {e.sha256[:16]})" for e in spec.experiments)
    for p, fp in zip(spec.parameters, res.parameters):
        t = _table(data, p)
        prov = t.setdefault("provenance", {})
        top = p.key.split(".", 1)[0]
        what = (f"95 % interval {fp.lo95:.4g}..{fp.hi95:.4g}" if fp.pinned else
                f"not pinned by the data: held only within its bounds {fp.lo95:.4g}..{fp.hi95:.4g}")
        prov[top] = (f"fitted to {Path(spec.file).name} (sha256 {sha256_of(Path(spec.file))[:16]}, "
                     f"{day}): {fp.value:.6g}, {what}; data {files}")
    name = str(data.get("name", spec.catalyst.key))
    if "(fitted to" not in name:
        data["name"] = f"{name} (fitted to {Path(spec.file).name})"
    data["fit"] = {
        "spec": rel(spec.file), "spec_sha256": sha256_of(Path(spec.file)),
        "date": day, "parameters": [p.label for p in spec.parameters],
        "coordinates": ["ln" if p.log else "linear" for p in spec.parameters],
        "mean": [fp.x for fp in res.parameters],
        "covariance": [list(map(float, row)) for row in res.covariance],
        "ci95_low": [fp.lo95 for fp in res.parameters],
        "ci95_high": [fp.hi95 for fp in res.parameters],
        "pinned": [fp.pinned for fp in res.parameters],
        "covariance_basis": ("diagonal, from the conditional 95 % intervals (one-sided "
                             "published statements)" if res.one_sided else
                             "(J^T J)^-1 of the weighted residuals"),
        "chi2": res.chi2, "dof": res.dof,
        "data": [{"file": rel(e.file), "sha256": e.sha256} for e in spec.experiments]}
    lead = []
    for line in Path(spec.catalyst.file).read_text(encoding="utf-8").splitlines():
        if not line.startswith("#"):
            break
        if "written by 'aftertreat fit" not in line and "[fit] table holds" not in line \
                and "only as good as the data" not in line:
            lead.append(line)
    while lead and lead[-1].strip() == "#":
        lead.pop()
    head = ("\n".join(lead) + "\n#\n" if lead else "") + (
        f"# written by 'aftertreat fit {Path(spec.file).name}' on {day} from "
        f"{Path(spec.catalyst.file).name}; the [fit] table holds the fitted values'\n"
        "# covariance. Fitted parameters are only as good as the data and the bench model "
        "(docs/fitting.md).\n")
    return head + to_toml(data)


def write_catalyst(res: FitResult) -> Path:
    """Write the calibrated catalyst file (atomically; never over an existing file)."""
    from .output import write_atomic
    out = res.spec.output
    if out.exists():
        raise InputError("the new catalyst file exists already: it is never overwritten",
                         key="output", value=str(out), file=res.spec.file)
    text = catalyst_file_text(res)
    import tomllib
    parse_catalyst(tomllib.loads(text), key=out.stem, file=str(out))   # it must load
    write_atomic(out, text)
    return out


def replace_parameters(spec: FitSpec, values: dict[str, float]) -> FitSpec:
    """``spec`` with the catalyst's parameters set to ``values`` (label -> value), for making
    synthetic data from a known "true" set."""
    given = [p for p in spec.parameters if p.label in values]
    data = _with_values(spec.catalyst_data, given, [values[p.label] for p in given])
    reactor = _reactor_with(spec, data)
    return dataclasses.replace(spec, catalyst=reactor.brick.catalysts[0], catalyst_data=data,
                               reactor=reactor)
