"""Engine-out time traces read from CSV (aftertreat.trace)."""
from pathlib import Path

import numpy as np
import pytest

from aftertreat.errors import InputError
from aftertreat.trace import read_trace

DEMO = Path(__file__).resolve().parents[1] / "cases" / "harbour_manoeuvre.csv"

HEADER = ("time [s],power [kW],exhaust flow [kg/h],T [degC],p [kPa],O2 [%],H2O [%],NOx [ppm],"
          "NO2/NOx [-],NH3 [ppm],N2O [ppm]")
ROWS = ["0,100,3600,300,101.325,12,10,500,0.1,20,10",
        "1,200,7200,350,102,11,12,800,0.05,30,15",
        "2.5,150,5400,320,101.5,11.5,11,700,0,10,12"]


def write(tmp_path, lines, name="trace.csv"):
    path = tmp_path / name
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


def test_demo_trace_reads_and_integrates():
    """The invented demo trace: 1800 samples at 1 Hz from 0 s, time strictly increasing; work is
    the trapezoid rule sum of (P_i + P_i+1)/2 dt_i / 3600 s/h (arithmetic)."""
    tr = read_trace(DEMO)
    assert len(tr) == 1800
    assert tr.t_s[0] == 0.0 and tr.duration_s == 1799.0
    assert np.all(np.diff(tr.t_s) > 0)
    P, t = tr.power_kW.tolist(), tr.t_s.tolist()
    hand = sum((P[i] + P[i + 1]) / 2 * (t[i + 1] - t[i]) for i in range(len(t) - 1)) / 3600.0
    assert tr.work_kWh == pytest.approx(hand, rel=1e-12)
    assert tr.basis == "dry" and tr.file == str(DEMO)
    assert np.all(tr.H2_ppm == 0.0)       # absent optional column defaults to zero


def test_units_converted_to_si(tmp_path):
    """degF, lb/h, bar, MW, min and % against hand conversions. Bases: T[K] = (T[degF] - 32) 5/9
    + 273.15 and 1 bar = 1e5 Pa (NIST SP 811, exact); 1 lb = 0.45359237 kg (international pound,
    exact); 1 min = 60 s; 1 % = 1e4 ppm = 0.01 (arithmetic)."""
    path = write(tmp_path, [
        ("time [min],power [MW],exhaust flow [lb/h],T [degF],p [bar],O2 [%],H2O [%],NOx [%],"
         "NO2/NOx [%]"),
        "0,1.5,10000,572,1.02,13,9,0.08,10",
        "0.5,2.0,12000,662,1.03,12,10,0.1,5"])
    tr = read_trace(path)
    np.testing.assert_allclose(tr.t_s, [0.0, 30.0], rtol=1e-14)
    np.testing.assert_allclose(tr.power_kW, [1500.0, 2000.0], rtol=1e-14)
    np.testing.assert_allclose(tr.mass_flow_kg_s, np.array([10000, 12000]) * 0.45359237 / 3600,
                               rtol=1e-14)
    np.testing.assert_allclose(tr.T_K, (np.array([572, 662]) - 32) * 5 / 9 + 273.15, rtol=1e-14)
    np.testing.assert_allclose(tr.p_Pa, [1.02e5, 1.03e5], rtol=1e-14)
    np.testing.assert_allclose(tr.O2_pct, [13, 12], rtol=1e-14)
    np.testing.assert_allclose(tr.NOx_ppm, [800, 1000], rtol=1e-14)
    np.testing.assert_allclose(tr.NO2_fraction, [0.10, 0.05], rtol=1e-14)
    np.testing.assert_array_equal(tr.NH3_ppm, [0, 0])
    # 1652 degF is exactly 900 degC, the upper bound: conversion round-off must not reject it
    head = "time [s],power [kW],exhaust flow [kg/s],T [degF],O2 [%],H2O [%],NOx [ppm]"
    path = write(tmp_path, [head, "0,1,1,1652,10,10,100"], name="edge.csv")
    assert read_trace(path).T_K[0] == pytest.approx(1173.15, rel=1e-14)


def test_column_map_and_comments(tmp_path):
    """User header names via ``columns``, matched ignoring case and spaces; '#' lines and blank
    lines skipped; an absent pressure column takes 101325 Pa (standard atmosphere, ISO 2533)."""
    path = write(tmp_path, [
        "# a comment line", "",
        (" Zeit [s] , P_el [kW], m_exh [kg/s], t_turbine_out [K], o2 [%], h2o [%], nox [ppm], "
         "speed [rpm]"),
        "0, 10, 1.0, 500, 14, 15, 600, 900",
        "# a comment between rows",
        "5, 20, 2.0, 600, 13, 16, 700, 1000"])
    tr = read_trace(path, columns={"time": "zeit", "power": "P_EL", "exhaust_flow": "m_exh",
                                   "T": "T_turbine_out"})
    np.testing.assert_array_equal(tr.t_s, [0, 5])
    np.testing.assert_array_equal(tr.power_kW, [10, 20])
    np.testing.assert_array_equal(tr.mass_flow_kg_s, [1.0, 2.0])
    np.testing.assert_array_equal(tr.T_K, [500, 600])
    np.testing.assert_array_equal(tr.p_Pa, [101325.0, 101325.0])
    assert tr.duration_s == 5.0
    assert tr.work_kWh == pytest.approx(15.0 * 5 / 3600, rel=1e-15)


def test_wet_and_dry_basis(tmp_path):
    """The same numbers read as dry and as wet: dry ppm x (1 - y_H2O) = wet ppm (arithmetic);
    read as wet, the stream's wet ppm are the file's numbers."""
    path = write(tmp_path, [HEADER] + ROWS)
    dry, wet = read_trace(path, basis="dry"), read_trace(path, basis="wet")
    for i in range(len(dry)):
        h2o = dry.H2O_pct[i] / 100
        sd, sw = dry.exhaust(i).ppm_wet(), wet.exhaust(i).ppm_wet()
        for sp, given in (("NH3", dry.NH3_ppm[i]), ("N2O", dry.N2O_ppm[i])):
            assert sd[sp] == pytest.approx(given * (1 - h2o), rel=1e-9)
            assert sw[sp] == pytest.approx(given, rel=1e-9)
        assert sd["NO"] + sd["NO2"] == pytest.approx(dry.NOx_ppm[i] * (1 - h2o), rel=1e-9)
        assert sw["NO2"] == pytest.approx(wet.NOx_ppm[i] * wet.NO2_fraction[i], abs=1e-9)
        assert sd["O2"] == pytest.approx(dry.O2_pct[i] * 1e4 * (1 - h2o), rel=1e-9)
        assert sd["H2O"] == pytest.approx(sw["H2O"], rel=1e-12)    # H2O is always wet
        assert dry.exhaust(i).mass_flow == pytest.approx(dry.mass_flow_kg_s[i], rel=1e-12)
    assert len(dry.exhausts()) == 3
    with pytest.raises(InputError) as e:
        read_trace(path, basis="moist")
    assert e.value.key == "basis" and e.value.value == "moist"


def _error(path, **kw) -> InputError:
    with pytest.raises(InputError) as e:
        read_trace(path, **kw)
    assert str(path) in str(e.value)
    return e.value


def test_missing_required_column(tmp_path):
    """Dropping the NOx column: the message names the file, the column and the headers found."""
    cells = HEADER.split(",")
    path = write(tmp_path, [",".join(c for c in cells if not c.startswith("NOx"))]
                 + [",".join(v for j, v in enumerate(r.split(",")) if j != 7) for r in ROWS])
    e = _error(path)
    assert e.key == "NOx" and "NOx" in str(e) and "headers found" in str(e)
    assert "time [s]" in str(e)


def test_header_without_unit(tmp_path):
    e = _error(write(tmp_path, [HEADER.replace("T [degC]", "T")] + ROWS))
    assert e.key == "T" and "square brackets" in str(e)


def test_unit_of_wrong_dimension(tmp_path):
    e = _error(write(tmp_path, [HEADER.replace("exhaust flow [kg/h]", "exhaust flow [m]")]
                     + ROWS))
    assert e.key == "exhaust flow [m]" and e.value == "m" and "kg/s" in str(e)
    e = _error(write(tmp_path, [HEADER.replace("[degC]", "[furlongs per fortnight]")] + ROWS))
    assert e.key == "T [furlongs per fortnight]"


def test_non_numeric_and_empty_cells(tmp_path):
    """Row numbers: data row 2 is file line 4 (a comment line and the header come first)."""
    rows = list(ROWS)
    rows[1] = rows[1].replace(",800,", ",abc,")
    e = _error(write(tmp_path, ["# comment", HEADER] + rows))
    assert e.key == "NOx [ppm]" and e.value == "abc"
    assert "data row 2" in str(e) and "file line 4" in str(e)
    rows[1] = ROWS[1].replace(",350,", ",,")
    e = _error(write(tmp_path, [HEADER] + rows))
    assert e.key == "T [degC]" and e.value == "" and "empty" in str(e)
    e = _error(write(tmp_path, [HEADER, ROWS[0] + ",7"]))
    assert "line 2" in str(e) and "11 cells" in str(e)


def test_time_not_increasing(tmp_path):
    rows = [ROWS[0], ROWS[1], ROWS[2].replace("2.5,", "1,", 1)]
    e = _error(write(tmp_path, [HEADER] + rows))
    assert e.key == "time [s]" and e.value == 1.0 and "data row 3" in str(e)
    e = _error(write(tmp_path, [HEADER, "-1" + ROWS[0][1:]]))
    assert e.key == "time [s]" and e.value == -1.0


def test_values_out_of_range(tmp_path):
    """T above 900 degC and ppm below 0 (project conventions), O2 above 21 % (air), NO2/NOx
    above 1 (a fraction; arithmetic), zero exhaust flow."""
    rows = [ROWS[0], ROWS[1].replace(",350,", ",950,"), ROWS[2]]
    e = _error(write(tmp_path, [HEADER] + rows))
    assert e.key == "T [degC]" and e.value == 950.0 and "0..900 degC" in str(e)
    assert "data row 2" in str(e)
    e = _error(write(tmp_path, [HEADER, ROWS[0].replace(",12,10,", ",22,10,")]))
    assert e.key == "O2 [%]" and e.value == 22.0
    e = _error(write(tmp_path, [HEADER, ROWS[0].replace(",0.1,", ",1.2,")]))
    assert e.key == "NO2/NOx [-]" and e.value == 1.2
    e = _error(write(tmp_path, [HEADER, ROWS[0].replace(",3600,", ",0,")]))
    assert e.key == "exhaust flow [kg/h]" and e.value == 0.0
    e = _error(write(tmp_path, [HEADER, ROWS[0].replace(",20,10", ",-5,10")]))
    assert e.key == "NH3 [ppm]" and e.value == -5.0 and ">= 0" in str(e)


def test_unknown_key_in_column_map(tmp_path):
    e = _error(write(tmp_path, [HEADER] + ROWS), columns={"exhaust flow": "m_exh"})
    assert e.key == "columns.exhaust flow" and e.value == "m_exh"
    assert "did you mean" in str(e)
