"""Every number the report shows carries its unit; grids that fit their window.

The unit words are the trade's (points per square inch, per 25 mm square, bearing in
percent, lengths in the job's unit); the check is on the report's text as a reader sees
it (HTML tags stripped), in the parts that hold figures.
"""

from __future__ import annotations

import dataclasses
import re
from html.parser import HTMLParser

import pytest
from _hand_results import make_result

from printcheck.guidance import BarePatch, HighArea
from printcheck.judge import judge
from printcheck.report.html import render_report
from printcheck.serde import summarize
from printcheck.spec import find_spec

# what may follow a number: a unit, or a count's noun (in a figure box, the caption
# under the number)
_UNIT = re.compile(
    r"\s*(\|\s*)?(%|in\b|mm\b|points?\b|spots?\b|cells?\b|px/mm|of \d+ cells?\b|part cells?\b)"
)
_NUMBER = re.compile(r"(?<![\w.\-–])\d+(?:\.\d+)?(?![\w.])")
# the parts of a pass that hold figures
_FIGURE_PARTS = {"fig", "checks", "advice", "heat", "legend"}


class _Texts(HTMLParser):
    """Text inside elements whose class is one of ``_FIGURE_PARTS``."""

    def __init__(self) -> None:
        super().__init__()
        self.depth = 0
        self.stack: list[bool] = []
        self.texts: list[str] = []
        self.current: list[str] = []

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        classes = set((dict(attrs).get("class") or "").split())
        hit = bool(classes & _FIGURE_PARTS)
        if tag in ("br", "img", "rect", "circle", "polygon", "input"):
            return
        self.stack.append(hit)
        self.depth += hit

    def handle_endtag(self, tag: str) -> None:
        if tag in ("br", "img", "rect", "circle", "polygon", "input") or not self.stack:
            return
        if tag in ("td", "th", "li", "div", "caption"):
            self.current.append(" | ")
        hit = self.stack.pop()
        self.depth -= hit
        if hit and self.depth == 0:
            self.texts.append("".join(self.current))
            self.current = []

    def handle_data(self, data: str) -> None:
        if self.depth:
            self.current.append(data)


def _unitless_numbers(text: str) -> list[str]:
    bad = []
    for m in _NUMBER.finditer(text):
        after = text[m.end() :]
        # a range's first end takes the unit of its second ("12-15 %", "20% to 60%")
        if re.match(r"\s*[–-]\s*\d", after) or re.match(r"% to \d", after):
            continue
        if not _UNIT.match(after):
            bad.append(f"{m.group()!r} in {text[max(0, m.start() - 40) : m.end() + 25]!r}")
    return bad


@pytest.mark.parametrize(
    ("unit", "cell", "spec_name"),
    [("in", 1.0, "slideway-precision"), ("mm", 25.0, "plate-grade-0")],
)
def test_every_number_in_the_report_carries_its_unit(unit, cell, spec_name) -> None:
    r = make_result(
        discs_mm=tuple((5.0 + 9.0 * i, 6.0 + 7.0 * (i % 5), 1.5) for i in range(5)),
        unit=unit,
        cell=cell,
        cell_mm=25.4 if unit == "in" else 25.0,
        high=(HighArea(35.0, 12.0, 8.0, "why", "heavy bearing"),),  # type: ignore[arg-type]
        bare=(BarePatch(14.0, 25.0, 40.0),),
    )
    spec = find_spec(spec_name)
    r = dataclasses.replace(r, verdict=judge(r.measurement, spec, unit=unit))
    summary = summarize(r)
    page = render_report(
        surface="bed-front-way", spec=spec, passes=[(summary, b"\x89PNG\r\n\x1a\n")]
    )
    parser = _Texts()
    parser.feed(page[page.index('<section class="pass"') :])
    texts = parser.texts
    assert len(texts) >= 6  # figures, checks, advice, legend, two maps
    bad = [b for t in texts for b in _unitless_numbers(t)]
    assert not bad, "numbers without a unit:\n" + "\n".join(bad)
    joined = " ".join(texts)
    assert " pts" not in joined and "_" not in joined  # no abbreviations, no snake_case


@pytest.mark.parametrize(
    ("cell_mm", "cells", "strip"),
    [(25.0, 3, 0.8), (25.4, 2, None), (20.0, 3, None), (12.0, 5, 2.8)],
)
def test_two_inch_card_in_millimetres_keeps_the_grid_and_hides_edge_strips(
    cell_mm, cells, strip
) -> None:
    # the 2 in card's window is 50.8 mm (1 in = 25.4 mm exactly); counted in 25 mm cells
    # the grid (DESIGN: side `cell` from the top-left) leaves a third row and column of
    # 0.8 mm.  They stay in the result as incomplete cells (other scripts read cells of
    # side `cell`); the terminal leaves out a strip under a quarter cell and says so
    # (common practice: a count over a sliver means nothing)
    import math
    from dataclasses import replace

    import numpy as np
    from _hand_results import make_summary

    from printcheck.frame import Frame
    from printcheck.layout import card_layout
    from printcheck.measure import MeasureConfig, measure
    from printcheck.records import CellSummary, WindowSummary
    from printcheck.summary import summary_text

    w = card_layout().window
    assert w.width_mm == pytest.approx(50.8)
    s = 8.0
    n = int(round(50.8 * s))
    frame = Frame(px_per_mm=s, origin_mm=(w.x_mm, w.y_mm), shape=(n, n), window=w)
    yy, xx = np.mgrid[:n, :n]
    mask = ((yy % 40) < 8) & ((xx % 40) < 8)  # a 5 mm grid of 1 mm squares
    analysed = np.ones((n, n), bool)
    m = measure(mask, frame=frame, analysed=analysed, config=MeasureConfig(cell_mm=cell_mm))
    assert (m.rows, m.cols) == (cells, cells)
    for c in m.cells:  # every cell but the last row and column has side `cell`
        if c.col < cells - 1:
            assert c.width_mm == pytest.approx(cell_mm)
        if c.row < cells - 1:
            assert c.height_mm == pytest.approx(cell_mm)
    # the cells tile the window and count every spot once
    # (to the pixel: 406 px at 8 px/mm cover 50.75 of the 50.8 mm)
    assert sum(c.area_mm2 for c in m.cells) == pytest.approx(50.75**2, rel=1e-6)
    assert sum(c.spot_count for c in m.cells) == m.spot_count == math.ceil(n / 40) ** 2
    assert all(c.complete == (c.width_mm >= cell_mm and c.height_mm >= cell_mm) for c in m.cells)

    summary = replace(
        make_summary(unit="mm", cell=cell_mm),
        window=WindowSummary(50.8, 50.8, 50.8**2),
        cells=tuple(
            CellSummary(c.row, c.col, c.complete, c.spot_count, 1.0, 4.0, c.area_mm2)
            for c in m.cells
        ),
    )
    text = summary_text(summary)
    grid = [line for line in text.splitlines() if line.startswith("    ") and "%" in line]
    shown = cells - (strip is not None)
    assert len(grid) == shown and all(line.count("%") == shown for line in grid)
    assert ("edge strips" in text) == (strip is not None)
    if strip is not None:
        assert f"{strip:.2g} mm wide" in text


def test_version_is_printed() -> None:
    import subprocess
    import sys

    from printcheck import __version__

    out = subprocess.run(
        [sys.executable, "-m", "printcheck", "--version"], capture_output=True, text=True
    )
    assert out.returncode == 0 and out.stdout.strip() == f"printcheck {__version__}"
