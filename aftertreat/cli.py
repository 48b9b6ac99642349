"""The ``aftertreat`` command.

Subcommands:
    aftertreat run CASE [--set KEY=VALUE ...] [--json] [--report DIR]   evaluate a duty cycle
    aftertreat size CASE [--set KEY=VALUE ...] [--json] [--report DIR]  size SCR and slip catalyst
    aftertreat point CASE [--set KEY=VALUE ...] [--json]   solve the train at the case's exhaust
    aftertreat study CASE [--set ...] [--out DIR] [--resume] [--scheduler ADDRESS] [--workers N]
                                                            sweeps and Monte Carlo on Dask
    aftertreat fit SPEC [--out FILE] [--report DIR] [--json]   calibrate a catalyst to lab data
    aftertreat catalysts [KEY]                              list catalysts, or one's provenance
    aftertreat sources CASE                                 the sources behind a case's numbers

Exit codes: 0 computed (whether or not anything passes), 2 bad input, 1 a failure of ours
(including a solver that did not converge), with a one-line reason on stderr.
"""
from __future__ import annotations

import argparse
import math
import sys
from pathlib import Path

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


_SET_HELP = ("override a case value by its dotted path, e.g. 'brick.SCR 1.length=700 mm' "
             "(repeatable)")


def _case_options(parser, case_help: str, set_help: str = _SET_HELP) -> None:
    """The case file and the options every command on a case takes: --set, --json, --strict."""
    parser.add_argument("case", help=case_help)
    parser.add_argument("--set", action="append", default=[], metavar="KEY=VALUE",
                        help=set_help)
    _json_option(parser)
    parser.add_argument("--strict", action="store_true",
                        help="an inlet temperature outside a catalyst's validity range is an "
                             "error (default: a warning, and the rates are extrapolated)")


def _json_option(parser) -> None:
    parser.add_argument("--json", action="store_true",
                        help="one JSON object on stdout, nothing else")


def _build_parser() -> argparse.ArgumentParser:
    p = _Parser(prog="aftertreat", description="Size SCR and ammonia-slip catalysts behind "
                "ammonia-fuelled engines and turbines.")
    sub = p.add_subparsers(dest="command", required=True, parser_class=_Parser)
    rn = sub.add_parser("run", help="evaluate a duty-cycle case: every mode, cycle emissions, "
                        "limits")
    _case_options(rn, "case file (TOML) with [engine], [cycle], [engine_out] ...")
    rn.add_argument("--report", metavar="DIR", help="write tables, plots, sources, the case as "
                    "run and the safety cautions into DIR")
    rn.add_argument("--move-old", action="store_true", help="when the --report folder exists "
                    "and is not empty, move it aside (renamed with the time) instead of refusing")
    sz = sub.add_parser("size", help="find the smallest SCR and slip catalyst that meet every "
                        "limit of a duty-cycle case")
    _case_options(sz, "case file (TOML) with [engine], [cycle], ... and [sizing]",
                  "override a case value by its dotted path (repeatable)")
    sz.add_argument("--report", metavar="DIR", help="write the sizing curves (CSV, PNG) and the "
                    "report of the sized design into DIR")
    sz.add_argument("--move-old", action="store_true", help="when the --report folder exists "
                    "and is not empty, move it aside (renamed with the time) instead of refusing")
    sz.add_argument("--confidence", type=_probability, metavar="P",
                    help="also find the smallest buildable train whose probability of "
                         "compliance under the case's [study] uncertainties is at least P "
                         "(e.g. 0.95); runs on Dask like 'aftertreat study'")
    sz.add_argument("--workers", type=_workers, metavar="N",
                    help="with --confidence: local Dask workers (default one per core; 0 runs "
                         "in this process without Dask)")
    sz.add_argument("--scheduler", metavar="ADDRESS",
                    help="with --confidence: the address of an existing Dask scheduler")
    st = sub.add_parser("study", help="run the case's [study]: sweeps and Monte Carlo over "
                        "uncertainties, on Dask; probability of compliance and sensitivity")
    _case_options(st, "duty-cycle case file (TOML) with a [study] table",
                  "override a case value by its dotted path, e.g. study.samples=500 "
                  "(repeatable)")
    st.add_argument("--out", metavar="DIR", help="the study folder: Parquet dataset, summary, "
                    "figures (default: <case name>_study in the current folder)")
    st.add_argument("--resume", action="store_true", help="continue the study in --out: "
                    "compute only the chunks that are missing (same case, seed and items)")
    st.add_argument("--scheduler", metavar="ADDRESS", help="use an existing Dask cluster, e.g. "
                    "tcp://10.0.0.5:8786 (default: a local cluster, one worker per core, on "
                    "127.0.0.1)")
    st.add_argument("--workers", type=_workers, metavar="N", help="local Dask workers (default "
                    "one per core); 0 runs in this process without Dask")
    pt = sub.add_parser("point", help="solve the catalyst train at the exhaust state of a case")
    _case_options(pt, "case file (TOML)")
    fi = sub.add_parser("fit", help="calibrate a catalyst's rate parameters to lab-reactor "
                        "data: a new catalyst file with 95 %% intervals")
    fi.add_argument("spec", help="fit spec (TOML) with catalyst, [reactor], [[experiment]] and "
                    "[[parameter]] (docs/fitting.md)")
    fi.add_argument("--out", metavar="FILE", help="the new catalyst file (default: the spec's "
                    "output); never overwritten")
    fi.add_argument("--report", metavar="DIR", help="the fit folder: tables, correlation, "
                    "figures (default: <new file>_fit beside it)")
    _json_option(fi)
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


def _probability(text: str) -> float:
    try:
        v = float(text)
    except ValueError:
        v = float("nan")
    if not 0.0 < v < 1.0:
        raise argparse.ArgumentTypeError(f"expected a probability in (0, 1), e.g. 0.95; got "
                                         f"{text!r}")
    return v


def _workers(text: str) -> int:
    if not text.isdigit():
        raise argparse.ArgumentTypeError(f"expected a whole number >= 0; got {text!r}")
    return int(text)


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
        if args.command == "study":
            return _study(args)
        if args.command == "point":
            return _point(args)
        if args.command == "catalysts":
            return _catalysts(args)
        if args.command == "fit":
            return _fit(args)
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
    except Exception as exc:
        if type(exc).__module__.split(".")[0] not in ("distributed", "dask"):
            raise
        # the cluster lost work beyond its retries (killed workers, a lost node): not the
        # user's input, and what finished is kept (a study's Parquet parts)
        again = (" run the same command again with --resume: finished chunks are kept"
                 if args.command == "study" else " run it again")
        return _fail(1, f"the Dask cluster lost work ({type(exc).__name__}: "
                        f"{str(exc).splitlines()[0][:160] if str(exc) else 'no detail'});"
                        + again)
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
    from .errors import InputError
    from .sizing import size_case
    if args.confidence is None:
        for flag_, v in (("--workers", args.workers), ("--scheduler", args.scheduler)):
            if v is not None:
                raise InputError("only with --confidence", key=flag_, value=v)
    case = load_run_case(args.case, args.set)
    if args.confidence is not None and (case.study is None or not (
            case.study.uncertain or case.study.correlated)):
        raise InputError("--confidence needs the case's uncertainties: a [study] table with "
                         "[[study.uncertain]] or [[study.correlated]] items (docs/study.md)",
                         key="study", file=case.file)
    res = _with_status(args, "sizing", lambda p: size_case(
        case, progress=p, curves=bool(args.report or args.json)))
    from .report import write_size_report
    conf = None
    if args.confidence is not None:
        from .study_sizing import size_to_confidence
        conf = _with_status(args, f"sizing to P >= {args.confidence:g}", lambda p:
                            size_to_confidence(case, args.confidence, res, workers=args.workers,
                                               scheduler=args.scheduler, progress=p))
    if conf is not None and args.json:
        from .output import to_json
        if args.report:
            _write_report(args, lambda folder: write_size_report(res, folder))
        print(to_json(res.to_json() | {"confidence": conf.to_json()}))
    else:
        _emit(args, res, write_size_report,
              lambda r, safety, rep: _print_size(r, safety, rep, conf))
    if not res.run.converged:
        return _fail(1, "the solver did not converge at the sized design; its numbers are flagged")
    return 0


def _print_size(res, safety: str, report: str | None, conf=None) -> None:
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
    if conf is not None:
        _print_confidence(con, conf)
    if report:
        con.print(f"report written to {report}/")
    con.print(f"[dim]{safety}[/dim]")


def _print_confidence(con, conf) -> None:
    """The train sized to a probability of compliance, beside the deterministic one."""
    from rich import box
    from rich.table import Table
    t = Table(title=f"Sized to a probability of compliance >= {conf.level:g} (limits as they "
              f"are; {conf.samples} samples, seed {conf.seed}, common random numbers)",
              box=box.SIMPLE_HEAD, pad_edge=False)
    t.add_column("brick")
    t.add_column("deterministic mm", justify="right")
    t.add_column(f"P >= {conf.level:g} mm", justify="right")
    d, b = conf.deterministic, conf.best
    for i, name in enumerate(conf.brick_names):
        t.add_row(escape(name), f"{d.lengths_m[i] * 1e3:.0f}",
                  "-" if b is None else f"{b.lengths_m[i] * 1e3:.0f}")
    t.add_row("volume L", f"{d.volume_m3 * 1e3:.0f}", "-" if b is None else
              f"{b.volume_m3 * 1e3:.0f}")

    def p(c):
        lo, hi = c.compliance.interval
        return f"{_pct(c.compliance.probability)} ({_pct(lo)} - {_pct(hi)})"
    t.add_row("P(compliance) (95 % interval)", p(d), "-" if b is None else p(b))
    con.print(t)
    if b is None:
        con.print(f"[red]no buildable train reached P >= {conf.level:g}[/red]"
                  + (f": {escape(conf.note)}" if conf.note else ""))
        top = max(conf.candidates, key=lambda c: c.compliance.probability)
        con.print("the most probable train tried: " + ", ".join(
            f"{escape(nm)} {L * 1e3:.0f} mm" for nm, L in zip(conf.brick_names, top.lengths_m))
            + f", {top.volume_m3 * 1e3:.0f} L, P = {_pct(top.compliance.probability)}")
    elif conf.note:
        con.print(f"note: {escape(conf.note)}")
    lo = b.compliance.interval[0] if b is not None else None
    if lo is not None and lo < conf.level:
        con.print(f"note: the lower end of the interval is below {conf.level:g}; for that "
                  "confidence raise [study] samples")
    con.print(f"{len(conf.candidates)} candidate trains x {conf.samples} samples on "
              f"{escape(conf.where)} in {conf.seconds:.1f} s")


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


def _progress_bar(args, label: str):
    """A context manager giving ``update(done, total)`` for a rich progress bar on stderr with
    the rate and the time left (nothing with --json)."""
    import contextlib
    if args.json:
        return contextlib.nullcontext(None)
    from rich.console import Console
    from rich.progress import (BarColumn, MofNCompleteColumn, Progress, TextColumn,
                               TimeElapsedColumn, TimeRemainingColumn)

    class _Bar:
        def __init__(self):
            self.p = Progress(TextColumn(label), BarColumn(), MofNCompleteColumn(),
                              TextColumn("{task.fields[rate]}"), TimeElapsedColumn(),
                              TextColumn("ETA"), TimeRemainingColumn(),
                              console=Console(stderr=True), transient=True)
            self.task = None
            self.first = None

        def __enter__(self):
            self.p.__enter__()
            return self

        def __exit__(self, *exc):
            return self.p.__exit__(*exc)

        def __call__(self, done: int, total: int):
            import time
            now = time.perf_counter()
            if self.task is None:
                self.task = self.p.add_task(label, total=total, completed=done, rate="")
                self.first = (now, done)
                return
            t0, d0 = self.first
            if done == d0:                         # (re)start: the rate counts from here
                self.first = (now, done)
                return
            rate = (done - d0) / (now - t0) if now > t0 else 0.0
            self.p.update(self.task, completed=done, total=total,
                          rate=f"{rate:.2f} samples/s" if done > d0 else "")
    return _Bar()


def _study(args) -> int:
    from pathlib import Path
    from .cyclecase import load_run_case
    from .output import to_json
    from .study import StudyInterrupted, plan_study, run_study
    case = load_run_case(args.case, args.set)
    out = args.out or f"{Path(args.case).stem}_study"
    if not args.resume and Path(out).exists() and (not Path(out).is_dir()
                                                   or any(Path(out).iterdir())):
        from .errors import InputError       # checked before any solving
        raise InputError("the folder exists and holds files: give another --out, or --resume "
                         "to continue the study in it", key="--out", value=out)
    plan = _with_status(args, "running the case as given", lambda p: plan_study(case))
    try:
        with _progress_bar(args, "study") as bar:
            run = run_study(case, out, resume=args.resume, scheduler=args.scheduler,
                            workers=args.workers, progress=bar, plan=plan)
    except StudyInterrupted as exc:
        return _fail(1, str(exc))
    if args.json:
        print(to_json(run.to_json()))
    else:
        _print_study(run)
    return 0


def _pct(p: float) -> str:
    return f"{100 * p:.1f} %"


def _print_study(run) -> None:
    from rich import box
    from rich.console import Console
    from rich.table import Table
    from .output import SAFETY_NOTE
    con = Console()
    s, st, plan = run.summary, run.stats, run.plan
    con.print(f"[bold]{escape(s.title)}[/bold]  ({escape(s.file)})")
    _say_overrides(con, plan.case)
    con.print(f"study: {s.design}, {s.n_planned} samples, seed {s.seed}; inputs: "
              + escape(", ".join(s.inputs)))
    con.print("the case as given: " + ("[green]passes[/]" if s.nominal_passed else
                                       "[red]does not pass[/]")
              + f" (worst value/limit {s.nominal_worst_ratio:.3f})")
    o = s.overall
    lo, hi = o.interval
    con.print(f"probability of compliance with every limit: [bold]{_pct(o.probability)}[/bold]"
              f" ({o.compliant} of {o.samples} samples; Wilson 95 % interval {_pct(lo)} - "
              f"{_pct(hi)})")
    t = Table(title="Probability of compliance per limit check (lowest first)",
              box=box.SIMPLE_HEAD, pad_edge=False)
    for col in ("check", "compliant", "P", "95 % interval"):
        t.add_column(col, justify="left" if col == "check" else "right")
    for c in sorted(s.checks, key=lambda c: c.probability)[:12]:
        a, b = c.interval
        t.add_row(escape(c.name), f"{c.compliant}/{c.samples}", _pct(c.probability),
                  f"{_pct(a)} - {_pct(b)}")
    con.print(t)
    if len(s.checks) > 12:
        con.print(f"({len(s.checks) - 12} more checks in summary.json)")
    if s.sensitivity:
        t = Table(title=f"Sensitivity of the worst value/limit: {s.sensitivity_method} "
                  f"({s.sensitivity_samples} samples)", box=box.SIMPLE_HEAD, pad_edge=False)
        t.add_column("input")
        if s.design == "sobol":
            t.add_column("S1", justify="right")
            t.add_column("ST", justify="right")
            for x in s.sensitivity:
                t.add_row(escape(x.input), _num(x.S1), _num(x.ST))
        else:
            t.add_column("Spearman rho", justify="right")
            for x in s.sensitivity:
                t.add_row(escape(x.input), _num(x.rho))
        con.print(t)
    if s.n_not_converged or s.n_refused:
        con.print(f"[yellow]{s.n_not_converged} sample(s) did not converge and {s.n_refused} "
                  "were refused by the case: they count as failing[/yellow]")
    for n in s.notes:
        con.print(f"note: {escape(n)}")
    con.print(f"ran on {escape(st.where)}: {st.samples} samples in {st.wall_s:.1f} s "
              f"({st.samples_per_s:.2f} samples/s; start-up {st.startup_s:.1f} s; scheduler "
              f"overhead {100 * st.overhead_share:.1f} %)"
              + (f"; {run.resumed_chunks} chunks were already done" if run.resumed_chunks else ""))
    con.print(f"dataset: {escape(run.folder)}/samples (pandas.read_parquet); summary and "
              f"figures: " + escape(", ".join(run.files)))
    con.print(f"[dim]{SAFETY_NOTE}[/dim]")


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


def _fit(args) -> int:
    """``aftertreat fit SPEC``: everything is checked before fitting (spec, data, the new file
    and the report folder); the catalyst file and the fit folder are written whole or not at
    all."""
    from .fit import fit, load_fit_spec, write_catalyst
    from .fit_report import print_fit, write_fit_folder
    from .output import to_json
    from .report import StagedFolder, check_report_folder
    # --out is relative to where the command runs (the spec's own output key to the spec)
    spec = load_fit_spec(args.spec, output=None if args.out is None else Path(args.out).resolve())
    folder = args.report or str(spec.output.with_name(spec.output.stem + "_fit"))
    check_report_folder(folder)
    res = _with_status(args, "fitting", lambda p: fit(spec, progress=p))
    written = None
    with StagedFolder(folder) as tmp:        # the report first: a failure leaves no new file
        write_fit_folder(res, tmp)
    if res.converged:
        written = write_catalyst(res)
    if args.json:
        obj = res.to_json()
        obj["written"] = None if written is None else str(written)
        obj["report"] = folder
        print(to_json(obj))
    else:
        print_fit(res, written, folder)
    if not res.converged:
        return _fail(1, "the fit did not converge; no catalyst file was written (see the "
                        "warnings and the fit folder)")
    return 0


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
    if c.fit:
        f = c.fit
        F = Table(title=f"Calibration ({escape(Path(f.get('spec', '?')).name)}, {f.get('date', '?')}; "
                  f"chi2 {f.get('chi2', float('nan')):.1f} for {f.get('dof', '?')} degrees of "
                  "freedom)")
        for col in ("parameter", "fitted", "95 % low", "95 % high", "standard error"):
            F.add_column(col, justify="left" if col == "parameter" else "right")
        for i, label in enumerate(f["parameters"]):
            x, var = f["mean"][i], f["covariance"][i][i]
            ln = f["coordinates"][i] == "ln"
            pinned = (f.get("pinned") or [True] * len(f["parameters"]))[i]
            F.add_row(escape(label), f"{(math.exp(x) if ln else x):.4g}",
                      f"{f['ci95_low'][i]:.4g}", f"{f['ci95_high'][i]:.4g}",
                      "not pinned (bounds)" if not pinned else
                      f"{math.sqrt(var) * 100:.2g} % (ln)" if ln else f"{math.sqrt(var):.3g}")
        con.print(F)
        con.print(escape("The file's [fit] table holds the covariance of these values (for studies)."))
    if c.notes:
        con.print(f"Notes: {c.notes}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
