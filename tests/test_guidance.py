"""Tests of the guidance list (printcheck.guidance.advise) and its wording.

The positions are plain geometry on hand-built places; the rendered print's high and low
areas are known from how its surface was made (a plateau raised into the compound film,
a disc sunk below it), so the list must name those places first, within the stated
distances.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from printcheck.frame import Frame
from printcheck.guidance import (
    MAX_PLACES,
    MAX_WHEN_MET,
    BarePatch,
    Guidance,
    HighArea,
    advise,
    cell_label,
)
from printcheck.layout import Window, card_layout
from printcheck.wording import advice_line

WINDOW = Window(0.0, 0.0, 50.8, 50.8)


def test_cell_labels_run_like_a_spreadsheet() -> None:
    assert cell_label(0, 0) == "A1"
    assert cell_label(1, 1) == "B2"
    assert cell_label(4, 25) == "Z5"
    assert cell_label(0, 26) == "AA1"


def test_positions_from_the_nearer_edges_and_the_cell() -> None:
    g = Guidance(high=(HighArea(12.0, 30.0, 6.0, "why", "heavy bearing"),))
    (a,) = advise(g, window=WINDOW, cell_mm=25.4, meets=False)
    # x 12 mm: nearer the left edge; y 30 mm of 50.8: 20.8 mm from the bottom
    assert (a.cell, a.edge_x, a.from_x, a.edge_y, a.from_y) == ("A2", "left", 12.0, "bottom", 20.8)
    assert (a.x, a.y) == (12.0, 30.0)
    assert advice_line(a, "mm") == (
        "1. heavy bearing, cell A2, 12 mm from the left edge and 21 mm from the bottom edge "
        "of the window: break up"
    )
    # the window's own origin in the layout frame is taken off; inches to the hundredth
    shifted = Window(100.0, -20.0, 50.8, 50.8)
    g2 = Guidance(high=(HighArea(140.0, -15.0, 2.0, "why", "oversized spot"),))
    (b,) = advise(g2, window=shifted, cell_mm=25.4, meets=None, to_unit=1 / 25.4, digits=2)
    assert (b.cell, b.edge_x, b.edge_y) == ("B1", "right", "top")
    assert b.from_x == pytest.approx(10.8 / 25.4, abs=0.005)
    assert b.from_y == pytest.approx(5.0 / 25.4, abs=0.005)
    assert advice_line(b, "in").endswith("0.20 in from the top edge of the window: split it")


def test_ranked_scrape_places_first_no_overlaps_and_scaled_to_the_print() -> None:
    high = tuple(
        HighArea(5.0 + 4.0 * k, 5.0 + 4.0 * k, 1.0 + 0.1 * k, "why", "oversized spot")
        for k in range(10)
    ) + (
        HighArea(40.0, 10.0, 9.0, "why", "heavy bearing"),
        HighArea(41.0, 11.0, 2.0, "why", "oversized spot"),  # inside the heavy area
    )
    bare = (BarePatch(20.0, 20.0, 40.0), BarePatch(12.0, 45.0, 45.0), BarePatch(11.0, 5, 45))
    g = Guidance(high=high, bare=bare)
    failing = advise(g, window=WINDOW, cell_mm=25.4, meets=False)
    assert len(failing) == MAX_PLACES
    assert [a.rank for a in failing] == list(range(1, MAX_PLACES + 1))
    assert failing[0].kind == "heavy bearing"
    assert [a.kind for a in failing[-2:]] == ["bare patch", "bare patch"]
    assert failing[-2].size == 20.0  # the largest bare patch first
    for i, a in enumerate(failing):
        for b in failing[i + 1 :]:
            assert math.hypot(a.x - b.x, a.y - b.y) >= 0.5 * (a.size + b.size) - 0.1
    met = advise(g, window=WINDOW, cell_mm=25.4, meets=True)
    assert len(met) <= MAX_WHEN_MET
    assert met[0].kind == "heavy bearing"
    assert advise(Guidance(), window=WINDOW, cell_mm=25.4, meets=False) == ()


@pytest.fixture(scope="module")
def rendered_print():  # type: ignore[no-untyped-def]
    """A 14 ppi print with a plateau at (12, 38) mm and a sunk disc at (36, 14) mm."""
    from printcheck.measure import MeasureConfig, measure
    from printcheck.segment import SegmentConfig, segment
    from printcheck.synth import Scene, render_photo
    from printcheck.synth.job import surface_at_density
    from printcheck.synth.truth import layout_masks

    layout = card_layout()
    field = surface_at_density(layout, 14, seed=3, px_per_mm=14.0, film_um=1.5)
    h = field.height_um
    y = field.origin_mm[1] + (np.arange(h.shape[0]) + 0.5) / field.px_per_mm
    x = field.origin_mm[0] + (np.arange(h.shape[1]) + 0.5) / field.px_per_mm
    xx, yy = np.meshgrid(x, y)
    top = float(h.max())
    plateau = (xx - 12.0) ** 2 + (yy - 38.0) ** 2 <= 6.0**2
    h[plateau] = np.maximum(h[plateau], top - 0.6)  # inside the 1.5 µm film: all bears
    sunk = (xx - 36.0) ** 2 + (yy - 14.0) ** 2 <= 11.0**2
    h[sunk] -= 6.0  # far below the film: nothing bears
    scene = Scene(layout=layout, field=field, camera=None, px_per_mm=10.0)
    shot = render_photo(scene, seed=1)
    w = layout.window
    frame = Frame(px_per_mm=10.0, origin_mm=(w.x_mm, w.y_mm), shape=shot.image.shape[:2], window=w)
    visible, analysed = layout_masks(layout, frame)
    seg = segment(
        shot.image, visible=visible, analysed=analysed, config=SegmentConfig(px_per_mm=10.0)
    )
    m = measure(
        seg.mask,
        frame=frame,
        analysed=analysed,
        config=MeasureConfig(cell_mm=25.4, max_bare_mm=19.0),
    )
    return m, frame


def test_rendered_print_names_its_high_and_low_places(rendered_print) -> None:  # type: ignore[no-untyped-def]
    m, frame = rendered_print
    advice = advise(m.guidance, window=frame.window, cell_mm=25.4, meets=False)
    first = advice[0]
    # the plateau (6 mm radius) is named first, its centre within 4 mm of the made one
    assert first.kind == "heavy bearing" and first.cell == "A2"
    assert math.hypot(first.x - 12.0, first.y - 38.0) < 4.0
    # the sunk disc (22 mm across; 19 mm allowed) is the bare patch listed, within 3 mm
    bare = [a for a in advice if a.kind == "bare patch"]
    assert bare and bare[0].cell == "B1"
    assert math.hypot(bare[0].x - 36.0, bare[0].y - 14.0) < 3.0
    # had the print met its spec, only the places that matter most
    met = advise(m.guidance, window=frame.window, cell_mm=25.4, meets=True)
    assert len(met) <= MAX_WHEN_MET and met[0] == first


def test_overlay_gives_each_kind_its_own_mark_and_the_report_the_list() -> None:
    from _hand_results import make_result

    from printcheck.report.html import render_report
    from printcheck.report.overlay import COLOURS, OverlayStyle, draw_overlay
    from printcheck.serde import summarize

    r = make_result(
        discs_mm=((10.0, 10.0, 2.0),),
        high=(
            HighArea(35.0, 12.0, 8.0, "why", "heavy bearing"),  # type: ignore[arg-type]
            HighArea(12.0, 38.0, 3.0, "why", "oversized spot"),  # type: ignore[arg-type]
        ),
        bare=(BarePatch(12.0, 38.0, 12.0),),
    )
    out = draw_overlay(r, style=OverlayStyle(min_side=720))
    s = 720 / r.rectified.image.shape[0]  # drawn px per rectified px; 4 px/mm

    def near(key: str, x_mm: float, y_mm: float, radius_mm: float) -> float:
        ys, xs = np.nonzero(np.all(out == COLOURS[key], axis=2))
        d = np.hypot(xs - x_mm * 4 * s, ys - y_mm * 4 * s)
        return float(np.mean(d < radius_mm * 4 * s)) if d.size else 0.0

    # each mark in its own colour where its place is; the bare patch overlapping the
    # oversized spot ranked before it is left out, so no cyan is drawn
    assert near("high", 35.0, 12.0, 5.0) > 0.95
    assert near("oversized", 12.0, 38.0, 4.0) > 0.95
    assert not np.all(out == COLOURS["bare"], axis=2).any()
    # no key burnt into the image: it is as tall as the window
    assert out.shape[0] == 720
    summary = summarize(r)
    assert summary.advice is not None and [a.kind for a in summary.advice] == [
        "heavy bearing",
        "oversized spot",
    ]
    png = b"\x89PNG\r\n\x1a\n"  # stands for the overlay's bytes
    page = render_report(surface="bed-front-way", spec=None, passes=[(summary, png)])
    assert "Where to scrape next" in page
    assert "heavy bearing, cell B1, 0.62 in from the right edge and 0.47 in from the top" in page
    assert "oversized spot: split it" in page  # the key, beside the image
