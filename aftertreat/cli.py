"""The ``aftertreat`` command.

Subcommands:
    aftertreat run CASE [--set KEY=VALUE ...] [--json] [--report DIR]   evaluate a duty cycle
    aftertreat size CASE [--set KEY=VALUE ...] [--json] [--report DIR]  size SCR and slip catalyst
    aftertreat point CASE [--set KEY=VALUE ...] [--json]   solve the train at the case's exhaust
    aftertreat catalysts [KEY]                              list catalysts, or one's provenance
    aftertreat sources CASE                                 the sources behind a case's numbers

Exit codes: 0 computed (whether or not anything passes), 2 bad input, 1 a failure of ours
(including a solver that did not converge), with a one-line reason on stderr.
"""
from __future__ import annotations

import argparse
import sys

from .units import NORMAL_CONDITIONS, ZERO_C_K

__all__ = ["main"]


def escape(text: str) -> str:
    """``text`` safe to print through rich (square brackets, as in ``[limits]``, are markup)."""
    from rich.markup import escape as _escape
    return _escape(text)


def _fail(code: int, text: str) -> int:
    print(f"aftertreat: {text}", file=sys.stderr)
    return code


class _Parser(argparse.ArgumentParser):
    def error(self, message):             # usage errors are bad input: exit 2, one line
        self.exit(2, f"aftertreat: {message} (see 'aftertreat --help')\n")


def _build_parser() -> argparse.ArgumentParser:
    p = _Parser(prog="aftertreat", description="Size SCR and ammonia-slip catalysts behind "
                "ammonia-fuelled engines and turbines.")
    sub = p.add_subparsers(dest="command", required=True, parser_class=_Parser)
    rn = sub.add_parser("run", help="evaluate a duty-cycle case: every mode, cycle emissions, "
                        "limits")
    rn.add_argument("case", help="case file (TOML) with [engine], [cycle], [engine_out] ...")
    rn.add_argument("--set", action="append", default=[], metavar="KEY=VALUE",
                    help="override a case value by its dotted path, e.g. "
                         "'brick.SCR 1.length=700 mm' (repeatable)")
    rn.add_argument("--json", action="store_true", help="one JSON object on stdout, nothing else")
    rn.add_argument("--strict", action="store_true",
                    help="an inlet temperature outside a catalyst's validity range is an error "
                         "(default: a warning, and the rates are extrapolated)")
    rn.add_argument("--report", metavar="DIR", help="write tables, plots, sources, the case as "
                    "run and the safety cautions into DIR")
    rn.add_argument("--move-old", action="store_true", help="when the --report folder exists "
                    "and is not empty, move it aside (renamed with the time) instead of refusing")
    sz = sub.add_parser("size", help="find the smallest SCR and slip catalyst that meet every "
                        "limit of a duty-cycle case")
    sz.add_argument("case", help="case file (TOML) with [engine], [cycle], ... and [sizing]")
    sz.add_argument("--set", action="append", default=[], metavar="KEY=VALUE",
                    help="override a case value by its dotted path (repeatable)")
    sz.add_argument("--json", action="store_true", help="one JSON object on stdout, nothing else")
    sz.add_argument("--strict", action="store_true",
                    help="an inlet temperature outside a catalyst's validity range is an error "
                         "(default: a warning, and the rates are extrapolated)")
    sz.add_argument("--report", metavar="DIR", help="write the sizing curves (CSV, PNG) and the "
                    "report of the sized design into DIR")
    sz.add_argument("--move-old", action="store_true", help="when the --report folder exists "
                    "and is not empty, move it aside (renamed with the time) instead of refusing")
    pt = sub.add_parser("point", help="solve the catalyst train at the exhaust state of a case")
    pt.add_argument("case", help="case file (TOML)")
    pt.add_argument("--set", action="append", default=[], metavar="KEY=VALUE",
                    help="override a case value by its dotted path, e.g. "
                         "'brick.SCR 1.length=700 mm' (repeatable)")
    pt.add_argument("--json", action="store_true", help="one JSON object on stdout, nothing else")
    pt.add_argument("--strict", action="store_true",
                    help="an inlet temperature outside a catalyst's validity range is an error "
                         "(default: a warning, and the rates are extrapolated)")
    so = sub.add_parser("sources", help="list the sources behind a case's numbers: catalysts, "
                        "correlations, cycle and limits")
    so.add_argument("case", help="case file (TOML)")
    ct = sub.add_parser("catalysts", help="list the shipped catalysts, or show one's parameters "
                        "and their provenance")
    ct.add_argument("key", nargs="?", help="catalyst key or file")
    tu = sub.add_parser("tui", help="open a case in the terminal UI: step through its cycle, "
                        "what-ifs, sizing")
    tu.add_argument("case", help="duty-cycle case file (TOML)")
    return p


def main(argv: list[str] | None = None) -> int:
    from .errors import ConvergenceError, InputError
    from .reactor import set_strict_temperature_range
    args = _build_parser().parse_args(argv)
    try:
        set_strict_temperature_range(bool(getattr(args, "strict", False)))
        if getattr(args, "report", None):           # checked before any solving
            from .report import check_report_folder
            check_report_folder(args.report, move_old=getattr(args, "move_old", False))
        if args.command == "run":
            return _run(args)
        if args.command == "size":
            return _size(args)
        if args.command == "point":
            return _point(args)
        if args.command == "catalysts":
            return _catalysts(args)
        if args.command == "sources":
            return _sources(args)
        if args.command == "tui":
            return _tui(args)
    except InputError as exc:
        return _fail(2, str(exc))
    except ConvergenceError as exc:
        return _fail(1, str(exc))
    except KeyboardInterrupt:
        return _fail(1, "interrupted")
    finally:
        set_strict_temperature_range(False)       # the flag holds for this command only
    return 0


def _tui(args) -> int:
    """The terminal UI (package ``tui``, installed with aftertreat). The command layer may start
    it; the library modules never import it. The case is checked first, so a bad case gives the
    usual one-line message instead of an app with an error in it."""
    import importlib
    from .cyclecase import load_run_case
    load_run_case(args.case)
    return importlib.import_module("tui.app").main(args.case)


def _with_status(args, label: str, compute):
    """Run ``compute(progress)``: quietly with --json, else with a status line on stderr."""
    if args.json:
        return compute(None)
    from rich.console import Console
    from .solver import compiled_kernel_cached, default_kernel
    if default_kernel() != "numpy" and compiled_kernel_cached() is False:
        label = f"{label} (first run: compiling the solver kernel for this machine, once, " \
                "about 1-2 minutes)"
    with Console(stderr=True).status(f"{label}...") as status:
        return compute(lambda text: status.update(f"{label}: {text}"))


def _emit(args, result, write_report, print_human) -> None:
    """The report folder (--report), then one JSON object (--json) or the human tables."""
    from .output import SAFETY_NOTE, to_json
    if args.report:
        _write_report(args, lambda folder: write_report(result, folder))
    if args.json:
        print(to_json(result.to_json()))
    else:
        print_human(result, SAFETY_NOTE, args.report)


def _write_report(args, write) -> None:
    """``write(folder)`` into a staged folder that replaces ``args.report`` whole (see
    :class:`aftertreat.report.StagedFolder`); say on stderr where an old report was moved."""
    from .report import StagedFolder
    staged = StagedFolder(args.report, move_old=getattr(args, "move_old", False))
    with staged as folder:
        write(folder)
    if staged.moved_to is not None:
        print(f"aftertreat: the earlier contents of {args.report} were moved to "
              f"{staged.moved_to}", file=sys.stderr)


def _say_overrides(con, case) -> None:
    over = getattr(case, "overrides", [])
    if over:
        con.print("[yellow]--set overrides:[/yellow] " + escape("; ".join(over)))


def _run(args) -> int:
    from .cyclecase import load_run_case
    from .evaluate import run_case
    case = load_run_case(args.case, args.set)
    if case.transient is not None:
        return _run_transient(args, case)
    result = _with_status(args, "solving", lambda p: run_case(
        case, progress=None if p is None else lambda i, n, name: p(f"mode {i + 1}/{n}: {name}")))
    from .report import write_report
    _emit(args, result, write_report, _print_run)
    if not result.converged:
        bad = [m.name for m in result.modes if not m.solution.converged]
        return _fail(1, f"solver did not converge in mode(s) {', '.join(bad)}; their numbers "
                        "are flagged")
    return 0


def _run_transient(args, case) -> int:
    """A case with [transient]: its steady modes (if it has a cycle), then the time run."""
    from .evaluate import run_case
    from .output import SAFETY_NOTE, to_json
    from .report import write_report, write_transient_report
    from .transient_run import run_transient
    steady = None
    if case.cycle is not None:
        steady = _with_status(args, "solving", lambda p: run_case(case, progress=None if p is None
                              else lambda i, n, name: p(f"mode {i + 1}/{n}: {name}")))
    trun = _with_status(args, "transient", lambda p: run_transient(
        case, progress=None if p is None else lambda i, n: p(f"step {i}/{n - 1}")
        if i % 50 == 0 else None))
    obj = steady.to_json() if steady is not None else trun.run_json()
    obj["transient"] = trun.summary()
    if args.report:
        def both(folder):
            if steady is not None:
                write_report(steady, folder)
            write_transient_report(trun, obj, folder, with_cycle=steady is not None)
        _write_report(args, both)
    if args.json:
        print(to_json(obj))
    else:
        if steady is not None:
            _print_run(steady, "", None)
        _print_transient(trun, obj["transient"], SAFETY_NOTE, args.report)
    converged = trun.result.all_converged and (steady is None or steady.converged)
    if not converged:
        return _fail(1, "the solver did not converge at some steps or modes; their numbers are "
                        "flagged")
    return 0


def _print_transient(trun, s: dict, safety: str, report) -> None:
    from rich import box
    from rich.console import Console
    from rich.table import Table
    con = Console()
    case = trun.case
    if case.cycle is None:
        con.print(f"[bold]{escape(case.title)}[/bold]  ({escape(str(case.file))})")
        _say_overrides(con, case)
    con.print(f"transient run: {s['source']}; {s['duration_s']:.0f} s in {s['steps']} steps; "
              f"dosing {case.dosing['method']}, control {s['dosing_control']}")
    wk = s["work_kWh"]
    con.print(f"work {wk:.1f} kWh; emitted NOx {s['NOx_g']:.1f} g, N2O {s['N2O_g']:.1f} g, "
              f"NH3 {s['NH3_g']:.1f} g"
              + (f" = {s['NOx_g_kWh']:.3f} / {s['N2O_g_kWh']:.3f} / {s['NH3_g_kWh']:.3f} g/kWh"
                 if wk > 0 else ""))
    con.print(f"NH3 slip: peak {s['NH3_slip_ppmvd_peak']:.1f} ppmvd as measured at "
              f"t = {s['NH3_slip_ppmvd_peak_t_s']:.0f} s, time average "
              f"{s['NH3_slip_ppmvd_mean']:.2f} ppmvd")
    acc = s["NH3_account_mol"]
    con.print(f"NH3 account (mol): in {acc['in_mol']:.2f} = out {acc['out_mol']:.2f} + "
              f"destroyed {acc['reacted_mol']:.2f} + stored {acc['stored_change_mol']:+.2f} "
              f"(imbalance {acc['imbalance_mol']:.1e})")
    checks = trun.limit_checks()
    if checks:
        L = Table(title="Limits over the run", box=box.SIMPLE_HEAD, pad_edge=False)
        for col in ("limit", "value / peak", "mean", "limit", "unit", "time above s", "result"):
            L.add_column(col, justify="left" if col in ("limit", "unit") else "right")
        for r in checks:
            L.add_row(r.name, _num(r.value if r.value is not None else r.peak), _num(r.mean),
                      _num(r.limit), r.basis,
                      f"{r.time_above_s:.0f}" if r.time_above_s is not None else "-",
                      ("[green]pass[/]" if r.passed else "[red]FAIL[/]")
                      if r.limit is not None else "n/a")
        con.print(L)
    rtf = s.get("real_time_factor")
    con.print(f"solved in {s['solve_s']:.1f} s" + (f" ({rtf:.0f} x real time)" if rtf else "")
              + ("" if s["converged"] else " [red]with steps that did not converge[/]"))
    if report:
        con.print(f"report written to {report}/")
    con.print(f"[dim]{safety}[/dim]")


def _size(args) -> int:
    from .cyclecase import load_run_case
    from .sizing import size_case
    case = load_run_case(args.case, args.set)
    res = _with_status(args, "sizing", lambda p: size_case(
        case, progress=p, curves=bool(args.report or args.json)))
    from .report import write_size_report
    _emit(args, res, write_size_report, _print_size)
    if not res.run.converged:
        return _fail(1, "the solver did not converge at the sized design; its numbers are flagged")
    return 0


def _print_size(res, safety: str, report: str | None) -> None:
    from rich import box
    from rich.console import Console
    from rich.table import Table
    con = Console()
    case = res.case
    con.print(f"[bold]{escape(case.title)}[/bold]  ({escape(str(case.file))})")
    _say_overrides(con, case)
    con.print(f"sizing with a design margin of {case.sizing.design_margin * 100:.0f} % on "
              f"every limit, at the aged activities of the case")
    t = Table(title="Sized train", box=box.SIMPLE_HEAD, pad_edge=False)
    for c in ("brick", "role", "catalyst", "length mm", "diameter mm", "volume L"):
        t.add_column(c, justify="left" if c in ("brick", "role", "catalyst") else "right")
    for b in res.train.bricks:
        t.add_row(b.name, b.role, "+".join(c.key for c in b.catalysts), f"{b.length * 1e3:.0f}",
                  f"{b.diameter * 1e3:.0f}", f"{b.volume * 1e3:.0f}")
    con.print(t)
    if res.continuous:
        total = sum(r["volume_L"] for r in res.continuous)
        con.print("continuous optimum (before rounding up to buildable lengths): "
                  + ", ".join(f"{r['name']} {r['length_mm']:.0f} mm" for r in res.continuous)
                  + f"; {total:.0f} L")
    for rule in res.build_rules:
        con.print(f"buildable lengths, {rule}")
    if res.diameter_reason:
        con.print(f"diameter: {res.diameter_reason}")
    if res.layers:
        con.print(f"layers: {escape(res.layers)}")
    if case.dosing["method"] != "none":
        con.print("ANR per mode (NH3/NOx dosed): " + ", ".join(
            f"{m.name} {m.anr:.2f}" for m in res.run.modes))
    c = res.run.cycle
    dp = res.run.dp_kPa_max
    con.print(f"total {res.train.volume * 1e3:.0f} L; cycle NOx {c['NOx_g_kWh']:.3f} g/kWh, "
              f"N2O {c['N2O_g_kWh']:.3f} g/kWh, max NH3 slip {c['NH3_slip_ppmvd_max']:.2f} "
              f"ppmvd as measured; back-pressure {dp:.2f} kPa (worst mode)"
              + (f"; cost {res.cost:.1f}" if res.cost is not None else ""))
    con.print(_n2o_made(res.run))
    if res.objective:
        con.print(f"objective: {escape(res.objective)}")
    if res.feasible:
        con.print("[green]feasible[/green]; binding limits: " + ("; ".join(res.binding) or
                                                                 "none within 1.5 %"))
    else:
        con.print("[red]NOT FEASIBLE[/red]")
        for p in res.problems:
            con.print(f"  - {escape(p)}")
        if res.suggestions:
            con.print("what would change that: " + escape("; ".join(res.suggestions)))
    L = Table(title="Margin on every limit at the sized design", box=box.SIMPLE_HEAD,
              pad_edge=False)
    for col in ("limit", "mode", "value", "limit", "unit", "margin %"):
        L.add_column(col, justify="right" if col in ("value", "limit", "margin %") else "left")
    for x in res.margins:
        r = x.check
        L.add_row(r.row_name, r.mode or "cycle", _num(r.value), _num(r.limit), r.basis,
                  _num(x.margin_pct))
    con.print(L)
    _print_notes(con, res.run.warnings)
    con.print(f"{res.evaluations} designs evaluated ({res.train_solves} train solves) in "
              f"{res.seconds:.1f} s")
    if report:
        con.print(f"report written to {report}/")
    con.print(f"[dim]{safety}[/dim]")


def _print_notes(con, warnings) -> None:
    """The run's warnings, each once (the same note at every mode is shown once)."""
    seen = set()
    for w in warnings:
        text = w.split(": ", 1)[1] if w.startswith("mode '") else w
        if text not in seen:
            seen.add(text)
            con.print(f"[yellow]note: {escape(text)}[/yellow]")


def _n2o_made(result) -> str:
    """One line on the N2O the train made (cycle g/kWh and as CO2e)."""
    t = result.train_n2o()
    rise = t["GHG_CO2e_rise_pct"]
    return (f"N2O made in the train {t['N2O_made_g_kWh']:+.3f} g/kWh = "
            f"{t['N2O_made_CO2e_g_kWh']:+.0f} g CO2e/kWh (GWP100 {t['GWP_set']})"
            + (f", {rise:+.1f} % on the engine-out CO2e" if rise is not None else ""))


def _print_run(result, safety: str, report: str | None) -> None:
    from rich.console import Console
    from rich.table import Table
    con = Console()
    case = result.case
    con.print(f"[bold]{escape(case.title)}[/bold]  ({escape(str(case.file))})")
    _say_overrides(con, case)
    con.print(f"{case.engine.application}, {case.engine.rated_power_kW:.0f} kW"
              + (f" at {case.engine.rated_speed_rpm:.0f} rpm" if case.engine.rated_speed_rpm
                 else "") + f"; cycle {case.cycle.name}; dosing {case.dosing['method']}")
    from rich import box
    t = Table(title="Modes (NOx, NH3, N2O in ppmvd at the actual O2)", box=box.SIMPLE_HEAD,
              pad_edge=False)
    for c in ("mode", "W", "kW", "T in\nC", "ANR", "NOx\nin", "NOx\nout", "NH3\nout",
              "N2O\nout", "dp\nkPa", "ok"):
        t.add_column(c, justify="left" if c == "mode" else "right", no_wrap=True)
    for m, row in zip(result.modes, result.mode_table().itertuples()):
        e = m.emissions()
        t.add_row(m.name, f"{m.weight:.2f}", f"{m.power_kW:.0f}", f"{row.T_in_C:.0f}",
                  f"{row.ANR:.2f}", f"{m.emissions(m.inlet)['ppmvd']['NOx']:.0f}",
                  f"{e['ppmvd']['NOx']:.1f}", f"{e['ppmvd']['NH3']:.1f}",
                  f"{e['ppmvd']['N2O']:.1f}", f"{row.dp_kPa:.2f}",
                  "yes" if row.converged else "[red]NO[/]")
    con.print(t)
    c, eo = result.cycle, result.engine_out_cycle
    con.print(f"cycle NOx {eo['NOx_g_kWh']:.2f} -> {c['NOx_g_kWh']:.3f} g/kWh, "
              f"N2O {eo['N2O_g_kWh']:.3f} -> {c['N2O_g_kWh']:.3f} g/kWh "
              f"({c['N2O_CO2e_g_kWh']:.0f} g CO2e/kWh, GWP {case.gwp_set}), "
              f"NH3 {c['NH3_g_kWh']:.3f} g/kWh, max NH3 slip {c['NH3_slip_ppm_wet_max']:.1f} ppm wet")
    con.print(f"greenhouse gases {eo['GHG_CO2e_g_kWh']:.0f} -> {c['GHG_CO2e_g_kWh']:.0f} "
              "g CO2e/kWh (CO2 from carbon fuels and reagent + N2O as CO2e); "
              + _n2o_made(result))
    if result.limits:
        L = Table(title="Limits (sources: limits.csv of the report, or --json)",
                  box=box.SIMPLE_HEAD, pad_edge=False)
        for col in ("limit", "mode", "value", "limit", "unit", "result"):
            L.add_column(col, justify="right" if col in ("value", "limit") else "left")
        for r in result.limits:
            L.add_row(r.row_name + (" *" if r.confidence == "from memory" else ""),
                      r.mode or "cycle", _num(r.value), _num(r.limit), r.basis,
                      "[green]pass[/]" if r.passed else "[red]FAIL[/]")
        con.print(L)
        if any(r.confidence == "from memory" for r in result.limits):
            con.print("* limit value recalled from memory, not read in the source: check it")
    verdict = "[green]PASSES[/]" if result.passed else "[red]DOES NOT PASS[/]"
    con.print(f"Overall: {verdict} every limit of the case (solved in {result.seconds:.1f} s)")
    _print_notes(con, result.warnings)
    if report:
        con.print(f"report written to {report}/")
    con.print(f"[dim]{safety}[/dim]")


def _num(v) -> str:
    return "-" if v is None else f"{v:.3g}"


def _point(args) -> int:
    from .case import load_case
    from .output import SAFETY_NOTE, point_dict, to_json
    case = load_case(args.case, args.set)
    sol = case.train.solve(case.exhaust)
    if args.json:
        print(to_json(dict(point_dict(case.title, sol), overrides=case.overrides)))
    else:
        _print_point(case, sol, SAFETY_NOTE)
    if not sol.converged:
        bad = [b.brick.name for b in sol.bricks if not b.converged]
        return _fail(1, f"solver did not converge in brick(s) {', '.join(bad)} "
                        f"(scaled residual {sol.residual:.1e}); numbers above are flagged")
    return 0


def _print_point(case, sol, safety: str) -> None:
    from rich.console import Console
    from rich.table import Table
    con = Console()
    con.print(f"[bold]{escape(case.title)}[/bold]  ({escape(str(case.file))})")
    _say_overrides(con, case)
    inl, out = sol.inlet, sol.outlet
    con.print(f"exhaust {inl.mass_flow * 3600:.0f} kg/h, {inl.T - ZERO_C_K:.1f} C, "
              f"{inl.p / 1e3:.1f} kPa; GHSV {sol.ghsv_per_h():.0f} 1/h ({NORMAL_CONDITIONS}); "
              f"NOx conversion {sol.nox_conversion() * 100:.1f} %")
    t = Table(title="Bricks (outlet values, wet ppm)")
    for col in ("brick", "role", "vol L", "T out C", "dp kPa", "NO", "NO2", "NH3", "N2O", "ok"):
        t.add_column(col, justify="left" if col in ("brick", "role") else "right")
    for b in sol.bricks:
        o = b.outlet
        t.add_row(b.brick.name, b.brick.role, f"{b.brick.volume * 1e3:.0f}",
                  f"{o.T - ZERO_C_K:.1f}", f"{b.dp.total_Pa / 1e3:.2f}", f"{o.ppm('NO'):.1f}",
                  f"{o.ppm('NO2'):.1f}", f"{o.ppm('NH3'):.1f}", f"{o.ppm('N2O'):.1f}",
                  "yes" if b.converged else f"NO {b.residual:.0e}")
    con.print(t)
    s = Table(title="Train inlet and outlet")
    s.add_column("species")
    for col in ("in wet", "in dry", "out wet", "out dry"):
        s.add_column(col, justify="right")
    iw, idr, ow, od = inl.ppm_wet(), inl.ppm_dry(), out.ppm_wet(), out.ppm_dry()
    for sp in ("NO", "NO2", "NH3", "N2O"):
        s.add_row(f"{sp} ppm", f"{iw[sp]:.1f}", f"{idr[sp]:.1f}", f"{ow[sp]:.1f}", f"{od[sp]:.1f}")
    for sp in ("O2", "H2O"):
        s.add_row(f"{sp} %", f"{iw[sp] / 1e4:.2f}", f"{idr[sp] / 1e4:.2f}", f"{ow[sp] / 1e4:.2f}",
                  f"{od[sp] / 1e4:.2f}")
    con.print(s)
    for w in sol.warnings:
        con.print(f"[yellow]note: {escape(w)}[/yellow]")
    con.print(f"element balance error {sol.element_balance_error:.1e}; solved in "
              f"{sol.seconds * 1e3:.0f} ms. Kinetic parameters and their provenance: "
              "'aftertreat catalysts KEY'.")
    con.print(f"[dim]{safety}[/dim]")


def _sources(args) -> int:
    """Sources behind a case, without solving it."""
    from .case import load_case, read_toml
    data = read_toml(args.case)
    if "cycle" in data or "transient" in data:
        from .cyclecase import load_run_case
        case = load_run_case(args.case)
    else:
        case = load_case(args.case)
    from .citations import case_sources
    lines = case_sources(case)
    print(f"Sources behind {case.title}:")
    for line in lines:
        print(f"  - {line}")
    print("Every kinetic parameter and its provenance: aftertreat catalysts KEY")
    return 0


def _catalysts(args) -> int:
    from rich.console import Console
    from rich.table import Table
    from .catalyst import LayeredCatalyst, available_catalysts, load_catalyst
    con = Console()
    if not args.key:
        t = Table(title="Shipped catalysts")
        for col in ("key", "role", "valid C", "name", "parameters: transcribed / from memory / "
                    "fitted"):
            t.add_column(col)
        for key in available_catalysts():
            c = load_catalyst(key)
            if isinstance(c, LayeredCatalyst):
                t.add_row(key, c.role, "", c.name,
                          "layers: " + " over ".join(x.key for x, _ in c.layers))
                continue
            rows = c.provenance_table()
            counts = [sum(r["provenance"].lower().startswith(k) for r in rows)
                      for k in ("transcribed", "from memory", "fitted")]
            t.add_row(key, c.role, f"{c.valid_T[0] - ZERO_C_K:.0f}-{c.valid_T[1] - ZERO_C_K:.0f}",
                      c.name, " / ".join(map(str, counts)))
        con.print(t)
        return 0
    c = load_catalyst(args.key)
    con.print(f"[bold]{c.name}[/bold] ({c.file})\n{c.description}")
    con.print("Sources:")
    for line in c.citations():
        con.print(f"  - {line}")
    if isinstance(c, LayeredCatalyst):
        for cat, th in c.layers:
            con.print(f"  layer: {cat.key}, {th * 1e6:.0f} um")
        return 0
    t = Table(title="Parameters and provenance")
    for col in ("item", "parameter", "provenance"):
        t.add_column(col)
    for r in c.provenance_table():
        t.add_row(r["item"], r["parameter"], r["provenance"])
    con.print(t)
    if c.notes:
        con.print(f"Notes: {c.notes}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
