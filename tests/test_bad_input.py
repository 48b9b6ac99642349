"""Bad input is refused with an InputError that names the value and the key (and the file, where
there is one); a solve that cannot converge reports it instead of raising."""
import numpy as np
import pytest

import aftertreat as at
from aftertreat import InputError
from aftertreat.catalyst import parse_catalyst

CAT_FILE = "<test catalyst>"


def _msg(exc_info):
    return str(exc_info.value)


def _parse(table):
    return parse_catalyst(table, key="test", file=CAT_FILE)


def _reaction(**over):
    r = {"name": "decomposition", "equation": "N2O -> N2 + 0.5 O2", "form": "power_law",
         "k_ref": 1.0, "E_kJ_mol": 50.0, "orders": {"N2O": 1}}
    r.update(over)
    return r


# ---- geometry --------------------------------------------------------------------------------
def test_washcoat_thicker_than_channel():
    with pytest.raises(InputError) as e:
        at.Substrate.coated(cpsi=400, wall_mil=4, washcoat_um=(700,))
    assert e.value.key == "washcoat"
    assert "0.0007" in _msg(e) and "washcoat" in _msg(e)


def test_wall_thicker_than_pitch():
    with pytest.raises(InputError) as e:
        at.Substrate.extruded(cpsi=35, wall_mm=5.0)
    assert e.value.key == "wall" and "0.005" in _msg(e)


def test_open_frontal_area_of_one_is_refused():
    """OFA = 1 is reachable by round-off: a wall of 1e-300 m leaves (p - t_w)/p == 1.0."""
    with pytest.raises(InputError) as e:
        at.Substrate("extruded", 1e-300, cell_density=35 / 0.0254 ** 2)
    assert e.value.key == "ofa" and "1.0" in _msg(e)


@pytest.mark.parametrize("key,value", [("length", -0.1), ("diameter", 0.0),
                                       ("length", float("nan"))])
def test_brick_size_must_be_positive(key, value):
    kw = {"length": 0.5, "diameter": 0.5, key: value}
    with pytest.raises(InputError) as e:
        at.Brick("SCR 1", at.Substrate.extruded(cpsi=35, wall_mm=0.7),
                 at.load_catalyst("vanadia_extruded"), **kw)
    assert e.value.key == f"SCR 1.{key}" and str(value) in _msg(e)


# ---- streams ---------------------------------------------------------------------------------
def test_negative_molar_flow():
    F = np.full(len(at.SPECIES), 0.1)
    F[at.SPECIES.index("NH3")] = -1e-6
    with pytest.raises(InputError) as e:
        at.Stream(F=F, T=600.0)
    assert "NH3" in e.value.key and "-1e-06" in _msg(e)


def test_negative_mole_fraction():
    with pytest.raises(InputError) as e:
        at.Stream.from_mole_fractions({"NO": -800e-6}, T=600.0, total_mol_s=1.0)
    assert e.value.key == "NO" and "-0.0008" in _msg(e)


def test_unknown_species_in_stream_suggests_name():
    with pytest.raises(InputError) as e:
        at.Stream.from_mole_fractions({"H20": 0.1}, T=600.0, total_mol_s=1.0)
    assert e.value.key == "H20" and "did you mean" in _msg(e) and "H2O" in _msg(e)


# ---- operating point -------------------------------------------------------------------------
def test_temperature_outside_catalyst_range():
    cat = at.load_catalyst("vanadia_extruded")
    s = at.Stream.from_mole_fractions({"NO": 800e-6, "NH3": 800e-6, "O2": 0.1, "H2O": 0.08},
                                      T=700 + 273.15, mass_kg_s=1.2)
    b = at.Brick("SCR 1", at.Substrate.extruded(cpsi=35, wall_mm=0.7), cat, length=0.6,
                 diameter=0.8)
    from aftertreat.reactor import set_strict_temperature_range
    sol = at.solve_brick(b, s)               # default: a warning with the range, not an error
    note = [n for n in sol.notes if "validity range" in n]
    assert len(note) == 1 and "700.0 C" in note[0] and "200..550" in note[0]
    set_strict_temperature_range(True)       # --strict: the error naming the catalyst file
    try:
        with pytest.raises(InputError) as e:
            at.solve_brick(b, s)
    finally:
        set_strict_temperature_range(False)
    assert e.value.key == "valid_T_C" and e.value.file == cat.file
    assert "700" in _msg(e) and "SCR 1" in _msg(e) and "vanadia_extruded" in _msg(e)


def test_pressure_drop_beyond_inlet_pressure_names_brick():
    """A brick whose pressure drop exceeds the inlet pressure is an input problem (too long /
    too fine / too much flow); the error should say which brick (common practice)."""
    s = at.Stream.from_mole_fractions({"NO": 800e-6, "NH3": 800e-6, "O2": 0.1, "H2O": 0.08},
                                      T=350 + 273.15, mass_kg_s=50.0)
    b = at.Brick("SCR 1", at.Substrate.extruded(cpsi=35, wall_mm=0.7),
                 at.load_catalyst("vanadia_extruded"), length=3.0, diameter=0.3)
    with pytest.raises(InputError) as e:
        at.solve_brick(b, s)
    assert "SCR 1" in _msg(e)


# ---- catalyst files --------------------------------------------------------------------------
def test_unbalanced_reaction(catalyst_dict):
    with pytest.raises(InputError) as e:
        _parse(catalyst_dict([_reaction(equation="N2O -> N2 + O2")]))
    assert e.value.key == "reaction[0].equation" and e.value.file == CAT_FILE
    assert "N2O -> N2 + O2" in _msg(e) and "'O': 1.0" in _msg(e) and CAT_FILE in _msg(e)


def test_unknown_rate_form_suggests_name(catalyst_dict):
    with pytest.raises(InputError) as e:
        _parse(catalyst_dict([_reaction(form="power_lw")]))
    assert e.value.key == "reaction[0].form" and "power_lw" in _msg(e)
    assert "did you mean power_law" in _msg(e) and CAT_FILE in _msg(e)


def test_unknown_species_in_equation_suggests_name(catalyst_dict):
    with pytest.raises(InputError) as e:
        _parse(catalyst_dict([_reaction(equation="N20 -> N2 + 0.5 O2")]))
    assert e.value.key == "reaction[0].equation" and "N20" in _msg(e)
    assert "did you mean" in _msg(e) and "N2O" in _msg(e) and CAT_FILE in _msg(e)


def test_unknown_species_in_orders_suggests_name(catalyst_dict):
    with pytest.raises(InputError) as e:
        _parse(catalyst_dict([_reaction(orders={"NH4": 1})]))
    assert e.value.key == "reaction[0].orders.NH4"
    assert "did you mean" in _msg(e) and "NH3" in _msg(e) and CAT_FILE in _msg(e)


def test_unknown_reaction_key_suggests_name(catalyst_dict):
    r = _reaction()
    r["k_rf"] = r.pop("k_ref")
    with pytest.raises(InputError) as e:
        _parse(catalyst_dict([r]))
    assert e.value.key == "reaction[0].k_rf" and "did you mean k_ref" in _msg(e)
    assert CAT_FILE in _msg(e)


def test_unknown_top_level_key_suggests_name(catalyst_dict):
    table = catalyst_dict([_reaction()])
    table["valid_T"] = table.pop("valid_T_C")
    with pytest.raises(InputError) as e:
        _parse(table)
    assert e.value.key == "valid_T" and "did you mean valid_T_C" in _msg(e)


def test_missing_provenance(catalyst_dict):
    table = catalyst_dict([_reaction()])
    del table["reaction"][0]["provenance"]["E_kJ_mol"]
    with pytest.raises(InputError) as e:
        _parse(table)
    assert e.value.key == "reaction[0].provenance.E_kJ_mol" and CAT_FILE in _msg(e)


def test_unknown_catalyst_key_suggests_name():
    with pytest.raises(InputError) as e:
        at.load_catalyst("vanadia_extrudd")
    assert "vanadia_extrudd" in _msg(e) and "did you mean vanadia_extruded" in _msg(e)


# ---- non-convergence -------------------------------------------------------------------------
def test_non_convergence_is_reported_not_raised(deadline):
    """One Newton iteration per cell and no continuation cannot solve a coupled SCR brick from
    the crude start: the result says converged == False with its residual, and nothing is
    raised."""
    s = at.Stream.from_mole_fractions({"NO": 800e-6, "NH3": 800e-6, "O2": 0.1, "H2O": 0.08},
                                      T=350 + 273.15, mass_kg_s=1.2)
    b = at.Brick("SCR 1", at.Substrate.extruded(cpsi=35, wall_mm=0.7),
                 at.load_catalyst("vanadia_extruded"), length=0.6, diameter=0.8)
    with deadline(30):
        crude = at.SolverSettings(max_iter=1, continuation=False, rate_continuation=False)
        sol = at.solve_brick(b, s, settings=crude)
        train = at.Train([b]).solve(s, settings=crude)
    assert sol.converged is False
    assert sol.residual > at.SolverSettings().tol
    assert train.converged is False
    with pytest.raises(at.ConvergenceError):
        from aftertreat.reactor import require_converged
        require_converged(sol)


@pytest.mark.parametrize("text", ["2**1000**1000 mm", "3 m**999", "9" * 20 + " mm"])
def test_runaway_unit_arithmetic_rejected(text):
    """pint evaluates arithmetic in unit text; a tower of powers would never return, so such
    text is rejected before pint sees it (our own guard; no external basis)."""
    from aftertreat.errors import InputError
    from aftertreat.units import to_si
    with pytest.raises(InputError):
        to_si(text, "m", key="length")


def test_runaway_unit_in_a_trace_header(tmp_path):
    """The same guard on a trace column's unit, with the column named."""
    from aftertreat.errors import InputError
    from aftertreat.trace import read_trace
    f = tmp_path / "t.csv"
    f.write_text("time [s],power [kW],exhaust flow [kg/h],T [2**1000**1000],O2 [%],H2O [%],"
                 "NOx [ppm]\n0,100,1000,300,14,10,500\n1,100,1000,300,14,10,500\n")
    with pytest.raises(InputError) as e:
        read_trace(f)
    assert "T [2**1000**1000]" in str(e.value)


# ---- case files and report paths at the command line -----------------------------------------
_DEMO = __import__("pathlib").Path(__file__).resolve().parents[1] / "cases" / "genset_d2.toml"


def _cli(argv, capsys):
    from aftertreat.cli import main
    rc = main(argv)
    err = capsys.readouterr().err.strip().splitlines()
    return rc, err


def _edited(tmp_path, old, new, name="case.toml"):
    text = _DEMO.read_text()
    assert old in text
    f = tmp_path / name
    f.write_text(text.replace(old, new, 1))
    return f


@pytest.mark.parametrize("old,new,key,words", [
    ('length = "700 mm"', "length = 700", "length", 'length = "700 mm"'),
    ('diameter = "1300 mm"', "diameter = 1300", "diameter", "diameter_mm = 1300"),
    ("rated_power_kW = 2000", "rated_power_kW = 1e300", "engine.rated_power_kW", "2e6"),
])
def test_case_values_refused_in_one_line(tmp_path, capsys, old, new, key, words):
    """A bare number on a dimensional key is refused with the units it takes (700 would be
    700 m), and an absurd rated power is refused before it overflows: exit 2, one line."""
    rc, err = _cli(["run", str(_edited(tmp_path, old, new))], capsys)
    assert rc == 2 and len(err) == 1, err
    assert key in err[0] and words in err[0] and "case.toml" in err[0]


@pytest.mark.parametrize("kind", ["binary", "utf16", "folder"])
def test_unreadable_case_files_refused_in_one_line(tmp_path, capsys, kind):
    f = tmp_path / "case.toml"
    if kind == "binary":
        f.write_bytes(bytes(range(256)) * 4)
    elif kind == "utf16":
        f.write_bytes(_DEMO.read_text().encode("utf-16"))
    else:
        f.mkdir()
    rc, err = _cli(["run", str(f)], capsys)
    assert rc == 2 and len(err) == 1 and "case.toml" in err[0], err


def test_report_paths_checked_before_solving(tmp_path, capsys, monkeypatch):
    """--report onto an existing file, or under a parent that cannot be written, is exit 2
    with one line, before any mode is solved."""
    import aftertreat.evaluate as ev
    monkeypatch.setattr(ev, "run_case", lambda *a, **k: pytest.fail("solved before the check"))
    existing = tmp_path / "notes.txt"
    existing.write_text("the user's file")
    for target in (existing, existing / "rep", "/proc/aftertreat-report"):
        rc, err = _cli(["run", str(_DEMO), "--report", str(target)], capsys)
        assert rc == 2 and len(err) == 1 and "--report" in err[0], (target, err)
    assert existing.read_text() == "the user's file"


def test_full_precision_decimal_length_is_accepted():
    """A long decimal (as the tool itself may write a length back) is a plain quantity; only
    long whole numbers are refused by the runaway-arithmetic guard (our own guard)."""
    from aftertreat.units import to_si
    assert to_si("0.9553796329614969 m", "m", key="length") == pytest.approx(0.9553796329614969)
    assert to_si("955.3796329614969 mm", "m", key="length") == pytest.approx(0.9553796329614969)


_TURBINE = _DEMO.parent / "turbine_d1.toml"


def test_dry_o2_above_air_refused_before_solving(tmp_path, capsys, monkeypatch):
    """Wet O2 and water that give more O2 on a dry basis than air holds are refused before any
    mode is solved, naming the file, the mode and the key (y_dry = y_wet / (1 - y_H2O))."""
    import aftertreat.reactor as rx
    monkeypatch.setattr(rx, "solve_brick", lambda *a, **k: pytest.fail("solved before"),
                        raising=False)
    text = _TURBINE.read_text()
    old = "O2_pct = [12.0, 12.8, 13.6]"
    assert old in text
    f = tmp_path / "gt.toml"
    f.write_text(text.replace(old, "O2_pct = [12.0, 12.8, 18.5]"))     # 18.5 / 0.86 = 21.5 % dry
    rc, err = _cli(["run", str(f)], capsys)
    assert rc == 2 and len(err) == 1, err
    assert "gt.toml" in err[0] and "engine_out.O2_pct" in err[0] and "mode '3'" in err[0], err


def test_dry_o2_between_reference_air_and_air_refused_for_o2_corrected_limits(tmp_path, capsys):
    """20.9 % <= O2_dry < 20.95 %: physically possible, but the set's reference-O2 correction
    (O2 of air 20.9 % for this set) diverges; refused before solving, naming the limit set."""
    text = _TURBINE.read_text()
    f = tmp_path / "gt.toml"
    # 17.97 % wet at 14 % water -> 20.90 % dry
    f.write_text(text.replace("O2_pct = [12.0, 12.8, 13.6]", "O2_pct = [12.0, 12.8, 17.98]"))
    rc, err = _cli(["run", str(f)], capsys)
    assert rc == 2 and len(err) == 1, err
    assert "gt.toml" in err[0] and "mode '3'" in err[0] and "limit set" in err[0], err


_HARBOUR = _DEMO.parent / "harbour_trace.toml"
_POINT = _DEMO.parent / "genset_point.toml"


@pytest.mark.parametrize("case,assignment,key", [
    (_DEMO, 'brick.SCR 1.heat_loss_W_m2K="lots"', "brick[0].heat_loss_W_m2K"),
    (_DEMO, 'brick.ASC.washcoat_um=["thin", 10]', "brick[2].washcoat_um"),
    (_DEMO, 'brick.SCR 1.sherwood=["a"]', "brick[0].sherwood"),
    (_DEMO, 'limits.gwp=["AR6"]', "limits.gwp"),
    (_DEMO, 'limits.sets=[["imo_tier_iii"]]', "limits.sets"),
    (_DEMO, 'limits.custom.0.factor="x"', "limits.custom[0].factor"),
    (_DEMO, 'limits.custom.0.quantity=["NH3_ppmvd"]', "limits.custom[0].quantity"),
    (_DEMO, "limits.custom.0.min_load_pct=150", "limits.custom[0].min_load_pct"),
    (_DEMO, 'limits.custom.1.apply_exemptions="no"', "limits.custom[1].apply_exemptions"),
    (_DEMO, 'fuel.cracked_H2="no"', "fuel.cracked_H2"),
    (_DEMO, "sizing.cost_per_L.vanadia=0.04", "sizing.cost_per_L.vanadia"),
    (_DEMO, "sizing.cost_per_L.vanadia_extruded=true", "sizing.cost_per_L.vanadia_extruded"),
    (_HARBOUR, 'transient.dosing.ANR_max="high"', "transient.dosing.ANR_max"),
    (_HARBOUR, "transient.dosing.response_s=0", "transient.dosing.response_s"),
])
def test_wrong_types_are_one_line_not_a_traceback(case, assignment, key, capsys):
    """Text, lists and quoted words where numbers, keys or true/false belong: exit 2, one line
    naming the key as the case spells it (found by reading the parsers against the schema)."""
    rc, err = _cli(["run", str(case), "--set", assignment], capsys)
    assert rc == 2 and len(err) == 1, err
    assert f"'{key}'" in err[0] and "Traceback" not in err[0], err


def test_balance_species_in_a_point_case_named_as_typed(capsys):
    rc, err = _cli(["point", str(_POINT), "--set", "exhaust.N2_ppm=700000"], capsys)
    assert rc == 2 and len(err) == 1 and "'exhaust.N2_ppm'" in err[0], err


@pytest.mark.parametrize("case,assignment,key", [
    (_DEMO, "brick.SCR 1.wall_mm=0.7", "brick[0].wall_mm"),            # wall given twice
    (_DEMO, "brick.SCR 1.length_mm=700", "brick[0].length_mm"),        # length given twice
    (_DEMO, "brick.SCR 1.washcoat_um=30", "brick[0].washcoat_um"),     # not read for extruded
    (_TURBINE, "brick.SCR layer 1.cpsi=35", "brick[0].cpsi"),          # not read for plate
])
def test_values_the_model_would_not_read_are_refused(case, assignment, key, capsys):
    """A value given twice (two unit forms) or one the substrate kind does not use is refused
    by name instead of being silently ignored (our own rule, docs/case-file.md)."""
    rc, err = _cli(["run", str(case), "--set", assignment], capsys)
    assert rc == 2 and len(err) == 1 and f"'{key}'" in err[0], err


def test_diameter_from_dp_needs_a_budget(tmp_path, capsys):
    text = _DEMO.read_text().replace("dp_max_kPa = 3.0 ", "diameter_from_dp = true ")
    assert "diameter_from_dp = true" in text
    f = tmp_path / "case.toml"
    f.write_text(text)
    rc, err = _cli(["size", str(f)], capsys)
    assert rc == 2 and len(err) == 1 and "'sizing.diameter_from_dp'" in err[0], err
