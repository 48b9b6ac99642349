"""`aftertreat run`: the JSON contract, atom balance, what-ifs, the report folder and bad cases."""
import contextlib
import copy
import io
import json
import tomllib
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings, strategies as st

from aftertreat.cli import main
from aftertreat.report import to_toml
from atoms import assert_atoms_balance

ROOT = Path(__file__).resolve().parents[1]
TURBINE = ROOT / "cases" / "turbine_d1.toml"
GENSET = ROOT / "cases" / "genset_d2.toml"
MARINE = ROOT / "cases" / "marine_e3_tier3.toml"


def run_json(*args):
    buf = io.StringIO()
    with contextlib.redirect_stdout(buf):
        code = main(["run", *map(str, args), "--json"])
    return code, buf.getvalue()


@pytest.fixture(scope="module")
def turbine():
    code, text = run_json(TURBINE)
    assert code == 0
    return json.loads(text)          # stdout is exactly one JSON object


def test_run_json_contract(turbine):
    """Keys in the exact spelling of the project's CLI contract (docs/conventions.md)."""
    o = turbine
    assert o["schema"] == "aftertreat.run/1"
    for k in ("case", "modes", "cycle", "limits", "pass"):
        assert k in o
    for m in o["modes"]:
        for k in ("name", "weight", "power_kW", "exhaust_kg_h", "T_in_C", "T_out_C",
                  "GHSV_per_h", "dp_kPa", "ANR", "NOx_conversion", "converged",
                  "element_balance_error", "engine_out", "dosed", "outlet", "bricks"):
            assert k in m, k
        for s in ("engine_out", "dosed", "outlet"):
            for part in ("mol_s", "ppm_wet", "ppmvd"):
                assert set(("NO", "NO2", "NH3", "N2O", "O2", "H2O", "N2")) <= set(m[s][part])
        for b in m["bricks"]:
            for k in ("name", "role", "volume_L", "T_out_C", "dp_kPa", "outlet"):
                assert k in b
    for k in ("NOx_g_kWh", "N2O_g_kWh", "NH3_g_kWh", "N2O_CO2e_g_kWh", "NH3_slip_ppm_wet_max"):
        assert k in o["cycle"]
    for r in o["limits"]:
        for k in ("name", "value", "limit", "unit", "pass", "source"):
            assert k in r
    assert abs(sum(m["weight"] for m in o["modes"]) - 1.0) < 1e-9


def test_engine_out_plus_dosed_balances_outlet(turbine):
    """engine_out + dosed = outlet in N, H and O atoms for every mode (conservation of atoms)."""
    for m in turbine["modes"]:
        assert_atoms_balance([m["engine_out"]["mol_s"], m["dosed"]["mol_s"]],
                             m["outlet"]["mol_s"])


def test_dosing_reaches_anr_and_nox_as_no2(turbine):
    """ANR = NH3/NOx at the first brick = the case's 0.95 (NH3 dosing tops up the engine's own
    NH3); cycle NOx is counted as NO2 (40 CFR 1065.1005: NOx molar mass is that of NO2)."""
    for m in turbine["modes"]:
        assert m["ANR"] == pytest.approx(0.95, rel=1e-9)
    m = turbine["modes"][0]
    F = m["outlet"]["mol_s"]
    nox_g_h = (F["NO"] + F["NO2"]) * 46.0055 * 3600
    assert nox_g_h / m["power_kW"] == pytest.approx(
        nox_g_h / m["power_kW"], rel=1e-12)           # per-mode g/kWh definition
    w = [x["weight"] for x in turbine["modes"]]
    g = [(x["outlet"]["mol_s"]["NO"] + x["outlet"]["mol_s"]["NO2"]) * 46.0055 * 3600
         for x in turbine["modes"]]
    p = [x["power_kW"] for x in turbine["modes"]]
    expect = sum(a * b for a, b in zip(w, g)) / sum(a * b for a, b in zip(w, p))
    assert turbine["cycle"]["NOx_g_kWh"] == pytest.approx(expect, rel=2e-4)


def test_set_what_if_changes_the_named_value():
    """--set dosing.ANR=0.8 lowers the ANR of every mode to 0.8 and nothing else in the inlet."""
    code, text = run_json(TURBINE, "--set", "dosing.ANR=0.8")
    assert code == 0
    o = json.loads(text)
    for m in o["modes"]:
        assert m["ANR"] == pytest.approx(0.8, rel=1e-9)


def test_report_folder(tmp_path, capsys):
    out = tmp_path / "report"
    assert main(["run", str(TURBINE), "--report", str(out)]) == 0
    names = {p.name for p in out.iterdir()}
    for f in ("summary.json", "modes.csv", "limits.csv", "bricks.csv", "profiles.csv",
              "provenance.csv", "compliance.png", "limits_by_mode.png", "profiles.png", "sources.txt",
              "case_as_run.toml", "SAFETY.txt"):
        assert f in names
    for png in ("compliance.png", "limits_by_mode.png", "profiles.png"):
        assert (out / png).read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert "NH3" in (out / "SAFETY.txt").read_text()
    # the case as run reads back to the same data
    assert tomllib.loads((out / "case_as_run.toml").read_text()) == tomllib.loads(
        TURBINE.read_text())
    assert not [p for p in out.iterdir() if p.name.endswith(".tmp")]


def test_toml_writer_round_trip():
    for f in (GENSET, MARINE, TURBINE):
        data = tomllib.loads(f.read_text())
        assert tomllib.loads(to_toml(data)) == data


def _mutations():
    """Invalid edits of a valid case: (path, value) with what the message must name."""
    return st.sampled_from([
        (("engine", "rated_power_kW"), -5, "engine.rated_power_kW"),
        (("engine", "rated_power_kW"), "lots", "engine.rated_power_kW"),
        (("engine", "application"), "lorry", "engine.application"),
        (("engine", "rated_sped_rpm"), 500, "rated_sped_rpm"),
        (("cycle", "iso8178"), "Z9", "cycle.iso8178"),
        (("engine_out", "T_C"), [360, 345], "engine_out.T_C"),
        (("engine_out", "T_C"), [360, 345, 1500], "engine_out.T_C"),
        (("engine_out", "NOx_ppm"), -1, "engine_out.NOx_ppm"),
        (("engine_out", "O2_pct"), "twelve", "engine_out.O2_pct"),
        (("engine_out", "method"), "guess", "engine_out.method"),
        (("dosing", "method"), "urine", "dosing.method"),
        (("dosing", "ANR"), 7, "dosing.ANR"),
        (("limits", "sets"), ["tier_99"], "limits.sets"),
        (("limits", "gwp"), "AR9", "limits.gwp"),
        (("brick", 0, "length"), "-3 m", "brick[0].length"),
        (("brick", 0, "catalyst"), "unobtainium", "brick[0].catalyst"),
        (("brick", 1, "gap"), "0 mm", "brick[1].gap"),
        (("brick", 1, "activity"), 0, "brick[1].activity"),
        (("fuel",), {"NH3": 0.7}, "fuel"),
        (("nonsense",), 1, "nonsense"),
    ])


@settings(max_examples=20, deadline=None, derandomize=True,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(mut=_mutations())
def test_bad_case_files_exit_2_with_a_message(tmp_path_factory, capsys, mut):
    """Every invalid case gives exit code 2 and one line naming file, key and value, never a
    traceback or a number (project rule for bad input)."""
    path, value, needle = mut
    data = copy.deepcopy(tomllib.loads(TURBINE.read_text()))
    node = data
    for k in path[:-1]:
        node = node[k]
    node[path[-1]] = value
    f = tmp_path_factory.mktemp("bad") / "bad_case.toml"
    f.write_text(to_toml(data))
    buf = io.StringIO()
    with contextlib.redirect_stdout(buf):
        code = main(["run", str(f)])
    err = capsys.readouterr().err
    assert code == 2, err
    assert buf.getvalue() == ""
    assert "Traceback" not in err and err.count("\n") == 1
    assert "bad_case.toml" in err and needle in err, err


@pytest.mark.parametrize("case", [GENSET, MARINE])
def test_demo_cases_run_and_balance(case):
    """The invented demo cases run to completion (exit 0, converged) and, with the exhaust built
    from the fuel blend, every mode balances N, H and O from engine-out + dosed to outlet."""
    code, text = run_json(case)
    assert code == 0
    o = json.loads(text)
    assert o["converged"] is True
    for m in o["modes"]:
        assert m["element_balance_error"] < 1e-9
    # the greenhouse line: N2O as CO2e uses the case's GWP set (IPCC AR6: 273)
    assert o["cycle"]["N2O_CO2e_g_kWh"] == pytest.approx(273 * o["cycle"]["N2O_g_kWh"],
                                                          rel=1e-12)
    assert o["engine_out_cycle"]["NOx_g_kWh"] > o["cycle"]["NOx_g_kWh"]
