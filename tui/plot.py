"""Multi-series line charts drawn with Unicode braille characters, for the terminal UI.

Every character cell of the plot area is a braille pattern: a grid of 2 dots across by 4 dots
down, drawn as U+2800 plus one bit per lit dot. A plot area ``w`` cells wide and ``h`` rows high is
therefore a dot grid of ``2 w`` x ``4 h`` dots, on which the series are drawn as straight segments
between consecutive points.

Layout of the returned text, top to bottom (``width`` cells wide, ``height`` lines)::

    NOx [ppm]                       ── inlet  ── outlet     <- y label, legend
     150┤⠈⠢⡀                                                <- y tick labels, axis, plot area
        │   ⠑⢄       ┊                                         (┊: a vertical marker)
      50┤      ⠉⠒⠤⣀⣀ ┊
        └──┬───────┬──────┬──                               <- x axis, ticks at ┬
           0      0.1    0.2                                <- x tick labels
                 length [m]                                 <- x label (only if given)

Axes: the x axis spans the finite data exactly and its ticks are "nice" values inside it; the y
axis is widened to the nearest nice ticks (whole decades on a log scale) unless ``y_min`` or
``y_max`` fixes that end, so the top and bottom rows carry labels.
Nice steps are 1, 2, 2.5 and 5 times a power of ten (common practice for axis ticks).
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from rich.cells import cell_len
from rich.text import Text

# Bit of the dot at (row 0..3 from the top, column 0..1) of a braille cell: Unicode's dot numbering
# 1-2-3-7 down the left column and 4-5-6-8 down the right one.
_DOT_BIT = np.array([[0x01, 0x08], [0x02, 0x10], [0x04, 0x20], [0x40, 0x80]], dtype=np.int64)
# Glyph of each 8-bit dot pattern; no dots is drawn as a space, not as the blank braille U+2800.
_GLYPH = [" "] + [chr(0x2800 + bits) for bits in range(1, 256)]

MARKER_GLYPH = "┊"
AXIS_STYLE = "dim"
MARKER_STYLE = "dim"
NOTE_STYLE = "dim italic"
TOO_SMALL = "(too small)"
MIN_WIDTH, MIN_HEIGHT = 20, 5      # below this the chart is replaced by TOO_SMALL
MAX_TICKS = 5
_HUGE = 1e300                      # axis ends are clamped to +-_HUGE (finite spans only)
_NICE_MANTISSAS = (1.0, 2.0, 2.5, 5.0)
# Cell style ids besides the series index (0, 1, ...):
_EMPTY, _MARKER, _NOTE = -1, -2, -3


def plain(text: Text) -> list[str]:
    """The lines of a chart as plain strings (styles dropped)."""
    return text.plain.split("\n")


def format_tick(value: float, decimals: int = 6) -> str:
    """A tick label: the shorter of plain decimal (``decimals`` places at most, trailing zeros
    cut) and mantissa-exponent form, the plain form winning ties: 0, 2.5, 150, 0.01, 1e3, 1e-3."""
    v = round(float(value), decimals)
    if v == 0:
        return "0"                                   # also turns -0.0 into "0"
    plain_form = f"{v:.{decimals}f}"
    if "." in plain_form:
        plain_form = plain_form.rstrip("0").rstrip(".")
    digits = max(0, decimals + math.floor(math.log10(abs(v))))   # mantissa places kept
    mantissa, exponent = f"{v:.{digits}e}".split("e")
    sci_form = f"{mantissa.rstrip('0').rstrip('.')}e{int(exponent)}"
    return sci_form if len(sci_form) < len(plain_form) else plain_form


def _nice_steps(span: float, max_ticks: int):
    """Candidate tick steps 1, 2, 2.5, 5 x 10^e in increasing order, starting well below
    span/max_ticks; yields (step, decimals needed to print multiples of it)."""
    e = math.floor(math.log10(span / max_ticks)) - 1
    for _ in range(40):                              # the step grows ~10x per pass; 2 passes do
        for m in _NICE_MANTISSAS:
            yield m * 10.0 ** e, max(0, -e) + (1 if m == 2.5 else 0)
        e += 1


def _decade_steps(span: float, max_ticks: int):
    """Candidate steps in log10 space: whole numbers of decades (1, 2, 3, ...), so that every tick
    is a power of ten; yields (step, 0) (the labels are formatted by the caller)."""
    for k in range(1, int(span) + 3):
        yield float(k), 0


def _ticks(lo: float, hi: float, max_ticks: int, steps, *, expand_lo: bool, expand_hi: bool):
    """Tick values at multiples of the smallest candidate step giving at most ``max_ticks`` ticks.

    An end with ``expand_*`` set is moved outward to the nearest multiple of the step; a fixed end
    stays where it is. Returns (lo, hi, ticks, decimals) with lo < hi.
    """
    span = hi - lo
    tol = 1e-9 * span
    max_ticks = max(3, max_ticks)    # with step >= span, 3 ticks always suffice: the loop ends
    for step, decimals in steps(span, max_ticks):
        a = math.floor((lo + tol) / step) * step if expand_lo else lo
        b = math.ceil((hi - tol) / step) * step if expand_hi else hi
        k0, k1 = math.ceil((a - tol) / step), math.floor((b + tol) / step)
        if k1 < k0:                  # fixed ends with no multiple between: label the ends
            return a, b, [a, b], max(0, 2 - math.floor(math.log10(max(abs(a), abs(b)))))
        if k1 - k0 + 1 <= max_ticks:
            return a, b, [k * step for k in range(k0, k1 + 1)], decimals
    return lo, hi, [lo, hi], 6                       # not reached for finite lo < hi


@dataclass(frozen=True)
class _Scale:
    """Maps data values (log10 already taken on a log axis) in [lo, hi] to fractional dot indices
    0 .. n_dots-1; ``flip`` puts ``hi`` at index 0 (screen rows count downward)."""
    lo: float
    hi: float
    n_dots: int
    flip: bool = False

    def __call__(self, v):
        f = (np.asarray(v, dtype=float) - self.lo) / (self.hi - self.lo)
        return (1.0 - f if self.flip else f) * (self.n_dots - 1)

    def cell(self, v: float, dots_per_cell: int) -> int:
        """Character cell (column or row) holding the dot nearest to ``v``."""
        d = int(np.clip(np.rint(self(v)), 0, self.n_dots - 1))
        return d // dots_per_cell


def _clip_segments(x0, y0, x1, y1, x_max, y_max):
    """Liang-Barsky clipping of segments (x0, y0)-(x1, y1) to the box [-0.5, x_max] x [-0.5, y_max]
    in dot coordinates; returns the clipped endpoints of the segments that meet the box."""
    dx, dy = x1 - x0, y1 - y0
    t0, t1 = np.zeros_like(x0), np.ones_like(x0)
    keep = np.ones(x0.shape, dtype=bool)
    with np.errstate(divide="ignore", invalid="ignore"):
        for p, q in ((-dx, x0 + 0.5), (dx, x_max - x0), (-dy, y0 + 0.5), (dy, y_max - y0)):
            keep &= ~((p == 0) & (q < 0))            # parallel to this edge and outside it
            r = q / p
            t0 = np.where(p < 0, np.maximum(t0, r), t0)
            t1 = np.where(p > 0, np.minimum(t1, r), t1)
    keep &= t0 <= t1
    return (x0 + t0 * dx)[keep], (y0 + t0 * dy)[keep], (x0 + t1 * dx)[keep], (y0 + t1 * dy)[keep]


def _raster(x0, y0, x1, y1):
    """Dots of the segments between integer dot positions (all segments at once).

    Each segment takes one dot per step along its longer axis, the other coordinate being the
    nearest integer to the exact line: the dots Bresenham's algorithm lights (rounding ties aside).
    """
    dx, dy = x1 - x0, y1 - y0
    n = np.maximum(np.abs(dx), np.abs(dy))           # steps; n + 1 dots per segment
    counts = n + 1
    seg = np.repeat(np.arange(n.size), counts)
    k = np.arange(counts.sum()) - np.repeat(np.cumsum(counts) - counts, counts)
    t = k / np.maximum(n, 1)[seg]
    return x0[seg] + np.rint(t * dx[seg]).astype(np.int64), \
        y0[seg] + np.rint(t * dy[seg]).astype(np.int64)


def _series_dots(x, y, sx: _Scale, sy: _Scale):
    """Dot (column, row) indices lit by one series: segments between consecutive finite points,
    plus every finite point itself (so an isolated point between gaps still shows)."""
    ok = np.isfinite(x) & np.isfinite(y)
    px, py = sx(x), sy(y)
    pair = ok[:-1] & ok[1:]
    x_max, y_max = sx.n_dots - 0.5, sy.n_dots - 0.5
    a, b, c, d = _clip_segments(px[:-1][pair], py[:-1][pair], px[1:][pair], py[1:][pair],
                                x_max, y_max)
    ends = [np.clip(np.rint(v), 0, n - 1).astype(np.int64)
            for v, n in ((a, sx.n_dots), (b, sy.n_dots), (c, sx.n_dots), (d, sy.n_dots))]
    cols, rows = _raster(*ends)
    inside = ok & (px >= -0.5) & (px <= x_max) & (py >= -0.5) & (py <= y_max)
    pcols = np.clip(np.rint(px[inside]), 0, sx.n_dots - 1).astype(np.int64)
    prows = np.clip(np.rint(py[inside]), 0, sy.n_dots - 1).astype(np.int64)
    return np.concatenate([cols, pcols]), np.concatenate([rows, prows])


def _prepare(series, log_y: bool):
    """The series as (name, x, y, style) with float arrays; on a log axis y becomes log10(y) and
    non-positive values NaN (skipped)."""
    out = []
    for name, x, y, style in series:
        x, y = np.asarray(x, dtype=float), np.asarray(y, dtype=float)
        if x.ndim != 1 or x.shape != y.shape:
            raise ValueError(f"series {name!r}: x and y must be 1-D of equal length, "
                             f"got shapes {x.shape} and {y.shape}")
        if log_y:
            y = np.log10(np.where(y > 0, y, np.nan))
        out.append((str(name), x, y, style))
    return out


def _data_range(values, fixed_lo, fixed_hi):
    """(lo, hi, expand_lo, expand_hi) from the finite values and optional fixed ends; a flat or
    empty range is widened around its value (by 10 % of it, or by 1 around zero). Ends are kept
    within +-1e300 so that the span stays a finite float."""
    finite = values[np.isfinite(values)]
    lo = fixed_lo if fixed_lo is not None else (finite.min() if finite.size else 0.0)
    hi = fixed_hi if fixed_hi is not None else (finite.max() if finite.size else 1.0)
    lo, hi = min(max(lo, -_HUGE), _HUGE), min(max(hi, -_HUGE), _HUGE)
    expand_lo, expand_hi = fixed_lo is None, fixed_hi is None
    if not hi > lo:            # flat, or the data beyond a fixed end: centre on the fixed end
        mid = lo if fixed_hi is None and fixed_lo is not None else \
            hi if fixed_lo is None and fixed_hi is not None else 0.5 * (lo + hi)
        half = 0.1 * abs(mid) if mid != 0 else 1.0
        lo, hi, expand_lo, expand_hi = mid - half, mid + half, True, True
    return float(lo), float(hi), expand_lo, expand_hi


def _too_small(width: int, height: int) -> Text:
    lines = [TOO_SMALL[:width].ljust(width)] + [" " * width] * (height - 1)
    return Text("\n".join(lines[:height]))


def _fit(runs, width: int) -> Text:
    """One line from (text, style) runs, cut with an ellipsis or padded to exactly ``width``."""
    line = Text.assemble(*[(s, style or "") for s, style in runs if s])
    line.truncate(width, overflow="ellipsis", pad=True)
    return line


def _place_labels(cols, labels, offset: int, width: int):
    """Start positions of labels centred on their columns (shifted in at the edges); a label
    that would touch the previous one is left out. Returns [(start, label)]."""
    placed, free_from = [], 0
    for col, label in zip(cols, labels):
        start = max(0, min(offset + col - (len(label) - 1) // 2, width - len(label)))
        if start >= free_from:
            placed.append((start, label))
            free_from = start + len(label) + 1
    return placed


def _top_line(y_label: str, prepared, width: int) -> Text:
    """y label at the left, legend (``── name`` in each style) at the right if both fit,
    otherwise straight after the label; cut with an ellipsis when too long."""
    legend = []
    for i, (name, _, _, style) in enumerate(prepared):
        legend += [("  " if i else "", None), ("── " + name, style)]
    legend_len = sum(cell_len(s) for s, _ in legend)
    gap = 2 if y_label else 0
    if cell_len(y_label) + gap + legend_len <= width:
        gap = width - cell_len(y_label) - legend_len
    return _fit([(y_label, None), (" " * gap, None)] + legend, width)


def line_chart(series, width: int, height: int, *, x_label: str = "", y_label: str = "",
               log_y: bool = False, y_min: float | None = None, y_max: float | None = None,
               markers: list[float] | None = None) -> Text:
    """A line chart of ``series`` as exactly ``height`` lines of exactly ``width`` cells.

    ``series``: (name, x, y, style) tuples; x and y 1-D of equal length (each series its own x),
    style a rich style string. Points with a non-finite x or y (or y <= 0 when ``log_y``) are
    skipped and the line breaks there. A dot cell takes the style of the last series drawn in it.
    ``y_min`` / ``y_max`` fix the ends of the y axis (values in data units, also when ``log_y``;
    a non-positive bound is ignored on a log axis); points beyond them are clipped.
    ``markers``: x positions drawn as dim dotted columns where no series dot is.
    Below 20 x 5 cells the text only says "(too small)". Raises ValueError only for a series whose
    x and y are not 1-D of equal length.
    """
    width, height = max(0, int(width)), max(0, int(height))
    if height == 0:
        return Text("")
    if width < MIN_WIDTH or height < MIN_HEIGHT:
        return _too_small(width, height)
    data = _prepare(series, log_y)

    # Rows: top line, plot rows, axis line, x tick labels, x label (dropped to keep 2 plot rows).
    has_x_label = bool(x_label) and height - 4 >= 2
    plot_h = height - 3 - has_x_label

    xs = [x[np.isfinite(x) & np.isfinite(y)] for _, x, y, _ in data]
    ys = [y[np.isfinite(x) & np.isfinite(y)] for _, x, y, _ in data]
    all_x = np.concatenate(xs) if xs else np.empty(0)
    all_y = np.concatenate(ys) if ys else np.empty(0)
    no_data = all_y.size == 0

    # y axis
    if log_y:
        fix_lo = math.log10(y_min) if y_min is not None and y_min > 0 else None
        fix_hi = math.log10(y_max) if y_max is not None and y_max > 0 else None
        steps = _decade_steps
    else:
        fix_lo, fix_hi, steps = y_min, y_max, _nice_steps
    lo, hi, exp_lo, exp_hi = _data_range(all_y, fix_lo, fix_hi)
    y_max_ticks = min(MAX_TICKS, max(3, (plot_h + 1) // 2))
    lo, hi, y_ticks, y_dec = _ticks(lo, hi, y_max_ticks, steps, expand_lo=exp_lo, expand_hi=exp_hi)
    sy = _Scale(lo, hi, 4 * plot_h, flip=True)
    if log_y:        # whole exponents, except the ends of a fixed range less than a decade wide
        y_text = [format_tick(10.0 ** round(t), max(0, -round(t))) if abs(t - round(t)) < 1e-9
                  else format_tick(10.0 ** t, max(0, 2 - math.floor(t))) for t in y_ticks]
    else:
        y_text = [format_tick(t, y_dec) for t in y_ticks]
    # One label per row: the axis ends first, then the inner ticks that find a free row.
    row_label = {}
    order = [0, len(y_ticks) - 1] + list(range(1, len(y_ticks) - 1))
    for i in order:
        row_label.setdefault(sy.cell(y_ticks[i], 4), y_text[i])
    margin = max(len(s) for s in row_label.values())
    plot_w = width - margin - 1
    if plot_w < 2:                                   # y labels too long for this width
        return _too_small(width, height)

    # x axis: the data's own span, ticks inside it, as many (<= 5) as fit without touching.
    x_lo, x_hi, _, _ = _data_range(all_x, None, None)
    sx = _Scale(x_lo, x_hi, 2 * plot_w)
    for max_n in range(MAX_TICKS, 2, -1):
        _, _, x_ticks, x_dec = _ticks(x_lo, x_hi, max_n, _nice_steps,
                                      expand_lo=False, expand_hi=False)
        x_cols = [sx.cell(t, 2) for t in x_ticks]
        x_labels = _place_labels(x_cols, [format_tick(t, x_dec) for t in x_ticks],
                                 margin + 1, width)
        if len(x_labels) == len(x_ticks):
            break

    # Plot area: a dot grid per series, merged into 8-bit cell patterns; owner = last series.
    dots = np.zeros((4 * plot_h, 2 * plot_w), dtype=bool)
    owner = np.full((plot_h, plot_w), _EMPTY, dtype=np.int64)
    for i, (_, x, y, _) in enumerate(data):
        cols, rows = _series_dots(x, y, sx, sy)
        dots[rows, cols] = True
        owner[rows // 4, cols // 2] = i
    bits = (dots.reshape(plot_h, 4, plot_w, 2) * _DOT_BIT[None, :, None, :]).sum(axis=(1, 3))
    chars = [[_GLYPH[b] for b in row] for row in bits.tolist()]
    for m in markers or ():
        if np.isfinite(m) and x_lo <= m <= x_hi:
            c = sx.cell(m, 2)
            for r in range(plot_h):
                if bits[r, c] == 0:
                    chars[r][c], owner[r, c] = MARKER_GLYPH, _MARKER
    if no_data:
        note = "no data"[:plot_w]
        r, c0 = plot_h // 2, (plot_w - len(note)) // 2
        chars[r][c0:c0 + len(note)] = list(note)
        owner[r, c0:c0 + len(note)] = _NOTE
    styles = {i: style for i, (_, _, _, style) in enumerate(data)}
    styles.update({_EMPTY: None, _MARKER: MARKER_STYLE, _NOTE: NOTE_STYLE})

    lines = [_top_line(y_label, data, width)]
    for r in range(plot_h):
        label = row_label.get(r)
        runs = [((label or "").rjust(margin), None), ("┤" if label else "│", AXIS_STYLE)]
        row_owner, start = owner[r].tolist(), 0
        for c in range(1, plot_w + 1):               # runs of cells with the same style
            if c == plot_w or row_owner[c] != row_owner[start]:
                runs.append(("".join(chars[r][start:c]), styles[row_owner[start]]))
                start = c
        lines.append(_fit(runs, width))
    axis = ["─"] * plot_w
    for c in x_cols:
        axis[c] = "┬"
    lines.append(_fit([(" " * margin + "└" + "".join(axis), AXIS_STYLE)], width))
    tick_line = [" "] * width
    for start, label in x_labels:
        tick_line[start:start + len(label)] = label
    lines.append(_fit([("".join(tick_line), None)], width))
    if has_x_label:
        pad = margin + 1 + max(0, (plot_w - cell_len(x_label)) // 2)
        lines.append(_fit([(" " * pad + x_label, None)], width))
    return Text("\n").join(lines)
