"""What a study found: probability of compliance with its interval, sensitivity, figures.

Probability of compliance. A sample complies with a limit check when its run converged, the
case accepted its inputs and the check passed; it complies overall when every check passed.
A run that did not converge never counts as compliant. With k compliant of n samples the
estimate is p = k / n and its 95 % interval the Wilson score interval (Wilson 1927, J. Amer.
Statist. Assoc. 22, 209-212; Agresti & Coull 1998, Amer. Statist. 52, 119-126):

    centre = (p + z^2 / 2n) / (1 + z^2 / n)
    half   = z / (1 + z^2 / n) * sqrt(p (1 - p) / n + z^2 / 4n^2),   z = Phi^-1(0.975)

It treats the samples as independent draws: exact for Monte Carlo, conservative for a Latin
hypercube or Sobol design (their estimates scatter less, McKay et al. 1979). For a Sobol
design it counts the A and B rows only (the A_B^j rows repeat A's values but one group).

Sensitivity. The response is the worst ratio of the sample, max over the checks of value /
limit (> 1 fails). Its Spearman rank correlation with each numeric input (Spearman 1904, Amer.
J. Psychol. 15, 72-101; ``scipy.stats.spearmanr``) ranks the inputs; a Sobol design gives
first-order and total Sobol indices instead (Saltelli et al. 2010, Comput. Phys. Commun. 181,
259-270, eq. (b) of their Table 2 for S_j; Jansen 1999, Comput. Phys. Commun. 117, 35-43 for
S_Tj):

    S_j  = mean(f_B (f_ABj - f_A)) / V,    S_Tj = mean((f_A - f_ABj)^2) / (2 V),
    V = variance of f over the A and B rows.

Only converged samples the case accepted enter the sensitivity (their number is reported).
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

__all__ = ["Z95", "wilson_interval", "sobol_indices", "Compliance", "Sensitivity", "GridCell", "StudySummary",
           "summarise", "write_outputs", "SUMMARY_SCHEMA"]

SUMMARY_SCHEMA = "aftertreat.study/1"
#: Phi^-1(0.975), the two-sided 95 % normal quantile
Z95 = 1.959963984540054


def wilson_interval(k: int, n: int, z: float = Z95) -> tuple[float, float]:
    """Wilson score interval (lo, hi) of a binomial proportion k / n (module docstring)."""
    if n <= 0:
        return (0.0, 1.0)
    p = k / n
    den = 1.0 + z * z / n
    centre = (p + z * z / (2 * n)) / den
    half = z / den * math.sqrt(p * (1 - p) / n + z * z / (4 * n * n))
    # at k = 0 (k = n) the lower (upper) end is exactly 0 (1); say so rather than round off
    return (0.0 if k == 0 else max(0.0, centre - half), 1.0 if k == n else min(1.0, centre + half))


@dataclass(frozen=True)
class Compliance:
    """Probability of compliance of one check (or of every check: ``name`` "overall")."""
    name: str
    compliant: int
    samples: int

    @property
    def probability(self) -> float:
        return self.compliant / self.samples if self.samples else float("nan")

    @property
    def interval(self) -> tuple[float, float]:
        return wilson_interval(self.compliant, self.samples)

    def to_dict(self) -> dict:
        lo, hi = self.interval
        return {"name": self.name, "compliant": self.compliant, "samples": self.samples,
                "probability": self.probability, "wilson95_lo": lo, "wilson95_hi": hi}


@dataclass(frozen=True)
class Sensitivity:
    """One input's effect on the worst ratio: Spearman's rho, or Sobol S1 and ST."""
    input: str
    rho: float | None = None
    S1: float | None = None
    ST: float | None = None

    @property
    def size(self) -> float:
        v = self.ST if self.ST is not None else self.rho
        return abs(v) if v is not None and np.isfinite(v) else 0.0

    def to_dict(self) -> dict:
        return {"input": self.input, "spearman_rho": self.rho, "sobol_S1": self.S1,
                "sobol_ST": self.ST}


@dataclass(frozen=True)
class GridCell:
    """One point of a grid design: its sweep values and the compliance of its replicas."""
    values: dict
    compliance: Compliance
    worst_ratio_median: float

    def to_dict(self) -> dict:
        return {"inputs": self.values, **self.compliance.to_dict(),
                "worst_ratio_median": self.worst_ratio_median}


@dataclass
class StudySummary:
    """The summary of a study (``to_json()`` is ``aftertreat.study/1``)."""
    title: str
    file: str
    design: str
    seed: int
    case_hash: str
    n_planned: int
    n_rows: int
    n_counted: int
    n_not_converged: int
    n_refused: int
    overall: Compliance
    checks: list[Compliance]
    sensitivity: list[Sensitivity]
    sensitivity_method: str
    sensitivity_samples: int
    nominal_passed: bool
    nominal_worst_ratio: float
    inputs: list[str]
    sweeps: list[str]
    grid: list[GridCell] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)

    def to_json(self) -> dict:
        from .output import SAFETY_NOTE
        return {"schema": SUMMARY_SCHEMA, "case": self.title, "file": self.file,
                "design": self.design, "seed": self.seed, "case_hash": self.case_hash,
                "samples_planned": self.n_planned, "samples_in_dataset": self.n_rows,
                "samples_counted": self.n_counted,
                "samples_not_converged": self.n_not_converged,
                "samples_refused": self.n_refused,
                "compliance_overall": self.overall.to_dict(),
                "compliance_by_check": [c.to_dict() for c in self.checks],
                "interval": "Wilson score, 95 %",
                "sensitivity_response": "worst_ratio (max over checks of value / limit)",
                "sensitivity_method": self.sensitivity_method,
                "sensitivity_samples": self.sensitivity_samples,
                "sensitivity": [s.to_dict() for s in self.sensitivity],
                "deterministic_case": {"pass": self.nominal_passed,
                                       "worst_ratio": self.nominal_worst_ratio},
                "inputs": self.inputs, "sweeps": self.sweeps,
                "grid": [g.to_dict() for g in self.grid], "notes": self.notes,
                "safety": SAFETY_NOTE}


def _ok(t) -> np.ndarray:
    """Rows that count as evaluated: converged and accepted by the case."""
    conv = np.asarray(t.column("converged").to_pylist(), dtype=bool)
    err = np.array([e == "" for e in t.column("error").to_pylist()], dtype=bool)
    return conv & err


def summarise(plan, table) -> StudySummary:
    """The summary of the dataset ``table`` (all rows of the study) of ``plan``."""
    spec = plan.spec
    n_rows = table.num_rows
    sample = np.asarray(table.column("sample").to_pylist(), dtype=np.int64)
    ok = _ok(table)
    err = np.array([e != "" for e in table.column("error").to_pylist()], dtype=bool)
    conv = np.asarray(table.column("converged").to_pylist(), dtype=bool)
    counted = np.ones(n_rows, dtype=bool)
    notes = ["a sample whose solve did not converge, or whose inputs the case refuses, counts "
             "as failing every limit",
             "limits are checked as they are (no [sizing] design margin)"]
    if spec.design == "sobol":
        counted = sample < 2 * spec.samples
        notes.append("probabilities from the A and B rows of the Sobol design "
                     f"({int(counted.sum())} samples)")
    passed = np.asarray(table.column("passed").to_pylist(), dtype=bool) & ok
    overall = Compliance("overall", int(passed[counted].sum()), int(counted.sum()))
    checks = []
    for name, typ in plan.columns:
        if name.startswith("limit.") and name.endswith(".pass"):
            col = np.asarray([bool(v) for v in table.column(name).to_pylist()], dtype=bool)
            good = col & ok
            checks.append(Compliance(name[len("limit."):-len(".pass")],
                                     int(good[counted].sum()), int(counted.sum())))
    worst = np.asarray([np.nan if v is None else v
                        for v in table.column("worst_ratio").to_pylist()], dtype=float)
    text = spec.text_inputs()
    numeric = [n for n in spec.input_names() if n not in text]
    sens, method, n_sens = [], "none", 0
    if spec.design == "sobol":
        sens, n_sens = _sobol_indices(spec, sample, worst, ok)
        method = "Sobol indices (Saltelli 2010 S1, Jansen 1999 ST)"
    else:
        good = ok & np.isfinite(worst)
        n_sens = int(good.sum())
        if n_sens >= 3:
            from scipy.stats import spearmanr
            for name in numeric:
                x = np.asarray(table.column(f"x.{name}").to_pylist(), dtype=float)[good]
                if np.ptp(x) == 0 or np.ptp(worst[good]) == 0:
                    sens.append(Sensitivity(name, rho=float("nan")))
                    continue
                rho = spearmanr(x, worst[good]).statistic
                sens.append(Sensitivity(name, rho=float(rho)))
            method = "Spearman rank correlation"
        if text:
            notes.append("text inputs (" + ", ".join(sorted(text)) + ") are not ranked; see "
                         "the sweep figure")
    sens.sort(key=lambda s: -s.size)
    grid = _grid_cells(spec, table, passed, worst, ok) if spec.design == "grid" else []
    nom = plan.nominal
    ratios = [c.ratio for c in nom.limits if c.ratio is not None]
    return StudySummary(
        title=plan.case.title, file=str(plan.case.file), design=spec.design, seed=spec.seed,
        case_hash=plan.case_hash, n_planned=spec.n_samples, n_rows=n_rows,
        n_counted=int(counted.sum()), n_not_converged=int((~conv & ~err).sum()),
        n_refused=int(err.sum()), overall=overall, checks=checks, sensitivity=sens,
        sensitivity_method=method, sensitivity_samples=n_sens, nominal_passed=nom.passed,
        nominal_worst_ratio=float(max(ratios)) if ratios else float("nan"),
        inputs=spec.input_names(), sweeps=[v.name for v in spec.sweeps], grid=grid,
        notes=notes)


def sobol_indices(fA, fB, fAB) -> tuple[float, float]:
    """First-order and total Sobol indices (S1, ST) of one input group from the responses
    on the A, B and A_B^j rows (module docstring; rows where any is NaN are left out)."""
    fA, fB, fAB = (np.asarray(a, dtype=float) for a in (fA, fB, fAB))
    m = np.isfinite(fA) & np.isfinite(fB) & np.isfinite(fAB)
    V = np.var(np.concatenate([fA[m], fB[m]])) if m.any() else 0.0
    if m.sum() < 2 or not V > 0:
        return float("nan"), float("nan")
    S1 = float(np.mean(fB[m] * (fAB[m] - fA[m])) / V)
    ST = float(np.mean((fA[m] - fAB[m]) ** 2) / (2 * V))
    return S1, ST


def _sobol_indices(spec, sample, worst, ok):
    n = spec.samples
    f = np.full(spec.n_samples, np.nan)
    f[sample] = np.where(ok, worst, np.nan)
    fA, fB = f[:n], f[n:2 * n]
    out = []
    for j, name in enumerate(spec.group_names):
        S1, ST = sobol_indices(fA, fB, f[(2 + j) * n:(3 + j) * n])
        out.append(Sensitivity(name, S1=S1, ST=ST))
    used = int((np.isfinite(f)).sum())
    return out, used


def _grid_cells(spec, table, passed, worst, ok) -> list[GridCell]:
    R = spec.replicas
    sample = np.asarray(table.column("sample").to_pylist(), dtype=np.int64)
    levels = [v.levels() for v in spec.sweeps]
    cells = {}
    for r, s in enumerate(sample):
        cells.setdefault(int(s) // R, []).append(r)
    out = []
    for cell in sorted(cells):
        rows = cells[cell]
        at = np.unravel_index(cell, spec.grid_shape)
        vals = {v.name: levels[k][at[k]] for k, v in enumerate(spec.sweeps)}
        w = worst[rows][ok[rows]]
        out.append(GridCell(vals, Compliance("overall", int(passed[rows].sum()), len(rows)),
                            float(np.median(w)) if w.size else float("nan")))
    return out


# ---- figures ------------------------------------------------------------------------------
def tornado_png(summary: StudySummary) -> bytes | None:
    """Bars of each input's sensitivity, largest at the top."""
    rows = [s for s in summary.sensitivity if s.size > 0 or s.rho is not None]
    if not rows:
        return None
    from .plots import _plt, _png, _BLUE, _RED, _GREY
    plt = _plt()
    rows = rows[::-1]
    fig, ax = plt.subplots(figsize=(7.5, 0.45 * len(rows) + 1.6))
    y = np.arange(len(rows))
    if summary.design == "sobol":
        ax.barh(y + 0.18, [s.S1 or 0.0 for s in rows], height=0.36, color=_BLUE,
                label="first order S1")
        ax.barh(y - 0.18, [s.ST or 0.0 for s in rows], height=0.36, color=_GREY,
                label="total ST")
        ax.set_xlabel("Sobol index of the worst ratio (share of its variance)")
        ax.legend(loc="lower right", fontsize=8)
    else:
        vals = [0.0 if s.rho is None or not np.isfinite(s.rho) else s.rho for s in rows]
        ax.barh(y, vals, color=[_RED if v > 0 else _BLUE for v in vals])
        ax.axvline(0.0, color="black", lw=0.8)
        ax.set_xlim(-1, 1)
        ax.set_xlabel("Spearman rank correlation with the worst ratio (value / limit); "
                      "> 0: raises it")
    ax.set_yticks(y, [s.input for s in rows], fontsize=8)
    ax.set_title(f"Sensitivity ({summary.sensitivity_samples} samples)", fontsize=10)
    return _png(fig)


def sweep_png(plan, table, summary: StudySummary) -> bytes | None:
    """The margin of the most binding limit, 100 (1 - worst ratio) %, over the first two
    sweep variables (a map for a grid, points otherwise), or over one."""
    spec = plan.spec
    if not spec.sweeps:
        return None
    from .plots import _plt, _png, _RED
    plt = _plt()
    ok = _ok(table)
    worst = np.asarray([np.nan if v is None else v
                        for v in table.column("worst_ratio").to_pylist()], dtype=float)
    margin = 100.0 * (1.0 - worst)
    margin[~ok] = np.nan
    sw = spec.sweeps[:2]

    def axis(v):
        x = table.column(f"x.{v.name}").to_pylist()
        if v.is_text:
            labels = list(v.levels())
            return np.array([labels.index(a) for a in x], dtype=float), labels
        return np.asarray(x, dtype=float), None
    fig, ax = plt.subplots(figsize=(7.5, 5.0))
    label = "margin on the most binding limit, 100 (1 - value/limit) %"
    if spec.design == "grid" and len(sw) == 2:
        lv = [v.levels() for v in sw]
        M = np.full((len(lv[1]), len(lv[0])), np.nan)
        P = {}
        for g in summary.grid:
            i = lv[0].index(g.values[sw[0].name])
            j = lv[1].index(g.values[sw[1].name])
            cur = 100.0 * (1.0 - g.worst_ratio_median)
            M[j, i] = cur if np.isnan(M[j, i]) else min(M[j, i], cur)
            P[(i, j)] = g.compliance.probability
        xs = np.arange(len(lv[0])) if sw[0].is_text else np.asarray(lv[0], dtype=float)
        ys = np.arange(len(lv[1])) if sw[1].is_text else np.asarray(lv[1], dtype=float)
        lim = np.nanmax(np.abs(M)) if np.isfinite(M).any() else 1.0
        im = ax.pcolormesh(xs, ys, M, shading="nearest", cmap="RdYlGn", vmin=-lim, vmax=lim)
        fig.colorbar(im, ax=ax, label="median " + label)
        if np.isfinite(M).any() and np.nanmin(M) < 0 < np.nanmax(M) and \
                M.shape[0] > 1 and M.shape[1] > 1:
            ax.contour(xs, ys, M, levels=[0.0], colors="black", linewidths=1.2)
        if spec.replicas > 1:
            for (i, j), p in P.items():
                ax.text(xs[i], ys[j], f"P={p:.2f}", ha="center", va="center", fontsize=7)
        if sw[0].is_text:
            ax.set_xticks(xs, lv[0])
        if sw[1].is_text:
            ax.set_yticks(ys, lv[1])
        ax.set_xlabel(sw[0].name)
        ax.set_ylabel(sw[1].name)
    elif len(sw) == 2:
        (x, xl), (y, yl) = axis(sw[0]), axis(sw[1])
        good = np.isfinite(margin)
        sc = ax.scatter(x[good], y[good], c=margin[good], cmap="RdYlGn", s=14,
                        vmin=-np.nanmax(np.abs(margin)), vmax=np.nanmax(np.abs(margin)))
        fig.colorbar(sc, ax=ax, label=label)
        fail = ~np.asarray(table.column("passed").to_pylist(), dtype=bool) | ~ok
        ax.scatter(x[fail], y[fail], marker="x", color="black", s=12, lw=0.7,
                   label="fails (or did not converge)")
        ax.legend(loc="best", fontsize=8)
        if xl:
            ax.set_xticks(range(len(xl)), xl)
        if yl:
            ax.set_yticks(range(len(yl)), yl)
        ax.set_xlabel(sw[0].name)
        ax.set_ylabel(sw[1].name)
    else:
        x, xl = axis(sw[0])
        ax.scatter(x, margin, s=10, alpha=0.6)
        ax.axhline(0.0, color=_RED, lw=1.0, label="limit")
        if xl:
            ax.set_xticks(range(len(xl)), xl)
        ax.set_xlabel(sw[0].name)
        ax.set_ylabel(label)
        ax.legend(loc="best", fontsize=8)
    ax.set_title(f"{summary.title}: design sweep ({summary.n_rows} samples)", fontsize=9)
    return _png(fig)


def write_outputs(store, plan, table, summary: StudySummary, stats, *,
                  figures: bool = True) -> list[str]:
    """tornado.png, sweep.png and summary.json into the study folder, each atomically (the
    summary last: its presence says the study finished)."""
    from .output import to_json
    files = []
    if figures:
        for name, png in (("tornado.png", tornado_png(summary)),
                          ("sweep.png", sweep_png(plan, table, summary))):
            if png:
                files.append(str(store.write_file(name, png)))
    obj = summary.to_json() | {"execution": stats.to_dict()}
    files.append(str(store.write_file("summary.json", to_json(obj) + "\n")))
    return files
