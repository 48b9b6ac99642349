"""Transient runs of a case: a measured trace, or ramped steps through the case's modes.

The ``[transient]`` table of a duty-cycle case (all keys optional except as noted)::

    [transient]
    trace = "harbour_manoeuvre.csv"   # a time trace (aftertreat.trace), relative to the case;
    basis = "dry"                     # ... its concentration basis, and
    columns = { T = "T_exh" }         # ... its column names where they are not ours
    zero_columns = ["N2O"]            # species the trace leaves out because the engine emits
                                      # none (NH3 and N2O columns are required otherwise)
    hold_s = 300                      # without a trace: hold each mode of [cycle] this long,
    ramp_s = 30                       # ... ramping linearly between modes over this
    dt_s = 1.0                        # step of the ramped form (a trace keeps its own times)
    start = "steady"                  # or "clean": no stored NH3, brick at T_start_C
    T_start_C = 150
    conduction = false                # axial heat conduction in the brick solid
    [transient.dosing]                # with [dosing] method NH3 or urea
    control = "fixed"                 # the case's ANR (per mode, ramped); or "map"; or "storage"
    ANR_map = { T_C = [180, 220, 260], ANR = [0.0, 0.8, 1.0] }      # map and storage control
    target_fraction = { T_C = [200, 300, 400], fraction = [0.5, 0.3, 0.05] }   # storage only
    response_s = 30
    ANR_max = 1.5

A case with a trace needs no [cycle] or [engine_out]; its figures are then the trace's own
(g/kWh = emitted mass / work over the trace, not a certification cycle). Results
(:class:`TransientRun`): the time series, cumulative and specific emissions, peak and
time-averaged NH3 slip, time above each concentration limit, and the NH3 account.
"""
from __future__ import annotations

import dataclasses
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from . import dosing as dosing_mod
from . import schema
from .control import AnrMap, StorageController, parse_map
from .emissions import dry_ppm
from .errors import InputError, did_you_mean
from .species import INDEX, MOLAR_MASS
from .species import nox as nox_of
from .stream import Stream
from .transient import TransientResult, TransientSettings, simulate, start
from .units import P_ATM_PA, ZERO_C_K

__all__ = ["parse_transient", "timeline", "run_transient", "TransientRun", "Timeline"]

#: NH3 molar mass [g/mol] (from the species table)
M_NH3_G = float(MOLAR_MASS[INDEX["NH3"]]) * 1e3

# the keys of [transient] and [transient.dosing]: declared once, in aftertreat.schema
_KEYS = set(schema.keys("transient"))
_DOSING_KEYS = set(schema.keys("transient.dosing"))
CONTROLS = ("fixed", "map", "storage")
#: Default feed-forward map (common practice: no dosing below ~180 C, where ammonium salts
#: form; stoichiometric above ~260 C) and default storage targets (from memory: fill falling
#: with temperature, as the catalyst's holding capacity does).
DEFAULT_ANR_MAP = {"T_C": [180.0, 220.0, 260.0], "ANR": [0.0, 0.8, 1.0]}
DEFAULT_TARGET = {"T_C": [200.0, 300.0, 400.0, 450.0], "fraction": [0.5, 0.3, 0.1, 0.02]}


def _number(t, key, file, lo, hi, default=None, table="transient"):
    v = t.get(key, default)
    if v is None:
        return None
    if not isinstance(v, (int, float)) or isinstance(v, bool) or not lo <= v <= hi:
        raise InputError(f"expected a number within [{lo}, {hi}]", key=f"{table}.{key}",
                         value=v, file=file)
    return float(v)


def parse_transient(data: dict, file: str, *, has_cycle: bool, dosing_method: str) -> dict | None:
    """Validate the ``[transient]`` table (None when absent); see the module docstring."""
    t = data.get("transient")
    if t is None:
        return None
    if not isinstance(t, dict):
        raise InputError("expected a [transient] table", key="transient", file=file)
    for k in t:
        if k not in _KEYS:
            raise InputError("unknown key; allowed: " + ", ".join(sorted(_KEYS))
                             + did_you_mean(k, _KEYS), key=f"transient.{k}", file=file)
    out = {"trace": None, "start": t.get("start", "steady")}
    if "trace" in t:
        tr = t["trace"]
        if not isinstance(tr, str) or not tr:
            raise InputError("expected a CSV file name", key="transient.trace", value=tr,
                             file=file)
        path = Path(tr) if Path(tr).is_absolute() else Path(file).parent / tr
        if not path.is_file():
            raise InputError("expected an existing CSV file (relative to the case file)",
                             key="transient.trace", value=tr, file=file)
        out["trace"] = str(path)
        out["basis"] = t.get("basis", "dry")
        cols = t.get("columns", {})
        if not isinstance(cols, dict):
            raise InputError("expected a table of our name = your column name",
                             key="transient.columns", value=cols, file=file)
        out["columns"] = cols
        zero = t.get("zero_columns", [])
        from .trace import DECLARE_ZERO
        if not isinstance(zero, list) or any(z not in DECLARE_ZERO for z in zero):
            raise InputError(f"expected a list of species among {', '.join(DECLARE_ZERO)} that "
                             "the trace leaves out because the engine emits none",
                             key="transient.zero_columns", value=zero, file=file)
        out["zero_columns"] = tuple(zero)
    else:
        if not has_cycle:
            raise InputError("give a trace, or a [cycle] to step through",
                             key="transient.trace", file=file)
        for k in ("basis", "columns", "zero_columns"):
            if k in t:
                raise InputError("belongs to a trace: give 'trace' too", key=f"transient.{k}",
                                 value=t[k], file=file)
    out["hold_s"] = _number(t, "hold_s", file, 1.0, 1e6, 300.0)
    out["ramp_s"] = _number(t, "ramp_s", file, 0.0, 1e5, 30.0)
    out["dt_s"] = _number(t, "dt_s", file, 0.01, 600.0, 1.0)
    if out["start"] not in ("steady", "clean"):
        raise InputError("expected 'steady' or 'clean'", key="transient.start",
                         value=out["start"], file=file)
    out["T_start_C"] = _number(t, "T_start_C", file, 0.0, 900.0)
    cond = t.get("conduction", False)
    if not isinstance(cond, bool):
        raise InputError("expected true or false", key="transient.conduction", value=cond,
                         file=file)
    out["conduction"] = cond
    d = t.get("dosing", {})
    if not isinstance(d, dict):
        raise InputError("expected a [transient.dosing] table", key="transient.dosing",
                         value=d, file=file)
    for k in d:
        if k not in _DOSING_KEYS:
            raise InputError("unknown key; allowed: " + ", ".join(sorted(_DOSING_KEYS))
                             + did_you_mean(k, _DOSING_KEYS), key=f"transient.dosing.{k}",
                             file=file)
    control = d.get("control", "fixed")
    if control not in CONTROLS:
        raise InputError("expected one of " + ", ".join(CONTROLS) + did_you_mean(control, CONTROLS),
                         key="transient.dosing.control", value=control, file=file)
    if control != "fixed" and dosing_method == "none":
        raise InputError("dosing control needs [dosing] method 'NH3' or 'urea'",
                         key="transient.dosing.control", value=control, file=file)
    out["control"] = control
    out["anr_map"] = parse_map(d.get("ANR_map", DEFAULT_ANR_MAP), "transient.dosing.ANR_map",
                               "ANR", file, 0.0, 3.0)
    out["target"] = parse_map(d.get("target_fraction", DEFAULT_TARGET),
                              "transient.dosing.target_fraction", "fraction", file, 0.0, 1.0)
    out["response_s"] = _number(d, "response_s", file, 1.0, 1e4, 30.0, table="transient.dosing") if "response_s" in d \
        else 30.0
    out["ANR_max"] = _number(d, "ANR_max", file, 0.0, 3.0, 1.5, table="transient.dosing")
    return out


@dataclass
class Timeline:
    """Engine-out exhaust over time: times [s], power [kW], engine-out streams, the fixed ANR
    (from the case, ramped with the modes) and the intake-air CO2 [mol/s]."""
    t_s: np.ndarray
    power_kW: np.ndarray
    engine_out: list[Stream]
    anr_fixed: np.ndarray
    air_CO2_mol_s: np.ndarray
    source: str


def _blend(a: Stream, b: Stream, w: float) -> Stream:
    return Stream(F=(1 - w) * a.F + w * b.F, T=(1 - w) * a.T + w * b.T, p=(1 - w) * a.p + w * b.p)


def timeline(case) -> Timeline:
    """The engine-out time series of a case with ``[transient]``: the trace, or the modes of
    [cycle] held ``hold_s`` each and ramped linearly (flows, temperature, pressure, power, ANR)
    over ``ramp_s`` between them, sampled every ``dt_s``."""
    tr = case.transient
    if tr["trace"] is not None:
        from .trace import read_trace
        trace = read_trace(tr["trace"], columns=tr["columns"], basis=tr["basis"],
                           zero=tr.get("zero_columns", ()))
        n = len(trace)
        if n < 2:
            raise InputError(f"expected at least two data rows to run through time; found {n}",
                             key="transient.trace", value=Path(tr["trace"]).name,
                             file=case.file)
        anr = np.full(n, float(case.dosing["ANR"][0]))
        return Timeline(t_s=np.asarray(trace.t_s, dtype=float), power_kW=np.asarray(
            trace.power_kW, dtype=float), engine_out=trace.exhausts(), anr_fixed=anr,
            air_CO2_mol_s=np.zeros(n), source=Path(tr["trace"]).name)
    from .evaluate import engine_out_stream
    modes = case.cycle.modes
    streams, powers, co2 = [], [], []
    for i in range(len(modes)):
        p, eo, c = engine_out_stream(case, i)
        streams.append(eo)
        powers.append(p)
        co2.append(c)
    hold, ramp, dt = tr["hold_s"], tr["ramp_s"], tr["dt_s"]
    # knots (time, mode index) at the start and end of each hold; ramps lie between them
    knots_t, knots = [0.0], [0.0]
    t = 0.0
    for i in range(len(modes)):
        t += hold
        knots_t.append(t)
        knots.append(float(i))
        if i + 1 < len(modes) and ramp > 0:
            t += ramp
            knots_t.append(t)
            knots.append(float(i + 1))
    times = np.arange(0.0, knots_t[-1] + 0.5 * dt, dt)
    # fractional mode index along time, then blend the two neighbouring modes
    frac = np.interp(times, np.array(knots_t), np.array(knots))
    eo, pw, anr, air = [], [], [], []
    ANR = np.asarray(case.dosing["ANR"], dtype=float)
    for f in frac:
        a = int(np.floor(f))
        b = min(a + 1, len(modes) - 1)
        w = f - a
        eo.append(_blend(streams[a], streams[b], w) if w > 0 else streams[a])
        pw.append((1 - w) * powers[a] + w * powers[b])
        anr.append((1 - w) * ANR[a] + w * ANR[b])
        air.append((1 - w) * co2[a] + w * co2[b])
    return Timeline(t_s=times, power_kW=np.array(pw), engine_out=eo, anr_fixed=np.array(anr),
                    air_CO2_mol_s=np.array(air), source=f"modes of {case.cycle.name}, "
                    f"{hold:g} s each, {ramp:g} s ramps")


class _Doser:
    """The train inlet at step i: engine-out plus what the dosing control adds."""

    def __init__(self, case, tl: Timeline, scr_index: list[int]):
        self.case, self.tl, self.scr = case, tl, scr_index
        tr = case.transient
        self.method = case.dosing["method"]
        self.control = tr["control"]
        self.map: AnrMap = tr["anr_map"]
        self.ctrl = StorageController(tr["anr_map"], tr["target"], tr["response_s"],
                                      tr["ANR_max"])
        n = len(tl.t_s)
        self.reagent = np.zeros((n, len(tl.engine_out[0].F)))
        self.anr_cmd = np.zeros(n)
        self.capacity = None

    def __call__(self, i: int, state) -> Stream:
        eo = self.tl.engine_out[i]
        if self.method == "none":
            self.anr_cmd[i] = dosing_mod.anr(eo) if nox_of(eo.F) > 0 \
                else 0.0
            return eo
        nox_mol_s = float(nox_of(eo.F))
        if self.control == "fixed":
            target = self.tl.anr_fixed[i]
        elif self.control == "map" or state is None:
            target = self.map(eo.T)
        else:
            if self.capacity is None:
                self.capacity = float(state.capacity_mol()[self.scr].sum())
            stored = float(state.stored_nh3_mol()[self.scr].sum())
            target = self.ctrl.anr(eo.T, nox_mol_s, stored, self.capacity)
        self.anr_cmd[i] = target
        inlet, reagent = dosing_mod.dose(eo, self.method, float(target),
                                         urea_mass_fraction=self.case.dosing["urea_mass_fraction"])
        self.reagent[i] = reagent
        return inlet


@dataclass(frozen=True)
class RunLimitCheck:
    """One limit row over a transient run. A g/kWh cycle row has its ``value`` (emitted mass
    over work); a concentration row its ``peak``, time-weighted ``mean`` and ``time_above_s``
    the limit; a per-mode cap of a test cycle does not apply (``limit`` None, ``note``)."""
    row_name: str
    quantity: str
    unit: str
    limit: float | None
    passed: bool
    source: str = ""
    o2_ref_pct: float | None = None
    value: float | None = None
    peak: float | None = None
    mean: float | None = None
    time_above_s: float | None = None
    note: str = ""

    @property
    def name(self) -> str:
        return self.row_name

    @property
    def basis(self) -> str:
        from .limits import basis_label
        return basis_label(self.unit, self.o2_ref_pct)

    def to_dict(self) -> dict:
        d = {"name": self.name, "unit": self.unit, "o2_ref_pct": self.o2_ref_pct,
             "limit": self.limit, "pass": self.passed, "source": self.source}
        for k in ("value", "peak", "mean", "time_above_s"):
            if getattr(self, k) is not None:
                d[k] = getattr(self, k)
        if self.note:
            d["note"] = self.note
        return d


@dataclass
class TransientRun:
    """A transient run of a case: the timeline, the dosing and the train's time series."""
    case: object
    timeline: Timeline
    result: TransientResult
    reagent_mol_s: np.ndarray          # [N, nspecies] gas products of the dosed reagent
    anr_cmd: np.ndarray                # the ANR the control asked for [N]
    seconds: float
    train: object = None               # the Train that was run (the case's, or a what-if's)
    complete: bool = True              # False: the first points of a run still going on
    planned_s: float | None = None     # of a partial run: the whole run's duration [s]

    def head(self) -> "TransientRun":
        """This run cut to the points :attr:`result` holds (a partial run's timeline and
        dosing arrays are the whole run's)."""
        n = len(self.result.t_s)
        tl = self.timeline
        if len(tl.t_s) == n:
            return self
        cut = Timeline(t_s=tl.t_s[:n], power_kW=tl.power_kW[:n], engine_out=tl.engine_out[:n],
                       anr_fixed=tl.anr_fixed[:n], air_CO2_mol_s=tl.air_CO2_mol_s[:n],
                       source=tl.source)
        return dataclasses.replace(self, timeline=cut, reagent_mol_s=self.reagent_mol_s[:n].copy(),
                                   anr_cmd=self.anr_cmd[:n].copy())

    # -- per-step quantities --------------------------------------------------------------------
    def _outlet_streams(self) -> list[Stream]:
        r = self.result
        return [Stream(F=r.outlet_F[i], T=r.outlet_T_K[i], p=P_ATM_PA) for i in range(len(r.t_s))]

    def step_emissions(self) -> list:
        """:class:`aftertreat.limits.ModeEmissions` of the train outlet at every step (the
        step's length as its weight); computed once."""
        if getattr(self, "_steps", None) is not None:
            return self._steps
        from .evaluate import mode_emissions
        r = self.result
        dt = np.diff(r.t_s, prepend=r.t_s[0])
        self._steps = [mode_emissions(f"t={r.t_s[i]:g} s", float(dt[i]), float(self.timeline.power_kW[i]),
                               False, s, float(self.timeline.air_CO2_mol_s[i]))
                for i, s in enumerate(self._outlet_streams())]
        return self._steps

    def table(self):
        """The time series, one row per step, units in the column names."""
        import pandas as pd
        r = self.result
        ppm_out = r.outlet_F / r.outlet_F.sum(axis=1, keepdims=True) * 1e6
        x_h2o = r.outlet_F[:, INDEX["H2O"]] / r.outlet_F.sum(axis=1)
        ppm_in = r.inlet_F / r.inlet_F.sum(axis=1, keepdims=True) * 1e6
        cols = {"t_s": r.t_s, "power_kW": self.timeline.power_kW,
                "exhaust_kg_h": [s.mass_flow * 3600.0 for s in self.timeline.engine_out],
                "T_in_C": r.inlet_T_K - ZERO_C_K, "T_out_C": r.outlet_T_K - ZERO_C_K,
                "ANR_in": (r.inlet_F[:, INDEX["NH3"]] / np.maximum(
                    nox_of(r.inlet_F), 1e-300)),
                "ANR_target": self.anr_cmd,
                "NH3_dosed_g_h": self.reagent_mol_s[:, INDEX["NH3"]] * M_NH3_G * 3600.0,
                "NOx_in_ppm_wet": nox_of(ppm_in),
                "NH3_in_ppm_wet": ppm_in[:, INDEX["NH3"]]}
        for sp in ("NO", "NO2", "NH3", "N2O"):
            cols[f"{sp}_out_ppmvd"] = dry_ppm(ppm_out[:, INDEX[sp]], x_h2o)
        cols["NOx_out_ppmvd"] = cols["NO_out_ppmvd"] + cols["NO2_out_ppmvd"]
        for k, name in enumerate(r.brick_names):
            cols[f"{name}_stored_NH3_g"] = r.stored_nh3_mol[:, k] * M_NH3_G
            cols[f"{name}_T_solid_mean_C"] = r.solid_T_mean_K[:, k] - ZERO_C_K
        cols["converged"] = r.converged
        return pd.DataFrame(cols)

    def summary(self) -> dict:
        """Cumulative and specific emissions, NH3 slip figures, limits and the NH3 account
        (computed once)."""
        if getattr(self, "_summary", None) is None:
            self._summary = self._make_summary()
        return self._summary

    def _make_summary(self) -> dict:
        r = self.result
        dt = np.diff(r.t_s)
        steps = self.step_emissions()
        work_kWh = float(dt @ self.timeline.power_kW[1:]) / 3600.0
        g = {q: float(dt @ np.array([getattr(s, f"{q}_g_h") for s in steps[1:]])) / 3600.0
             for q in ("NOx", "N2O", "NH3")}
        slip = np.array([s.ppmvd["NH3"] for s in steps])
        T_total = float(r.t_s[-1] - r.t_s[0])
        out = {"duration_s": T_total, "steps": len(r.t_s) - 1, "work_kWh": work_kWh,
               "NOx_g": g["NOx"], "N2O_g": g["N2O"], "NH3_g": g["NH3"]}
        for q in ("NOx", "N2O", "NH3"):
            out[f"{q}_g_kWh"] = g[q] / work_kWh if work_kWh > 0 else None
        out["NH3_slip_ppmvd_peak"] = float(slip.max())
        out["NH3_slip_ppmvd_mean"] = float(dt @ slip[1:] / T_total)
        out["NH3_slip_ppmvd_peak_t_s"] = float(r.t_s[int(slip.argmax())])
        out["limits"] = [c.to_dict() for c in self.limit_checks()]
        out["NH3_account_mol"] = r.nh3_account()
        out["converged"] = r.all_converged
        out["jacobians"] = int(r.jacobians.sum())
        out["solve_s"] = r.seconds
        out["real_time_factor"] = T_total / r.seconds if r.seconds > 0 else None
        out["source"] = self.timeline.source
        out["dosing_control"] = self.case.transient["control"]
        return out

    def limit_checks(self) -> list[RunLimitCheck]:
        """Per limit row: a concentration row gives its peak, time average and time above the
        limit over the run; a g/kWh cycle row its value over the run (work-weighted). Per-mode
        g/kWh rows (test-mode caps) do not apply to a trace and are listed as such. Computed
        once."""
        if getattr(self, "_checks", None) is None:
            self._checks = self._limit_checks(self.step_emissions())
        return self._checks

    def limit_series(self) -> list[tuple]:
        """(check, value per step, limit per step) of every concentration limit, each on the
        limit's own basis (NaN where the row does not apply), for plots."""
        self.limit_checks()
        return list(self._series)

    def _limit_checks(self, steps) -> list[RunLimitCheck]:
        from . import limits as lm
        case = self.case
        rows = []
        self._series = []
        weights = np.diff(self.result.t_s, prepend=self.result.t_s[0])
        for ls in case.limit_sets:
            for row in ls.rows:
                if row.unit == "g/kWh":
                    if row.scope == "mode":
                        rows.append(RunLimitCheck(
                            row.name, row.quantity, row.unit, None, True, row.source,
                            note="a per-mode cap of the test cycle: not applied to a trace"))
                        continue
                    sub = dataclasses.replace(ls, rows=[row])
                    res = lm.evaluate(sub, steps[1:], rated_speed_rpm=case.engine.rated_speed_rpm,
                                      gwp_set=case.gwp_set,
                                      rated_power_kW=case.engine.rated_power_kW)
                    for rr in res:
                        rows.append(RunLimitCheck(
                            rr.name, rr.quantity, rr.unit, rr.limit, rr.passed, rr.source,
                            value=rr.value,
                            note="emitted mass / work over the run, not a certification "
                                 "cycle"))
                    continue
                sub = dataclasses.replace(ls, rows=[row])
                res = lm.evaluate(sub, steps, rated_speed_rpm=case.engine.rated_speed_rpm,
                                  gwp_set=case.gwp_set, rated_power_kW=case.engine.rated_power_kW)
                v = np.array([rr.value for rr in res], dtype=float)
                lim = np.array([np.nan if rr.limit is None else rr.limit for rr in res])
                on = np.isfinite(lim)
                above = on & (v > np.where(on, lim, np.inf))
                t_above = float(weights[above].sum())
                rows.append(RunLimitCheck(
                    row.name, row.quantity, row.unit, float(np.nanmax(lim)) if on.any() else None,
                    t_above == 0.0, row.source, o2_ref_pct=row.o2_ref_pct,
                    peak=float(np.nanmax(v[on])) if on.any() else None,
                    mean=float((weights[on] @ v[on]) / weights[on].sum())
                    if on.any() and weights[on].sum() > 0 else None, time_above_s=t_above))
                self._series.append((rows[-1], v, lim))
        return rows

    def to_json(self) -> dict:
        return self.summary()

    def run_json(self) -> dict:
        """An ``aftertreat.run/1`` object for a trace case (no modes): the run's own figures
        stand for the cycle, its limit rows for the limits."""
        s = self.summary()
        cyc = {k: s[k] for k in ("NOx_g_kWh", "N2O_g_kWh", "NH3_g_kWh")}
        r = self.result
        ppm = r.outlet_F[:, INDEX["NH3"]] / r.outlet_F.sum(axis=1) * 1e6
        cyc["NH3_slip_ppm_wet_max"] = float(ppm.max())
        from .emissions import GWP100
        gwp = GWP100[self.case.gwp_set]
        cyc["N2O_CO2e_g_kWh"] = None if s["N2O_g_kWh"] is None else gwp * s["N2O_g_kWh"]
        limits = [{"name": x.name, "value": x.value if x.value is not None else x.peak,
                   "limit": x.limit, "unit": x.unit, "o2_ref_pct": x.o2_ref_pct,
                   "pass": x.passed, "source": x.source} for x in self.limit_checks()]
        return {"schema": "aftertreat.run/1", "case": self.case.title, "file": self.case.file,
                "overrides": list(getattr(self.case, "overrides", [])), "cycle_name": None, "modes": [], "cycle": cyc, "limits": limits,
                "pass": all(x["pass"] for x in limits) and s["converged"],
                "converged": s["converged"], "GWP_set": self.case.gwp_set, "warnings": [],
                "solve_s": s["solve_s"]}


def run_transient(case, *, train=None, progress=None, partial=None,
                  partial_every_s: float = 2.0,
                  settings: TransientSettings | None = None) -> TransientRun:
    """Run the ``[transient]`` part of ``case`` (see the module docstring).

    ``progress(i, N)`` before each interval; ``partial(run)``, when given, every
    ``partial_every_s`` seconds of wall time with the :class:`TransientRun` of the points done so far (``complete`` False), for a
    viewer that shows the run as it goes."""
    t0 = time.perf_counter()
    tr = case.transient
    if tr is None:
        raise InputError("the case has no [transient] table", key="transient", file=case.file)
    train = case.train if train is None else train
    st = settings or TransientSettings(conduction=tr["conduction"])
    tl = timeline(case)
    scr = [i for i, b in enumerate(train.bricks) if b.role == "SCR"] or [0]
    doser = _Doser(case, tl, scr)
    inlet0 = doser(0, None)
    if tr["start"] == "steady":
        state = start(train, inlet0, settings=st)
    else:
        T0 = tr["T_start_C"] + ZERO_C_K if tr["T_start_C"] is not None else None
        state = start(train, inlet0, steady=False, T_start_K=T0, settings=st)
    def on_partial(r):
        partial(TransientRun(case=case, timeline=tl, result=r, reagent_mol_s=doser.reagent,
                             anr_cmd=doser.anr_cmd, seconds=time.perf_counter() - t0,
                             train=train, complete=False,
                             planned_s=float(tl.t_s[-1] - tl.t_s[0])).head())
    res = simulate(train, tl.t_s, lambda i, s: inlet0 if i == 0 else doser(i, s), state=state,
                   settings=st, progress=progress,
                   partial=None if partial is None else on_partial,
                   partial_every_s=partial_every_s)
    return TransientRun(case=case, timeline=tl, result=res, reagent_mol_s=doser.reagent,
                        anr_cmd=doser.anr_cmd, seconds=time.perf_counter() - t0, train=train)
