"""Lab-reactor experiments for kinetic calibration: the fit spec (TOML) and its data (CSV).

A fit spec names the catalyst to calibrate, the bench reactor (``[reactor]``: the core sample as a
brick table, its flow and pressure), the experiments (``[[experiment]]``) and the parameters to
fit (``[[parameter]]``); docs/fitting.md is the reference. Each experiment's CSV carries its units
in the header, as traces do (``T [degC]``, ``NH3_out [ppm]``, ``time [s]``).

Experiment kinds:

``steady``
    One steady point per row: the sample at ``T`` with the feed of the spec (a row's
    ``<species>_in`` column overrides it), the measured outlet ``<species>_out``.
``lightoff``
    The same for a slip catalyst's light-off and selectivity (NH3 conversion, N2O, NOx made).
``tpd``
    NH3 temperature-programmed desorption: the sample saturated at ``adsorb`` (its T and feed),
    then the rows in time: purge and ramp in the NH3-free ``feed``, the sample at the row's ``T``;
    measured outlet NH3.
``step``
    An NH3 step (breakthrough) onto a clean sample at the rows' ``T``; measured outlet NH3 (and
    NO where given).
``published``
    A published behaviour held in an evidence file (TOML, not CSV): :mod:`aftertreat.published`.

Every measured value carries its uncertainty, sigma = abs_ppm + rel x |value| (one standard
deviation, as stated by the spec; the fit weights residuals by 1 / sigma).
"""
from __future__ import annotations

import csv
import hashlib
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .case import _unknown
from .checks import choice, number
from .errors import InputError, did_you_mean
from .species import INDEX
from .units import ZERO_C_K

__all__ = ["KINDS", "MEASURABLE", "Experiment", "read_experiment", "read_lab_csv"]

KINDS = ("steady", "lightoff", "tpd", "step", "published")
#: species whose outlet a fit can compare (ppm, on the wet basis of the bench gas)
MEASURABLE = ("NO", "NO2", "NH3", "N2O")
#: feed keys of a spec and their unit: species in ppm, O2 and H2O in percent
FEED_KEYS = {"NO_ppm": "NO", "NO2_ppm": "NO2", "NH3_ppm": "NH3", "N2O_ppm": "N2O",
             "O2_pct": "O2", "H2O_pct": "H2O"}
_EXPERIMENT_KEYS = {"name", "kind", "data", "feed", "adsorb", "measured", "uncertainty"}


@dataclass
class Experiment:
    """One experiment of a fit spec, with its data in SI (T in K, time in s, ppm as ppm).

    ``feed`` are the wet mole fractions of the bench gas (balance N2); ``feed_rows`` the per-row
    overrides ([n] arrays by species); ``adsorb`` (tpd) the saturating T [K] and feed.
    """
    name: str
    kind: str
    file: str
    sha256: str
    T_K: np.ndarray
    measured: dict[str, np.ndarray]            # species -> outlet ppm per row
    sigma: dict[str, np.ndarray]               # species -> one standard deviation [ppm]
    feed: dict[str, float]
    feed_rows: dict[str, np.ndarray] = field(default_factory=dict)
    time_s: np.ndarray | None = None
    adsorb_T_K: float | None = None
    adsorb_feed: dict[str, float] | None = None
    uncertainty: tuple[float, float] = (0.0, 0.0)   # (abs ppm, relative)
    # kind "published" (aftertreat.published): the targets, the source, the evidence file's
    # own reactor and TPD protocol
    targets: list | None = None
    source: dict | None = None
    reactor: object | None = None
    tpd: dict | None = None

    @property
    def n_points(self) -> int:
        return sum(len(v) for v in self.measured.values())

    def feed_at(self, j: int) -> dict[str, float]:
        """The feed mole fractions of row ``j``."""
        x = dict(self.feed)
        for sp, col in self.feed_rows.items():
            x[sp] = float(col[j])
        return x


def _feed(table, key: str, file: str) -> dict[str, float]:
    if not isinstance(table, dict):
        raise InputError("expected a table such as { NO_ppm = 500, NH3_ppm = 500, O2_pct = 10, "
                         "H2O_pct = 5 }", key=key, value=table, file=file)
    x = {}
    for k, v in table.items():
        if k not in FEED_KEYS:
            raise InputError("unknown feed key; valid: " + ", ".join(FEED_KEYS)
                             + did_you_mean(k, FEED_KEYS), key=f"{key}.{k}", value=v, file=file)
        v = number(v, f"{key}.{k}", file, lo=0.0, what="a concentration >= 0")
        x[FEED_KEYS[k]] = v * (1e-6 if k.endswith("_ppm") else 1e-2)
    if sum(x.values()) >= 1.0:
        raise InputError("the feed adds up to 100 % or more (the balance is N2)", key=key,
                         value=table, file=file)
    return x


def sha256_of(path: Path) -> str:
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


def read_lab_csv(path: Path, file_label: str) -> tuple[dict[str, np.ndarray], dict[str, str]]:
    """Columns of a lab CSV by name, in SI: ``time [s]`` -> s, ``T [degC]`` -> K, species
    columns (``NH3_out [ppm]``, ``NO_in [ppm]``) -> ppm, ``O2_in [%]`` -> percent. Returns the
    columns and the header cell of each (for messages). Errors name the file, the row (1-based
    data row) and the column."""
    from .trace import _split_header, column_unit
    from .units import ureg
    try:
        text = Path(path).read_text(encoding="utf-8-sig")
    except OSError as e:
        raise InputError(f"cannot read the data file ({e.strerror})", file=file_label) from None
    lines = [s for s in text.splitlines() if s.strip() and not s.lstrip().startswith("#")]
    if len(lines) < 2:
        raise InputError("expected a header row and data rows", file=file_label)
    cells = [c.strip() for c in next(csv.reader([lines[0]]))]
    rows = list(csv.reader(lines[1:]))
    out, heads = {}, {}
    reg = ureg()
    for j, cell in enumerate(cells):
        name, unit = _split_header(cell)
        if name == "time":
            si = "s"
        elif name == "T":
            si = "K"
        elif name.endswith(("_out", "_in")) and name.rsplit("_", 1)[0] in ("O2", "H2O"):
            si = "percent"
        elif name.endswith(("_out", "_in")) and name.rsplit("_", 1)[0] in INDEX:
            si = "ppm"
        else:
            continue                         # columns no experiment reads are ignored
        if unit is None:
            raise InputError(f"expected a unit in square brackets, e.g. '{name} [{si}]'",
                             key=cell, file=file_label)
        u = column_unit(unit, si, cell, file_label)
        vals = np.empty(len(rows))
        for i, r in enumerate(rows):
            try:
                v = float(r[j])
            except (IndexError, ValueError):
                raise InputError(f"expected a number (data row {i + 1})", key=cell,
                                 value=r[j] if j < len(r) else "(missing)",
                                 file=file_label) from None
            if not np.isfinite(v):
                raise InputError(f"expected a finite number (data row {i + 1})", key=cell,
                                 value=r[j], file=file_label)
            vals[i] = v
        if si == "K":
            vals = reg.Quantity(vals, u).to("K").magnitude
        else:
            vals = vals * reg.Quantity(1.0, u).to(si).magnitude
        if si != "K" and np.any(vals < 0):
            i = int(np.argmax(vals < 0))
            raise InputError(f"expected a value >= 0 (data row {i + 1})", key=cell,
                             value=rows[i][j], file=file_label)
        out[name], heads[name] = vals, cell
    return out, heads


def read_experiment(spec: dict, i: int, base: Path, file: str,
                    valid_T: tuple[float, float] | None = None) -> Experiment:
    """Validate ``[[experiment]]`` number ``i`` of a fit spec and read its CSV."""
    pre = f"experiment[{i}]"
    if not isinstance(spec, dict):
        raise InputError("expected an [[experiment]] table", key=pre, file=file)
    _unknown(spec, _EXPERIMENT_KEYS, file, f"{pre}.")
    kind = choice(spec.get("kind"), KINDS, f"{pre}.kind", file)
    name = str(spec.get("name", f"experiment {i + 1}"))
    data = spec.get("data")
    if not isinstance(data, str):
        raise InputError("expected a CSV file name (relative to the spec)", key=f"{pre}.data",
                         value=data, file=file)
    path = base / data
    if not path.is_file():
        raise InputError("expected an existing CSV file (relative to the spec)",
                         key=f"{pre}.data", value=data, file=file)
    label = str(path)
    cols, heads = read_lab_csv(path, label)
    meas = spec.get("measured")
    if not (isinstance(meas, list) and meas and all(m in MEASURABLE for m in meas)):
        raise InputError(f"expected a list of outlet species among {', '.join(MEASURABLE)}",
                         key=f"{pre}.measured", value=meas, file=file)
    unc = spec.get("uncertainty")
    if not isinstance(unc, dict) or set(unc) - {"abs_ppm", "rel"} or not unc:
        raise InputError("expected { abs_ppm = ..., rel = ... } (one standard deviation of a "
                         "measured outlet value)", key=f"{pre}.uncertainty", value=unc, file=file)
    a = number(unc.get("abs_ppm", 0.0), f"{pre}.uncertainty.abs_ppm", file, lo=0.0)
    r = number(unc.get("rel", 0.0), f"{pre}.uncertainty.rel", file, lo=0.0, hi=1.0)
    if a <= 0 and r <= 0:
        raise InputError("expected abs_ppm > 0 or rel > 0", key=f"{pre}.uncertainty",
                         value=unc, file=file)
    if "T" not in cols:
        raise InputError("missing column 'T' (e.g. 'T [degC]'); headers found: "
                         + ", ".join(heads.values()), key="T", file=label)
    T = cols["T"]
    if valid_T is not None:
        bad = np.flatnonzero((T < valid_T[0] - 1e-9) | (T > valid_T[1] + 1e-9))
        if bad.size:
            j = int(bad[0])
            raise InputError(
                f"temperature outside the catalyst's range {valid_T[0] - ZERO_C_K:g}.."
                f"{valid_T[1] - ZERO_C_K:g} degC (data row {j + 1})", key=heads["T"],
                value=f"{T[j] - ZERO_C_K:g} degC", file=label)
    measured, sigma = {}, {}
    for sp in meas:
        c = f"{sp}_out"
        if c not in cols:
            raise InputError(f"missing column '{c}' (e.g. '{c} [ppm]') for measured = "
                             f"{meas}; headers found: " + ", ".join(heads.values()), key=c,
                             file=label)
        measured[sp] = cols[c]
        sigma[sp] = a + r * np.abs(cols[c])
    feed = _feed(spec.get("feed", {}), f"{pre}.feed", file)
    rows = {c[:-3]: cols[c] * (1e-2 if c[:-3] in ("O2", "H2O") else 1e-6)
            for c in cols if c.endswith("_in")}
    exp = Experiment(name=name, kind=kind, file=label, sha256=sha256_of(path), T_K=T,
                     measured=measured, sigma=sigma, feed=feed, feed_rows=rows,
                     uncertainty=(a, r))
    if kind in ("tpd", "step"):
        if "time" not in cols:
            raise InputError("missing column 'time' (e.g. 'time [s]')", key="time", file=label)
        t = cols["time"]
        back = np.flatnonzero(np.diff(t) <= 0)
        if back.size:
            raise InputError(f"time must increase from row to row (data row {int(back[0]) + 2})",
                             key=heads["time"], value=float(t[back[0] + 1]), file=label)
        exp.time_s = t
    if kind == "tpd":
        ad = spec.get("adsorb")
        if not isinstance(ad, dict) or "T_C" not in ad:
            raise InputError("expected { T_C = ..., NH3_ppm = ..., ... }: the temperature and "
                             "feed the sample was saturated at", key=f"{pre}.adsorb", value=ad,
                             file=file)
        ad = dict(ad)
        exp.adsorb_T_K = number(ad.pop("T_C"), f"{pre}.adsorb.T_C", file, lo=0.0,
                                hi=900.0) + ZERO_C_K
        exp.adsorb_feed = _feed(ad, f"{pre}.adsorb", file)
        if exp.adsorb_feed.get("NH3", 0.0) <= 0:
            raise InputError("expected NH3_ppm > 0 (the sample is saturated with NH3)",
                             key=f"{pre}.adsorb.NH3_ppm", file=file)
    elif "adsorb" in spec:
        raise InputError("belongs to a tpd experiment", key=f"{pre}.adsorb", file=file)
    return exp
