"""Published behaviour as fit targets: the ``published`` experiment kind of ``aftertreat fit``.

A paper's abstract or text often states a behaviour, not a data table: "three TPD peaks near
317, 456 and 526 C", "conversion essentially independent of NO2/NOx above 350 C", "good
performance from 200 to 550 C". An evidence file (TOML, in ``catalysts/evidence/``) holds such
a statement as numbered targets, keeping apart what the source states and how we read it:

.. code-block:: toml

    [source]
    cite = "D. Madia, M. Koebel, M. Elsener, A. Wokaun, Ind. Eng. Chem. Res. 41 (2002) 3512"
    read = "read from the text (abstract)"    # or "read from a figure", "read from a table"
    states = "..."                            # what the source says, in our words

    [reactor]          # the test conditions the model runs (brick keys and flow, as in a spec);
    note = "..."       # say which the source states and which are assumed

    [[target]]
    quantity = "NOx_conversion_pct"
    T_C = 375
    feed = { NO_ppm = 250, NO2_ppm = 250, NH3_ppm = 500, O2_pct = 10, H2O_pct = 5 }
    minus = { NO_ppm = 500, NH3_ppm = 500, O2_pct = 10, H2O_pct = 5 }  # optional: a difference
    sense = "="        # "=", ">=" or "<=" (a one-sided statement)
    value = 0.0
    sigma = 2.0        # one standard deviation of our reading of the statement
    reading = "..."    # how the statement became this number

Quantities (steady points on the bench sample held at T, :mod:`aftertreat.bench`; inlet and
outlet molar flows F):

``NOx_conversion_pct``   100 (1 - F_NOx,out / F_NOx,in), NOx = NO + NO2
``NH3_conversion_pct``   100 (1 - F_NH3,out / F_NH3,in)
``NH3_unused_by_SCR_pct`` 100 (dF_NH3 - dF_NOx) / F_NH3,in with d = in - out: the NH3 fed that
                         did not reduce NOx one to one (oxidised, in a NO-only feed where the
                         SCR stoichiometry is 1 NH3 per NO)
``N2_selectivity_pct``   100 (1 - (2 dF_N2O + dF_NOx,made) / dF_NH3): the NH3 converted that
                         became N2 (a slip catalyst fed NH3 without NOx)
``tpd_peak_C``           the peak temperature of one storage ``site`` in an NH3-TPD with the
                         protocol of the file's ``[tpd]`` table (adsorb T and feed, purge
                         minutes, ramp K/min, end T), run on the tanks model of
                         :func:`aftertreat.bench._timed` on a 1 K grid: the mean temperature
                         of the ramp weighted by the site's net NH3 loss (the centroid of its
                         desorption peak). We use the centroid, not the maximum, because a
                         site that trades NH3 with the others through re-adsorption has a
                         broad, sometimes double-humped loss curve whose maximum jumps between
                         humps as parameters change; for a symmetric peak the two agree

A one-sided target enters the weighted least squares as a hinge: zero residual while the
statement holds, (model - value) / sigma when it does not. The statement then bounds a
parameter without pinning it; :func:`aftertreat.fit.fit` says so. Reference: docs/fitting.md.
"""
from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .case import _unknown, read_toml
from .checks import choice, number
from .errors import InputError
from .units import ZERO_C_K

__all__ = ["QUANTITIES", "Target", "read_published", "predict_published"]

QUANTITIES = ("NOx_conversion_pct", "NH3_conversion_pct", "NH3_unused_by_SCR_pct",
              "N2_selectivity_pct", "tpd_peak_C")
SENSES = ("=", ">=", "<=")
_FILE_KEYS = {"source", "reactor", "tpd", "target"}
_SOURCE_KEYS = {"cite", "doi", "read", "states", "key"}
_TARGET_KEYS = {"quantity", "T_C", "feed", "minus", "sense", "value", "sigma", "reading",
                "site"}
_TPD_KEYS = {"adsorb", "feed", "purge_min", "ramp_K_min", "end_T_C"}
#: the time grid of a simulated TPD: one row per kelvin of ramp
_TPD_GRID_K = 1.0


@dataclass
class Target:
    """One published statement as a number: ``quantity`` at ``T_K`` with ``feed`` (minus the
    same at ``minus``), compared as ``sense`` with ``value`` +- ``sigma``."""
    quantity: str
    T_K: float
    feed: dict | None
    minus: dict | None
    sense: str
    value: float
    sigma: float
    reading: str
    site: str | None = None


def _source(table, file: str) -> dict:
    if not isinstance(table, dict) or not {"cite", "read", "states"} <= set(table):
        raise InputError("expected a [source] table with cite, read (\"read from the text\", "
                         "\"read from a figure\" ...) and states", key="source", value=table,
                         file=file)
    _unknown(table, _SOURCE_KEYS, file, "source.")
    read = str(table["read"])
    if not read.startswith("read from"):
        raise InputError("expected where the values were read: \"read from the text\", "
                         "\"read from a table\" or \"read from a figure\" (with detail)",
                         key="source.read", value=read, file=file)
    return {k: str(v) for k, v in table.items()}


def _target(t, i: int, file: str, sites: list[str]) -> Target:
    from .labdata import _feed
    pre = f"target[{i}]"
    if not isinstance(t, dict):
        raise InputError("expected a [[target]] table", key=pre, file=file)
    _unknown(t, _TARGET_KEYS, file, f"{pre}.")
    q = choice(t.get("quantity"), QUANTITIES, f"{pre}.quantity", file)
    sense = choice(t.get("sense", "="), SENSES, f"{pre}.sense", file)
    value = number(t.get("value"), f"{pre}.value", file)
    sigma = number(t.get("sigma"), f"{pre}.sigma", file, lo=0.0, lo_open=True,
                   what="one standard deviation > 0 of our reading")
    reading = t.get("reading")
    if not isinstance(reading, str) or not reading.strip():
        raise InputError("expected how the statement became this number (our reading)",
                         key=f"{pre}.reading", value=reading, file=file)
    if q == "tpd_peak_C":
        site = t.get("site")
        if site not in sites:
            raise InputError("expected the storage site whose peak this is; the catalyst has: "
                             + ", ".join(sites), key=f"{pre}.site", value=site, file=file)
        if "feed" in t or "minus" in t or "T_C" in t:
            raise InputError("a TPD peak takes its protocol from the [tpd] table (no T_C, "
                             "feed or minus)", key=pre, file=file)
        return Target(quantity=q, T_K=value + ZERO_C_K, feed=None, minus=None, sense=sense,
                      value=value, sigma=sigma, reading=reading, site=str(site))
    T = number(t.get("T_C"), f"{pre}.T_C", file, lo=-50.0, hi=900.0) + ZERO_C_K
    feed = _feed(t.get("feed"), f"{pre}.feed", file)
    minus = _feed(t["minus"], f"{pre}.minus", file) if "minus" in t else None
    need = {"NOx_conversion_pct": ("NO", "NO2"), "NH3_conversion_pct": ("NH3",),
            "NH3_unused_by_SCR_pct": ("NH3",), "N2_selectivity_pct": ("NH3",)}[q]
    for f, k in ((feed, "feed"), (minus, "minus")):
        if f is not None and sum(f.get(s, 0.0) for s in need) <= 0:
            raise InputError(f"{q} needs {' or '.join(need)} in the feed", key=f"{pre}.{k}",
                             value=t.get(k), file=file)
    return Target(quantity=q, T_K=T, feed=feed, minus=minus, sense=sense, value=value,
                  sigma=sigma, reading=reading)


def _tpd_protocol(table, file: str) -> dict:
    from .labdata import _feed
    if not isinstance(table, dict) or not {"adsorb", "ramp_K_min", "end_T_C"} <= set(table):
        raise InputError("a tpd_peak_C target needs a [tpd] table: adsorb = { T_C = ..., "
                         "NH3_ppm = ... }, feed (the purge gas), purge_min, ramp_K_min, end_T_C",
                         key="tpd", value=table, file=file)
    _unknown(table, _TPD_KEYS, file, "tpd.")
    ad = table["adsorb"]
    if not isinstance(ad, dict) or "T_C" not in ad:
        raise InputError("expected { T_C = ..., NH3_ppm = ..., ... }", key="tpd.adsorb",
                         value=ad, file=file)
    ad = dict(ad)
    T_ad = number(ad.pop("T_C"), "tpd.adsorb.T_C", file, lo=0.0, hi=900.0) + ZERO_C_K
    return {"adsorb_T_K": T_ad, "adsorb_feed": _feed(ad, "tpd.adsorb", file),
            "feed": _feed(table.get("feed", {}), "tpd.feed", file),
            "purge_s": 60.0 * number(table.get("purge_min", 30.0), "tpd.purge_min", file,
                                     lo=0.0),
            "ramp_K_s": number(table["ramp_K_min"], "tpd.ramp_K_min", file, lo=0.0,
                               lo_open=True) / 60.0,
            "end_T_K": number(table["end_T_C"], "tpd.end_T_C", file, lo=0.0, hi=900.0)
            + ZERO_C_K}


def read_published(spec: dict, i: int, base: Path, file: str, catalyst, default_reactor):
    """The ``published`` experiment number ``i`` of a fit spec: its evidence file read and
    checked (every error names the file and key)."""
    from .bench import parse_reactor
    from .labdata import Experiment, sha256_of
    pre = f"experiment[{i}]"
    _unknown(spec, {"name", "kind", "data"}, file, f"{pre}.")
    data = spec.get("data")
    if not isinstance(data, str) or not (base / data).is_file():
        raise InputError("expected an existing evidence file (TOML, relative to the spec)",
                         key=f"{pre}.data", value=data, file=file)
    path = base / data
    label = str(path)
    ev = read_toml(path)
    _unknown(ev, _FILE_KEYS, label, "")
    source = _source(ev.get("source"), label)
    sites = list(catalyst.mechanism.sites)
    targets = ev.get("target")
    if not isinstance(targets, list) or not targets:
        raise InputError("expected at least one [[target]]", key="target", file=label)
    tg = [_target(t, j, label, sites) for j, t in enumerate(targets)]
    qs = {t.quantity for t in tg}
    if len(qs) > 1:
        raise InputError("one quantity per evidence file (split the file)", key="target",
                         value=sorted(qs), file=label)
    reactor = (parse_reactor({k: v for k, v in ev["reactor"].items() if k != "note"}, label,
                             catalyst) if "reactor" in ev else default_reactor)
    if reactor is None:
        raise InputError("expected a [reactor] table (the test conditions) in the evidence "
                         "file or in the spec", key="reactor", file=label)
    tpd = _tpd_protocol(ev.get("tpd"), label) if "tpd_peak_C" in qs else None
    T = np.array([t.T_K for t in tg])
    lo, hi = catalyst.valid_T
    for j, t in enumerate(tg):
        Ts = [t.T_K] if t.quantity != "tpd_peak_C" else [tpd["adsorb_T_K"], tpd["end_T_K"]]
        if any(not lo - 1e-9 <= x <= hi + 1e-9 for x in Ts):
            raise InputError(f"temperature outside the catalyst's range {lo - ZERO_C_K:g}.."
                             f"{hi - ZERO_C_K:g} degC", key=f"target[{j}].T_C",
                             value=f"{max(Ts, key=lambda x: abs(x - (lo + hi) / 2)) - ZERO_C_K:g}"
                             " degC", file=label)
    key = tg[0].quantity
    exp = Experiment(name=str(spec.get("name", source.get("key", path.stem))), kind="published",
                     file=label, sha256=sha256_of(path), T_K=T,
                     measured={key: np.array([t.value for t in tg])},
                     sigma={key: np.array([t.sigma for t in tg])}, feed={})
    exp.targets, exp.source, exp.reactor, exp.tpd = tg, source, reactor, tpd
    return exp


# ---------------------------------------------------------------------------------------------
# the model's value of each target
# ---------------------------------------------------------------------------------------------
def _flows(reactor, x: dict, T: float, settings=None):
    inlet, sol = reactor.steady(x, T, settings)
    return inlet.F, sol.outlet.F, bool(sol.converged)


def quantity_of(q: str, F_in: np.ndarray, F_out: np.ndarray) -> float:
    """The value of quantity ``q`` (module docstring) from the inlet and outlet molar flows."""
    from .species import INDEX
    no, no2, nh3, n2o = (INDEX[s] for s in ("NO", "NO2", "NH3", "N2O"))
    nox_in, nox_out = F_in[no] + F_in[no2], F_out[no] + F_out[no2]
    d_nh3 = F_in[nh3] - F_out[nh3]
    if q == "NOx_conversion_pct":
        return 100.0 * (1.0 - nox_out / nox_in)
    if q == "NH3_conversion_pct":
        return 100.0 * d_nh3 / F_in[nh3]
    if q == "NH3_unused_by_SCR_pct":
        return 100.0 * (d_nh3 - (nox_in - nox_out)) / F_in[nh3]
    if q == "N2_selectivity_pct":
        made = 2.0 * (F_out[n2o] - F_in[n2o]) + (nox_out - nox_in)
        return 100.0 * (1.0 - made / d_nh3) if d_nh3 > 0 else float("nan")
    raise ValueError(q)


def tpd_peaks(reactor, tpd: dict) -> tuple[dict[str, float], bool, int]:
    """Per-site peak temperatures [K] of the TPD protocol ``tpd`` (module docstring): site
    name -> T at its fastest net NH3 loss; whether the run converged; model solves."""
    from .bench import _timed
    from .labdata import Experiment
    T0, T1, ramp = tpd["adsorb_T_K"], tpd["end_T_K"], tpd["ramp_K_s"]
    t_purge = tpd["purge_s"]
    n = max(int(np.ceil((T1 - T0) / _TPD_GRID_K)), 3)
    T_ramp = np.linspace(T0, T1, n + 1)
    t = np.concatenate([[0.0], t_purge + (T_ramp - T0) / ramp]) if t_purge > 0 else \
        (T_ramp - T0) / ramp
    T = np.concatenate([[T0], T_ramp]) if t_purge > 0 else T_ramp
    exp = Experiment(name="tpd", kind="tpd", file="", sha256="", T_K=T, measured={"NH3": T * 0},
                     sigma={"NH3": T * 0 + 1}, feed=tpd["feed"], time_s=t,
                     adsorb_T_K=T0, adsorb_feed=tpd["adsorb_feed"])
    pr = _timed(reactor, exp, coverage=True)
    sites = list(reactor.brick.catalysts[0].mechanism.sites)
    if not pr.converged:
        return {s: float("nan") for s in sites}, False, pr.solves
    th = pr.coverage                                   # [rows, N, ns]
    held = th.sum(axis=1)                              # sum over tanks [rows, ns]
    start = 1 if t_purge > 0 else 0
    loss = -np.diff(held[start:], axis=0) / np.diff(t[start:])[:, None]      # [rows-1, ns]
    Tm = 0.5 * (T[start:][1:] + T[start:][:-1])
    w = np.maximum(loss, 0.0) * np.diff(t[start:])[:, None]               # NH3 lost per row
    out = {}
    for s, name in enumerate(sites):
        tot = float(w[:, s].sum())
        out[name] = float(Tm @ w[:, s] / tot) if tot > 0 else float("nan")
    return out, True, pr.solves


@dataclass
class PublishedPrediction:
    """The model's value of every target (``raw``) and the value the fit compares (``outlet_ppm``
    by the experiment's one key: a one-sided target that holds compares equal)."""
    outlet_ppm: dict[str, np.ndarray]
    raw: np.ndarray
    converged: bool
    solves: int


def predict_published(reactor_of, exp, settings=None) -> PublishedPrediction:
    """The model's values of ``exp``'s targets, with the catalyst of ``reactor_of(exp.reactor)``
    (the fit swaps its trial catalyst into the evidence file's own reactor)."""
    reactor = reactor_of(exp.reactor)
    raw = np.empty(len(exp.targets))
    ok, solves = True, 0
    peaks = None
    for j, t in enumerate(exp.targets):
        if t.quantity == "tpd_peak_C":
            if peaks is None:
                peaks, good, n = tpd_peaks(reactor, exp.tpd)
                ok &= good
                solves += n
            raw[j] = peaks[t.site] - ZERO_C_K
            continue
        Fi, Fo, good = _flows(reactor, t.feed, t.T_K, settings)
        v = quantity_of(t.quantity, Fi, Fo)
        solves += 1
        if t.minus is not None:
            Fi2, Fo2, good2 = _flows(reactor, t.minus, t.T_K, settings)
            v -= quantity_of(t.quantity, Fi2, Fo2)
            good &= good2
            solves += 1
        ok &= good
        raw[j] = v
    cmp = raw.copy()
    for j, t in enumerate(exp.targets):
        if t.sense == ">=":
            cmp[j] = min(raw[j], t.value)
        elif t.sense == "<=":
            cmp[j] = max(raw[j], t.value)
    key = next(iter(exp.measured))
    return PublishedPrediction(outlet_ppm={key: cmp}, raw=raw, converged=bool(ok),
                               solves=solves)
