"""Report folders: the case as computed re-runs to the same numbers, --set overrides are echoed,
a report is written whole or not at all and never into a folder that holds files, and every
output lists the same sources (our own contract, docs/conventions.md)."""
import json
import shutil
from pathlib import Path

import pytest

from aftertreat.cli import main

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "cases" / "genset_d2.toml"


def _json(capsys):
    return json.loads(capsys.readouterr().out)


@pytest.fixture(scope="module")
def sized(tmp_path_factory):
    """`aftertreat size --report` on the demo, with one override (coarse grid for speed)."""
    import contextlib
    import io
    rep = tmp_path_factory.mktemp("size") / "rep"
    buf = io.StringIO()
    with contextlib.redirect_stdout(buf):
        rc = main(["size", str(DEMO), "--json", "--report", str(rep),
                   "--set", "sizing.design_margin=0.12"])
    assert rc == 0
    return rep, json.loads(buf.getvalue())


def test_sized_case_as_run_reruns_to_the_same_numbers(sized, capsys):
    """case_as_run.toml of a sizing is the sized design (not the case's lengths): `run` on it
    gives the sizing's cycle values and limit values back (to solver round-off, 1e-6)."""
    rep, obj = sized
    text = (rep / "case_as_run.toml").read_text()
    assert text.startswith("# INVENTED DEMO SCENARIO")          # the case's header comments
    assert "sizing.design_margin=0.12" in text and "sized design" in text
    assert main(["run", str(rep / "case_as_run.toml"), "--json"]) == 0
    again = _json(capsys)
    for k in ("NOx_g_kWh", "N2O_g_kWh", "NH3_slip_ppmvd_max", "GHG_CO2e_g_kWh"):
        assert again["cycle"][k] == pytest.approx(obj["run"]["cycle"][k], rel=1e-6), k
    assert [r["value"] for r in again["limits"]] == pytest.approx(
        [r["value"] for r in obj["run"]["limits"]], rel=1e-6)


def test_sizing_report_differs_from_the_case_lengths(sized):
    """The demo's own train is longer than its sized one: the report must not carry the
    case's 700 mm SCR bricks (the bug this guards against)."""
    rep, obj = sized
    sized_mm = [b["length_mm"] for b in obj["bricks"]]
    assert sized_mm != [700.0, 700.0, 250.0]
    text = (rep / "case_as_run.toml").read_text()
    for mm in sized_mm:
        assert f"{mm:g} mm" in text or f"{mm:.6g} mm" in text, (mm, text)


def test_overrides_echoed_in_terminal_json_and_report(sized, tmp_path, capsys):
    rep, obj = sized
    assert obj["overrides"] == ["sizing.design_margin=0.12"]
    assert obj["run"]["overrides"] == ["sizing.design_margin=0.12"]
    assert json.loads((rep / "summary.json").read_text())["overrides"] == \
        ["sizing.design_margin=0.12"]
    assert main(["run", str(DEMO), "--set", "brick.SCR 1.length=600 mm"]) == 0
    out = capsys.readouterr().out
    assert "--set overrides:" in out and "brick.SCR 1.length=600 mm" in out


def test_report_into_a_non_empty_folder_destroys_nothing(tmp_path, capsys, monkeypatch):
    """A folder holding the user's files is refused before solving (exit 2, one line); with
    --move-old it is moved aside whole and the new report takes its place."""
    import aftertreat.evaluate as ev
    target = tmp_path / "rep"
    target.mkdir()
    (target / "notes.txt").write_text("the user's notes")
    real = ev.run_case
    monkeypatch.setattr(ev, "run_case", lambda *a, **k: pytest.fail("solved before the check"))
    assert main(["run", str(DEMO), "--report", str(target)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "--report" in err[0] and "not empty" in err[0]
    assert [p.name for p in target.iterdir()] == ["notes.txt"]
    monkeypatch.setattr(ev, "run_case", real)
    assert main(["run", str(DEMO), "--report", str(target), "--move-old", "--set",
                 "engine_out.T_C=[395, 375, 355, 330, 300]"]) == 0
    err = capsys.readouterr().err
    aside = [p for p in tmp_path.iterdir() if p.name.startswith("rep.old-")]
    assert len(aside) == 1 and (aside[0] / "notes.txt").read_text() == "the user's notes"
    assert str(aside[0]) in err
    assert (target / "summary.json").exists() and not (target / "notes.txt").exists()
    assert not [p for p in tmp_path.iterdir() if ".partial-" in p.name]


def test_an_empty_folder_is_filled(tmp_path, capsys):
    target = tmp_path / "rep"
    target.mkdir()
    assert main(["run", str(DEMO), "--report", str(target), "--json"]) == 0
    assert (target / "case_as_run.toml").exists()


@pytest.mark.parametrize("where", ["plot", "last file"])
def test_an_interrupt_leaves_the_whole_report_or_nothing(tmp_path, capsys, monkeypatch, where):
    """Ctrl-C while the report is being written: no target folder, no partial folder."""
    import aftertreat.report as rp
    target = tmp_path / "rep"

    def stop(*a, **k):
        raise KeyboardInterrupt
    if where == "plot":
        monkeypatch.setattr(rp.plots, "profiles", stop)
    else:
        real = rp.write_atomic

        def late(path, text):
            if Path(path).name == "SAFETY.txt":
                raise KeyboardInterrupt
            real(path, text)
        monkeypatch.setattr(rp, "write_atomic", late)
    assert main(["run", str(DEMO), "--report", str(target)]) == 1
    assert "interrupted" in capsys.readouterr().err
    assert list(tmp_path.iterdir()) == []


def test_trace_report_has_the_files_of_a_cycle_report(tmp_path, capsys):
    """A trace case's report carries limits, sources, provenance, the case as run and the
    safety cautions, like a cycle report; the case as run names its trace by absolute path
    and re-runs from the report folder."""
    from test_transient_case import _trace_case
    f = _trace_case(tmp_path, dosing={"control": "storage"})
    rep = tmp_path / "rep"
    assert main(["run", str(f), "--report", str(rep), "--json"]) == 0
    first = _json(capsys)
    names = {p.name for p in rep.iterdir()}
    assert {"limits.csv", "sources.txt", "provenance.csv", "case_as_run.toml",
            "SAFETY.txt", "transient.csv", "summary.json"} <= names, names
    moved = tmp_path / "elsewhere"
    shutil.copytree(rep, moved)
    assert main(["run", str(moved / "case_as_run.toml"), "--json"]) == 0
    again = _json(capsys)
    assert again["transient"]["NOx_g"] == pytest.approx(first["transient"]["NOx_g"], rel=1e-9)


def test_sources_are_the_same_everywhere(tmp_path, capsys):
    """`aftertreat sources`, the report's sources.txt and the terminal UI's list come from one
    function (aftertreat.citations.case_sources) and list the same lines."""
    from aftertreat.citations import case_sources
    from aftertreat.cyclecase import load_run_case
    case = load_run_case(DEMO)
    lines = case_sources(case)
    assert any("Tier III" in x or "MARPOL" in x for x in lines)
    assert any("GWP100" in x for x in lines)
    assert main(["sources", str(DEMO)]) == 0
    out = capsys.readouterr().out
    assert all(line in out for line in lines)
    rep = tmp_path / "rep"
    assert main(["run", str(DEMO), "--report", str(rep), "--json"]) == 0
    capsys.readouterr()
    text = (rep / "sources.txt").read_text()
    assert all(line in text for line in lines)


def test_sizing_curves_carry_each_limit_on_its_own_basis(sized):
    """The curves hold the governing check of every limit group with its limit, on the
    limit's basis (NH3 at 15 % O2 here, not the as-measured slip), and the figure exists."""
    rep, obj = sized
    row = obj["curves"][0]
    assert "NH3_ppmvd_at_15pctO2_per_mode_value" in row
    assert row["NH3_ppmvd_at_15pctO2_per_mode_limit"] == 10.0
    assert row["NOx_g_kWh_cycle_limit"] > 0 and "N2O_g_kWh_cycle_value" in row
    for png in ("sizing_curves.png", "compliance.png", "limits_by_mode.png"):
        assert (rep / png).read_bytes()[:4] == b"\x89PNG"


def test_limit_checks_are_typed_and_name_their_basis():
    from aftertreat.cyclecase import load_run_case
    from aftertreat.evaluate import run_case
    from aftertreat.limits import LimitCheck, governing
    res = run_case(load_run_case(DEMO))
    assert all(isinstance(c, LimitCheck) for c in res.limits)
    nh3 = [c for c in res.limits if c.quantity == "NH3_ppmvd"]
    assert nh3 and all(c.basis == "ppmvd @15% O2" for c in nh3)
    worst = governing(res.limits)["NH3_ppmvd_at_15pctO2_per_mode"]
    assert worst.ratio == max(c.ratio for c in nh3)
    d = res.to_json()["limits"][0]
    assert {"name", "value", "limit", "unit", "o2_ref_pct", "pass", "mode"} <= set(d)


@pytest.mark.parametrize("name", ["marine_e2_10mw.toml", "turbine_50mw_hrsg.toml"])
def test_new_user_cases_size_to_buildable_trains_that_rerun(name, tmp_path, capsys):
    """The two kinds of case a new user tried (a 10 MW four-stroke with ~3000 ppm engine NH3
    on E2 against Tier III; a 50 MW gas turbine held to 2 ppmvd NOx and 5 ppmvd slip at 15 %
    O2): `size --report` gives a feasible train of whole build steps, and `run` on the report's
    case_as_run.toml passes with the sizing's numbers."""
    from aftertreat.build import default_rules
    rep = tmp_path / "rep"
    assert main(["size", str(ROOT / "cases" / name), "--report", str(rep), "--json"]) == 0
    sized = _json(capsys)
    assert sized["feasible"], sized["problems"]
    rules = default_rules()
    from aftertreat.cyclecase import load_run_case
    case = load_run_case(rep / "case_as_run.toml")
    for b in case.train.bricks:
        step = rules[b.substrate.kind].step_mm
        k = b.length * 1e3 / step
        assert abs(k - round(k)) < 1e-6 and b.length >= rules[b.substrate.kind].shortest_m - 1e-9
    assert main(["run", str(rep / "case_as_run.toml"), "--json"]) == 0
    again = _json(capsys)
    assert again["pass"] is True
    for k in ("NOx_g_kWh", "N2O_g_kWh", "NH3_slip_ppmvd_max"):
        assert again["cycle"][k] == pytest.approx(sized["run"]["cycle"][k], rel=1e-6)


def test_sizing_cost_counts_every_brick_by_the_catalyst_it_names(sized):
    """cost = sum of volume x [sizing] cost_per_L of the catalyst each [[brick]] names; the
    slip catalyst is priced as its layered file (asc_dual_layer), not as its first layer."""
    rep, obj = sized
    price = {"SCR": 0.04, "ASC": 0.35}             # cases/genset_d2.toml, invented
    expect = sum(b["volume_L"] * price[b["role"]] for b in obj["bricks"])
    assert obj["cost"] == pytest.approx(expect, rel=1e-12)
