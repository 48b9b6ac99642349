"""The terminal UI, driven headless with Textual's run_test/pilot: open a demo case, step through
every mode, make a what-if, reject a bad edit, run sizing, save (with a backup) and export."""
import asyncio
import shutil
import time
from pathlib import Path

import pytest

from tui.app import CycleApp
from tui.session import Session

ROOT = Path(__file__).resolve().parents[1]


def _text(app, wid: str) -> str:
    from textual.widgets import Static
    return str(app.query_one(wid, Static).render())


async def _settle(app, pilot, timeout=60.0):
    """Wait until the app's workers are done (bounded)."""
    t0 = time.perf_counter()
    await pilot.pause()
    while time.perf_counter() - t0 < timeout:
        await app.workers.wait_for_complete()
        await pilot.pause()
        if not app.busy:
            return
    raise TimeoutError("the app stayed busy")


@pytest.fixture
def case_copy(tmp_path):
    """The demo genset case copied to a temporary folder (saves go there)."""
    f = tmp_path / "genset_d2.toml"
    shutil.copy(ROOT / "cases" / "genset_d2.toml", f)
    return f


def test_open_step_whatif_size_save(case_copy):
    """The whole walk of the issue: every mode shown in turn, a what-if changes the cycle
    figures against the baseline, a bad edit shows a message and changes nothing, sizing shows
    its result and binding limits, save-as writes a new case (and backs up a file it would
    replace), the caution is on screen throughout."""
    async def walk():
        app = CycleApp(case_copy)
        async with app.run_test(size=(160, 50)) as pilot:
            await _settle(app, pilot)
            assert "NH3 is toxic" in _text(app, "#caution")
            assert "PASSES" in _text(app, "#limits") or "DOES NOT PASS" in _text(app, "#limits")
            names = [m.name for m in app.session.result.modes]
            seen = []
            for _ in names:
                seen.append(_text(app, "#profile-head").split(":")[0])
                await pilot.press("n")
                await pilot.pause()
            assert seen == [f"Mode {n} ({i + 1}/{len(names)})" for i, n in enumerate(names)]
            assert "ppm wet" in _text(app, "#plot-species")
            # a what-if: a longer SCR 1 (tab 3 form)
            await pilot.press("3")
            app.query_one("#wi-length").value = "1000"
            await pilot.press("r")
            await _settle(app, pilot)
            assert app.session.edited
            assert "(was " in _text(app, "#totals")
            assert "What-if against the case" in _text(app, "#wi-compare")
            # a bad edit: nothing applied, a message shown
            n_edits = len(app.session.whatif.assignments)
            app.query_one("#wi-length").value = "-5"
            await pilot.press("r")
            await pilot.pause()
            assert "not applied" in _text(app, "#status")
            assert len(app.session.whatif.assignments) == n_edits
            # sizing
            await pilot.press("s")
            await _settle(app, pilot, timeout=120)
            out = _text(app, "#size-out")
            assert "feasible" in out and "binding:" in out
            # save as (the name exists: backed up first)
            target = case_copy.with_name("edited.toml")
            target.write_text("# a file that was there before\n")
            await pilot.press("a")
            await pilot.pause()
            app.screen.query_one("#save-name").value = str(target)
            await pilot.click("#save-ok")
            await pilot.pause()
            assert "saved" in _text(app, "#status")
            assert (case_copy.with_name("edited.toml.bak")).read_text().startswith("# a file")
            saved = Session(target)
            assert saved.case.train.bricks[0].length == pytest.approx(1.0)
            # help screen lists the keys
            await pilot.press("question_mark")
            await pilot.pause()
            assert "size the train" in str(app.screen.query_one("#help-text").render())
            await pilot.press("escape")
            # export
            await pilot.press("e")
            await pilot.pause()
            assert app.screen.query_one("#save-name").value.endswith("genset_d2_report")
            await pilot.click("#save-ok")
            await pilot.pause()
            assert (case_copy.with_name("genset_d2_report") / "summary.json").exists()
            # a second export proposes a new folder; the first report is left as it was
            first = (case_copy.with_name("genset_d2_report") / "summary.json").read_bytes()
            await pilot.press("e")
            await pilot.pause()
            assert app.screen.query_one("#save-name").value.endswith("genset_d2_report_2")
            app.screen.query_one("#save-name").value = str(case_copy.with_name(
                "genset_d2_report"))                          # the user insists: refused
            await pilot.click("#save-ok")
            await pilot.pause()
            assert "not written" in _text(app, "#status")
            assert (case_copy.with_name("genset_d2_report") / "summary.json").read_bytes() \
                == first
    asyncio.run(walk())


def test_starts_fast_and_stays_responsive(case_copy):
    """The first screen is up well before the solve ends (the solve runs in a worker): the
    app answers a key press while the modes are being solved. (Start-up time itself is printed
    by benchmarks, not asserted here.)"""
    async def go():
        app = CycleApp(case_copy)
        async with app.run_test(size=(140, 45)) as pilot:
            await pilot.pause()
            await pilot.press("question_mark")          # while the solve may still run
            await pilot.pause()
            assert app.screen.__class__.__name__ == "HelpScreen"
            await pilot.press("escape")
            await _settle(app, pilot)
            assert app.session.result is not None
    asyncio.run(go())


def test_session_never_overwrites_the_opened_case(case_copy):
    """Saving onto the case that was opened is refused; the file is unchanged."""
    from aftertreat.errors import InputError
    s = Session(case_copy)
    before = case_copy.read_text()
    with pytest.raises(InputError):
        s.save_as(case_copy)
    assert case_copy.read_text() == before


def test_bad_case_gives_one_line(tmp_path, capsys):
    """`aftertreat tui` on a bad case: exit 2 and one line, before any screen opens."""
    from aftertreat.cli import main
    f = tmp_path / "bad.toml"
    f.write_text('title = "x"\n[engine]\napplication = "rocket"\n')
    assert main(["tui", str(f)]) == 2
    assert len(capsys.readouterr().err.strip().splitlines()) == 1


def test_trace_case_time_cursor(tmp_path):
    """A trace case: the run happens in a worker, then ] and [ move the time cursor one sample
    and the head line follows it (time series plotted with the cursor marked)."""
    from test_transient_case import _trace_case

    async def go():
        app = CycleApp(_trace_case(tmp_path))
        async with app.run_test(size=(150, 45)) as pilot:
            await _settle(app, pilot)
            assert app.session.transient is not None
            assert "t = 0 s" in _text(app, "#profile-head")
            await pilot.press("right_square_bracket")
            await pilot.press("right_square_bracket")
            await pilot.pause()
            assert "t = 2 s" in _text(app, "#profile-head")
            await pilot.press("left_square_bracket")
            await pilot.pause()
            assert "t = 1 s" in _text(app, "#profile-head")
            assert "time [min]" in _text(app, "#plot-species")
            assert "Limits over the run" in _text(app, "#limits")
            # keys and tabs fit the case kind: no mode keys, no sizing or bricks; what-ifs
            assert app.check_action("next_mode", ()) is False
            assert app.check_action("size", ()) is False
            assert app.check_action("play", ()) is True
            assert app.check_action("run_whatif", ()) is True
            from textual.widgets import TabbedContent
            tabs = app.query_one("#tabs", TabbedContent)
            await pilot.press("4")
            await pilot.pause()
            assert tabs.active != "sizing" and "trace case" in _text(app, "#status")
            await pilot.press("3")
            await pilot.pause()
            assert tabs.active == "whatif"
    asyncio.run(go())


def test_trace_timeline_fills_in_and_the_cursor_works_meanwhile(tmp_path, monkeypatch):
    """The trace is shown while it runs: the first part reaches the screen before the run
    ends (head line "RUNNING", limits "so far"), the time cursor steps on it, and the whole
    run replaces it at the end with the cursor where the user left it."""
    from test_transient_case import _trace_case
    monkeypatch.setattr(Session, "PARTIAL_EVERY_S", 0.0)
    shown = []

    async def go():
        app = CycleApp(_trace_case(tmp_path))
        original = app._show_partial

        def spy(run, gen):
            original(run, gen)
            shown.append((run.complete, len(run.result.t_s), _text(app, "#totals"),
                          _text(app, "#limits")))
            if len(shown) == 5:             # a key press while the rest is computing
                app.action_step(3)
                shown.append(("cursor", _text(app, "#profile-head")))
        app._show_partial = spy
        async with app.run_test(size=(150, 45)) as pilot:
            await _settle(app, pilot)
            assert shown[-1][0] is True and app.trace_view is app.session.transient
            assert "t = 3 s" in _text(app, "#profile-head")
    asyncio.run(go())
    parts = [x for x in shown if x[0] is False]
    assert len(parts) >= 5 and parts[0][1] < parts[-1][1] < 41
    assert "RUNNING" in parts[0][2] and "so far" in parts[0][3]
    assert ("cursor", ) == shown[5][:1] and "t = 3 s" in shown[5][1]


def test_trace_whatif_reruns_the_trace_and_compares(tmp_path):
    """A what-if on a trace case (a longer SCR 1 and storage-controlled dosing with a slower
    response) re-runs the whole trace in the background and compares the run figures with the
    case's; a what-if typed while the trace still runs supersedes that run; b goes back to the
    case's run without solving again; the report of the trace exports."""
    from test_transient_case import _trace_case
    from textual.widgets import Input, Select

    async def go():
        app = CycleApp(_trace_case(tmp_path))
        async with app.run_test(size=(160, 50)) as pilot:
            await _settle(app, pilot)
            base = app.session.transient
            assert app.session.base_transient is base
            await pilot.press("3")
            assert not app.query_one("#wi-dT", Input).display     # the trace has its own T
            app.query_one("#wi-brick", Select).value = "SCR 1"
            app.query_one("#wi-length", Input).value = "300"
            app.query_one("#wi-control", Select).value = "storage"
            app.query_one("#wi-response", Input).value = "60"
            app.query_one("#wi-length", Input).focus()
            await pilot.press("enter")
            await _settle(app, pilot)
            s = app.session
            run = s.transient
            assert run is not base and run.complete and app.trace_view is run
            assert run.train.bricks[0].length == pytest.approx(0.300)
            assert s.case.transient["control"] == "storage"
            assert s.case.transient["response_s"] == 60.0
            cmp = _text(app, "#wi-compare")
            assert "NOx over the run [g/kWh]" in cmp and "->" in cmp
            assert f"{base.summary()['NOx_g_kWh']:.3g} -> {run.summary()['NOx_g_kWh']:.3g}" \
                in cmp
            # a second what-if while a solve runs: the newer one wins, the older shows nothing
            app.query_one("#wi-anrmax", Input).value = "1.1"
            app.action_run_whatif()
            app.query_one("#wi-length", Input).value = "350"
            app.action_run_whatif()
            await _settle(app, pilot)
            assert app.trace_view.train.bricks[0].length == pytest.approx(0.350)
            assert app.trace_view.case.transient["ANR_max"] == 1.1
            assert app.trace_view is app.session.transient and not app.busy
            # back to the case: its run again, nothing solved (Escape leaves the field first)
            await pilot.press("escape", "b")
            await pilot.pause()
            assert app.trace_view is base and not app.busy
            # the trace report exports (e, then the folder asked for), with its case as run
            folder = tmp_path / "trace_report"
            await pilot.press("e")
            await pilot.pause()
            from textual.widgets import Input as _Input
            app.screen.query_one("#save-name", _Input).value = str(folder)
            await pilot.press("enter")
            await pilot.pause()
            assert "report written" in _text(app, "#status")
            names = {p.name for p in folder.iterdir()}
            assert {"transient.csv", "summary.json", "case_as_run.toml", "SAFETY.txt"} <= names
    asyncio.run(go())


def test_unknown_catalyst_edit_is_refused(case_copy):
    """An edit naming a catalyst that does not exist is refused with the key named, and the
    what-if is unchanged (the UI shows the same message on its status line)."""
    from aftertreat.errors import InputError
    s = Session(case_copy)
    with pytest.raises(InputError) as e:
        s.apply(s.brick_assignments("SCR 1", catalyst="no_such_catalyst"))
    assert "catalyst" in str(e.value)
    assert not s.edited


def test_quit_with_unsaved_edits_asks_and_sized_design_can_be_saved(case_copy):
    """q with edits not saved opens a question instead of quitting (cancel keeps the app);
    sizing, then "use the sized design", makes the sized lengths the what-if, and saving it
    writes the sized case; after the save, q quits at once."""
    async def walk():
        app = CycleApp(case_copy)
        async with app.run_test(size=(160, 50)) as pilot:
            await _settle(app, pilot)
            await pilot.press("s")
            await _settle(app, pilot, timeout=120)
            out = _text(app, "#size-out")
            assert "smallest margins" in out and "N2O made" in out
            await pilot.press("u")
            await _settle(app, pilot)
            sized = [b.length for b in app.session.sizing.train.bricks]
            assert [b.length for b in app.session.case.train.bricks] == pytest.approx(sized)
            assert app.session.unsaved
            await pilot.press("q")
            await pilot.pause()
            assert app.screen.query_one("#quit-discard") is not None    # asked, not quit
            await pilot.click("#quit-cancel")
            await pilot.pause()
            assert app.is_running
            target = case_copy.with_name("sized.toml")
            await pilot.press("a")
            await pilot.pause()
            app.screen.query_one("#save-name").value = str(target)
            await pilot.click("#save-ok")
            await pilot.pause()
            again = Session(target)
            assert [b.length for b in again.case.train.bricks] == pytest.approx(sized)
            assert not app.session.unsaved
            await pilot.press("q")
            await pilot.pause()
        assert not app.is_running
    asyncio.run(walk())


def test_edits_keep_one_entry_per_key_and_warn_when_they_do_nothing(case_copy):
    s = Session(case_copy)
    s.apply(['brick.SCR 1.length="800 mm"'])
    s.apply(['brick.SCR 1.length="900 mm"'])
    assert s.whatif.assignments == ['brick.SCR 1.length="900 mm"']
    assert s.case.train.bricks[0].length == pytest.approx(0.9)
    warnings = s.apply(["dosing.ANR=0.9"])               # the demo doses nothing
    assert warnings and "no effect" in warnings[0]
    s.reset()
    assert not s.edited and not s.unsaved


def test_enter_in_a_field_runs_the_whatif_and_escape_leaves_it(case_copy):
    """Typed digits reach the focused field, Enter runs the what-if from it, Escape leaves
    the field so that single-key commands work again."""
    async def walk():
        app = CycleApp(case_copy)
        async with app.run_test(size=(160, 50)) as pilot:
            await _settle(app, pilot)
            await pilot.press("3")
            await pilot.pause()
            app.set_focus(app.query_one("#wi-length"))
            await pilot.press("9", "0", "0")
            assert app.query_one("#wi-length").value == "900"
            await pilot.press("enter")
            await _settle(app, pilot)
            assert app.session.edited
            assert app.session.case.train.bricks[0].length == pytest.approx(0.9)
            app.set_focus(app.query_one("#wi-cpsi"))
            await pilot.press("escape")
            await pilot.pause()
            assert app.focused is None
            await pilot.press("4")
            await pilot.pause()
            assert app.query_one("TabbedContent").active == "sizing"
    asyncio.run(walk())


def test_letters_in_a_number_field_are_commands(case_copy):
    """Tab 3 puts the cursor in the length field, so digits typed at once land there; r
    typed in the field runs the what-if instead of being typed into it (no "900r")."""
    async def walk():
        app = CycleApp(case_copy)
        async with app.run_test(size=(160, 50)) as pilot:
            await _settle(app, pilot)
            await pilot.press("3", "9", "0", "0")
            assert app.focused is app.query_one("#wi-length")
            assert app.query_one("#wi-length").value == "900"
            await pilot.press("r")
            await _settle(app, pilot)
            assert app.session.case.train.bricks[0].length == pytest.approx(0.9)
            assert app.query_one("#wi-length").value == ""       # the form is cleared
    asyncio.run(walk())


@pytest.mark.parametrize("width", [100, 200])
def test_mode_table_fits_its_panel_at_any_width(case_copy, width):
    """Narrow and wide terminals: the mode table keeps the columns that fit its panel (mode
    and the outlet figures first), so its text never runs into the right-hand panel; the
    compliance lines are one per check and no wider than the panel."""
    async def walk():
        app = CycleApp(case_copy)
        async with app.run_test(size=(width, 48)) as pilot:
            await _settle(app, pilot)
            t = app.query_one("#modes")
            labels = [str(c.label) for c in t.columns.values()]
            assert labels[0] == "mode" and "NOx out" in labels and "NH3 out" in labels
            used = sum(c.get_render_width(t) for c in t.columns.values())
            assert used <= app.query_one("#left").size.width, (labels, used)
            assert len(labels) >= (9 if width >= 200 else 5), labels
            lines = _text(app, "#limits").splitlines()
            assert max(len(x) for x in lines) <= app.query_one("#left").size.width
            assert lines[-1] in ("PASSES every limit", "DOES NOT PASS")
    asyncio.run(walk())


def test_sizing_can_be_cancelled(case_copy):
    """x while the sizing runs stops it at its next step: nothing is kept, the tab says so,
    and sizing again afterwards works."""
    async def walk():
        app = CycleApp(case_copy)
        async with app.run_test(size=(160, 48)) as pilot:
            await _settle(app, pilot)
            # the pilot's key presses wait for the screen to settle, which lasts as long as
            # the sizing posts progress; so the x arrives through the sizing's first step
            real = app.session.size

            def size_with_a_key_press(progress=None):
                def first(text):
                    app.call_from_thread(app.action_cancel_sizing)   # what x does
                    progress(text)
                return real(progress=lambda text: first(text))
            app.session.size = size_with_a_key_press
            await pilot.press("s")
            await _settle(app, pilot, timeout=120)
            assert app.session.sizing is None
            app.session.size = real
            assert app.check_action("cancel_sizing", ()) is True
            assert "cancelled" in _text(app, "#size-out")
            await pilot.press("s")
            await _settle(app, pilot, timeout=120)
            assert app.session.sizing is not None and "feasible" in _text(app, "#size-out")
    asyncio.run(walk())
