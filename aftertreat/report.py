"""A report folder for a duty-cycle result: tables (CSV), plots (PNG), sources, the case as run
and the safety cautions. Every file is written atomically (temporary file, then rename)."""
from __future__ import annotations

import io
from pathlib import Path

from . import plots
from .errors import InputError
from .output import SAFETY_NOTE, current_umask, to_json, write_atomic

__all__ = ["write_report", "write_size_report", "write_transient_report", "to_toml",
           "sources_text", "case_as_run_text", "check_report_folder", "StagedFolder"]


def _toml_value(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, (int, float)):
        return repr(v)
    if isinstance(v, str):
        return '"' + v.replace("\\", "\\\\").replace('"', '\\"').replace("\n", "\\n") + '"'
    if isinstance(v, list):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{ " + ", ".join(f"{_key(k)} = {_toml_value(x)}" for k, x in v.items()) + " }"
    raise TypeError(f"cannot write {type(v).__name__} to TOML")


def _key(k: str) -> str:
    return k if k.replace("_", "").replace("-", "").isalnum() else _toml_value(k)


def to_toml(data: dict, prefix: str = "") -> str:
    """Write a case dictionary back as TOML (tables, arrays of tables, plain values)."""
    out = io.StringIO()
    plain = {k: v for k, v in data.items()
             if not isinstance(v, dict) and not (isinstance(v, list) and v and
                                                 all(isinstance(x, dict) for x in v))}
    for k, v in plain.items():
        out.write(f"{_key(k)} = {_toml_value(v)}\n")
    for k, v in data.items():
        name = f"{prefix}{_key(k)}"
        if isinstance(v, dict):
            out.write(f"\n[{name}]\n")
            out.write(to_toml(v, prefix=name + "."))
        elif isinstance(v, list) and v and all(isinstance(x, dict) for x in v):
            for item in v:
                out.write(f"\n[[{name}]]\n")
                out.write(to_toml(item, prefix=name + "."))
    return out.getvalue()


def _csv(df) -> str:
    return df.to_csv(index=False, float_format="%.6g")


def check_report_folder(folder: str | Path, move_old: bool = False) -> None:
    """Raise :class:`InputError` (key ``--report``) before any solving if ``folder`` cannot
    hold a report: an existing file, an existing folder that is not empty (unless ``move_old``:
    it will be moved aside), or a folder whose nearest existing parent is not writable."""
    import os
    path = Path(folder)
    if path.exists() and not path.is_dir():
        raise InputError("expected a folder for the report, and this is an existing file",
                         key="--report", value=str(folder))
    if path.is_dir() and any(path.iterdir()) and not move_old:
        raise InputError("the folder exists and is not empty; nothing was written (choose a "
                         "new folder, or add --move-old to move the existing one aside)",
                         key="--report", value=str(folder))
    up = path.parent                       # the report is staged beside the target
    while not up.exists() and up != up.parent:
        up = up.parent
    ok = up.is_dir()
    if ok:                                 # a real write test (permission bits do not bind root)
        import tempfile
        try:
            os.rmdir(tempfile.mkdtemp(prefix=".aftertreat-probe-", dir=up))
        except OSError:
            ok = False
    if not ok:
        raise InputError(f"cannot write a report there: '{up}' is not a writable folder",
                         key="--report", value=str(folder))


class StagedFolder:
    """A report folder written whole or not at all.

    ``with StagedFolder(target) as tmp:`` gives a fresh hidden folder beside ``target``
    (``.<name>.partial-XXXX``). When the block ends normally the folder is moved into place by
    one rename: an empty ``target`` is replaced, a non-empty one is moved aside first to
    ``<name>.old-<UTC time>`` when ``move_old`` (``moved_to`` says where), else refused. When
    the block raises (an error, Ctrl-C) the hidden folder is removed, and ``target`` is
    untouched. A hard kill can leave only the hidden ``.partial-`` folder, named as such.
    """

    def __init__(self, target: str | Path, move_old: bool = False):
        self.target = Path(target)
        self.move_old = move_old
        self.moved_to: Path | None = None
        self.path: Path | None = None

    def __enter__(self) -> Path:
        import tempfile
        parent = self.target.parent
        parent.mkdir(parents=True, exist_ok=True)
        self.path = Path(tempfile.mkdtemp(prefix=f".{self.target.name}.partial-", dir=parent))
        return self.path

    def __exit__(self, kind, exc, tb) -> bool:
        import os
        import shutil
        if kind is not None:
            shutil.rmtree(self.path, ignore_errors=True)
            return False
        try:
            os.chmod(self.path, 0o777 & ~current_umask())     # mkdtemp makes 0700
            t = self.target
            if t.is_dir() and not any(t.iterdir()):
                t.rmdir()
            elif t.exists():
                if not self.move_old:
                    raise InputError("the folder exists and is not empty; nothing was "
                                     "written", key="--report", value=str(t))
                import datetime
                stamp = datetime.datetime.now(datetime.timezone.utc).strftime("%Y%m%d-%H%M%S")
                aside = t.with_name(f"{t.name}.old-{stamp}")
                n = 1
                while aside.exists():
                    n += 1
                    aside = t.with_name(f"{t.name}.old-{stamp}-{n}")
                os.rename(t, aside)
                self.moved_to = aside
            os.rename(self.path, t)
        except BaseException:
            shutil.rmtree(self.path, ignore_errors=True)
            raise
        return False


def header_comments(file: str | Path) -> str:
    """The comment block at the top of a case file (lines starting with ``#``, and blank lines
    between them), as written; empty when the file has none or cannot be read."""
    try:
        lines = Path(file).read_text(encoding="utf-8").splitlines()
    except (OSError, UnicodeDecodeError):
        return ""
    out = []
    for line in lines:
        if line.lstrip().startswith("#") or not line.strip():
            out.append(line.rstrip())
        else:
            break
    while out and not out[-1]:
        out.pop()
    return "\n".join(out)


def _portable(data: dict, case_file: str) -> dict:
    """``data`` with the files it names (catalyst files, the time trace) made absolute, so the
    case re-runs from the report folder."""
    import copy
    out = copy.deepcopy(data)
    base = Path(case_file).resolve().parent

    def fix(v):
        if isinstance(v, str) and (v.endswith((".toml", ".csv")) or "/" in v):
            p = Path(v)
            if not p.is_absolute() and (base / p).exists():
                return str((base / p).resolve())
        return v
    for b in out.get("brick", []) if isinstance(out.get("brick"), list) else []:
        if isinstance(b, dict) and "catalyst" in b:
            b["catalyst"] = fix(b["catalyst"])
    tr = out.get("transient")
    if isinstance(tr, dict) and "trace" in tr:
        tr["trace"] = fix(tr["trace"])
    return out


def case_as_run_text(case, data: dict | None = None, how: str = "run") -> str:
    """The case exactly as computed, as TOML: the case file's header comments, a block saying
    how it was run (command, --set overrides, what sizing changed), then ``data`` (default: the
    case as read after its overrides) with the files it names made absolute."""
    import datetime
    from . import __version__
    data = case.data if data is None else data
    head = header_comments(case.file)
    when = datetime.datetime.now(datetime.timezone.utc).strftime("%Y-%m-%d %H:%M UTC")
    over = getattr(case, "overrides", []) or []
    lines = ([head, "#"] if head else []) + [
        f"# ---- as computed by aftertreat {__version__} ({how}), {when}, from {case.file}",
        "# --set overrides: " + ("; ".join(over) if over else "none") + " (applied below)"]
    if how == "size":
        lines.append("# sized design: brick lengths, diameters and the per-mode ANR below are "
                     "the sizing's answer")
    return "\n".join(lines) + "\n\n" + to_toml(_portable(data, case.file))


def write_report(result, folder: str | Path, case_text: str | None = None) -> list[Path]:
    """Write the report of a :class:`~aftertreat.evaluate.CycleResult` into ``folder``.

    Files: ``summary.json`` (the ``aftertreat.run/1`` object), ``modes.csv``, ``limits.csv``,
    ``bricks.csv``, ``profiles.csv``, ``provenance.csv``, ``compliance.png`` (every limit as
    value / limit), ``limits_by_mode.png`` (each limited quantity on its own basis),
    ``profiles.png``, ``sources.txt``, ``case_as_run.toml`` (``case_text``, default
    :func:`case_as_run_text`), ``SAFETY.txt``. Write into a :class:`StagedFolder` so the
    report appears whole or not at all.
    """
    import pandas as pd
    folder = Path(folder)
    written = []

    def put(name, text):
        write_atomic(folder / name, text)
        written.append(folder / name)

    put("summary.json", to_json(result.to_json()) + "\n")
    put("modes.csv", _csv(result.mode_table()))
    put("limits.csv", _csv(result.limit_table()))
    bricks, profiles, prov = [], [], None
    for m in result.modes:
        bt = m.solution.brick_table()
        bt.insert(0, "mode", m.name)
        bricks.append(bt)
        pr = m.solution.profiles()
        pr.insert(0, "mode", m.name)
        profiles.append(pr)
        prov = m.solution.provenance()
    put("bricks.csv", _csv(pd.concat(bricks, ignore_index=True)))
    put("profiles.csv", _csv(pd.concat(profiles, ignore_index=True)))
    if prov is not None:
        put("provenance.csv", _csv(prov))
    put("compliance.png", plots.compliance(result))
    put("limits_by_mode.png", plots.limits_by_mode(result))
    put("profiles.png", plots.profiles(result))
    put("sources.txt", sources_text(result))
    put("case_as_run.toml", case_text if case_text is not None
        else case_as_run_text(result.case))
    put("SAFETY.txt", SAFETY_NOTE + "\n")
    return written


def sources_text(result) -> str:
    """The sources behind a result (duty-cycle, sizing or transient): the case's sources
    (:func:`aftertreat.citations.case_sources`) for the train that was computed."""
    from .citations import case_sources
    case = result.case
    lines = [f"Sources behind: {case.title}", ""]
    lines += [f"- {s}" for s in case_sources(case, getattr(result, "train", None))]
    lines += ["", "Every kinetic parameter and its provenance: provenance.csv.",
              "Each limit row names its source and confidence: limits.csv."]
    return "\n".join(lines) + "\n"


def write_size_report(res, folder: str | Path) -> list[Path]:
    """Sizing report: ``size.json`` (``aftertreat.size/1``), ``sizing_curves.csv``,
    ``sizing_curves.png``, ``margins.csv``, and the full run report of the sized design."""
    import pandas as pd
    folder = Path(folder)
    written = write_report(res.run, folder, case_text=case_as_run_text(
        res.case, res.sized_data(), how="size"))
    for name, text in (("size.json", to_json(res.to_json()) + "\n"),
                       ("sizing_curves.csv", _csv(res.curve_table())),
                       ("margins.csv", _csv(pd.DataFrame([x.to_dict() for x in res.margins]))),
                       ("sizing_curves.png", plots.sizing_curves(res))):
        write_atomic(folder / name, text)
        written.append(folder / name)
    return written


def write_transient_report(trun, run_obj: dict, folder: str | Path,
                           with_cycle: bool = False, case_text: str | None = None) -> list[Path]:
    """Write a transient run into ``folder``: ``transient.csv`` (the time series, units in the
    column names), ``transient.png``, ``summary.json`` (the run object with its ``transient``
    section) and the limit rows over the run. Without a cycle report beside it
    (``with_cycle`` false) it also writes what a cycle report has: ``limits.csv`` (here the
    rows over the run), ``sources.txt``, ``provenance.csv``, ``case_as_run.toml`` and
    ``SAFETY.txt``; with one, the run's rows go to ``transient_limits.csv``. ``case_text``
    replaces the default :func:`case_as_run_text`."""
    import pandas as pd
    folder = Path(folder)
    written = []

    def put(name, text):
        write_atomic(folder / name, text)
        written.append(folder / name)

    put("transient.csv", _csv(trun.table()))
    put("transient.png", plots.transient(trun))
    put("summary.json", to_json(run_obj) + "\n")
    lim = _csv(pd.DataFrame(trun.summary()["limits"]))
    if with_cycle:
        put("transient_limits.csv", lim)
        return written
    put("limits.csv", lim)
    put("sources.txt", sources_text(trun))
    put("provenance.csv", _csv(trun.train.provenance()))
    put("case_as_run.toml", case_text if case_text is not None
        else case_as_run_text(trun.case))
    put("SAFETY.txt", SAFETY_NOTE + "\n")
    return written
