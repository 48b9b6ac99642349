"""Transient cases: a trace case through `aftertreat run`, ramped steps through a cycle's modes,
the dosing controller's arithmetic and bad [transient] input."""
import json
from pathlib import Path

import numpy as np
import pytest

from aftertreat.cli import main
from aftertreat.control import AnrMap, StorageController
from aftertreat.cyclecase import parse_run_case
from aftertreat.errors import InputError
from aftertreat.report import to_toml

ROOT = Path(__file__).resolve().parents[1]

BRICK = {"catalyst": "vanadia_extruded", "substrate": "extruded", "cpsi": 35, "wall": "0.7 mm",
         "length": "150 mm", "diameter": "600 mm", "cells": 6}
HEADER = ("time [s],power [kW],exhaust flow [kg/h],T [degC],p [kPa],O2 [%],H2O [%],NOx [ppm],"
          "NO2/NOx [-],NH3 [ppm],N2O [ppm]")


def _trace_case(tmp_path, **transient):
    rows = [HEADER]
    for t in range(41):                          # invented: a load step at t = 20 s
        hi = t >= 20
        rows.append(f"{t},{800 if hi else 300},{5000 if hi else 3000},{330 if hi else 290},"
                    f"103,{12 if hi else 14},20,{900 if hi else 600},0.05,{600 if hi else 1200},30")
    (tmp_path / "trace.csv").write_text("\n".join(rows) + "\n")
    data = {"title": "invented trace test",
            "engine": {"application": "auxiliary genset", "rated_power_kW": 1000.0},
            "transient": {"trace": "trace.csv", **transient},
            "dosing": {"method": "NH3", "ANR": 1.0},
            "brick": [dict(BRICK, name="SCR 1"), dict(BRICK, name="SCR 2")],
            "limits": {"custom": [{"name": "NH3 slip", "quantity": "NH3_ppmvd", "value": 10.0,
                                   "unit": "ppmvd", "o2_ref_pct": 15.0, "source": "test"}]}}
    f = tmp_path / "case.toml"
    f.write_text(to_toml(data))
    return f


def test_trace_case_runs_with_json_and_report(tmp_path, capsys):
    """`aftertreat run` on a trace case: exit 0, one aftertreat.run/1 object with no modes and
    a transient section (cumulative and specific emissions, NH3 slip peak and mean, time above
    each concentration limit, the NH3 account closing), and the report files."""
    f = _trace_case(tmp_path, dosing={"control": "storage"})
    out = tmp_path / "rep"
    assert main(["run", str(f), "--json", "--report", str(out)]) == 0
    obj = json.loads(capsys.readouterr().out)
    assert obj["schema"] == "aftertreat.run/1" and obj["modes"] == []
    t = obj["transient"]
    for k in ("duration_s", "work_kWh", "NOx_g", "NOx_g_kWh", "N2O_g_kWh", "NH3_g_kWh",
              "NH3_slip_ppmvd_peak", "NH3_slip_ppmvd_mean", "limits", "NH3_account_mol",
              "converged", "real_time_factor"):
        assert k in t
    assert t["duration_s"] == 40.0 and t["converged"] is True
    # right-point sums (implicit Euler): t = 1..19 s at 300 kW, t = 20..40 s at 800 kW
    assert t["work_kWh"] == pytest.approx((19 * 300 + 21 * 800) / 3600.0)
    row = t["limits"][0]
    assert 0.0 <= row["time_above_s"] <= 40.0 and row["peak"] >= row["mean"]
    acc = t["NH3_account_mol"]
    assert abs(acc["imbalance_mol"]) < 1e-4 * acc["in_mol"]
    names = {p.name for p in out.iterdir()}
    assert {"transient.csv", "transient.png", "summary.json", "SAFETY.txt"} <= names
    assert (out / "transient.png").read_bytes()[:4] == b"\x89PNG"


def test_ramped_modes_timeline():
    """Stepping through a cycle: each mode held hold_s, linear ramps of ramp_s between them,
    so the sample count and the mid-ramp power follow by arithmetic."""
    from aftertreat.transient_run import timeline
    from aftertreat.case import read_toml
    f = ROOT / "cases" / "genset_d2.toml"
    data = read_toml(f)
    data["transient"] = {"hold_s": 20, "ramp_s": 10, "dt_s": 1.0}
    case = parse_run_case(data, str(f))
    tl = timeline(case)
    n = case.n_modes
    assert len(tl.t_s) == n * 20 + (n - 1) * 10 + 1
    p = case.engine.rated_power_kW * np.array([1.0, 0.75, 0.5, 0.25, 0.10])
    assert tl.power_kW[10] == pytest.approx(p[0])
    assert tl.power_kW[25] == pytest.approx(0.5 * (p[0] + p[1]))      # middle of the 1st ramp
    assert tl.power_kW[-1] == pytest.approx(p[-1])


def test_storage_controller_arithmetic():
    """NH3 dosed = ANR_ff NOx + (target - stored)/tau, as an ANR clipped to [0, ANR_max]
    (the control law of aftertreat.control; arithmetic)."""
    ff = AnrMap(np.array([400.0, 600.0]), np.array([0.5, 1.0]))
    tgt = AnrMap(np.array([400.0, 600.0]), np.array([0.4, 0.0]))
    c = StorageController(ff, tgt, response_s=20.0, anr_max=2.0)
    nox, cap = 0.01, 10.0
    # T = 500 K: ANR_ff 0.75, target 0.2 x 10 = 2 mol; stored 1.8 mol
    assert c.anr(500.0, nox, 1.8, cap) == pytest.approx(0.75 + (2.0 - 1.8) / 20.0 / nox)
    assert c.anr(500.0, nox, 9.0, cap) == 0.0          # over-full: dose nothing
    assert c.anr(500.0, nox, 0.0, cap) == 2.0          # empty: capped


@pytest.mark.parametrize("transient, key", [
    ({"trace": "trace.csv", "hold": 3}, "transient.hold"),
    ({"trace": "nothere.csv"}, "transient.trace"),
    ({"trace": "trace.csv", "start": "warm"}, "transient.start"),
    ({"trace": "trace.csv", "dosing": {"control": "pid"}}, "transient.dosing.control"),
    ({"trace": "trace.csv", "dosing": {"ANR_map": {"T_C": [300, 200], "ANR": [1, 1]}}},
     "transient.dosing.ANR_map.T_C"),
])
def test_bad_transient_input_named(tmp_path, transient, key):
    """Bad [transient] entries are rejected with the key named."""
    f = _trace_case(tmp_path)
    from aftertreat.case import read_toml
    data = read_toml(f)
    data["transient"] = transient
    with pytest.raises(InputError) as e:
        parse_run_case(data, str(f))
    assert e.value.key == key


def test_control_needs_dosing(tmp_path, capsys):
    """Storage control without a dosing method: exit 2 and one line naming the key."""
    f = _trace_case(tmp_path, dosing={"control": "storage"})
    text = f.read_text().replace('method = "NH3"', 'method = "none"')
    f.write_text(text)
    assert main(["run", str(f)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "transient.dosing.control" in err[0]


@pytest.mark.parametrize("command", ["size", "point"])
def test_trace_case_with_other_commands(tmp_path, capsys, command):
    """`size` and `point` on a trace case: exit 2 and one line saying what to use instead."""
    f = _trace_case(tmp_path)
    assert main([command, str(f)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "run" in err[0]


def test_sources_of_a_trace_case(tmp_path, capsys):
    """`sources` lists the catalysts' sources and the trace itself for a trace case."""
    f = _trace_case(tmp_path)
    assert main(["sources", str(f)]) == 0
    out = capsys.readouterr().out
    assert "vanadia" in out.lower() and "trace.csv" in out


def _drop_column(f, name):
    """Rewrite the case's trace without the column ``name``."""
    trace = f.parent / "trace.csv"
    rows = [r.split(",") for r in trace.read_text().splitlines()]
    j = next(k for k, c in enumerate(rows[0]) if c.startswith(name + " ["))
    trace.write_text("\n".join(",".join(r[:j] + r[j + 1:]) for r in rows) + "\n")


def test_trace_without_its_nh3_column_is_refused(tmp_path, capsys):
    """A trace that lost its NH3 column is not read as an engine without NH3 slip: exit 2,
    one line naming the column and how to declare a real zero."""
    f = _trace_case(tmp_path)
    _drop_column(f, "NH3")
    assert main(["run", str(f)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "NH3" in err[0] and "zero_columns" in err[0], err


def test_declared_zero_column_runs(tmp_path, capsys):
    """With [transient] zero_columns = ["N2O"] the trace may leave N2O out (read as zero)."""
    f = _trace_case(tmp_path, zero_columns=["N2O"])
    _drop_column(f, "N2O")
    assert main(["run", str(f), "--json"]) == 0
    obj = json.loads(capsys.readouterr().out)
    assert obj["transient"]["converged"] is True


def test_one_row_trace_is_refused(tmp_path, capsys):
    """A trace with one data row cannot be run through time: exit 2, one line (it used to end
    in a traceback from the integrator)."""
    f = _trace_case(tmp_path)
    trace = f.parent / "trace.csv"
    trace.write_text("\n".join(trace.read_text().splitlines()[:2]) + "\n")
    assert main(["run", str(f)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "transient.trace" in err[0] and "two data rows" in err[0], err


def test_partial_runs_are_the_first_points_of_the_whole_run(tmp_path):
    """A viewer sees the run as it goes (``partial``): every partial run holds exactly the first
    points of the whole run (same numbers), says it is not complete and how long the whole run
    is, and its own NH3 account closes over the part done (common practice: a conservation
    check holds on any prefix of a time-marching run)."""
    from aftertreat.cyclecase import load_run_case
    from aftertreat.transient_run import run_transient
    case = load_run_case(_trace_case(tmp_path, dosing={"control": "storage"}))
    parts = []
    whole = run_transient(case, partial=parts.append, partial_every_s=0.0)
    assert len(parts) == len(whole.result.t_s) - 2        # after every interval but the last
    for p in parts[::7]:
        n = len(p.result.t_s)
        assert not p.complete and p.planned_s == 40.0
        assert len(p.timeline.t_s) == len(p.anr_cmd) == n
        for k in ("outlet_F", "stored_nh3_mol", "solid_T_mean_K", "inlet_mol"):
            np.testing.assert_array_equal(getattr(p.result, k), getattr(whole.result, k)[:n])
        s = p.summary()
        assert s["duration_s"] == n - 1.0
        acc = s["NH3_account_mol"]
        assert abs(acc["imbalance_mol"]) <= 1e-4 * acc["in_mol"]
    assert whole.complete and whole.head() is whole
