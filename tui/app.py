"""The aftertreat terminal UI: step through a case's duty cycle, look along the train, try
what-ifs, size, save and export. Start it with ``aftertreat tui CASE``.

Layout: the modes of the cycle on the left with the cycle totals and the limits; the selected
mode on the right in tabs (profiles along the train, bricks, what-if, sizing, sources); the NH3
safety caution always on screen. Every computation runs in a worker thread, so the screen stays
live while the train is solved.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np
from rich.text import Text
from textual import on, work
from textual.app import App, ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical, VerticalScroll
from textual.screen import ModalScreen
from textual.widgets import (Button, DataTable, Footer, Input, Label, Select, Static, TabbedContent,
                             TabPane)

from aftertreat.errors import InputError
from aftertreat.output import SAFETY_NOTE
from aftertreat.transient_run import CONTROLS

from .session import Session
from aftertreat.units import ZERO_C_K

__all__ = ["CycleApp", "main"]

CAUTION = ("NH3 is toxic (odour ~5 ppm, irritation ~30 ppm, dangerous from a few hundred ppm); "
           "stored NH3 is pressurised or refrigerated. Model estimates: local codes, permits and "
           "licensed practice govern any installation.  [?] help")

#: Keys and what they do (the help screen lists these; the footer shows the main ones).
KEYS = [
    ("n", "next_mode", "next mode"),
    ("p", "previous_mode", "previous mode"),
    ("1", "tab('profiles')", "profiles along the train"),
    ("2", "tab('bricks')", "bricks table"),
    ("3", "tab('whatif')", "what-if form"),
    ("4", "tab('sizing')", "sizing"),
    ("5", "tab('sources')", "sources behind the numbers"),
    ("r", "run_whatif", "run the what-if in the form"),
    ("b", "reset", "back to the case as loaded"),
    ("s", "size", "size the train (aftertreat size)"),
    ("x", "cancel_sizing", "cancel a sizing that is running"),
    ("u", "use_sized", "use the sized design as the what-if (then compare or save it)"),
    ("a", "save_as", "save the edited case under a new name"),
    ("e", "export", "export the report (aftertreat run --report)"),
    ("space", "play", "trace: play or pause the time cursor (it works while the run goes on)"),
    ("right_square_bracket", "step(1)", "trace: one sample forward"),
    ("left_square_bracket", "step(-1)", "trace: one sample back"),
    ("escape", "leave_field", "leave a text field (Tab / shift+Tab move between fields, "
               "Enter in a field runs the what-if; letters are commands even in a number field, "
               "digits 1-5 type into it)"),
    ("question_mark", "help", "this help"),
    ("q", "quit", "quit"),
]
class _Cancelled(Exception):
    """Raised from a worker's progress callback when the user cancels it (sizing) or a newer
    solve supersedes it."""


#: what a trace case cannot do (it has no modes to size or look along), and what only a
#: trace case does
_STEADY_TABS = ("bricks", "sizing")
_STEADY_ACTIONS = {"next_mode", "previous_mode", "size", "use_sized", "cancel_sizing"}
_TRACE_ACTIONS = {"play", "step"}
_SHOWN = {"n", "p", "r", "s", "a", "e", "space", "question_mark", "q"}


class HelpScreen(ModalScreen):
    """Every key, and the safety caution in full."""
    BINDINGS = [Binding("escape,q,question_mark", "dismiss", "close")]

    def compose(self) -> ComposeResult:
        rows = "\n".join(f"  {k.replace('_', ' '):24s} {text}" for k, _, text in KEYS)
        with Vertical(id="help"):
            yield Static(Text("Keys\n\n" + rows + "\n\n" + SAFETY_NOTE), id="help-text")
            yield Button("Close", id="help-close")

    @on(Button.Pressed, "#help-close")
    def _close(self) -> None:
        self.dismiss()


class QuitScreen(ModalScreen):
    """Quitting with edits that are not saved: save them, discard them, or stay."""
    BINDINGS = [Binding("escape", "dismiss", "cancel")]

    def compose(self) -> ComposeResult:
        with Vertical(id="save"):
            yield Label("The what-if has edits that are not saved. Quit anyway?")
            with Horizontal():
                yield Button("Save first", id="quit-save", variant="primary")
                yield Button("Discard and quit", id="quit-discard", variant="error")
                yield Button("Cancel", id="quit-cancel")

    @on(Button.Pressed, "#quit-save")
    def _save(self) -> None:
        self.dismiss("save")

    @on(Button.Pressed, "#quit-discard")
    def _discard(self) -> None:
        self.dismiss("discard")

    @on(Button.Pressed, "#quit-cancel")
    def _cancel(self) -> None:
        self.dismiss(None)


class SaveScreen(ModalScreen):
    """Ask for a file or folder name (saving the edited case, exporting the report)."""
    BINDINGS = [Binding("escape", "dismiss", "cancel")]

    def __init__(self, suggestion: str,
                 prompt: str = "Save the edited case as (an existing file is backed up first):",
                 ok: str = "Save"):
        super().__init__()
        self.suggestion, self.prompt, self.ok = suggestion, prompt, ok

    def compose(self) -> ComposeResult:
        with Vertical(id="save"):
            yield Label(self.prompt)
            yield Input(value=self.suggestion, id="save-name")
            with Horizontal():
                yield Button(self.ok, id="save-ok", variant="primary")
                yield Button("Cancel", id="save-cancel")

    @on(Button.Pressed, "#save-ok")
    @on(Input.Submitted, "#save-name")
    def _ok(self) -> None:
        self.dismiss(self.query_one("#save-name", Input).value.strip())

    @on(Button.Pressed, "#save-cancel")
    def _cancel(self) -> None:
        self.dismiss(None)


class NumberField(Input):
    """A text field for a number: digits, sign and decimal point go into it; any other key
    (r, b, s, q ...) is a command as if no field were focused, so a single-key command never
    types into the form."""
    NUMBER_CHARACTERS = frozenset("0123456789.-+")

    def check_consume_key(self, key: str, character: str | None) -> bool:
        return character is not None and character in self.NUMBER_CHARACTERS

    async def _on_key(self, event) -> None:
        if event.is_printable and event.character not in self.NUMBER_CHARACTERS:
            event.prevent_default()          # not typed: the key goes on to the app's keys


def _chosen(select: Select):
    """A Select's value, or None while it shows its prompt."""
    return None if select.is_blank() else select.value


#: brick-table columns and their headings, in the words and units of the CLI tables
BRICK_COLUMNS = {"name": "brick", "role": "role", "catalysts": "catalyst",
                 "volume_L": "volume L", "GHSV_per_h": "GHSV 1/h", "T_out_C": "T out C",
                 "dp_kPa": "dp kPa", "NO_out_ppm_wet": "NO out ppm wet",
                 "NO2_out_ppm_wet": "NO2 out ppm wet", "NH3_out_ppm_wet": "NH3 out ppm wet",
                 "N2O_out_ppm_wet": "N2O out ppm wet", "converged": "converged"}
#: the cycle figures a what-if is compared on, in plain words with their units
COMPARED = (("NOx_g_kWh", "cycle NOx [g/kWh]"), ("N2O_g_kWh", "cycle N2O [g/kWh]"),
            ("NH3_g_kWh", "cycle NH3 [g/kWh]"),
            ("NH3_slip_ppmvd_max", "highest NH3 slip [ppmvd, actual O2]"),
            ("GHG_CO2e_g_kWh", "CO2 + N2O as CO2e [g/kWh]"))
#: the figures of a trace run a what-if is compared on
COMPARED_TRACE = (("NOx_g_kWh", "NOx over the run [g/kWh]"),
                  ("N2O_g_kWh", "N2O over the run [g/kWh]"),
                  ("NH3_g_kWh", "NH3 over the run [g/kWh]"),
                  ("NH3_slip_ppmvd_peak", "highest NH3 slip [ppmvd, actual O2]"),
                  ("NH3_slip_ppmvd_mean", "mean NH3 slip [ppmvd, actual O2]"))


def compliance_text(res, margin: float, width: int) -> Text:
    """Every limit check as value / limit: a bar of ten cells, the percentage and the check
    (green below the limit less the design margin, amber inside the margin, red above the
    limit; checks that do not apply are counted, not drawn). One line per check, cut to
    ``width`` so nothing wraps."""
    out = Text(f"Limits, value / limit (design margin {100 * margin:g} %)\n")
    skipped = 0
    for r in res.limits:
        if r.ratio is None:
            skipped += 1
            continue
        q = r.ratio
        style = "bold red" if not r.passed else ("yellow" if q > 1 - margin else "green")
        n = min(10, int(round(min(q, 1.0) * 10)))
        out.append("█" * n + "░" * (10 - n), style=style)
        label = f" {100 * q:5.0f} %  {r.mode or 'cycle':>6s}  {r.row_name}"
        out.append(label[: max(width - 11, 10)] + "\n", style=style if q > 1 else "")
    if skipped:
        note = (f"({skipped} per-mode check{'s do' if skipped > 1 else ' does'} not apply: "
                "idle, exempt or below a load gate)")
        out.append(note[: max(width, 10)] + "\n", style="dim")
    out.append("PASSES every limit" if res.passed else "DOES NOT PASS",
               style="bold green" if res.passed else "bold red")
    return out


#: mode-table columns, most important first: a narrow panel drops them from the end
MODE_COLUMNS = ("mode", "NOx out", "NH3 out", "N2O out", "ok", "dp kPa", "ANR", "T in C",
                "NOx in", "kW", "W")


def _fit_columns(priority, rows, width: int) -> list[str]:
    """The columns of ``priority`` (most important first) that fit in ``width`` characters,
    each as wide as its widest text plus 2 of padding, in the order of the rows' own keys
    (the table's reading order, as in the CLI)."""
    rows = list(rows)
    need = {k: max([len(k)] + [len(str(r[k])) for r in rows]) + 2 for k in priority}
    chosen, used = set(), 0
    for k in priority:
        if used + need[k] <= width or not chosen:
            chosen.add(k)
            used += need[k]
    return [k for k in (rows[0] if rows else priority) if k in chosen]


def _f(v, fmt=".3g") -> str:
    if v is None or (isinstance(v, float) and not np.isfinite(v)):
        return "-"
    return format(v, fmt)


def _delta(now: float, base: float | None, fmt=".3g") -> str:
    if base is None or base == now:
        return _f(now, fmt)
    return f"{_f(now, fmt)} (was {_f(base, fmt)})"


class CycleApp(App):
    """Step through a case; see :mod:`tui.app`."""
    CSS_PATH = "app.tcss"
    TITLE = "aftertreat"
    BINDINGS = [Binding(k, a, t, show=k in _SHOWN) for k, a, t in KEYS]

    def __init__(self, case_path: str | Path):
        super().__init__()
        self.case_path = Path(case_path)
        self.session: Session | None = None
        self.mode_index = 0
        self.cursor = 0                       # trace time index
        self.playing = False
        self.busy = False
        self._cancel_sizing = False
        self._generation = 0                  # counts solves: a newer one supersedes the rest
        self.trace_view = None                # the TransientRun on screen (partial or whole)

    # -- layout ------------------------------------------------------------------------------
    def compose(self) -> ComposeResult:
        yield Static("", id="title")
        yield Static(Text(CAUTION), id="caution")
        with Horizontal(id="main"):
            with Vertical(id="left"):
                yield DataTable(id="modes", cursor_type="row", zebra_stripes=True)
                yield Static("", id="totals")
                yield Static("", id="limits")
            with TabbedContent(id="tabs", initial="profiles"):
                with TabPane("1 Profiles", id="profiles"):
                    yield Static("", id="profile-head")
                    yield Static("", id="plot-species")
                    yield Static("", id="plot-temp")
                    yield Static("", id="plot-store")
                with TabPane("2 Bricks", id="bricks"):
                    yield DataTable(id="brick-table", cursor_type="row")
                    yield Static("", id="mode-figures")
                with TabPane("3 What-if", id="whatif"):
                    with VerticalScroll():
                        yield Label(Text("Brick to change"))
                        yield Select([], id="wi-brick", prompt="(choose a brick)")
                        yield Label(Text("Length [mm]   Diameter [mm]   Cell density [cpsi]   "
                                         "Activity [-]"))
                        with Horizontal(classes="row"):
                            yield NumberField(placeholder="length mm", id="wi-length")
                            yield NumberField(placeholder="diameter mm", id="wi-diameter")
                            yield NumberField(placeholder="cpsi", id="wi-cpsi")
                            yield NumberField(placeholder="activity 0..2", id="wi-activity")
                        yield Label(Text("Catalyst"))
                        yield Select([], id="wi-catalyst", prompt="(unchanged)")
                        yield Label(Text("Dosing method, ANR (every mode), inlet temperature "
                                         "shift [K]"), id="wi-dosing-label")
                        with Horizontal(classes="row"):
                            yield Select([("none", "none"), ("NH3", "NH3"), ("urea", "urea")],
                                         id="wi-dosing", prompt="(unchanged)")
                            yield NumberField(placeholder="ANR", id="wi-anr")
                            yield NumberField(placeholder="dT K", id="wi-dT")
                        yield Label(Text("Dosing control over the trace, response time [s], "
                                         "highest ANR [-]"), id="wi-trace-label")
                        with Horizontal(classes="row", id="wi-trace-row"):
                            yield Select([(c, c) for c in CONTROLS], id="wi-control",
                                         prompt="(unchanged)")
                            yield NumberField(placeholder="response s", id="wi-response")
                            yield NumberField(placeholder="ANR max", id="wi-anrmax")
                        with Horizontal(classes="row"):
                            yield Button(Text("Run what-if (r)"), id="wi-run", variant="primary")
                            yield Button(Text("Back to the case (b)"), id="wi-reset")
                        yield Static("", id="wi-edits")
                        yield Static("", id="wi-compare")
                with TabPane("4 Sizing", id="sizing"):
                    with Horizontal(classes="row"):
                        yield Button(Text("Size the train (s)"), id="size-run")
                        yield Button(Text("Use the sized design (u)"), id="size-use")
                    yield Static("Sizing finds the smallest SCR and slip-catalyst lengths that "
                                 "meet every limit with the case's design margin.", id="size-out")
                with TabPane("5 Sources", id="sources"):
                    with VerticalScroll():
                        yield Static("", id="sources-text")
        yield Static("", id="status")
        yield Footer()

    def on_mount(self) -> None:
        self._status("reading the case...")
        try:
            self.session = Session(self.case_path)
        except InputError as exc:
            self._status(f"{exc}", error=True)
            self.query_one("#title", Static).update(Text(f"aftertreat: cannot open "
                                                         f"{self.case_path}"))
            return
        case = self.session.case
        self.query_one("#title", Static).update(Text(f"{case.title}   ({self.case_path})",
                                                     style="bold"))
        bricks = [(b.name, b.name) for b in case.train.bricks]
        sel = self.query_one("#wi-brick", Select)
        sel.set_options(bricks)
        sel.value = bricks[0][1]
        from aftertreat.catalyst import available_catalysts
        self.query_one("#wi-catalyst", Select).set_options([(k, k) for k in
                                                            available_catalysts()])
        t = self.query_one("#modes", DataTable)
        if self.session.is_trace:
            t.add_columns("t s", "kW", "T in C", "NOx out", "NH3 out", "N2O out")
            tabs = self.query_one("#tabs", TabbedContent)
            for name in _STEADY_TABS:            # tabs that work on modes only
                tabs.hide_tab(name)
            self.query_one("#wi-dT", Input).display = False   # a trace has its own T column
            self.query_one("#wi-dosing-label", Label).update(Text(
                "Dosing method, ANR (with control \"fixed\")"))
        else:
            for wid in ("#wi-trace-label", "#wi-trace-row"):
                self.query_one(wid).display = False
        self.refresh_bindings()
        self.compute()

    # -- workers -----------------------------------------------------------------------------
    def compute(self) -> None:
        """Solve the current case in a worker thread (steady modes, or the trace). A new solve
        supersedes one still running (a what-if made while the trace runs): the old one stops
        at its next step and shows nothing more."""
        self._generation += 1
        self.busy = True
        self._solve(self._generation)

    @work(thread=True, exclusive=True, group="solve")
    def _solve(self, gen: int) -> None:
        s = self.session
        current = lambda: gen == self._generation      # noqa: E731

        def check():
            if not current():
                raise _Cancelled
        try:
            if s.is_trace:
                self.call_from_thread(self._status, "running the trace: the timeline fills in "
                                      "as it goes; the cursor works meanwhile")

                def progress(i, n):
                    check()
                    if i % 100 == 0:
                        self.call_from_thread(self._status, f"running the trace: step "
                                              f"{i}/{n - 1}" + (" (what-if)" if s.edited else ""))

                def partial(run):
                    check()
                    self.call_from_thread(self._show_partial, run, gen)
                run = s.run_transient(progress=progress, partial=partial)
                check()
                self.call_from_thread(self._show_partial, run, gen)
            else:
                self.call_from_thread(self._status, "solving...")

                def progress(i, n, name):
                    check()
                    self.call_from_thread(self._status, f"solving mode {i + 1}/{n}: {name}")
                s.run(progress=progress)
                check()
                self.call_from_thread(self._show_all)
            self.call_from_thread(self._status, "ready" + (" (what-if)" if s.edited else ""))
        except _Cancelled:
            return
        except InputError as exc:
            if current():
                self.call_from_thread(self._status, f"{exc}", True)
        except Exception as exc:        # noqa: BLE001 - a failure of ours: shown, never a crash
            if current():
                self.call_from_thread(self._status, f"failure: {type(exc).__name__}: {exc}",
                                      True)
        finally:
            if current():
                self.busy = False

    @work(thread=True, exclusive=True, group="size")
    def _size_worker(self) -> None:
        s = self.session
        self.busy = True

        def progress(text):
            if self._cancel_sizing:        # checked at every step of the search
                raise _Cancelled
            self.call_from_thread(self._status, f"sizing: {text}  (x cancels)")
        try:
            res = s.size(progress=progress)
            self.call_from_thread(self._show_sizing, res)
            self.call_from_thread(self._status, "sizing done")
        except _Cancelled:
            self.call_from_thread(self.query_one("#size-out", Static).update,
                                  "sizing cancelled; nothing changed")
            self.call_from_thread(self._status, "sizing cancelled")
        except InputError as exc:
            self.call_from_thread(self._status, f"{exc}", True)
        except Exception as exc:        # noqa: BLE001
            self.call_from_thread(self._status, f"failure: {type(exc).__name__}: {exc}", True)
        finally:
            self.busy = False

    # -- showing -----------------------------------------------------------------------------
    def _status(self, text: str, error: bool = False) -> None:
        """The status line (plain text: messages may contain brackets such as '[mm]')."""
        self.query_one("#status", Static).update(Text(text, style="bold red" if error else ""))

    def _show_all(self) -> None:
        s = self.session
        if s.is_trace:
            self._show_trace()
            return
        res, base = s.result, s.base_result
        t = self.query_one("#modes", DataTable)
        t.clear(columns=True)
        cells = {}
        for m, row in zip(res.modes, res.mode_table().itertuples()):
            e = m.emissions()
            cells[m.name] = {
                "mode": m.name, "W": f"{m.weight:.2f}", "kW": f"{m.power_kW:.0f}",
                "T in C": f"{row.T_in_C:.0f}", "ANR": _f(row.ANR, ".2f"),
                "NOx in": f"{m.emissions(m.inlet)['ppmvd']['NOx']:.0f}",
                "NOx out": f"{e['ppmvd']['NOx']:.1f}", "NH3 out": f"{e['ppmvd']['NH3']:.1f}",
                "N2O out": f"{e['ppmvd']['N2O']:.1f}", "dp kPa": f"{row.dp_kPa:.2f}",
                "ok": "yes" if row.converged else "NO"}
        cols = _fit_columns(MODE_COLUMNS, cells.values(), self._left_width())
        t.add_columns(*cols)
        for c in cells.values():
            t.add_row(*(c[k] for k in cols))
        self.mode_index = min(self.mode_index, len(res.modes) - 1)
        t.move_cursor(row=self.mode_index)
        c = res.cycle
        bc = base.cycle if (base is not None and s.edited) else None
        lines = [f"Cycle {s.case.cycle.name} (ppm columns: ppmvd at the actual O2)",
                 f"NOx  {_delta(c['NOx_g_kWh'], bc and bc['NOx_g_kWh'])} g/kWh",
                 f"N2O  {_delta(c['N2O_g_kWh'], bc and bc['N2O_g_kWh'])} g/kWh",
                 f"NH3 slip max {_delta(c['NH3_slip_ppmvd_max'], bc and bc['NH3_slip_ppmvd_max'])}"
                 " ppmvd",
                 f"train volume {_delta(s.case.train.volume * 1e3, s.base_case.train.volume * 1e3 if s.edited else None, '.0f')} L"]
        self.query_one("#totals", Static).update(Text("\n".join(lines)))
        self.query_one("#limits", Static).update(
            compliance_text(res, s.case.sizing.design_margin, self._left_width()))
        self._show_mode()
        self._show_sources()
        self._show_edits()

    def _left_width(self) -> int:
        """Characters available to the mode table (its panel less borders and scroll bar)."""
        try:
            w = self.query_one("#left").size.width
        except Exception:
            w = 0
        return max((w or self.size.width * 2 // 5) - 3, 20)

    def on_resize(self, event) -> None:
        s = self.session
        if s is not None and s.result is not None and not s.is_trace:
            self._show_all()

    def _show_mode(self) -> None:
        s = self.session
        if s.result is None or s.is_trace:
            return
        m = s.result.modes[self.mode_index]
        sol = m.solution
        head = (f"Mode {m.name} ({self.mode_index + 1}/{len(s.result.modes)}): "
                f"{m.power_kW:.0f} kW, exhaust {m.inlet.mass_flow * 3600:.0f} kg/h, "
                f"T in {m.inlet.T - ZERO_C_K:.0f} C, ANR {_f(m.anr, '.2f')}, "
                f"NOx conversion {100 * sol.nox_conversion():.1f} %, dp {sol.dp_Pa / 1e3:.2f} kPa, "
                f"GHSV {sol.ghsv_per_h():.0f} 1/h")
        self.query_one("#profile-head", Static).update(Text(head))
        self._draw_profiles(sol)
        bt = self.query_one("#brick-table", DataTable)
        bt.clear(columns=True)
        table = sol.brick_table()
        cols = [c for c in BRICK_COLUMNS if c in table.columns]
        bt.add_columns(*(BRICK_COLUMNS[c] for c in cols))
        for row in table[cols].itertuples(index=False):
            bt.add_row(*[v if isinstance(v, str) else _f(v) for v in row])
        base = s.base_result.modes[self.mode_index] if (s.base_result and s.edited) else None
        e, eb = m.emissions(), (base.emissions() if base else None)
        fig = [f"outlet NOx {_delta(e['ppmvd']['NOx'], eb and eb['ppmvd']['NOx'])} ppmvd",
               f"outlet NH3 {_delta(e['ppmvd']['NH3'], eb and eb['ppmvd']['NH3'])} ppmvd",
               f"outlet N2O {_delta(e['ppmvd']['N2O'], eb and eb['ppmvd']['N2O'])} ppmvd",
               f"NOx conversion {_delta(100 * sol.nox_conversion(), base and 100 * base.solution.nox_conversion())} %",
               f"pressure drop {_delta(sol.dp_Pa / 1e3, base and base.solution.dp_Pa / 1e3)} kPa",
               f"GHSV {_delta(sol.ghsv_per_h(), base and base.solution.ghsv_per_h(), '.0f')} 1/h"]
        self.query_one("#mode-figures", Static).update(Text("\n".join(fig)))

    def _plot_size(self) -> tuple[int, int]:
        """Width and height of each of the three charts: the tab area's share of the screen
        (3/5 of the width; the height less the title, caution, tab bar, mode line, status and
        footer), split between the charts."""
        W, H = self.size
        w = max(W * 3 // 5 - 4, 30)
        h = max((H - 12) // 3, 6)
        return w, h

    def _draw_profiles(self, sol) -> None:
        from .plot import line_chart
        z0, xs, marks = 0.0, [], []
        for b in sol.bricks:
            xs.append(z0 + b.z)
            z0 += b.brick.length
            marks.append(z0 * 1e3)
        x = np.concatenate(xs) * 1e3
        ppm = {sp: np.concatenate([b.ppm_profile(sp) for b in sol.bricks])
               for sp in ("NO", "NO2", "NH3", "N2O")}
        w, h = self._plot_size()
        styles = {"NO": "cyan", "NO2": "yellow", "NH3": "red", "N2O": "magenta"}
        chart = line_chart([(sp, x, np.maximum(v, 1e-3), styles[sp]) for sp, v in ppm.items()],
                           w, h, x_label="distance along the train [mm]", y_label="ppm wet",
                           log_y=True, markers=marks[:-1])
        self.query_one("#plot-species", Static).update(chart)
        Tg = np.concatenate([b.T_gas for b in sol.bricks]) - ZERO_C_K
        Ts = np.concatenate([b.T_solid for b in sol.bricks]) - ZERO_C_K
        t_chart = line_chart([("gas T", x, Tg, "white"), ("solid T", x, Ts, "green")], w, h,
                             x_label="distance along the train [mm]", y_label="C",
                             markers=marks[:-1])
        self.query_one("#plot-temp", Static).update(t_chart)
        # stored NH3: mean coverage over the washcoat nodes and sites of each cell
        cov = np.concatenate([b.coverage.reshape(len(b.z), -1).mean(axis=1)
                              if b.coverage.size else np.full(len(b.z), np.nan)
                              for b in sol.bricks])
        self.query_one("#plot-store", Static).update(line_chart(
            [("stored NH3 (coverage)", x, cov, "red")], w, h,
            x_label="distance along the train [mm]", y_label="theta [-]", y_min=0.0,
            markers=marks[:-1]))

    def _show_partial(self, run, gen: int) -> None:
        """Show a trace run, whole or the part done so far, unless a newer solve started."""
        if gen != self._generation:
            return
        self.trace_view = run
        self._show_trace()
        self._show_edits()

    def _show_trace(self) -> None:
        run = self.trace_view
        if run is None:
            return
        df = run.table()
        t = self.query_one("#modes", DataTable)
        t.clear()
        step = max(len(df) // 60, 1)
        for i in range(0, len(df), step):
            r = df.iloc[i]
            t.add_row(f"{r.t_s:.0f}", f"{r.power_kW:.0f}", f"{r.T_in_C:.0f}",
                      f"{r.NOx_out_ppmvd:.1f}", f"{r.NH3_out_ppmvd:.1f}",
                      f"{r.N2O_out_ppmvd:.1f}")
        sm = run.summary()
        whole = run.planned_s
        head = (f"Trace {sm['source']}: {sm['duration_s']:.0f} s, work {sm['work_kWh']:.1f} kWh"
                if run.complete else
                f"Trace {sm['source']}: RUNNING, {sm['duration_s']:.0f} of {whole:.0f} s so far "
                "(figures over the part done)")
        lines = [head,
                 f"NOx {_f(sm['NOx_g_kWh'])} g/kWh, N2O {_f(sm['N2O_g_kWh'])} g/kWh",
                 f"NH3 slip peak {sm['NH3_slip_ppmvd_peak']:.1f}, mean "
                 f"{sm['NH3_slip_ppmvd_mean']:.2f} ppmvd",
                 f"solved {_f(sm['real_time_factor'], '.0f')} x faster than real time"]
        self.query_one("#totals", Static).update(Text("\n".join(lines)))
        lim = Text("Limits over the run" + ("" if run.complete else " so far") + "\n")
        for r in run.limit_checks():
            ok = r.passed
            lim.append(f"{'pass' if ok else 'FAIL'} ", style="green" if ok else "bold red")
            extra = (f", {r.time_above_s:.0f} s above" if r.time_above_s is not None else "")
            lim.append(f"{r.name}: {_f(r.value if r.value is not None else r.peak)} / "
                       f"{_f(r.limit)} {r.basis}{extra}\n")
        self.query_one("#limits", Static).update(lim)
        self._show_cursor()
        self._show_sources()

    def _show_cursor(self) -> None:
        from .plot import line_chart
        run = self.trace_view
        if run is None:
            return
        df = run.table()
        i = min(max(self.cursor, 0), len(df) - 1)
        self.cursor = i
        r = df.iloc[i]
        self.query_one("#profile-head", Static).update(Text(
            f"t = {r.t_s:.0f} s: {r.power_kW:.0f} kW, T in {r.T_in_C:.0f} C, ANR {r.ANR_in:.2f}; "
            f"out NOx {r.NOx_out_ppmvd:.1f}, NH3 {r.NH3_out_ppmvd:.1f}, N2O "
            f"{r.N2O_out_ppmvd:.1f} ppmvd  ({'playing' if self.playing else 'paused'}; "
            "space plays, [ and ] step)"))
        w, h = self._plot_size()
        tm = df.t_s.to_numpy() / 60.0
        chart = line_chart([("NOx", tm, df.NOx_out_ppmvd.to_numpy(), "cyan"),
                            ("NH3", tm, df.NH3_out_ppmvd.to_numpy(), "red"),
                            ("N2O", tm, df.N2O_out_ppmvd.to_numpy(), "magenta")], w, h,
                           x_label="time [min]", y_label="ppmvd", markers=[tm[i]])
        self.query_one("#plot-species", Static).update(chart)
        series = [("gas in", tm, df.T_in_C.to_numpy(), "white")]
        for name, st in zip(run.result.brick_names, ("green", "yellow", "blue", "cyan")):
            series.append((f"{name} solid", tm, df[f"{name}_T_solid_mean_C"].to_numpy(), st))
        self.query_one("#plot-temp", Static).update(
            line_chart(series, w, h, x_label="time [min]", y_label="C", markers=[tm[i]]))
        store = [(name, tm, df[f"{name}_stored_NH3_g"].to_numpy(), st) for name, st in
                 zip(run.result.brick_names, ("green", "yellow", "blue", "cyan"))]
        self.query_one("#plot-store", Static).update(
            line_chart(store, w, h, x_label="time [min]", y_label="stored NH3 [g]",
                       markers=[tm[i]]))

    def _show_sources(self) -> None:
        from aftertreat.citations import case_sources
        s = self.session
        train = getattr(s.result, "train", None) if s.result is not None else None
        text = "Sources behind these numbers:\n\n" + "\n".join(
            f"- {line}" for line in case_sources(s.case, train))
        text += ("\nParameter provenance of each catalyst: aftertreat catalysts KEY\n\n"
                 + SAFETY_NOTE)
        self.query_one("#sources-text", Static).update(Text(text))

    def _show_edits(self) -> None:
        s = self.session
        text = ("Edits: " + "; ".join(s.whatif.assignments)) if s.edited else \
            "No edits: this is the case as loaded."
        self.query_one("#wi-edits", Static).update(Text(text))
        if s.is_trace:
            self.query_one("#wi-compare", Static).update(self._trace_compare())
            return
        if s.edited and s.base_result is not None and s.result is not None:
            c, b = s.result.cycle, s.base_result.cycle
            cmp = [f"{label}: {_f(b[k])} -> {_f(c[k])}" for k, label in COMPARED]
            verdict = {True: "passes every limit", False: "does not pass"}
            cmp.append(f"limits: {verdict[s.base_result.passed]} -> "
                       f"{verdict[s.result.passed]}")
            self.query_one("#wi-compare", Static).update(Text("What-if against the case:\n"
                                                              + "\n".join(cmp)))
        else:
            self.query_one("#wi-compare", Static).update("")

    def _trace_compare(self) -> Text:
        """The trace what-if against the trace as loaded (both over the whole run; a what-if
        still running is compared over the part done so far, and says so)."""
        s, run, base = self.session, self.trace_view, self.session.base_transient
        if s.edited and base is None:
            return Text("No comparison: the what-if started before the case's own run had "
                        "finished, and stopped it (b goes back to the case and runs it).")
        if not s.edited or run is None or run is base:
            return Text("")
        a, b = base.summary(), run.summary()
        head = "What-if against the case, over the run" + (
            "" if run.complete else f" (what-if RUNNING: its first {b['duration_s']:.0f} s "
            f"against the case's whole {a['duration_s']:.0f} s)") + ":"
        rows = [f"{label}: {_f(a[k])} -> {_f(b[k])}" for k, label in COMPARED_TRACE]
        ok = {True: "passes every limit", False: "does not pass"}
        passed = lambda r: all(c.passed for c in r.limit_checks()) and r.result.all_converged  # noqa: E731
        rows.append(f"limits: {ok[passed(base)]} -> {ok[passed(run)]}")
        return Text(head + "\n" + "\n".join(rows))

    def _show_sizing(self, res) -> None:
        lines = [("feasible" if res.feasible else "NOT FEASIBLE")
                 + f"; total volume {res.train.volume * 1e3:.0f} L; "
                 f"{res.evaluations} designs in {res.seconds:.1f} s"]
        for b in res.brick_rows():
            lines.append(f"  {b['name']:10s} {b['role']:4s} length {b['length_mm']:.0f} mm, "
                         f"diameter {b['diameter_mm']:.0f} mm, {b['volume_L']:.0f} L")
        lines.append("binding: " + ("; ".join(res.binding) or "none within 1.5 %"))
        if res.diameter_reason:
            lines.append(f"diameter: {res.diameter_reason}")
        if res.layers:
            lines.append(f"layers: {res.layers}")
        if res.case.dosing["method"] != "none":
            lines.append("ANR per mode: " + ", ".join(f"{m.name} {m.anr:.2f}"
                                                      for m in res.run.modes))
        t = res.run.train_n2o()
        lines.append(f"N2O made in the train {t['N2O_made_g_kWh']:+.3f} g/kWh "
                     f"({t['N2O_made_CO2e_g_kWh']:+.0f} g CO2e/kWh)")
        for p in res.problems:
            lines.append(f"problem: {p}")
        if res.suggestions:
            lines.append("what would help: " + "; ".join(res.suggestions))
        lines.append("")
        lines.append("smallest margins (value / limit on the limit's basis, margin %):")
        tight = sorted((x for x in res.margins if x.margin_pct is not None),
                       key=lambda x: x.margin_pct)[:8]
        for x in tight:
            c = x.check
            lines.append(f"  {c.row_name[:34]:34s} {c.mode or 'cycle':>7s}  "
                         f"{_f(c.value)} / {_f(c.limit)} {c.basis}  {x.margin_pct:.0f} %"
                         + ("" if x.pass_with_design_margin else "  FAILS the design margin"))
        lines.append("")
        lines.append("u: use the sized design as the what-if (compare it, then a: save it)")
        self.query_one("#size-out", Static).update(Text("\n".join(lines)))

    # -- events and actions ------------------------------------------------------------------
    @on(DataTable.RowHighlighted, "#modes")
    def _row(self, event: DataTable.RowHighlighted) -> None:
        if self.session is None or self.session.result is None or self.session.is_trace:
            return
        if event.cursor_row != self.mode_index:
            self.mode_index = event.cursor_row
            self._show_mode()

    def action_next_mode(self) -> None:
        self._move(1)

    def action_previous_mode(self) -> None:
        self._move(-1)

    def _move(self, d: int) -> None:
        s = self.session
        if s is None:
            return
        if s.is_trace:
            self.action_step(d * 60)
            return
        if s.result is None:
            return
        n = len(s.result.modes)
        self.mode_index = (self.mode_index + d) % n
        self.query_one("#modes", DataTable).move_cursor(row=self.mode_index)
        self._show_mode()

    def action_tab(self, name: str) -> None:
        if self.session is not None and self.session.is_trace and name in _STEADY_TABS:
            self._status("a trace case has no modes: what-ifs, sizing and bricks work on "
                         "cases with a cycle")
            return
        self.query_one("#tabs", TabbedContent).active = name
        if name == "whatif":                 # typing goes straight into the form
            self.set_focus(self.query_one("#wi-length", NumberField))

    def check_action(self, action: str, parameters) -> bool | None:
        """Keys that fit the case kind: mode keys for a cycle, time keys for a trace (the
        footer shows only those)."""
        s = self.session
        if s is None:
            return True
        if s.is_trace and action in _STEADY_ACTIONS:
            return False
        if not s.is_trace and action in _TRACE_ACTIONS:
            return False
        return True

    def action_help(self) -> None:
        self.push_screen(HelpScreen())

    def action_step(self, d: int) -> None:
        if self.session is None or self.trace_view is None:
            return
        self.cursor += int(d)
        self._show_cursor()

    def action_play(self) -> None:
        if self.session is None or self.trace_view is None:
            self._status("play/pause steps a trace's time cursor; this case has modes (n/p)")
            return
        self.playing = not self.playing
        if self.playing:
            self._timer = self.set_interval(0.1, lambda: self.action_step(5))
        elif getattr(self, "_timer", None) is not None:
            self._timer.stop()
        self._show_cursor()

    def _number(self, wid: str, lo: float, hi: float, what: str):
        text = self.query_one(wid, Input).value.strip()
        if not text:
            return None
        try:
            v = float(text)
        except ValueError:
            raise InputError(f"expected a number for {what}", key=what, value=text) from None
        if not lo <= v <= hi:
            raise InputError(f"expected {what} within [{lo:g}, {hi:g}]", key=what, value=v)
        return v

    def _form_assignments(self) -> list[str]:
        s = self.session
        brick = _chosen(self.query_one("#wi-brick", Select))
        out = []
        if brick is not None:
            cat = _chosen(self.query_one("#wi-catalyst", Select))
            out += s.brick_assignments(
                str(brick), length_mm=self._number("#wi-length", 1.0, 1e5, "length [mm]"),
                diameter_mm=self._number("#wi-diameter", 1.0, 1e5, "diameter [mm]"),
                cpsi=self._number("#wi-cpsi", 1.0, 2000.0, "cell density [cpsi]"),
                catalyst=None if cat is None else str(cat),
                activity=self._number("#wi-activity", 0.01, 2.0, "activity"))
        method = _chosen(self.query_one("#wi-dosing", Select))
        if method is not None:
            out.append(f'dosing.method="{method}"')
        anr = self._number("#wi-anr", 0.0, 3.0, "ANR")
        if anr is not None:
            out.append(f"dosing.ANR={anr:g}")
        if s.is_trace:
            control = _chosen(self.query_one("#wi-control", Select))
            out += s.dosing_control_assignments(
                control=None if control is None else str(control),
                response_s=self._number("#wi-response", 1.0, 1e4, "response time [s]"),
                ANR_max=self._number("#wi-anrmax", 0.0, 3.0, "highest ANR"))
            return out
        dT = self._number("#wi-dT", -300.0, 300.0, "temperature shift [K]")
        if dT:
            out += s.inlet_temperature_assignment(dT)
        return out

    @on(Input.Submitted, "#wi-length, #wi-diameter, #wi-cpsi, #wi-activity, #wi-anr, #wi-dT, "
                         "#wi-response, #wi-anrmax")
    def _submitted(self) -> None:
        """Enter in a what-if field runs the what-if."""
        self.action_run_whatif()

    def action_leave_field(self) -> None:
        """Escape leaves a text field, so the single-key commands work again."""
        self.set_focus(None)

    @on(Button.Pressed, "#wi-run")
    def action_run_whatif(self) -> None:
        s = self.session
        if s is None:
            return
        try:
            a = self._form_assignments()
            if not a:
                self._status("nothing to change: fill in the what-if form (tab 3) first")
                return
            warnings = s.apply(a)
        except InputError as exc:
            self._status(f"not applied: {exc}", error=True)
            return
        self._clear_form()
        self._show_edits()
        self.compute()
        if warnings:
            self._status("note: " + "; ".join(warnings), error=True)

    def _clear_form(self) -> None:
        for wid in ("#wi-length", "#wi-diameter", "#wi-cpsi", "#wi-activity", "#wi-anr",
                    "#wi-dT", "#wi-response", "#wi-anrmax"):
            self.query_one(wid, Input).value = ""

    @on(Button.Pressed, "#wi-reset")
    def action_reset(self) -> None:
        if self.session is None:
            return
        s = self.session
        was_running = s.is_trace and self.trace_view is not None and not self.trace_view.complete
        s.reset()
        self._clear_form()
        self._status("back to the case as loaded")
        if s.is_trace:
            if s.base_transient is not None:
                self._generation += 1          # a what-if still running is dropped
                self.busy = False
                self.trace_view = s.base_transient
                self._show_trace()
            elif was_running or self.trace_view is None:
                self.compute()                 # the baseline itself had not finished
        elif s.result is not None:
            self._show_all()
        self._show_edits()

    @on(Button.Pressed, "#size-run")
    def action_size(self) -> None:
        if self.session is None or self.session.is_trace:
            self._status("sizing needs a case with modes")
            return
        self.action_tab("sizing")
        self.query_one("#size-out", Static).update("sizing... (x cancels)")
        self._cancel_sizing = False          # before the worker starts: an early x counts
        self._size_worker()

    def action_cancel_sizing(self) -> None:
        self._cancel_sizing = True

    @on(Button.Pressed, "#size-use")
    def action_use_sized(self) -> None:
        s = self.session
        if s is None or s.sizing is None:
            self._status("size the train first (s)")
            return
        try:
            label = s.apply_sized(s.sizing)
        except InputError as exc:
            self._status(f"not applied: {exc}", error=True)
            return
        self._show_edits()
        self.compute()
        self._status(f"what-if: {label}")

    async def action_quit(self) -> None:
        """Quit; with edits not yet saved, ask first (save / discard / cancel)."""
        s = self.session
        if s is None or not s.unsaved:
            self.exit()
            return

        def answer(choice):
            if choice == "discard":
                self.exit()
            elif choice == "save":
                self.action_save_as(then_quit=True)
        self.push_screen(QuitScreen(), answer)

    def action_save_as(self, then_quit: bool = False) -> None:
        if self.session is None:
            return
        stem = self.case_path.stem
        suggestion = str(self.case_path.with_name(f"{stem}_whatif.toml"))

        def done(name):
            if not name:
                return
            try:
                target, backup = self.session.save_as(name)
            except (InputError, OSError) as exc:
                self._status(f"not saved: {exc}", error=True)
                return
            self._status(f"saved {target}" + (f" (the file there was kept as {backup.name})"
                                              if backup else ""))
            if then_quit:
                self.exit()
        self.push_screen(SaveScreen(suggestion), done)

    def action_export(self) -> None:
        s = self.session
        if s is None or (s.transient if s.is_trace else s.result) is None:
            self._status("nothing solved yet")
            return
        base = self.case_path.with_name(f"{self.case_path.stem}_report")
        suggestion, k = base, 1
        while suggestion.exists() and any(suggestion.iterdir()):
            k += 1
            suggestion = base.with_name(f"{base.name}_{k}")

        def done(name):
            if not name:
                return
            try:
                folder = s.export_report(name)
            except (InputError, OSError) as exc:
                self._status(f"report not written: {exc}", error=True)
                return
            self._status(f"report written to {folder}/")
        self.push_screen(SaveScreen(str(suggestion), prompt="Export the report into this folder "
                                    "(a folder that holds files is refused, never overwritten):",
                                    ok="Export"), done)

def main(case_path: str) -> int:
    """Run the app on ``case_path``; returns the exit code."""
    CycleApp(case_path).run()
    return 0
