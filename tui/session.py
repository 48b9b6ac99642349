"""What the terminal UI works on, without any UI: the case as loaded, the edits made to it,
the baseline and current results, saving and exporting.

Edits are ``--set`` assignments (``brick.SCR 1.length=800 mm``), applied to a copy of the case
file's data and validated exactly as the command line validates them, so the UI accepts what
``aftertreat run CASE --set ...`` accepts and rejects the rest with the same message.
"""
from __future__ import annotations

import copy
import shutil
import time
from dataclasses import dataclass, field
from pathlib import Path

from aftertreat.case import apply_set, read_toml
from aftertreat.cyclecase import parse_run_case
from aftertreat.errors import InputError

__all__ = ["Session", "WhatIf", "backup_name"]


@dataclass
class WhatIf:
    """One what-if: the assignments made, in order."""
    assignments: list[str] = field(default_factory=list)


def backup_name(path: Path) -> Path:
    """A free backup name beside ``path``: ``name.toml.bak``, then ``.bak2``, ``.bak3``..."""
    cand = path.with_name(path.name + ".bak")
    k = 2
    while cand.exists():
        cand = path.with_name(f"{path.name}.bak{k}")
        k += 1
    return cand


def _sets(table: str, **values) -> list[str]:
    """``table.key=value`` assignments of the values given (None: left out); numbers in
    short form, text quoted."""
    return [f'{table}.{k}="{v}"' if isinstance(v, str) else f"{table}.{k}={float(v):g}"
            for k, v in values.items() if v is not None]


class Session:
    """A case file, its baseline result and a what-if being edited."""

    #: how often a trace run shows the part done so far [s of wall time]
    PARTIAL_EVERY_S = 2.0

    def __init__(self, path: str | Path):
        self.path = Path(path)
        self.base_data = read_toml(self.path)
        self.base_case = parse_run_case(copy.deepcopy(self.base_data), str(self.path))
        self.whatif = WhatIf()
        self.data = copy.deepcopy(self.base_data)
        self.case = self.base_case
        self.base_result = None          # CycleResult of the case as loaded
        self.result = None               # CycleResult of the current what-if (or the baseline)
        self.transient = None            # TransientRun of a trace case (the current one)
        self.base_transient = None       # TransientRun of the trace case as loaded
        self.sizing = None
        self.saved = 0                   # edits already saved to a file (count)

    # -- properties --------------------------------------------------------------------------
    @property
    def is_trace(self) -> bool:
        return self.case.cycle is None

    @property
    def edited(self) -> bool:
        return bool(self.whatif.assignments)

    @property
    def unsaved(self) -> bool:
        """Edits made since the last save (what quitting would lose)."""
        return self.edited and len(self.whatif.assignments) != self.saved

    # -- edits -------------------------------------------------------------------------------
    def preview(self, assignments: list[str]):
        """The case with ``assignments`` added to the current edits (validated), without
        keeping it. Raises InputError naming the key and value."""
        data = copy.deepcopy(self.data)
        for a in assignments:
            data = apply_set(data, a, str(self.path))
        return data, parse_run_case(copy.deepcopy(data), str(self.path))

    def apply(self, assignments: list[str]) -> list[str]:
        """Add ``assignments`` to the what-if (validated first; nothing changes on error).
        One entry per key: a new value replaces the earlier entry of the same key. Returns
        warnings for edits that change nothing the model reads (an ANR without dosing)."""
        data, case = self.preview(assignments)
        self.data, self.case = data, case
        keys = {a.split("=", 1)[0].strip() for a in assignments}
        kept = [a for a in self.whatif.assignments if a.split("=", 1)[0].strip() not in keys]
        self.whatif.assignments = kept + list(assignments)
        warnings = []
        if any(k == "dosing.ANR" for k in keys) and case.dosing["method"] == "none":
            warnings.append("the ANR has no effect while dosing is \"none\": choose NH3 or urea "
                            "dosing too")
        return warnings

    def apply_sized(self, res) -> str:
        """Put the sized design of ``res`` (:class:`aftertreat.sizing.SizingResult` of this
        session's case) into the what-if: every brick's length and diameter, the bricks the
        sizer added or dropped, and the per-mode ANR it chose. Returns the edit's label."""
        data = res.sized_data()
        case = parse_run_case(copy.deepcopy(data), str(self.path))
        label = "sized design (aftertreat size): " + ", ".join(
            f"{b.name} {b.length * 1e3:.0f} mm" for b in case.train.bricks)
        self.data, self.case = data, case
        self.whatif.assignments = [a for a in self.whatif.assignments
                                   if not a.startswith("sized design")] + [label]
        return label

    def reset(self):
        """Back to the case as loaded."""
        self.data = copy.deepcopy(self.base_data)
        self.case = self.base_case
        self.whatif = WhatIf()
        self.saved = 0
        self.result = self.base_result
        self.transient = self.base_transient

    def brick_assignments(self, name: str, *, length_mm=None, diameter_mm=None, cpsi=None,
                          catalyst=None, activity=None) -> list[str]:
        """Assignments for one brick, written against the keys its table already uses
        (``length`` or ``length_mm``...), so the edited file stays as its author wrote it."""
        bricks = self.data.get("brick", [])
        table = next((b for b in bricks if b.get("name") == name), None)
        if table is None:
            raise InputError("no such brick", key="brick", value=name, file=str(self.path))
        out = []
        for key, v in (("length", length_mm), ("diameter", diameter_mm)):
            if v is None:
                continue
            if f"{key}_mm" in table:
                out.append(f"brick.{name}.{key}_mm={float(v):g}")
            else:
                out.append(f'brick.{name}.{key}="{float(v):g} mm"')
        return out + _sets(f"brick.{name}", cpsi=cpsi, catalyst=catalyst, activity=activity)

    def inlet_temperature_assignment(self, delta_K: float) -> list[str]:
        """Assignments that shift every mode's engine-out temperature by ``delta_K``."""
        eo = self.data.get("engine_out", {})
        T = eo.get("T_C")
        if T is None:
            raise InputError("this case has no engine-out temperature to shift",
                             key="engine_out.T_C", file=str(self.path))
        if isinstance(T, list):
            new = [float(t) + delta_K for t in T]
            return ["engine_out.T_C=[" + ", ".join(f"{t:g}" for t in new) + "]"]
        return [f"engine_out.T_C={float(T) + delta_K:g}"]

    # -- computing ---------------------------------------------------------------------------
    def run(self, progress=None):
        """Solve the current case (steady modes); the first run is the baseline."""
        from aftertreat.evaluate import run_case
        res = run_case(self.case, progress=progress)
        if self.base_result is None and not self.edited:
            self.base_result = res
        self.result = res
        return res

    def run_transient(self, progress=None, partial=None):
        """Run the current trace case (the first run is the baseline); ``partial(run)`` sees
        the points done so far every few seconds (:func:`aftertreat.transient_run.run_transient`)."""
        from aftertreat.transient_run import run_transient
        run = run_transient(self.case, progress=progress, partial=partial,
                            partial_every_s=self.PARTIAL_EVERY_S)
        if self.base_transient is None and not self.edited:
            self.base_transient = run
        self.transient = run
        return run

    def dosing_control_assignments(self, *, control=None, response_s=None,
                                   ANR_max=None) -> list[str]:
        """Assignments for the dosing control of a transient run ([transient.dosing])."""
        return _sets("transient.dosing", control=control, response_s=response_s,
                     ANR_max=ANR_max)

    def size(self, progress=None):
        from aftertreat.sizing import size_case
        self.sizing = size_case(self.case, progress=progress)
        return self.sizing

    # -- files -------------------------------------------------------------------------------
    def save_as(self, target: str | Path) -> tuple[Path, Path | None]:
        """Write the edited case to ``target`` (TOML, atomically). An existing file is first
        copied to a free backup name beside it, which is returned too; the case file that was
        opened is never the target."""
        from aftertreat.output import write_atomic
        from aftertreat.report import to_toml
        target = Path(target)
        if target.suffix != ".toml":
            raise InputError("expected a file name ending in .toml", key="save as",
                             value=str(target))
        if target.resolve() == self.path.resolve():
            raise InputError("give a new name: the case that was opened is kept as it is",
                             key="save as", value=str(target))
        backup = None
        if target.exists():
            backup = backup_name(target)
            shutil.copy2(target, backup)
        head = (f"# {self.data.get('title', self.path.stem)}\n"
                f"# saved by the aftertreat terminal UI on {time.strftime('%Y-%m-%d %H:%M')} "
                f"from {self.path.name}\n")
        if self.whatif.assignments:
            head += "# edits: " + "; ".join(self.whatif.assignments) + "\n"
        write_atomic(target, head + to_toml(self.data))
        self.saved = len(self.whatif.assignments)
        return target, backup

    def export_report(self, folder: str | Path) -> Path:
        """Write the report of the current result (as ``aftertreat run --report``, the same
        rules): whole or not at all, and never into a folder that already holds files
        (InputError before anything is written)."""
        from aftertreat.report import StagedFolder, case_as_run_text, check_report_folder
        from aftertreat.report import write_report, write_transient_report
        how = "terminal UI" + (", edits: " + "; ".join(self.whatif.assignments)
                               if self.whatif.assignments else "")
        if self.is_trace:
            run = self.transient
            if run is None or not run.complete:
                raise InputError("the trace is still running: export when it is done",
                                 key="report")
            obj = run.run_json()
            obj["transient"] = run.summary()

            def write(tmp):
                write_transient_report(run, obj, tmp, case_text=case_as_run_text(run.case,
                                                                                 how=how))
        else:
            if self.result is None:
                raise InputError("nothing solved yet", key="report")

            def write(tmp):
                write_report(self.result, tmp, case_text=case_as_run_text(self.result.case,
                                                                          how=how))
        check_report_folder(folder)
        with StagedFolder(folder) as tmp:
            write(tmp)
        return Path(folder)
