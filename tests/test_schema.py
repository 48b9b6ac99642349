"""The case-file schema (aftertreat/schema.py) against the parsers and the committed reference.

Where each rule comes from:
- the reference ``docs/case-file.md`` is the output of ``python -m aftertreat.schema`` (our own
  contract: it is regenerated whenever a key changes);
- the key sets, ranges, choices and defaults are those the parsers enforce (aftertreat/case.py,
  cyclecase.py, cycle.py, limits.py, build.py, transient_run.py, brick.py); the schema only
  describes them, so every one is held here against the parser's behaviour on the demo cases.
"""
import copy
import re
import subprocess
import sys
from pathlib import Path

import pytest

from aftertreat import build, case as point_case, cli, cycle, cyclecase, geometry, limits
from aftertreat import schema, transient_run
from aftertreat.case import parse_case, read_toml
from aftertreat.cyclecase import load_run_case, parse_run_case
from aftertreat.errors import InputError
from aftertreat.species import INDEX

REPO = Path(__file__).resolve().parents[1]
DOC = REPO / "docs" / "case-file.md"
D2 = REPO / "cases" / "genset_d2.toml"            # combustion method, no dosing, has [sizing]
TURBINE = REPO / "cases" / "turbine_d1.toml"      # measured method, plate bricks
POINT = REPO / "cases" / "genset_point.toml"      # point case
TRACE = REPO / "cases" / "harbour_trace.toml"     # trace case

_DATA = {p: read_toml(p) for p in (D2, TURBINE, POINT, TRACE)}


# ---- (a) the committed reference is the generator's output ----------------------------------
def test_reference_is_current():
    """Our contract: docs/case-file.md is what the schema generates (regenerate with the
    command in its first lines)."""
    assert DOC.read_text(encoding="utf-8") == schema.markdown(), \
        "docs/case-file.md is out of date: python -m aftertreat.schema > docs/case-file.md"


def test_reference_command_prints_the_reference():
    """The command the reference names prints it, and nothing on stderr."""
    run = subprocess.run([sys.executable, "-m", "aftertreat.schema"], cwd=REPO,
                         capture_output=True, text=True, timeout=300)
    assert run.returncode == 0, run.stderr
    assert run.stderr == ""
    assert run.stdout == DOC.read_text(encoding="utf-8")
    assert "python -m aftertreat.schema > docs/case-file.md" in run.stdout.splitlines()[2]


def test_reference_has_every_key_and_no_unfilled_list():
    """Every key of every table appears in its section; every {name} was filled from the
    code (our contract)."""
    text = schema.markdown()
    assert not re.search(r"\{[A-Za-z_0-9]+\}", text)
    sections = re.split(r"^## ", text, flags=re.M)
    for table, heading, _ in schema.TABLES:
        sec = next(s for s in sections if s.startswith(heading + "\n"))
        for name in schema.keys(table):
            assert f"`{name}`" in sec, (heading, name)


def test_fill_refuses_an_unknown_name():
    with pytest.raises(KeyError):
        schema.fill("one of {no_such_list}")


def test_schema_import_is_light():
    """The CLI imports the parsers, and so the schema, on every start: no pandas, matplotlib
    or cantera at import time (the brief for this module)."""
    code = ("import sys, aftertreat.schema; "
            "print(sorted(m for m in ('pandas', 'matplotlib', 'cantera') if m in sys.modules))")
    run = subprocess.run([sys.executable, "-c", code], cwd=REPO, capture_output=True,
                         text=True, timeout=300)
    assert run.returncode == 0, run.stderr
    assert run.stdout.strip() == "[]"


# ---- (b) every parser key set is the schema's -----------------------------------------------
@pytest.mark.parametrize("parser_keys,table,kw", [
    (point_case._TOP, "", {"case": "point"}),
    (point_case._EXHAUST, "exhaust", {}),
    (point_case._BRICK, "brick[]", {}),
    (cyclecase._TOP, "", {"case": "cycle"}),
    (cyclecase._ENGINE, "engine", {}),
    (cyclecase._FUEL, "fuel", {}),
    (cyclecase._CYCLE, "cycle", {}),
    (cyclecase._OUT_COMMON, "engine_out", {"key_set": ""}),
    (cyclecase._OUT_COMBUSTION, "engine_out", {"key_set": "combustion"}),
    (cyclecase._OUT_MEASURED, "engine_out", {"key_set": "measured"}),
    (cyclecase._DOSING, "dosing", {}),
    (cyclecase._LIMITS, "limits", {}),
    (cyclecase._SIZING, "sizing", {}),
    (transient_run._KEYS, "transient", {}),
    (transient_run._DOSING_KEYS, "transient.dosing", {}),
])
def test_parser_key_set_is_the_schemas(parser_keys, table, kw):
    names = schema.keys(table, **kw)
    assert len(names) == len(set(names))
    assert set(parser_keys) == set(names)


@pytest.mark.parametrize("parser_keys,table", [
    (cycle._MODE_KEYS, "cycle.mode[]"),
    (limits._ROW_KEYS, "limits.custom[]"),
    (build._KEYS, "sizing.build.<kind>"),      # build.py keeps its own tuple
])
def test_ordered_parser_key_list_is_the_schemas(parser_keys, table):
    """These parsers list their keys in order in their messages: same keys, same order."""
    assert tuple(parser_keys) == schema.keys(table)


def test_sizing_bounds_are_the_schemas():
    """The [sizing] range check reads the schema; each range is closed, as the parser checks
    lo <= value <= hi."""
    assert cyclecase._SIZING_BOUNDS == schema.bounds("sizing")
    ranged = {k.name for k in schema.table_keys("sizing") if k.range is not None}
    assert set(schema.bounds("sizing")) == ranged
    assert {"design_margin", "dp_max_kPa", "ANR_excess"} <= ranged


# ---- placing a value in a demo case -----------------------------------------------------------
_D2_MODES = (100, 75, 50, 25, 10)               # power of the D2 modes, for a [[cycle.mode]] list


def _point_only(k: schema.Key) -> bool:
    return k.cases == (schema.POINT,)


def _place(k: schema.Key, name: str, value):
    """(parse, file, data, key named in errors) with ``value`` at ``name`` of ``k.table`` in a
    demo case that reads that key, the key's other spellings (unit-suffix alternatives) taken
    out; other values as in the demo, adjusted only where the parser's cross-key rules need
    it."""
    t = k.table
    plate = t == "brick[]" and name.startswith(("gap", "plate"))
    src = TURBINE if (k.key_set == "measured" or plate) else POINT if _point_only(k) else D2
    data = copy.deepcopy(_DATA[src])
    parse = parse_case if src == POINT else parse_run_case
    numeric = isinstance(value, (int, float)) and not isinstance(value, bool)
    if t == "":
        node, where = data, name
    elif t == "fuel":
        data["fuel"] = node = {}
        where = f"fuel.{name}"
    elif t == "cycle.mode[]":
        modes = [{"weight": 0.2, "power_pct": p} for p in _D2_MODES]
        if name == "torque_pct":
            del modes[0]["power_pct"]          # exactly one of them (cycle._parse_modes)
        if name == "weight" and numeric and 0 < value < 1:
            for m in modes[1:]:
                m["weight"] = (1.0 - value) / 4    # the weights sum to 1
        data["cycle"] = {"mode": modes}
        node, where = modes[0], f"cycle.mode[0].{name}"
    elif t == "brick[]":
        i = 2 if name == "washcoat_um" else 0      # the coated slip catalyst of the D2 case
        node, where = data["brick"][i], f"brick[{i}].{name}"
    elif t == "limits.custom[]":
        node, where = data["limits"]["custom"][0], f"[0].{name}"   # row prefix: see _names
    elif t == "sizing.build.<kind>":
        data["sizing"]["build"] = {"extruded": {}}
        node, where = data["sizing"]["build"]["extruded"], f"sizing.build.extruded.{name}"
    elif t == "transient":
        data["transient"] = node = {}
        where = f"transient.{name}"
    elif t == "transient.dosing":
        data["transient"] = {"dosing": {}}
        node, where = data["transient"]["dosing"], f"transient.dosing.{name}"
    else:
        node, where = data.setdefault(t, {}), f"{t}.{name}"
    if t == "exhaust" and name.startswith(("mass_flow", "molar_flow")):
        for n in ("mass_flow", "mass_flow_kg_s", "molar_flow", "molar_flow_mol_s"):
            node.pop(n, None)                      # exactly one of the two flows
    for n in k.names:
        node.pop(n, None)
    node[name] = value
    if t == "fuel":                                # the shares sum to 1 (cyclecase._fuel),
        share = numeric and name != "cracked_H2"   # checked after each share's own range
        node["H2" if name == "NH3" else "NH3"] = 1.0 - value if share else 1.0
    return parse, str(src), data, where


def _names(err: InputError, where: str) -> bool:
    """The error names the key. Rows of [[limits.custom]] are named ``row[i].<key>`` by
    aftertreat/limits.py, so for them the row index and key must end the name."""
    if where.startswith("[0]."):
        return bool(err.key) and err.key.endswith(where)
    return err.key == where


# ---- every key the schema lists is accepted as a key; others are refused ----------------------
def _all_names():
    for k in schema.KEYS:
        for n in k.names:
            yield pytest.param(k, n, id=f"{k.table or 'top'}.{n}")


#: a value of the wrong type for almost every key, which no parser check crashes on
_ODD = -12345.5


def _is_unknown_key(err: InputError, where: str) -> bool:
    msg = err.expected
    return _names(err, where) and msg.startswith((
        "unknown key", "unknown mode key", "unknown limit key",        # case, cycle, limits
        "expected one of " + ", ".join(build._KEYS)))                   # build


@pytest.mark.parametrize("k,name", list(_all_names()))
def test_every_schema_key_is_a_known_key(k, name):
    """Each name of the schema gets past the parser's unknown-key check (whatever else it
    says about the odd value placed there)."""
    parse, file, data, where = _place(k, name, _ODD)
    try:
        parse(data, file)
    except InputError as err:
        assert not _is_unknown_key(err, where), str(err)


@pytest.mark.parametrize("table", [t for t, _, _ in schema.TABLES])
def test_a_key_outside_the_schema_is_refused(table):
    """A name the schema does not list is refused, naming it (the parsers' unknown-key
    checks)."""
    k = schema.table_keys(table)[0]
    if table == "":
        for src in (D2, POINT):
            data = copy.deepcopy(_DATA[src])
            data["no_such_key"] = 1
            with pytest.raises(InputError) as e:
                (parse_case if src == POINT else parse_run_case)(data, str(src))
            assert e.value.key == "no_such_key"
        return
    parse, file, data, where = _place(k, "no_such_key", 1)
    with pytest.raises(InputError) as e:
        parse(data, file)
    assert _is_unknown_key(e.value, where), str(e.value)


@pytest.mark.parametrize("k", [k for k in schema.table_keys("engine_out") if k.key_set],
                         ids=lambda k: k.name)
def test_method_keys_are_refused_under_the_other_method(k):
    """[engine_out] accepts the keys of its own method only (cyclecase._engine_out)."""
    other = TURBINE if k.key_set == "combustion" else D2
    data = copy.deepcopy(_DATA[other])
    data["engine_out"][k.name] = 1.0
    with pytest.raises(InputError) as e:
        parse_run_case(data, str(other))
    assert _is_unknown_key(e.value, f"engine_out.{k.name}")


# ---- (c) [sizing] ranges: outside exits 2 from the CLI, inside validates -----------------------
def _step(b, whole):
    return 1 if whole else max(abs(b), 1.0) * 1e-6


def _outside(r: schema.Range, whole=False):
    out = []
    if r.lo is not None:
        out.append(r.lo if r.lo_open else r.lo - _step(r.lo, whole))
    if r.hi is not None:
        out.append(r.hi if r.hi_open else r.hi + _step(r.hi, whole))
    return out


def _inside(r: schema.Range, whole=False):
    out = []
    if r.lo is not None:
        out.append(r.lo + _step(r.lo, whole) if r.lo_open else r.lo)
    if r.hi is not None:
        out.append(r.hi - _step(r.hi, whole) if r.hi_open else r.hi)
    return out


def _toml(v) -> str:
    return repr(v) if isinstance(v, float) else str(v)


#: the parser's cross-key rules (cyclecase._sizing) a value inside its range still has to meet
_SIZING_NEEDS = {"length_to_diameter": {"ghsv_per_h": 20000.0},
                 "volume_allowance_pct": {"objective": "CO2e"}}


def _sets(table: dict) -> list[str]:
    return [f"sizing.{k}=" + (f'"{v}"' if isinstance(v, str) else _toml(v))
            for k, v in table.items()]
_SIZING_RANGED = [(name, v) for name, (lo, hi) in schema.bounds("sizing").items()
                  for v in _outside(schema.key("sizing", name).range)]


@pytest.mark.parametrize("name,value", _SIZING_RANGED)
def test_sizing_value_outside_its_range_exits_2(name, value, capsys):
    """Outside the schema's range: `aftertreat size` stops before solving with exit code 2 and
    one line naming the key (cyclecase._sizing, cli.main)."""
    code = cli.main(["size", str(D2), "--set", f"sizing.{name}={_toml(value)}"])
    err = capsys.readouterr().err
    assert code == 2
    assert len(err.strip().splitlines()) == 1
    assert f"sizing.{name}" in err


@pytest.mark.parametrize("name,value", [
    (name, v) for name in schema.bounds("sizing")
    for v in _inside(schema.key("sizing", name).range)])
def test_sizing_value_inside_its_range_validates(name, value):
    case = load_run_case(D2, [f"sizing.{name}={_toml(value)}"] + _sets(_SIZING_NEEDS.get(name, {})))
    assert getattr(case.sizing, name) == value


# ---- (d) a sample of other tables through load_run_case ------------------------------------
_SAMPLE = [("engine", "rated_power_kW", "engine.rated_power_kW={v}"),
           ("dosing", "ANR", "dosing.ANR={v}"),
           ("engine_out", "idle_fuel_pct", "engine_out.idle_fuel_pct={v}"),
           ("limits", "co2e_rise_warn_pct", "limits.co2e_rise_warn_pct={v}"),
           ("sizing.build.<kind>", "step_mm", "sizing.build.extruded.step_mm={v}")]


def _sample_key(table, name):
    return f"sizing.build.extruded.{name}" if table == "sizing.build.<kind>" else f"{table}.{name}"


@pytest.mark.parametrize("table,name,template,value", [
    (t, n, tpl, v) for t, n, tpl in _SAMPLE for v in _outside(schema.key(t, n).range)])
def test_sample_value_outside_its_range_is_refused(table, name, template, value):
    """cyclecase._engine, _dosing, _engine_out, _limits and build.parse_build_rules refuse a
    value just outside the schema's range, naming the key."""
    with pytest.raises(InputError) as e:
        load_run_case(D2, [template.format(v=_toml(value))])
    assert e.value.key == _sample_key(table, name)


@pytest.mark.parametrize("table,name,template,value", [
    (t, n, tpl, v) for t, n, tpl in _SAMPLE for v in _inside(schema.key(t, n).range)])
def test_sample_value_inside_its_range_validates(table, name, template, value):
    company = [f"sizing.build.extruded.{k}={_toml(v)}" for k, v in
               _build_company(name, value).items()] if table == "sizing.build.<kind>" else []
    load_run_case(D2, [template.format(v=_toml(value))] + company)


# ---- every range of the schema against its parser -------------------------------------------
#: values inside a range that the parser's cross-key rules (build.parse_build_rules: a whole
#: step within [min_mm, max_mm]) need company for
def _build_company(name, value):
    if name == "max_mm" and value < 1.0:
        return {"min_mm": value, "step_mm": value}
    if name in ("min_mm", "step_mm") and value > 1300:
        return {"max_mm": 1e5}
    return {}


#: other values of the same table a value inside its range needs (cyclecase._engine_out: the
#: dry O2 of a measured mode, O2_pct / (1 - H2O_pct/100), at most that of dry air)
_COMPANY = {("engine_out", "H2O_pct"): {"O2_pct": 5.0}}


def _o2_dry_air() -> float:
    from aftertreat.combustion import dry_air
    return 100.0 * float(dry_air()[INDEX["O2"]])


def _with_value(k, name, value):
    v = f"{value!r} {k.unit}" if k.kind == schema.QUANTITY else value
    parse, file, data, where = _place(k, name, v)
    if (k.table, name) in _COMPANY:
        data[k.table].update(_COMPANY[(k.table, name)])
    if k.table == "sizing.build.<kind>":
        data["sizing"]["build"]["extruded"].update(_build_company(name, value))
    if k.table == "sizing":
        data["sizing"].update(_SIZING_NEEDS.get(name, {}))
    return parse, file, data, where


#: values the parser refuses under another key's name: (table, key, side) -> why, marked xfail
#: (strict) until the parser is fixed (none today)
_MISNAMED: dict = {}


def _ranged():
    for k in schema.KEYS:
        if k.range is None:
            continue
        whole = k.kind == schema.WHOLE
        for side, values in (("outside", _outside(k.range, whole)),
                             ("inside", _inside(k.range, whole))):
            for v in values:
                marks = [pytest.mark.xfail(strict=True, reason=_MISNAMED[(k.table, k.name, side)])
                         ] if (k.table, k.name, side) in _MISNAMED else []
                yield pytest.param(k, side, v, id=f"{k.table or 'top'}.{k.name}-{side}-{v!r}",
                                   marks=marks)


@pytest.mark.parametrize("k,side,value", list(_ranged()))
def test_every_schema_range_is_the_parsers(k, side, value):
    """The schema types each range from reading the parser; here each is held against it:
    just outside is refused naming the key, inside passes the whole case validation."""
    parse, file, data, where = _with_value(k, k.name, value)
    if (k.table, k.name) == ("engine_out", "O2_pct") and side == "inside" \
            and value > _o2_dry_air():
        # within [0, 21] but above the O2 of dry air: refused by the dry-air rule, as the
        # schema's allowed text says (cyclecase._engine_out)
        assert "{o2_dry_air}" in k.allowed
        with pytest.raises(InputError, match="dry air") as e:
            parse(data, file)
        assert _names(e.value, where)
        return
    if side == "outside":
        with pytest.raises(InputError) as e:
            parse(data, file)
        assert _names(e.value, where), str(e.value)
    else:
        parse(data, file)


def test_custom_row_reference_o2_range_is_the_parsers():
    """o2_ref_pct of [[limits.custom]] lies in [0, O2 of air): the reference takes that O2 from
    limits.custom_limits; the parser refuses it and accepts just below."""
    import inspect
    o2_air = inspect.signature(limits.custom_limits).parameters["o2_air_pct"].default
    assert f"[0, {o2_air:g})" in schema.markdown()
    k = schema.key("limits.custom[]", "o2_ref_pct")
    for value, ok in ((o2_air, False), (o2_air - 1e-6, True), (0.0, True), (-1e-6, False)):
        parse, file, data, where = _place(k, k.name, value)
        if ok:
            parse(data, file)
        else:
            with pytest.raises(InputError) as e:
                parse(data, file)
            assert _names(e.value, where)


# ---- choices ---------------------------------------------------------------------------------
def _choices():
    for k in schema.KEYS:
        for c in k.choices:
            yield pytest.param(k, c, id=f"{k.table or 'top'}.{k.name}={c}")


@pytest.mark.parametrize("k,choice", list(_choices()))
def test_every_schema_choice_is_accepted(k, choice):
    """The choices typed in the schema are the parser's: each passes validation."""
    parse, file, data, where = _place(k, k.name, choice)
    if k.table == "engine_out" and k.name == "method":
        file = str(D2 if choice == "combustion" else TURBINE)
        data = copy.deepcopy(_DATA[Path(file)])
        data["engine_out"]["method"] = choice
    if k.table == "dosing":
        data["dosing"]["ANR"] = 1.0             # required with NH3 or urea (cyclecase._dosing)
    if k.table == "limits.custom[]":
        data["limits"]["custom"][0].update(quantity="N2O_g_kWh", unit="g/kWh")
    parse(data, file)


@pytest.mark.parametrize("k", [k for k in schema.KEYS if k.choices],
                         ids=lambda k: f"{k.table or 'top'}.{k.name}")
def test_a_value_outside_the_choices_is_refused(k):
    parse, file, data, where = _place(k, k.name, "no_such_choice")
    with pytest.raises(InputError) as e:
        parse(data, file)
    assert _names(e.value, where), str(e.value)


@pytest.mark.parametrize("kind", geometry.KINDS)
def test_every_substrate_kind_is_a_brick_substrate(kind):
    """The reference lists geometry.KINDS for [[brick]] substrate; case.parse_brick types its
    own list: every kind must get past its substrate check (other keys may then be missing)."""
    data = copy.deepcopy(_DATA[D2])
    data["brick"][0]["substrate"] = kind
    try:
        parse_run_case(data, str(D2))
    except InputError as err:
        assert err.key != "brick[0].substrate", str(err)


# ---- defaults ---------------------------------------------------------------------------------
def _custom_row(c):
    return c.limit_sets[-1].rows[0]              # custom limits come after the shipped sets


#: where the parsed case shows the value of an absent key: (table, name) -> (file, getter)
_DEFAULT_SEEN = {
    ("fuel", "NH3"): (D2, lambda c: c.fuel["shares"].get("NH3", 0.0)),
    ("fuel", "H2"): (D2, lambda c: c.fuel["shares"].get("H2", 0.0)),
    ("fuel", "natural_gas"): (D2, lambda c: c.fuel["shares"].get("natural_gas", 0.0)),
    ("fuel", "diesel"): (D2, lambda c: c.fuel["shares"].get("diesel", 0.0)),
    ("fuel", "cracked_H2"): (D2, lambda c: c.fuel["cracked_H2"]),
    ("cycle.mode[]", "cap_exempt"): (D2, lambda c: c.cycle.modes[0].cap_exempt),
    ("engine_out", "method"): (D2, lambda c: c.engine_out["method"]),
    ("engine_out", "NO2_fraction"): (D2, lambda c: set(c.engine_out["NO2_fraction"])),
    ("engine_out", "NH3_ppm"): (D2, lambda c: set(c.engine_out["NH3_ppm"])),
    ("engine_out", "N2O_ppm"): (D2, lambda c: set(c.engine_out["N2O_ppm"])),
    ("engine_out", "H2_ppm"): (D2, lambda c: set(c.engine_out["H2_ppm"])),
    ("engine_out", "intake_humidity_g_kg"):
        (D2, lambda c: set(c.engine_out["intake_humidity_g_kg"])),
    ("engine_out", "basis"): (TURBINE, lambda c: c.engine_out["basis"]),
    ("dosing", "method"): (D2, lambda c: c.dosing["method"]),
    ("dosing", "urea_mass_fraction"): (D2, lambda c: c.dosing["urea_mass_fraction"]),
    ("exhaust", "basis"): (POINT, None),          # compared below with basis = "wet" written
    ("brick[]", "activity"): (D2, lambda c: c.train.bricks[0].activity),
    ("brick[]", "heat_loss_W_m2K"): (D2, lambda c: c.train.bricks[0].heat_loss_W_m2K),
    ("limits", "gwp"): (D2, lambda c: c.gwp_set),
    ("limits.custom[]", "factor"): (D2, lambda c: _custom_row(c).factor),
    ("limits.custom[]", "apply_exemptions"): (D2, lambda c: _custom_row(c).apply_exemptions),
    ("sizing", "design_margin"): (D2, lambda c: c.sizing.design_margin),
    ("sizing", "scr_length_max_mm"): (D2, lambda c: c.sizing.scr_length_max_mm),
    ("sizing", "asc_length_max_mm"): (D2, lambda c: c.sizing.asc_length_max_mm),
    ("sizing", "objective"): (D2, lambda c: c.sizing.objective),
    **{("sizing", n): (D2, (lambda n: lambda c: getattr(c.sizing, n))(n))
       for n in ("length_to_diameter", "volume_allowance_pct", "choose_ANR", "ANR_excess",
                 "diameter_from_dp")},
    ("transient", "basis"): (TRACE, lambda c: c.transient["basis"]),
    **{("transient", n): (D2, (lambda n: lambda c: c.transient[n])(n))
       for n in ("hold_s", "ramp_s", "dt_s", "start", "conduction")},
    ("transient.dosing", "control"): (D2, lambda c: c.transient["control"]),
    ("transient.dosing", "response_s"): (D2, lambda c: c.transient["response_s"]),
    ("transient.dosing", "ANR_max"): (D2, lambda c: c.transient["ANR_max"]),
    **{("exhaust", f"{s}_ppm"): (POINT, (lambda s: lambda c: float(c.exhaust.F[INDEX[s]]))(s))
       for s in INDEX if s != "N2"},
}


def test_every_default_value_is_checked():
    """Each default the schema states as a value has a check below (our contract)."""
    stated = {(k.table, k.name) for k in schema.KEYS if k.default_value is not None}
    assert stated == set(_DEFAULT_SEEN)


def _without(data, table, name):
    """``data`` without the key (and its unit-suffix alternatives) ``name`` of ``table``."""
    k = schema.key(table, name)
    if table == "fuel":
        data["fuel"] = {"H2": 1.0} if name == "NH3" else {"NH3": 1.0}
        return data
    if table == "cycle.mode[]":
        data["cycle"] = {"mode": [{"weight": 0.2, "power_pct": p} for p in _D2_MODES]}
        return data
    if table in ("transient", "transient.dosing") and "transient" not in data:
        data["transient"] = {}
    node = {"brick[]": lambda: data["brick"][0],
            "limits.custom[]": lambda: data["limits"]["custom"][0],
            "transient.dosing": lambda: data["transient"].setdefault("dosing", {})}.get(
        table, lambda: data.setdefault(table, {}))()
    for n in k.names:
        node.pop(n, None)
    return data


@pytest.mark.parametrize("table,name", sorted(_DEFAULT_SEEN))
def test_schema_default_is_what_the_parser_takes(table, name):
    """An absent key takes the default the schema states (the parsers' own defaults)."""
    k = schema.key(table, name)
    src, seen = _DEFAULT_SEEN[(table, name)]
    data = _without(copy.deepcopy(_DATA[src]), table, name)
    parse = parse_case if src == POINT else parse_run_case
    got = parse(data, str(src))
    if seen is None:                             # compare with the default written out
        written = copy.deepcopy(data)
        written[table][name] = k.default_value
        assert (got.exhaust.F == parse(written, str(src)).exhaust.F).all()
        return
    value = seen(got)
    if k.kind == schema.PER_MODE:
        assert value == {k.default_value}
    elif isinstance(k.default_value, bool):
        assert value is k.default_value
    else:
        assert value == k.default_value          # for an absent species: no flow of it
