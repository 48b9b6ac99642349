"""Figures of results, as PNG bytes, for report folders.

Rules every figure keeps (docs/conventions.md): one basis per panel, said in its axis label
(``ppmvd @15% O2``, ``g/kWh``, ``ppm wet``); a limit is drawn on its own basis, never against
a value on another one; the design margin is drawn where a sizing uses it; bricks are named
where a figure runs along the train; panels with nothing to show are left out.
"""
from __future__ import annotations

import io
import math

from .limits import group_label

__all__ = ["compliance", "limits_by_mode", "profiles", "sizing_curves", "transient"]

_BLUE, _RED, _AMBER, _GREEN, _GREY = "#4a7ab5", "#c0392b", "#d68910", "#27ae60", "#95a5a6"
#: the plain name of each quantity of the limit vocabulary, for axis titles
_NAMES = {"NOx": "NOx (as NO2)", "NH3": "NH3", "N2O": "N2O", "CO2": "CO2",
          "GHG": "CO2 + N2O as CO2e", "N2O_CO2e": "N2O as CO2e"}


def _plt():
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    return plt


def _png(fig) -> bytes:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=110, bbox_inches="tight")
    _plt().close(fig)
    return buf.getvalue()


def _quantity_name(quantity: str) -> str:
    head = "N2O_CO2e" if quantity.startswith("N2O_CO2e") else quantity.split("_")[0]
    return _NAMES.get(head, head)


def _margin(case) -> float:
    spec = getattr(case, "sizing", None)
    return float(spec.design_margin) if spec is not None else 0.0


def compliance(result, margin: float | None = None) -> bytes:
    """Every limit check that applies as value / limit [%]: the 100 % line, the design-margin
    line at 100 (1 - margin) % (``[sizing] design_margin``), bars coloured by pass (green),
    inside the margin (amber) and fail (red), each labelled with its value and limit on its
    own basis."""
    plt = _plt()
    m = _margin(result.case) if margin is None else margin
    checks = [c for c in result.limits if c.limit is not None]
    fig, ax = plt.subplots(figsize=(11, 1.2 + 0.32 * max(len(checks), 1)))
    if not checks:
        ax.text(0.5, 0.5, "the case has no limits", ha="center", va="center",
                transform=ax.transAxes)
        ax.set_axis_off()
        return _png(fig)
    pct = [100.0 * min(c.ratio, 1e6) for c in checks]
    top = max(110.0, min(max(pct) * 1.08, 250.0))
    y = list(range(len(checks)))[::-1]
    colours = [_RED if not c.passed else (_AMBER if p > 100 * (1 - m) else _GREEN)
               for c, p in zip(checks, pct)]
    ax.barh(y, [min(p, top) for p in pct], color=colours, height=0.7)
    ax.axvline(100.0, color="black", lw=1.2)
    if m > 0:
        ax.axvline(100 * (1 - m), color="black", lw=1.0, ls="--",
                   label=f"limit less the design margin ({100 * m:g} %)")
        ax.legend(fontsize=7, loc="lower right")
    for yi, c, p in zip(y, checks, pct):
        ax.text(min(p, top) + 1.0, yi, f"{c.value:.3g} / {c.limit:.3g} {c.basis}"
                + (" (off scale)" if p > top else ""), va="center", fontsize=7)
    ax.set_yticks(y, [c.row_name + (f"  [{c.mode}]" if c.mode else "  [cycle]")
                      for c in checks], fontsize=7)
    ax.set_xlim(0, top * 1.35)
    ax.set_xlabel("value / limit [%]  (each on the limit's own basis; 100 % = at the limit)")
    ax.grid(axis="x", alpha=0.3)
    ax.set_title(f"{result.case.title}\ncompliance: every limit of the case "
                 "(green pass, amber inside the design margin, red fail)", fontsize=9)
    fig.tight_layout()
    return _png(fig)


def _mode_specific(result, quantity: str) -> list[float | None]:
    """Per-mode specific emission [g/kWh] of a NOx/N2O/NH3/CO2 g/kWh quantity (None at idle)."""
    head = quantity.split("_")[0]
    out = []
    for m in result.modes:
        e = m.emissions()
        key = f"{head}_g_h"
        out.append(e[key] / m.power_kW if key in e and m.power_kW > 0 else None)
    return out


def limits_by_mode(result) -> bytes:
    """One panel per limited quantity and basis: the value at every mode (bars) against its
    per-mode limit (red ticks), and the cycle value against a cycle limit (last bar). For a
    g/kWh quantity limited over the cycle only, the modes' own specific emissions are shown in
    grey for context (no per-mode limit applies to them)."""
    plt = _plt()
    groups: dict[tuple, list] = {}
    for c in result.limits:
        groups.setdefault((c.quantity, c.basis), []).append(c)
    names = [m.name for m in result.modes]
    n = max(len(groups), 1)
    cols = min(3, n)
    rows = math.ceil(n / cols)
    fig, axes = plt.subplots(rows, cols, figsize=(4.6 * cols, 3.6 * rows), squeeze=False)
    for ax in axes.ravel()[n:]:
        ax.set_visible(False)
    if not groups:
        ax = axes[0, 0]
        vals = [m.emissions()["ppmvd"]["NOx"] for m in result.modes]
        ax.bar(range(len(names)), vals, color=_BLUE)
        ax.set_xticks(range(len(names)), names, rotation=30, ha="right", fontsize=8)
        ax.set_ylabel("NOx out [ppmvd, actual O2]")
        ax.set_title("no limits in the case", fontsize=9)
    for ax, ((q, basis), checks) in zip(axes.ravel(), groups.items()):
        per_mode = {c.mode: c for c in checks if c.mode is not None}
        cycle = [c for c in checks if c.mode is None]
        labels = list(names) if per_mode or q.endswith("_g_kWh") else []
        x = list(range(len(labels)))
        if per_mode:
            vals = [per_mode[k].value if k in per_mode else math.nan for k in labels]
            col = [_GREY if k not in per_mode or per_mode[k].limit is None else
                   (_BLUE if per_mode[k].passed else _RED) for k in labels]
            ax.bar(x, [0.0 if v is None or not math.isfinite(v) else v for v in vals],
                   color=col)
            for i, k in enumerate(labels):
                c = per_mode.get(k)
                if c is not None and c.limit is not None:
                    ax.plot([i - 0.42, i + 0.42], [c.limit, c.limit], color=_RED, lw=2)
                elif c is not None and c.note:
                    ax.text(i, 0, "n/a", ha="center", va="bottom", fontsize=7, color=_GREY)
        elif labels:                                  # context: the modes' own g/kWh
            vals = _mode_specific(result, q)
            ax.bar(x, [0.0 if v is None else v for v in vals], color=_GREY)
            for i, v in enumerate(vals):
                if v is None:
                    ax.text(i, 0, "idle", ha="center", va="bottom", fontsize=7, color=_GREY)
        for j, c in enumerate(cycle):
            i = len(labels) + j
            labels.append("cycle" if len(cycle) == 1 else f"cycle {j + 1}")
            ax.bar([i], [c.value], color=_BLUE if c.passed else _RED, hatch="//",
                   edgecolor="white")
            ax.plot([i - 0.42, i + 0.42], [c.limit, c.limit], color=_RED, lw=2)
        ax.set_xticks(range(len(labels)), labels, rotation=30, ha="right", fontsize=8)
        ax.set_ylabel(f"[{basis}]", fontsize=8)
        ax.set_ylim(bottom=0)
        ax.set_title(f"{_quantity_name(q)}, {basis}", fontsize=9)
        ax.grid(axis="y", alpha=0.3)
    fig.suptitle(f"{result.case.title}\nlimited quantities by mode, each on its limit's basis "
                 "(red ticks: the limits; hatched: cycle values; grey: no limit applies)",
                 fontsize=9)
    fig.tight_layout(rect=(0, 0, 1, 0.92))
    return _png(fig)


def profiles(result) -> bytes:
    """Axial profiles along the train for every mode: NOx, NH3, N2O [ppm wet] and the
    catalyst temperature, with the brick boundaries dashed and each brick named."""
    plt = _plt()
    fig, axes = plt.subplots(2, 2, figsize=(12, 7), sharex=True)
    for m in result.modes:
        p = m.solution.profiles()
        z = p["z_mm"]
        axes[0, 0].plot(z, p["NO_ppm_wet"] + p["NO2_ppm_wet"], label=m.name)
        axes[0, 1].plot(z, p["NH3_ppm_wet"], label=m.name)
        axes[1, 0].plot(z, p["N2O_ppm_wet"], label=m.name)
        axes[1, 1].plot(z, p["T_solid_C"], label=m.name)
    for ax, t in ((axes[0, 0], "NOx [ppm wet]"), (axes[0, 1], "NH3 [ppm wet]"),
                  (axes[1, 0], "N2O [ppm wet]"), (axes[1, 1], "catalyst temperature [C]")):
        ax.set_ylabel(t, fontsize=9)
        ax.grid(alpha=0.3)
    axes[0, 1].set_yscale("symlog", linthresh=1.0)
    z0, mids, names = 0.0, [], []
    for b in (result.train or result.case.train).bricks:
        mids.append(z0 + 0.5 * b.length * 1e3)
        names.append(b.name)
        z0 += b.length * 1e3
        for ax in axes.ravel():
            ax.axvline(z0, color="grey", lw=0.8, ls="--")
    for ax in axes[0]:                                 # brick names along the top
        top = ax.secondary_xaxis("top")
        top.set_xticks(mids, names, fontsize=8)
    axes[1, 0].set_xlabel("distance along the train [mm]")
    axes[1, 1].set_xlabel("distance along the train [mm]")
    axes[0, 0].legend(fontsize=8)
    fig.suptitle(f"{result.case.title}: axial profiles by mode (dashed: brick ends)",
                 fontsize=9)
    fig.tight_layout(rect=(0, 0, 1, 0.95))
    return _png(fig)


def sizing_curves(res) -> bytes:
    """Against the SCR volume (slip catalyst at its size) and, when the train has one, against
    the slip-catalyst volume (SCR at its size): the governing check of every limit group on
    its own basis, with the limit (solid) and the limit less the design margin (dashed), and
    the worst-mode back-pressure with its budget."""
    plt = _plt()
    t = res.curve_table()
    m = res.case.sizing.design_margin
    groups = [c[:-len("_value")] for c in t.columns if c.endswith("_value")]
    panels = [(g, f"{g}_value") for g in groups] + [("dp", "dp_kPa_max")]
    sweeps = [("SCR", "SCR_volume_L", "SCR volume [L] (slip catalyst at its size)")]
    has_asc = any(b.role != "SCR" for b in res.train.bricks) and (t["sweep"] == "ASC").any()
    if has_asc:
        sweeps.append(("ASC", "ASC_volume_L", "slip-catalyst volume [L] (SCR at its size)"))
    fig, axes = plt.subplots(len(sweeps), len(panels),
                             figsize=(3.4 * len(panels), 3.3 * len(sweeps)), squeeze=False)
    scr_v = sum(b.volume for b in res.train.bricks if b.role == "SCR") * 1e3
    asc_v = sum(b.volume for b in res.train.bricks if b.role != "SCR") * 1e3
    checks = {group_label(c): c for c in res.run.limits if c.limit is not None}
    for row, (sweep, xcol, label) in enumerate(sweeps):
        d = t[t["sweep"] == sweep].sort_values(xcol)
        xv = scr_v if sweep == "SCR" else asc_v
        for ax, (g, col) in zip(axes[row], panels):
            ax.plot(d[xcol], d[col], "o-", color=_BLUE, ms=4)
            ax.axvline(xv, color="black", lw=1.0, ls=":")
            if g == "dp":
                title, unit = "back-pressure, worst mode", "kPa"
                budget = res.case.sizing.dp_max_kPa
                if budget:
                    ax.axhline(budget, color=_RED, lw=1.5)
            else:
                c = checks.get(g)
                lim = d[f"{g}_limit"].max()
                ax.axhline(lim, color=_RED, lw=1.5)
                if m > 0:
                    ax.axhline(lim * (1 - m), color=_RED, lw=1.0, ls="--")
                unit = c.basis if c is not None else ""
                title = (f"{_quantity_name(g)}, "
                         + ("worst mode" if g.endswith("_per_mode") else "cycle"))
            ax.set_ylim(bottom=0)
            ax.set_title(title, fontsize=8)
            ax.set_ylabel(f"[{unit}]", fontsize=8)
            ax.set_xlabel(label, fontsize=7)
            ax.grid(alpha=0.3)
    from .sizing import COARSE_GRID
    fig.suptitle(f"{res.case.title}\nsizing curves around the sized design (dotted) on the "
                 f"search grid ({COARSE_GRID[0]} cells per brick, within 1-2 % of the case's); "
                 "red: limit, dashed: limit less the design margin", fontsize=9)
    fig.tight_layout(rect=(0, 0, 1, 0.93))
    return _png(fig)


def transient(trun) -> bytes:
    """A transient run: outlet NOx, NH3 and N2O [ppmvd at the actual O2]; one panel per
    concentration limit with the run's values on that limit's basis and the limit; gas and
    solid temperatures; stored NH3 per brick; power and the ANR at the inlet."""
    plt = _plt()
    df = trun.table()
    t = df["t_s"] / 60.0
    series = trun.limit_series()
    n = 4 + len(series)
    fig, ax = plt.subplots(n, 1, figsize=(11, 2.4 * n), sharex=True)
    for col, c in (("NOx_out_ppmvd", _BLUE), ("NH3_out_ppmvd", _RED),
                   ("N2O_out_ppmvd", "#7d3c98")):
        ax[0].plot(t, df[col], color=c, lw=1.0, label=col.replace("_out_ppmvd", ""))
    ax[0].set_ylabel("outlet [ppmvd,\nactual O2]")
    ax[0].legend(fontsize=8, loc="upper right")
    for k, (check, values, limits) in enumerate(series, start=1):
        a = ax[k]
        a.plot(t, values, color=_RED, lw=1.0)
        a.plot(t, limits, color="black", lw=1.2, ls="--")
        a.set_ylabel(f"{_quantity_name(check.quantity)}\n[{check.basis}]", fontsize=8)
        a.set_title(f"{check.row_name} (dashed: the limit)", fontsize=8)
        a.set_ylim(bottom=0)
    i = len(series) + 1
    ax[i].plot(t, df["T_in_C"], color="black", lw=1.0, label="gas in")
    for name in trun.result.brick_names:
        ax[i].plot(t, df[f"{name}_T_solid_mean_C"], lw=1.0, label=f"{name} solid (mean)")
    ax[i].set_ylabel("temperature [C]")
    ax[i].legend(fontsize=8, loc="upper right")
    for name in trun.result.brick_names:
        ax[i + 1].plot(t, df[f"{name}_stored_NH3_g"], lw=1.0, label=name)
    ax[i + 1].set_ylabel("stored NH3 [g]")
    ax[i + 1].legend(fontsize=8, loc="upper right")
    ax[i + 2].plot(t, df["power_kW"], color="black", lw=1.0)
    ax[i + 2].set_ylabel("power [kW]")
    a2 = ax[i + 2].twinx()
    a2.plot(t, df["ANR_in"], color=_GREEN, lw=0.8)
    a2.set_ylabel("ANR at the inlet [-]", color=_GREEN)
    ax[i + 2].set_xlabel("time [min]")
    for a in ax:
        a.grid(alpha=0.3)
    fig.suptitle(f"{trun.case.title}\n{trun.timeline.source}", fontsize=9)
    fig.tight_layout(rect=(0, 0, 1, 0.96))
    return _png(fig)
