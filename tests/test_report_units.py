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
