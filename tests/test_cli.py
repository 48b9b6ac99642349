"""The ``aftertreat`` command: JSON contract, --set what-ifs, exit codes and bad-input messages."""
import json
from pathlib import Path

import pytest

from aftertreat.case import apply_set, load_case, read_toml
from aftertreat.cli import main
from atoms import assert_atoms_balance

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "cases" / "genset_point.toml"


@pytest.fixture(scope="module")
def demo_json():
    import io
    import contextlib
    buf = io.StringIO()
    with contextlib.redirect_stdout(buf):
        code = main(["point", str(DEMO), "--json"])
    return code, buf.getvalue()


def test_point_json_is_one_object_with_contract_keys(demo_json):
    code, text = demo_json
    assert code == 0
    obj = json.loads(text)                     # the whole stdout is one JSON object
    assert obj["schema"] == "aftertreat.point/1"
    for key in ("case", "exhaust_kg_h", "T_in_C", "T_out_C", "GHSV_per_h", "dp_kPa", "ANR",
                "NOx_conversion", "converged", "element_balance_error", "inlet", "outlet",
                "bricks"):
        assert key in obj
    for b in obj["bricks"]:
        for key in ("name", "role", "volume_L", "T_out_C", "dp_kPa", "outlet"):
            assert key in b
    for sp in ("NO", "NO2", "NH3", "N2O", "O2", "H2O", "N2"):
        assert sp in obj["outlet"]["ppm_wet"] and sp in obj["outlet"]["ppmvd"]
    assert obj["converged"] is True


def test_point_json_balances_atoms(demo_json):
    """Inlet and outlet molar flows in the JSON balance N, H and O (conservation of atoms)."""
    obj = json.loads(demo_json[1])
    assert_atoms_balance([obj["inlet"]["mol_s"]], obj["outlet"]["mol_s"])


def test_dry_ppm_is_wet_over_dry_fraction(demo_json):
    """ppm dry = ppm wet / (1 - x_H2O) (definition of the dry basis, 40 CFR 1065.650)."""
    obj = json.loads(demo_json[1])
    x_h2o = obj["outlet"]["ppm_wet"]["H2O"] * 1e-6
    for sp in ("NO", "NH3", "N2O", "O2"):
        assert obj["outlet"]["ppmvd"][sp] == pytest.approx(obj["outlet"]["ppm_wet"][sp]
                                                          / (1 - x_h2o), rel=1e-12)


def test_set_changes_exactly_the_named_value():
    data = read_toml(DEMO)
    new = apply_set(data, "brick.SCR 2.length=800 mm", str(DEMO))
    assert new["brick"][1]["length"] == "800 mm"
    new["brick"][1]["length"] = data["brick"][1]["length"]
    assert new == data                          # nothing else moved
    by_index = apply_set(data, "exhaust.NH3_ppm=900", str(DEMO))
    assert by_index["exhaust"]["NH3_ppm"] == 900
    case = load_case(DEMO, ["brick.1.length=800 mm"])
    assert case.train.bricks[1].length == pytest.approx(0.8)
    assert case.train.bricks[0].length == pytest.approx(0.65)


def test_what_if_longer_scr_lowers_nox(capsys):
    """More SCR volume never raises outlet NOx at fixed inlet (common practice)."""
    out = []
    for L in ("400 mm", "900 mm"):
        assert main(["point", str(DEMO), "--json", "--set", f"brick.SCR 2.length={L}"]) == 0
        obj = json.loads(capsys.readouterr().out)
        out.append(obj["outlet"]["ppm_wet"]["NO"] + obj["outlet"]["ppm_wet"]["NO2"])
    assert out[1] < out[0]


BAD = [
    ("exhaust.T=\"1200 degC\"", "exhaust.T"),
    ("exhaust.NO_ppm=-5", "exhaust.NO_ppm"),
    ("brick.0.catalyst=\"vanadia_extrudd\"", "vanadia_extruded"),
    ("brick.0.length=\"3 kg\"", "brick[0].length"),
    ("brick.0.activity=0", "activity"),
    ("brick.2.washcoat_um=[700, 12]", "washcoat"),
    ("brick.0.cpsi=-3", "brick[0].cpsi"),
    ("brick.0.lenght=\"3 m\"", "did you mean length"),
    ("nosuch.x=1", "nosuch"),
]


@pytest.mark.parametrize("assignment,expect", BAD)
def test_bad_input_exit_2_one_line(assignment, expect, capsys):
    code = main(["point", str(DEMO), "--set", assignment])
    err = capsys.readouterr().err
    assert code == 2
    assert err.count("\n") == 1 and "Traceback" not in err
    assert "genset_point.toml" in err or "toml" in err
    assert expect in err


def test_missing_file_and_bad_toml(tmp_path, capsys):
    assert main(["point", str(tmp_path / "none.toml")]) == 2
    bad = tmp_path / "bad.toml"
    bad.write_text("title = \n")
    assert main(["point", str(bad)]) == 2
    err = capsys.readouterr().err
    assert "bad.toml" in err and "Traceback" not in err


def test_catalyst_listing_and_provenance(capsys):
    assert main(["catalysts"]) == 0
    out = capsys.readouterr().out
    for key in ("vanadia_extruded", "cu_chabazite", "fe_zeolite", "asc_dual_layer"):
        assert key in out
    assert main(["catalysts", "cu_chabazite"]) == 0
    out = capsys.readouterr().out
    assert "from memory" in out and "fitted" in out
    assert main(["catalysts", "no_such"]) == 2


def test_sources_command(capsys):
    """`aftertreat sources CASE` names the catalyst papers, correlations, cycle and limit sources
    without solving (docs/conventions.md: the program can print the sources behind any result)."""
    assert main(["sources", str(ROOT / "cases" / "marine_e3_tier3.toml")]) == 0
    out = capsys.readouterr().out
    assert "Nova" in out and "Tronconi" in out and "E3" in out and "MARPOL" in out
    assert main(["sources", str(DEMO)]) == 0


def test_temperature_outside_the_catalyst_range_warns_or_fails_in_strict_mode(capsys):
    """An inlet below the catalyst's validity range is a warning with the range (exit 0, the
    rates extrapolated); with --strict it is bad input (exit 2, one line)."""
    code = main(["point", str(DEMO), "--set", 'exhaust.T="100 degC"'])
    out = capsys.readouterr()
    assert code == 0 and "validity range" in out.out + out.err
    code = main(["point", str(DEMO), "--set", 'exhaust.T="100 degC"', "--strict"])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2 and len(err) == 1 and "validity range" in err[0]
