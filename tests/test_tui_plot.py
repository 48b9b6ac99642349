"""Checks of tui.plot, the braille line chart.

The charts are read back from their plain text: the x-axis line is the one holding "└", the y axis
is the column of that "└", plot rows are the lines between the top (legend) line and the axis
line, and y tick labels are the text left of a "┤". A braille cell with dots is U+2801..U+28FF.
Expected positions are worked out by arithmetic: a plot area w cells wide is 2 w dots, and the
value x of an axis [lo, hi] falls on dot round((x - lo) / (hi - lo) * (2 w - 1)).
"""
import math
import time
from itertools import pairwise

import numpy as np
import pytest
from rich.cells import cell_len

from tui.plot import MARKER_GLYPH, format_tick, line_chart, plain


def is_dot(ch: str) -> bool:
    return 0x2801 <= ord(ch) <= 0x28FF


def layout(lines):
    """(axis line index, y-axis column, plot rows as strings right of the axis)."""
    axis_row = next(i for i, line in enumerate(lines) if "└" in line)
    axis_col = lines[axis_row].index("└")
    return axis_row, axis_col, [line[axis_col + 1:] for line in lines[1:axis_row]]


def y_labels(lines):
    """[(plot row, label)] from top to bottom."""
    axis_row, axis_col, _ = layout(lines)
    return [(i - 1, lines[i][:axis_col].strip()) for i in range(1, axis_row)
            if lines[i][axis_col] == "┤"]


def x_labels(lines):
    axis_row, _, _ = layout(lines)
    return lines[axis_row + 1].split()


def dot_cell(value, lo, hi, n_cells):
    """Cell index holding the dot nearest to ``value`` on an axis of n_cells x 2 dots."""
    return round((value - lo) / (hi - lo) * (2 * n_cells - 1)) // 2


def diagonal():
    return [("y=x", np.linspace(0, 1, 50), np.linspace(0, 1, 50), "green")]


@pytest.mark.parametrize("width,height", [(100, 20), (80, 24), (40, 8), (20, 5), (19, 30),
                                          (120, 4), (20, 1), (5, 2), (1, 1)])
@pytest.mark.parametrize("log_y", [False, True])
def test_exact_size(width, height, log_y):
    """Exactly `height` lines of exactly `width` cells, tiny sizes included (arithmetic)."""
    x = np.linspace(0, 0.3, 200)
    series = [("inlet", x, 150 * np.exp(-x / 0.1), "cyan"),
              ("outlet with a long name", x, 20 + 100 * np.exp(-x / 0.05), "bold red")]
    text = line_chart(series, width, height, x_label="length along the brick [m]",
                      y_label="NOx [ppm]", log_y=log_y, markers=[0.1, 0.2])
    lines = plain(text)
    assert len(lines) == height
    assert all(cell_len(line) == width for line in lines)


def test_too_small_and_degenerate_sizes():
    """Below 20 x 5 the text says "(too small)"; zero and negative sizes do not raise (brief)."""
    assert plain(line_chart(diagonal(), 19, 10))[0].startswith("(too small)")
    assert plain(line_chart(diagonal(), 30, 4))[0].startswith("(too small)")
    assert plain(line_chart(diagonal(), 0, 0)) == [""]
    assert plain(line_chart(diagonal(), -3, -3)) == [""]


def test_diagonal_lights_the_diagonal():
    """y = x over [0, 1]: the line runs from the bottom-left to the top-right cell of the plot
    area and misses the two other corners; going down, the line moves left (arithmetic)."""
    lines = plain(line_chart(diagonal(), 40, 12))
    _, _, plot = layout(lines)
    assert is_dot(plot[0][-1]) and is_dot(plot[-1][0])
    assert plot[0][0] == " " and plot[-1][-1] == " "
    first_dot = [min(i for i, ch in enumerate(row) if is_dot(ch)) for row in plot]
    assert all(a > b for a, b in pairwise(first_dot))


def test_y_labels_unit_range():
    """Data in [0, 1]: the y labels are 0 at the bottom row and 1 at the top row, and decrease
    strictly from top to bottom (arithmetic)."""
    lines = plain(line_chart(diagonal(), 60, 14))
    labels = y_labels(lines)
    _, _, plot = layout(lines)
    assert labels[0] == (0, "1") and labels[-1] == (len(plot) - 1, "0")
    values = [float(s) for _, s in labels]
    assert all(a > b for a, b in pairwise(values))


def test_y_labels_bracket_the_data_with_a_nice_step():
    """Data in [3.7, 42.1]: 3 to 5 labels, the lowest at or below 3.7 and the highest at or above
    42.1 (arithmetic), equally spaced by 1, 2, 2.5 or 5 times a power of ten (common practice)."""
    x = np.linspace(0, 1, 30)
    lines = plain(line_chart([("s", x, 3.7 + 38.4 * x ** 2, "red")], 60, 14))
    values = [float(s) for _, s in y_labels(lines)][::-1]
    assert 3 <= len(values) <= 5
    assert values[0] <= 3.7 and values[-1] >= 42.1
    steps = np.diff(values)
    assert np.allclose(steps, steps[0])
    mantissa = steps[0] / 10 ** math.floor(math.log10(steps[0]))
    assert any(math.isclose(mantissa, m) for m in (1, 2, 2.5, 5))


def test_x_labels_inside_the_data_and_increasing():
    """x in [0, 0.3]: 3 to 5 x labels, increasing, inside the data range, one per tick mark
    (arithmetic)."""
    x = np.linspace(0, 0.3, 40)
    lines = plain(line_chart([("s", x, x, "red")], 70, 10))
    values = [float(s) for s in x_labels(lines)]
    axis_row, _, _ = layout(lines)
    assert 3 <= len(values) <= 5
    assert all(a < b for a, b in pairwise(values))
    assert values[0] >= 0 and values[-1] <= 0.3 + 1e-12
    assert lines[axis_row].count("┬") == len(values)


@pytest.mark.parametrize("value,decimals,label", [(0, 0, "0"), (2.5, 1, "2.5"), (1000, 0, "1e3"),
                                                  (150, 0, "150"), (0.001, 3, "1e-3"),
                                                  (-0.0, 2, "0"), (0.30000000000000004, 1, "0.3"),
                                                  (1500, 0, "1500"), (1.25e-5, 7, "1.25e-5")])
def test_format_tick(value, decimals, label):
    """Compact labels: the shorter of plain and exponent form, plain on ties (examples of the
    brief, arithmetic)."""
    assert format_tick(value, decimals) == label


def test_log_labels_are_powers_of_ten():
    """log_y over data in [0.05, 2000] with zero and negative points (skipped): every label is a
    power of ten, they decrease downwards, and they bracket the data (arithmetic)."""
    x = np.linspace(0, 1, 100)
    y = 0.05 * (2000 / 0.05) ** x
    y[10], y[20] = 0.0, -3.0
    lines = plain(line_chart([("slip", x, y, "yellow")], 60, 16, log_y=True))
    values = [float(s) for _, s in y_labels(lines)]
    exponents = [math.log10(v) for v in values]
    assert all(abs(e - round(e)) < 1e-9 for e in exponents)
    assert all(a > b for a, b in pairwise(values))
    assert values[-1] <= 0.05 and values[0] >= 2000


def test_log_range_within_one_decade_labels_its_ends():
    """log_y with y_min = 2 and y_max = 5 holds no power of ten: the ends are labelled instead,
    at the top and bottom rows (arithmetic)."""
    x = np.linspace(0, 1, 20)
    lines = plain(line_chart([("s", x, 2 + 3 * x, "red")], 40, 8, log_y=True, y_min=2, y_max=5))
    _, _, plot = layout(lines)
    assert y_labels(lines) == [(0, "5"), (len(plot) - 1, "2")]


def test_nan_leaves_a_gap():
    """y = 0.5 on x = 0..10 with NaN at x = 4, 5, 6: dots at the cells of x = 3 and x = 7,
    nothing in the cells strictly between (arithmetic)."""
    x = np.arange(11.0)
    y = np.where(np.isin(x, [4, 5, 6]), np.nan, 0.5)
    lines = plain(line_chart([("gap", x, y, "cyan")], 60, 10))
    _, _, plot = layout(lines)
    w = len(plot[0])
    c3, c7 = dot_cell(3, 0, 10, w), dot_cell(7, 0, 10, w)
    assert any(is_dot(row[c3]) for row in plot) and any(is_dot(row[c7]) for row in plot)
    assert all(row[c] == " " for row in plot for c in range(c3 + 1, c7))


def test_legend_and_y_label_on_the_top_line():
    """The top line starts with the y label and names every series (brief)."""
    x = np.linspace(0, 1, 10)
    names = ["inlet", "outlet", "NH3 slip"]
    text = line_chart([(n, x, x * (i + 1), "red") for i, n in enumerate(names)], 80, 10,
                      y_label="NOx [ppm]")
    top = plain(text)[0]
    assert top.startswith("NOx [ppm]")
    assert all(f"── {n}" in top for n in names)


def test_markers_are_dotted_columns_at_their_x():
    """Markers at x = 0.25 and x = 1 on y = x over [0, 1]: the dotted glyph fills those columns
    wherever no series dot is, and no other column; the line's top-right cell keeps its dots
    (arithmetic)."""
    lines = plain(line_chart(diagonal(), 50, 12, markers=[0.25, 1.0, 7.0]))  # 7: off the axis
    _, _, plot = layout(lines)
    w = len(plot[0])
    expected = {dot_cell(0.25, 0, 1, w), w - 1}
    found = {c for row in plot for c, ch in enumerate(row) if ch == MARKER_GLYPH}
    assert found == expected
    for c in expected:
        assert all(row[c] == MARKER_GLYPH or is_dot(row[c]) for row in plot)
    assert is_dot(plot[0][-1])


def test_last_series_drawn_owns_the_cell():
    """Two series on the same points: every dot cell carries the second series' style (brief)."""
    x = np.linspace(0, 1, 20)
    text = line_chart([("a", x, x, "red"), ("b", x, x, "blue")], 40, 10)
    dots = [i for i, ch in enumerate(text.plain) if is_dot(ch)]
    assert dots
    for i in dots:
        styles = {str(s.style) for s in text.spans if s.start <= i < s.end}
        assert styles == {"blue"}


def test_flat_series_is_one_row_inside_its_labels():
    """y = 3 everywhere: dots in a single plot row, and the labels bracket 3 (arithmetic)."""
    x = np.linspace(0, 10, 30)
    lines = plain(line_chart([("flat", x, np.full_like(x, 3.0), "magenta")], 50, 12))
    _, _, plot = layout(lines)
    rows = {r for r, row in enumerate(plot) if any(is_dot(ch) for ch in row)}
    assert len(rows) == 1
    values = [float(s) for _, s in y_labels(lines)]
    assert min(values) < 3 < max(values)


@pytest.mark.parametrize("series", [[], [("none", [], [], "red")],
                                    [("all nan", [0.0, 1.0], [np.nan, np.inf], "red")]])
def test_empty_chart_says_no_data(series):
    """No finite point: the frame is drawn with "no data" in the plot area (brief)."""
    lines = plain(line_chart(series, 50, 10, x_label="t [s]"))
    assert len(lines) == 10 and all(len(line) == 50 for line in lines)
    _, _, plot = layout(lines)
    assert any("no data" in row for row in plot)


def test_fixed_y_max_clips_a_huge_segment():
    """y from 0 to 1e12 over x in [0, 1] with y_max = 1: the segment leaves the plot at x = 1e-12,
    so only the first column holds dots (arithmetic); it is clipped, not drawn dot by dot."""
    t0 = time.perf_counter()
    lines = plain(line_chart([("spike", [0.0, 1.0], [0.0, 1e12], "red")], 50, 10, y_max=1.0))
    assert time.perf_counter() - t0 < 0.5
    _, _, plot = layout(lines)
    cols = {c for row in plot for c, ch in enumerate(row) if is_dot(ch)}
    assert cols == {0}
    assert y_labels(lines)[0][1] == "1"


def test_points_beyond_a_fixed_end_are_not_drawn():
    """Segments just above y_max = 1 (y from 1.05 to 1.1, and level at 1.2) light no dot, while a
    series inside the range (y = 0.2) does, in the row of its value (arithmetic: rows are 4 dots
    high and count downward from y_max)."""
    x = np.array([0.0, 1.0])
    series = [("above", x, [1.05, 1.1], "red"), ("level above", x, [1.2, 1.2], "red"),
              ("inside", x, [0.2, 0.2], "blue")]
    lines = plain(line_chart(series, 50, 10, y_min=0.0, y_max=1.0))
    _, _, plot = layout(lines)
    rows = {r for r, row in enumerate(plot) if any(is_dot(ch) for ch in row)}
    n_dots = 4 * len(plot)
    assert rows == {round((1.0 - 0.2) * (n_dots - 1)) // 4}


def test_mismatched_series_is_a_value_error():
    """x and y of different lengths are a caller's mistake, named in a ValueError (brief)."""
    with pytest.raises(ValueError, match="bad"):
        line_chart([("bad", [0, 1, 2], [0, 1], "red")], 40, 10)


def test_six_series_of_200_points_render_quickly():
    """6 series x 200 points into 100 x 20 cells: median of 5 renders under 20 ms (the brief's
    requirement; the measured time is about a tenth of it)."""
    rng = np.random.default_rng(0)
    x = np.linspace(0, 100, 200)
    series = [(f"s{i}", x, rng.normal(size=200).cumsum(), style)
              for i, style in enumerate(["red", "green", "blue", "cyan", "magenta", "yellow"])]
    times = []
    for _ in range(5):
        t0 = time.perf_counter()
        line_chart(series, 100, 20, x_label="t [s]", y_label="T [C]", markers=[30.0, 60.0])
        times.append(time.perf_counter() - t0)
    assert np.median(times) < 0.020
