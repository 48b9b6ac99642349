"""SVG snapshots of the terminal UI at a fixed size: the main screen of the demo genset and
its compliance view after a what-if that fails a limit.

The snapshots are the SVG files Textual exports (``App.export_screenshot``), kept in
``tests/snapshots/``; open one in a browser to see the screen. The test compares the *text
grid* the SVG draws (every character at its row and column), not the SVG bytes: colours, fonts
and markup change between Textual releases, the layout and the numbers must not. To accept a
changed screen after checking it: ``AFTERTREAT_UPDATE_SNAPSHOTS=1 python -m pytest
tests/test_tui_snapshots.py`` (then look at the new SVGs before committing them).
"""
import asyncio
import html
import os
import re
import shutil
from pathlib import Path


from test_tui import _settle
from tui.app import CycleApp

ROOT = Path(__file__).resolve().parents[1]
SNAPSHOTS = Path(__file__).parent / "snapshots"
UPDATE = os.environ.get("AFTERTREAT_UPDATE_SNAPSHOTS") == "1"

_TEXT = re.compile(r'<text class="([^"]+)" x="([\d.]+)" y="[\d.]+" textLength="[\d.]+" '
                   r'clip-path="url\(#[\w-]+-line-(\d+)\)">([^<]*)</text>')
_FILL = re.compile(r"\.([\w-]+) \{ fill: (#[0-9a-f]{6})")


def segments(svg: str) -> list[tuple[int, int, str, str]]:
    """(row, column, text, fill colour) of every text run the SVG draws."""
    fills = dict(_FILL.findall(svg))
    runs = _TEXT.findall(svg)
    # one column is the width of a character: rich draws 0.61 x the 20 px font
    char_w = 12.2
    return [(int(line), round(float(x) / char_w), html.unescape(t).replace("\xa0", " "),
             fills.get(cls, "")) for cls, x, line, t in runs]


def text_grid(svg: str) -> list[str]:
    """The screen as lines of text (trailing blanks dropped)."""
    rows: dict[int, list[str]] = {}
    for line, col, text, _ in segments(svg):
        row = rows.setdefault(line, [])
        if len(row) < col + len(text):
            row.extend(" " * (col + len(text) - len(row)))
        row[col:col + len(text)] = list(text)
    n = max(rows) + 1 if rows else 0
    return ["".join(rows.get(i, [])).rstrip() for i in range(n)]


def _shoot(tmp_path, monkeypatch, size, steps=None) -> str:
    """The SVG of the demo genset opened at ``size`` (after ``steps(app, pilot)``)."""
    shutil.copy(ROOT / "cases" / "genset_d2.toml", tmp_path / "genset_d2.toml")
    monkeypatch.chdir(tmp_path)              # the title shows the path as given

    async def go():
        app = CycleApp("genset_d2.toml")
        async with app.run_test(size=size) as pilot:
            await _settle(app, pilot)
            if steps is not None:
                await steps(app, pilot)
                await _settle(app, pilot)
            return app.export_screenshot()
    return asyncio.run(go())


def _check(name: str, svg: str) -> None:
    path = SNAPSHOTS / name
    if UPDATE:
        path.write_text(svg)
        return
    assert path.is_file(), (f"no snapshot {path}: make it with AFTERTREAT_UPDATE_SNAPSHOTS=1 "
                            "and look at it before committing")
    want, got = text_grid(path.read_text()), text_grid(svg)
    diff = [f"row {i}: want {w!r}\n        got  {g!r}" for i, (w, g) in
            enumerate(zip(want, got)) if w != g]
    assert len(want) == len(got) and not diff, "screen differs from " + name + ":\n" + \
        "\n".join(diff[:6])


def test_main_screen_snapshot(tmp_path, monkeypatch):
    """The main screen at 160 x 48: title, caution, mode table, cycle totals, compliance
    bars, the profiles of the first mode, footer."""
    svg = _shoot(tmp_path, monkeypatch, (160, 48))
    grid = text_grid(svg)
    assert any("NH3 is toxic" in r for r in grid) and any("PASSES" in r for r in grid)
    _check("main_160x48.svg", svg)


def test_compliance_view_snapshot(tmp_path, monkeypatch):
    """The compliance view after a what-if that shortens both SCR bricks to 30 mm (the cycle
    NOx limit and two per-mode caps then fail): the failing rows are drawn red, the verdict says DOES NOT PASS."""
    async def shorten(app, pilot):
        s = app.session
        s.apply(s.brick_assignments("SCR 1", length_mm=30)
                + s.brick_assignments("SCR 2", length_mm=30))
        app.compute()
    svg = _shoot(tmp_path, monkeypatch, (120, 40), shorten)
    grid = text_grid(svg)
    assert any("DOES NOT PASS" in r for r in grid)
    bars = {f for _, _, t, f in segments(svg) if "█" in t}
    assert len(bars) >= 2                 # bars in more than one colour (pass / fail)
    _check("compliance_120x40.svg", svg)
