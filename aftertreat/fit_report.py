"""What ``aftertreat fit`` shows and writes: the terminal tables, and the fit folder (fitted
values with intervals, correlations, goodness of fit, PNGs of measured against fitted and of the
residuals against temperature)."""
from __future__ import annotations

from pathlib import Path


from .units import ZERO_C_K

__all__ = ["print_fit", "write_fit_folder", "figure_fit", "figure_residuals"]


def _x_of(e):
    """The x axis of an experiment's plot: temperature for steady points, time for runs."""
    if e.time_s is not None:
        return e.time_s / 60.0, "time [min]"
    return e.T_K - ZERO_C_K, "T [degC]"


def figure_fit(res) -> bytes:
    """PNG: every experiment's measured outlet (points with 1-sigma bars) and the fitted model
    (lines), one panel per experiment."""
    from .plots import _plt, _png
    exps = res.experiments
    fig, axes = _plt().subplots(len(exps), 1, figsize=(8.0, 3.0 * len(exps)), squeeze=False)
    axes = axes[:, 0]
    colours = {"NO": "tab:blue", "NO2": "tab:orange", "NH3": "tab:red", "N2O": "tab:purple"}
    for ax, e, spec_e in zip(axes, exps, res.spec.experiments):
        if e.targets is not None:
            _published_panel(ax, e)
            continue
        x, label = _x_of(e)
        for sp, y in e.measured.items():
            ax.errorbar(x, y, yerr=spec_e.sigma[sp], fmt="o", ms=3, color=colours[sp],
                        alpha=0.6, label=f"{sp} measured")
            ax.plot(x, e.fitted[sp], "-", color=colours[sp], label=f"{sp} fitted")
        ax.set_title(f"{e.name} ({e.kind}): chi2 {e.chi2:.1f} over {e.n_points} points",
                     fontsize=9)
        ax.set_xlabel(label)
        ax.set_ylabel("outlet [ppm]")
        ax.legend(fontsize=7, ncol=2)
        ax.grid(alpha=0.3)
    fig.tight_layout()
    return _png(fig)


def _published_panel(ax, e) -> None:
    """One experiment of published targets: each target's value (one-sided ones as a
    triangle pointing where the statement holds) with its sigma, and the model's value."""
    import numpy as np
    x = np.arange(len(e.targets))
    for i, (t, m) in enumerate(zip(e.targets, e.model)):
        mk = {"=": "o", ">=": "^", "<=": "v"}[t.sense]
        ax.errorbar([i], [t.value], yerr=[t.sigma], fmt=mk, ms=6, color="tab:blue",
                    label="published (our reading)" if i == 0 else None)
    ax.plot(x, e.model, "x", ms=9, mew=2, color="tab:red", label="model at the fit")
    ax.set_xticks(x, [t.site if t.site is not None else f"{t.T_K - ZERO_C_K:.0f} C"
                      + (" (difference)" if t.minus is not None else "") for t in e.targets],
                  fontsize=7)
    ax.set_ylabel(e.targets[0].quantity.replace("_pct", " [%]").replace("_C", " [degC]"))
    ax.set_title(f"{e.name} (published): chi2 {e.chi2:.1f} over {e.n_points} targets",
                 fontsize=9)
    ax.legend(fontsize=7)
    ax.grid(alpha=0.3)


def figure_residuals(res) -> bytes:
    """PNG: weighted residuals (model - measured) / sigma against temperature, every
    experiment and species, with the +-2 band."""
    from .plots import _plt, _png
    fig, ax = _plt().subplots(figsize=(8.0, 3.5))
    markers = {"steady": "o", "lightoff": "s", "tpd": "^", "step": "v", "published": "D"}
    for e, spec_e in zip(res.experiments, res.spec.experiments):
        for sp, y in e.measured.items():
            r = (e.fitted[sp] - y) / spec_e.sigma[sp]
            ax.plot(e.T_K - ZERO_C_K, r, markers.get(e.kind, "o"), ms=3, alpha=0.7,
                    label=f"{e.name}: {sp}")
    ax.axhline(2.0, color="grey", ls="--", lw=0.8)
    ax.axhline(-2.0, color="grey", ls="--", lw=0.8)
    ax.axhline(0.0, color="black", lw=0.6)
    ax.set_xlabel("T [degC]")
    ax.set_ylabel("(fitted - measured) / sigma")
    ax.set_title("Weighted residuals (a good fit scatters within +-2 without a trend)",
                 fontsize=9)
    ax.legend(fontsize=6, ncol=2)
    ax.grid(alpha=0.3)
    return _png(fig)


def write_fit_folder(res, folder) -> list[Path]:
    """``parameters.csv``, ``correlation.csv``, ``experiments.csv``, ``fit.json``,
    ``fit.png``, ``residuals.png`` into ``folder`` (inside a staged folder)."""
    import pandas as pd
    from .output import to_json, write_atomic
    folder = Path(folder)
    out = []

    def put(name, data):
        write_atomic(folder / name, data)
        out.append(folder / name)
    put("parameters.csv", pd.DataFrame([p.to_dict() for p in res.parameters]).to_csv(
        index=False))
    labels = [p.label for p in res.parameters]
    put("correlation.csv", pd.DataFrame(res.correlation, index=labels, columns=labels).to_csv())
    put("experiments.csv", pd.DataFrame([e.to_dict() for e in res.experiments]).to_csv(
        index=False))
    put("fit.json", to_json(res.to_json()) + "\n")
    put("fit.png", figure_fit(res))
    put("residuals.png", figure_residuals(res))
    return out


def print_fit(res, written: Path | None, folder: str | None) -> None:
    from rich import box
    from rich.console import Console
    from rich.table import Table
    from .cli import escape
    from .fit import _holds
    con = Console()
    spec = res.spec
    con.print(f"[bold]{escape(spec.title)}[/bold]  ({escape(spec.file)})")
    con.print(f"catalyst {spec.catalyst.key}; {len(spec.experiments)} experiments, "
              f"{sum(e.n_points for e in res.experiments)} measured values; rate constants "
              f"referred to T_ref = {spec.T_mid_K - ZERO_C_K:.1f} degC (the data's middle)")
    t = Table(title="Fitted parameters (95 % intervals; ln coordinates give log-normal "
              "intervals)", box=box.SIMPLE_HEAD, pad_edge=False)
    for c in ("parameter", "start", "fitted", "95 % low", "95 % high", "note"):
        t.add_column(c, justify="left" if c in ("parameter", "note") else "right")
    for p in res.parameters:
        note = "; ".join(x for x in ("not pinned: bounds shown" if not p.pinned else "",
                                     "at bound" if p.at_bound and p.pinned else "",
                                     "profile" if p.profiled else "") if x)
        t.add_row(escape(p.label), f"{p.start:.4g}", f"{p.value:.4g}", f"{p.lo95:.4g}",
                  f"{p.hi95:.4g}", note)
    con.print(t)
    if len(res.parameters) > 1:
        C = Table(title="Correlation of the fitted coordinates", box=box.SIMPLE_HEAD,
                  pad_edge=False)
        C.add_column("")
        for i in range(len(res.parameters)):
            C.add_column(str(i + 1), justify="right")
        for i, p in enumerate(res.parameters):
            C.add_row(f"{i + 1} {escape(p.label)}", *[f"{v:+.2f}" for v in res.correlation[i]])
        con.print(C)
    G = Table(title="Goodness of fit", box=box.SIMPLE_HEAD, pad_edge=False)
    for c in ("experiment", "kind", "points", "chi2", "chi2/point", "rms residual ppm"):
        G.add_column(c, justify="left" if c in ("experiment", "kind") else "right")
    for e in res.experiments:
        G.add_row(escape(e.name), e.kind, str(e.n_points), f"{e.chi2:.1f}",
                  f"{e.chi2 / max(e.n_points, 1):.2f}",
                  f"{e.rms_ppm:.2f}" if e.targets is None else "-")
    con.print(G)
    for e in res.experiments:
        if e.targets is None:
            continue
        P = Table(title=f"{escape(e.name)}: published targets (our readings) and the model",
                  box=box.SIMPLE_HEAD, pad_edge=False)
        for c in ("quantity", "at", "target", "model", "holds"):
            P.add_column(c, justify="left" if c in ("quantity", "at", "holds") else "right")
        for t, m in zip(e.targets, e.model):
            at = f"site {t.site}" if t.site else f"{t.T_K - ZERO_C_K:.0f} degC" + (
                " (difference)" if t.minus is not None else "")
            P.add_row(t.quantity, at, f"{t.sense} {t.value:g} +- {t.sigma:g}", f"{m:.2f}",
                      "yes" if _holds(t, m) else "[red]no[/red]")
        con.print(P)
    con.print(f"chi2 {res.chi2:.1f} for {res.dof} degrees of freedom (reduced "
              f"{res.reduced_chi2:.2f}); {res.evaluations} residual evaluations, "
              f"{res.solves} model solves, {res.seconds:.1f} s")
    for w in res.warnings:
        con.print(f"[yellow]warning:[/yellow] {escape(w)}")
    if written is not None:
        con.print(f"new catalyst file: {escape(str(written))} (use it as catalyst = "
                  f"\"{escape(str(written))}\"; 'aftertreat catalysts {escape(str(written))}' "
                  "shows the intervals)")
    if folder:
        con.print(f"fit report written to {escape(str(folder))}/")
    from .output import SAFETY_NOTE
    con.print("[dim]A calibration holds over the data's temperatures, feeds and ageing state "
              "only. " + SAFETY_NOTE + "[/dim]")
