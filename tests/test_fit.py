"""Kinetic calibration (``aftertreat fit``): bad lab data and specs, the identifiability
warning, a three-site NH3-TPD against Redhead's analysis, and the written catalyst file."""
import json
import shutil
from pathlib import Path

import numpy as np
import pytest

from aftertreat.cli import main
from aftertreat.fit import fit, load_fit_spec
from aftertreat.report import to_toml
from aftertreat.units import R_GAS, ZERO_C_K

ROOT = Path(__file__).resolve().parents[1]
_PROV = "fitted: test chemistry"
REACTOR = {"substrate": "coated", "cpsi": 400, "wall_mil": 4, "washcoat_um": 30,
           "length": "50 mm", "diameter": "25.4 mm", "cells": 4, "GHSV_per_h": 60000}


def _catalyst_file(path: Path, name: str, valid_T_C, reactions, sites=()) -> Path:
    """A test catalyst file: its reactions and sites with the required source and pores."""
    data = {"name": name, "role": "SCR", "valid_T_C": list(valid_T_C),
            "source": [{"key": "test", "authors": "test", "year": 2026, "title": "test",
                        "journal": "test", "use": "test"}],
            "pores": {"porosity": 0.4, "tortuosity": 3.0, "pore_diameter_nm": 200.0,
                      "provenance": {"porosity": _PROV, "tortuosity": _PROV,
                                     "pore_diameter_nm": _PROV}},
            "reaction": list(reactions)}
    if sites:
        data["site"] = list(sites)
    path.write_text(to_toml(data))
    return path


def _power_law_catalyst(tmp_path, two_parallel=False) -> Path:
    """A test catalyst: NO reduced by a first-order power law (optionally two identical ones
    in parallel: only the sum of their rate constants is seen by any data)."""
    rx = [{"name": "reduction", "equation": "4 NO + 4 NH3 + O2 -> 4 N2 + 6 H2O",
           "form": "power_law", "k_ref": 30.0, "E_kJ_mol": 50.0, "T_ref_C": 250.0,
           "orders": {"NO": 1}, "provenance": {"k_ref": _PROV, "E_kJ_mol": _PROV,
                                               "orders": _PROV}}]
    if two_parallel:
        rx.append(dict(rx[0], name="reduction bis", k_ref=20.0))
    f = tmp_path / ("pl_two.toml" if two_parallel else "pl.toml")   # (loaded files are cached)
    return _catalyst_file(f, "test power law", (150.0, 600.0), rx)


def _spec(tmp_path, catalyst, csv_text, params, kind="steady", extra=None, measured=("NO",)):
    (tmp_path / "data.csv").write_text(csv_text)
    exp = {"name": "points", "kind": kind, "data": "data.csv",
           "feed": {"NO_ppm": 500, "NH3_ppm": 500, "O2_pct": 10, "H2O_pct": 5},
           "measured": list(measured), "uncertainty": {"abs_ppm": 3.0, "rel": 0.02}}
    exp.update(extra or {})
    data = {"title": "test", "catalyst": str(catalyst), "output": "out.toml",
            "reactor": dict(REACTOR), "experiment": [exp], "parameter": params}
    f = tmp_path / "spec.toml"
    f.write_text(to_toml(data))
    return f


GOOD_CSV = "T [degC],NO_out [ppm]\n200,400\n250,300\n300,200\n"
K_PARAM = [{"reaction": "reduction", "key": "k_ref", "min": 0.1, "max": 1e4}]


@pytest.mark.parametrize("csv_text, params, key", [
    ("T [degC],NH3_out [ppm]\n200,1\n", K_PARAM, "NO_out"),                      # missing column
    ("T [furlongs],NO_out [ppm]\n200,1\n", K_PARAM, "T [furlongs]"),             # unknown unit
    ("T [degC],NO_out [ppm]\n200,1\n700,1\n", K_PARAM, "T [degC]"),              # outside range
    ("T [degC],NO_out [ppm]\n200,abc\n", K_PARAM, "NO_out [ppm]"),               # not a number
    (GOOD_CSV, [{"reaction": "no such", "key": "k_ref", "min": 1, "max": 2}], "reaction"),
    (GOOD_CSV, [{"reaction": "reduction", "key": "k_reff", "min": 1, "max": 2}], "key"),
    (GOOD_CSV, [{"reaction": "reduction", "key": "k_ref", "min": 5, "max": 2}], "min"),
])
def test_bad_data_and_specs_give_one_line_and_exit_2(tmp_path, capsys, csv_text, params, key):
    """Bad lab data or fit specs stop before fitting: exit 2, one line naming the file and the
    column or key (and the row for data) - project convention (docs/conventions.md)."""
    spec = _spec(tmp_path, _power_law_catalyst(tmp_path), csv_text, params)
    assert main(["fit", str(spec)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and key in err[0] and ("data.csv" in err[0] or "spec.toml" in err[0])
    assert not (tmp_path / "out.toml").exists()


def test_time_must_increase(tmp_path, capsys):
    """A time column that goes back names the row (the data row where time stops rising)."""
    spec = _spec(tmp_path, _power_law_catalyst(tmp_path),
                 "time [s],T [degC],NH3_out [ppm]\n0,200,0\n10,200,5\n5,200,9\n",
                 K_PARAM, kind="step", measured=("NH3",), extra={"feed": {"NH3_ppm": 500}})
    assert main(["fit", str(spec)]) == 2
    err = capsys.readouterr().err
    assert "data row 3" in err and "time [s]" in err


def _synthetic(tmp_path, catalyst, k_true_scale=1.0):
    """Steady NO outlet made by the bench model itself at known parameters (no noise)."""
    from aftertreat.bench import predict
    spec_file = _spec(tmp_path, catalyst, "T [degC],NO_out [ppm]\n" + "".join(
        f"{T},0\n" for T in range(175, 426, 25)), K_PARAM)
    spec = load_fit_spec(spec_file)
    pr = predict(spec.reactor, spec.experiments[0])
    rows = "".join(f"{T},{v * k_true_scale:.6f}\n" for T, v in
                   zip(range(175, 426, 25), pr.outlet_ppm["NO"]))
    (tmp_path / "data.csv").write_text("T [degC],NO_out [ppm]\n" + rows)
    return spec_file


def test_two_rate_constants_seen_only_together_raise_the_warning(tmp_path):
    """Two identical first-order reactions in parallel: any data see only k1 + k2, so fitting
    both must warn (|correlation| > 0.95 or a near-singular direction) - Bates & Watts 1988,
    ch. 3 (collinear parameter effects). The single-reaction fit of the same data gives no such
    warning (the check does not fire on a well-posed fit)."""
    cat = _power_law_catalyst(tmp_path, two_parallel=True)
    f = _synthetic(tmp_path, cat)
    data = (tmp_path / "spec.toml").read_text()
    data = data.replace('[[parameter]]\nreaction = "reduction"\nkey = "k_ref"\nmin = 0.1\n'
                        'max = 10000.0\n', '[[parameter]]\nreaction = "reduction"\nkey = "k_ref"'
                        '\nmin = 0.1\nmax = 10000.0\n\n[[parameter]]\nreaction = '
                        '"reduction bis"\nkey = "k_ref"\nmin = 0.1\nmax = 10000.0\n')
    f.write_text(data)
    res = fit(load_fit_spec(f))
    assert any("correlated" in w or "near-singular" in w for w in res.warnings), res.warnings
    one = fit(load_fit_spec(_synthetic(tmp_path, _power_law_catalyst(tmp_path))))
    assert not any("correlated" in w or "near-singular" in w for w in one.warnings)
    # noiseless data from the model itself: the single constant is recovered exactly
    assert one.parameters[0].value == pytest.approx(
        30.0 * np.exp(-50e3 / R_GAS * (1 / one.spec.T_mid_K - 1 / (250 + ZERO_C_K))), rel=1e-4)


def _three_site_catalyst(tmp_path) -> Path:
    """Three NH3 storage sites with first-order desorption energies 100, 130 and 160 kJ/mol
    (alpha = 0, no Temkin term), 10 mol/m3 each, and slow Langmuir adsorption (little
    re-adsorption)."""
    sites, rxs = [], []
    for name, E, cap in (("W", 120.0, 10.0), ("M", 145.0, 10.0), ("S", 170.0, 10.0)):
        sites.append({"name": name, "capacity_mol_m3": cap, "provenance":
                      {"capacity_mol_m3": _PROV}})
        rxs.append({"name": f"adsorption {name}", "equation": f"NH3 -> NH3({name})",
                    "form": "mass_action", "k_ref": 0.05, "E_kJ_mol": 0.0, "T_ref_C": 300.0,
                    "orders": {"NH3": 1}, "free_sites": {name: 1},
                    "provenance": {"k_ref": _PROV, "E_kJ_mol": _PROV, "orders": _PROV,
                                   "free_sites": _PROV}})
        rxs.append({"name": f"desorption {name}", "equation": f"NH3({name}) -> NH3",
                    "form": "temkin_desorption", "A": 1e13, "E_kJ_mol": E, "alpha": 0.0,
                    "site": name,
                    "T_ref_C": 300.0, "provenance": {"A": _PROV, "E_kJ_mol": _PROV,
                                                     "alpha": _PROV}})
    return _catalyst_file(tmp_path / "three.toml", "three-site test", (50.0, 700.0), rxs,
                          sites)


def _peaks(T, y):
    """Temperatures of the local maxima of y (parabola through each maximum's neighbours)."""
    out = []
    for i in range(1, len(y) - 1):
        if y[i] > y[i - 1] and y[i] >= y[i + 1] and y[i] > 0.05 * y.max():
            a, b, c = y[i - 1], y[i], y[i + 1]
            d = 0.5 * (a - c) / (a - 2 * b + c)
            out.append(T[i] + d * (T[i + 1] - T[i]))
    return out


def _redhead_Tp(A, E, beta):
    """Peak temperature of first-order desorption at heating rate beta [K/s]: the root of
    E / (R Tp^2) = (A / beta) exp(-E / (R Tp)) (Redhead, Vacuum 12 (1962) 203, eq. 3)."""
    from scipy.optimize import brentq
    return brentq(lambda T: E / (R_GAS * T ** 2) - A / beta * np.exp(-E / (R_GAS * T)),
                  200.0, 1500.0)


def test_three_site_tpd_gives_three_peaks_that_move_as_redhead_says(tmp_path):
    """A TPD of the three-site catalyst (adsorbed at 100 C, ramped at 5 and 20 K/min) shows
    three peaks; each moves to higher T with the faster ramp, and by the amount Redhead's
    first-order analysis gives (Redhead 1962, eq. 3): shift within 2 % and each peak within
    1 K of its Redhead temperature (measured: 0.02-0.21 K; re-adsorption is kept small by a
    slow adsorption and a small capacity, so the ideal first-order case applies). Peaks are
    read from 400 rows by a parabola through each maximum."""
    from aftertreat.bench import predict
    cat = _three_site_catalyst(tmp_path)
    found = {}
    for beta_K_min in (5.0, 20.0):
        t_end = (700.0 - 60.0) / beta_K_min * 60.0
        t = np.linspace(0.0, t_end, 400)
        T = 60.0 + beta_K_min * t / 60.0
        csv = "time [s],T [degC],NH3_out [ppm]\n" + "".join(f"{a:.3f},{b:.3f},0\n"
                                                             for a, b in zip(t, T))
        spec = _spec(tmp_path, cat, csv, [{"reaction": "desorption W", "key": "E_kJ_mol",
                                           "min": 50, "max": 200}], kind="tpd",
                     measured=("NH3",), extra={"feed": {"H2O_pct": 5},
                                               "adsorb": {"T_C": 60, "NH3_ppm": 1000}})
        s = load_fit_spec(spec)
        pr = predict(s.reactor, s.experiments[0])
        assert pr.converged
        y = pr.outlet_ppm["NH3"]
        found[beta_K_min] = _peaks(T[3:] + ZERO_C_K, y[3:])   # (after the purge of the feed)
        assert len(found[beta_K_min]) == 3, found
    for k, E in enumerate((120e3, 145e3, 170e3)):
        # the project's desorption rate is per m3 of layer, r = A exp(-E/RT) theta [mol/(m3 s)]
        # (kinetics.py), so the coverage decays with A / Omega [1/s]: Omega = 10 mol/m3 here
        A = 1e13 / 10.0
        r5, r20 = (_redhead_Tp(A, E, b / 60.0) for b in (5.0, 20.0))
        m5, m20 = found[5.0][k], found[20.0][k]
        assert m20 > m5
        assert (m20 - m5) == pytest.approx(r20 - r5, rel=0.02)
        assert abs(m5 - r5) < 1.0 and abs(m20 - r20) < 1.0


def test_fit_writes_a_new_catalyst_file_and_never_overwrites(tmp_path, capsys):
    """aftertreat fit: the new catalyst file loads, cites the spec with its checksum in the
    fitted parameter's provenance and carries the covariance; `catalysts FILE` shows the
    interval; a second fit to the same name is refused (exit 2) and the file is unchanged."""
    from aftertreat.catalyst import load_catalyst
    spec = _synthetic(tmp_path, _power_law_catalyst(tmp_path))
    assert main(["fit", str(spec), "--json"]) == 0
    obj = json.loads(capsys.readouterr().out)
    assert obj["schema"] == "aftertreat.fit/1" and obj["converged"]
    out = tmp_path / "out.toml"
    cat = load_catalyst(str(out))
    prov = cat.provenance_table()
    assert any(r["provenance"].startswith("fitted to spec.toml (sha256 ") for r in prov)
    assert cat.fit["parameters"] == ["reduction: k_ref"] and len(cat.fit["covariance"]) == 1
    assert (tmp_path / "out_fit" / "fit.png").stat().st_size > 1000
    before = out.read_bytes()
    assert main(["catalysts", str(out)]) == 0
    assert "95 % low" in capsys.readouterr().out
    assert main(["fit", str(spec)]) == 2
    assert "never overwritten" in capsys.readouterr().err
    assert out.read_bytes() == before


def test_demo_spec_reads(tmp_path):
    """The demo spec of cases/ and its invented data read cleanly (the full demo fit runs in
    benchmarks/fit_demo.py)."""
    src = ROOT / "cases" / "lab_cu_chabazite"
    dst = tmp_path / "lab"
    shutil.copytree(src, dst, ignore=shutil.ignore_patterns("*calibrated*"))
    spec = load_fit_spec(dst / "fit_cu_chabazite.toml")
    assert len(spec.parameters) == 6 and sum(e.n_points for e in spec.experiments) == 90
