"""The change between two passes, cell by cell, on two renders of one surface.

The second render is the first surface with contacts added in a known region (cell B2
of the 2 in card: x and y 30-46 mm); the truth is how the surface was made.  The
per-cell change the report shows must put the gain there and nowhere else.
"""

from __future__ import annotations

import pytest
from _hand_results import make_summary, with_added_contacts

from printcheck.frame import Frame
from printcheck.layout import card_layout
from printcheck.records import CellSummary
from printcheck.report.html import render_report


def _measure(field):  # type: ignore[no-untyped-def]
    from printcheck.measure import MeasureConfig, measure
    from printcheck.segment import SegmentConfig, segment
    from printcheck.synth import Scene, render_photo
    from printcheck.synth.truth import layout_masks

    layout = card_layout()
    shot = render_photo(Scene(layout=layout, field=field, camera=None, px_per_mm=10.0), seed=1)
    w = layout.window
    frame = Frame(px_per_mm=10.0, origin_mm=(w.x_mm, w.y_mm), shape=shot.image.shape[:2], window=w)
    visible, analysed = layout_masks(layout, frame)
    seg = segment(
        shot.image, visible=visible, analysed=analysed, config=SegmentConfig(px_per_mm=10.0)
    )
    return measure(seg.mask, frame=frame, analysed=analysed, config=MeasureConfig(cell_mm=25.4))


@pytest.fixture(scope="module")
def two_passes():  # type: ignore[no-untyped-def]
    from printcheck.synth.job import surface_at_density

    layout = card_layout()
    field = surface_at_density(layout, 10, seed=5, px_per_mm=14.0, film_um=1.5)
    before = _measure(field)
    after = _measure(with_added_contacts(field))
    return before, after


def _cells(m) -> tuple[CellSummary, ...]:  # type: ignore[no-untyped-def]
    return tuple(
        CellSummary(
            c.row,
            c.col,
            c.complete,
            c.spot_count,
            round(c.density, 2),
            round(c.bearing_percent, 2),
            1.0,
        )
        for c in m.cells
    )


def test_the_gain_is_where_the_contacts_were_added(two_passes) -> None:  # type: ignore[no-untyped-def]
    before, after = two_passes
    gain = {
        (a.row, a.col): a.spot_count - b.spot_count
        for a, b in zip(after.cells, before.cells, strict=True)
    }
    assert gain[(1, 1)] >= 9  # 12 added; a few may merge with contacts already there
    assert all(abs(v) <= 2 for k, v in gain.items() if k != (1, 1))
    s0 = make_summary(1, cells=_cells(before))
    s1 = make_summary(2, cells=_cells(after))
    page = render_report(surface="bed", spec=None, passes=[(s0, None), (s1, None)])
    section = page[page.index('id="pass-2"') : page.index('id="pass-1"')]
    assert "Change since the pass before" in section
    change = section[section.index("Change since the pass before: density") :]
    d = after.cells[3].density - before.cells[3].density
    assert f"{d:+.1f} points" in change
