"""Tests of printcheck.measure on exact masks.

Reference libraries: scipy.ndimage.label / center_of_mass / sum_labels and
skimage.measure.regionprops for the spots; plane geometry for the bare patch.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays
from scipy import ndimage, stats
from skimage.measure import regionprops

from printcheck.errors import OptionError
from printcheck.frame import Frame
from printcheck.layout import Window
from printcheck.measure import MeasureConfig, measure
from printcheck.spots import label_spots

EIGHT = np.ones((3, 3), bool)


def _frame(shape, s=10.0, origin=(0.0, 0.0), window=None):
    if window is None:
        window = Window(origin[0], origin[1], shape[1] / s, shape[0] / s)
    return Frame(px_per_mm=s, origin_mm=origin, shape=shape, window=window)


def _disc(shape, cy, cx, r):
    yy, xx = np.mgrid[: shape[0], : shape[1]]
    return (yy - cy) ** 2 + (xx - cx) ** 2 <= r * r


def _window_mask(frame):
    m = np.zeros(frame.shape, bool)
    m[frame.window_slices()] = True
    return m


# ---------------------------------------------------------------- exact tiny cases


def test_tiny_hand_built_counts_and_centroids():
    # Two 2x2 squares and one single pixel at 1 px/mm, window = whole 6x8 image.
    mask = np.zeros((6, 8), bool)
    mask[0:2, 0:2] = True  # centroid pixel (0.5, 0.5) -> (x, y) = (1.0, 1.0) mm
    mask[3:5, 5:7] = True  # centroid pixel (3.5, 5.5) -> (6.0, 4.0) mm
    mask[5, 0] = True  # 1 mm² speck (kept at min 0.5 mm²)
    frame = _frame(mask.shape, s=1.0)
    m = measure(
        mask,
        frame=frame,
        analysed=_window_mask(frame),
        config=MeasureConfig(cell_mm=4.0, min_spot_mm2=0.5),
    )
    assert m.spot_count == 3
    assert m.area_mm2 == 48.0
    np.testing.assert_allclose(m.spots.area_mm2, [4.0, 4.0, 1.0])
    np.testing.assert_allclose(m.spots.x_mm, [1.0, 6.0, 0.5])
    np.testing.assert_allclose(m.spots.y_mm, [1.0, 4.0, 5.5])
    assert m.bearing_percent == pytest.approx(100 * 9 / 48)
    # cells of 4 mm: 2 rows (4 + 2 mm) x 2 cols; row 1 is cut by the window edge
    assert (m.rows, m.cols) == (2, 2)
    by = {(c.row, c.col): c for c in m.cells}
    assert by[0, 0].spot_count == 1 and by[0, 0].complete
    assert by[1, 1].spot_count == 1 and not by[1, 1].complete
    assert by[1, 0].spot_count == 1 and by[1, 0].area_mm2 == 8.0
    # density normalised by the real area: 1 spot * 16 / 8
    assert by[1, 0].density == pytest.approx(2.0)
    assert m.density == pytest.approx(3 * 16 / 48)
    assert sum(c.spot_count for c in m.cells) == m.spot_count


def test_min_spot_area_drops_specks_and_their_bearing():
    mask = np.zeros((20, 20), bool)
    mask[2:4, 2:4] = True  # 4 px = 0.04 mm² at 10 px/mm: a speck at 0.1 mm²
    mask[10:14, 10:14] = True  # 16 px = 0.16 mm²
    frame = _frame(mask.shape)
    m = measure(mask, frame=frame, analysed=_window_mask(frame))
    assert m.spot_count == 1
    assert m.spots.area_mm2[0] == pytest.approx(0.16)
    assert m.bearing_percent == pytest.approx(100 * 16 / 400)
    assert int((m.labels > 0).sum()) == 16


def test_empty_and_full_masks():
    frame = _frame((30, 40))
    an = _window_mask(frame)
    empty = measure(np.zeros((30, 40), bool), frame=frame, analysed=an)
    assert empty.spot_count == 0 and empty.bearing_percent == 0.0
    # no spot: the largest bare circle is the inscribed circle of the 3 x 4 mm window
    assert empty.largest_bare.diameter_mm == pytest.approx(3.0, abs=0.11)
    assert empty.size_stats["median_area_mm2"] == 0.0
    full = measure(np.ones((30, 40), bool), frame=frame, analysed=an)
    assert full.spot_count == 1 and full.bearing_percent == 100.0
    assert full.largest_bare.diameter_mm == 0.0


# ---------------------------------------------------------------- reference libraries


@settings(max_examples=60, deadline=None)
@given(arrays(bool, st.tuples(st.integers(1, 40), st.integers(1, 40))))
def test_labelling_matches_scipy_and_skimage(mask):
    """Without splitting and speck removal, spots are scipy's 8-connected components."""
    labels, n, _, _ = label_spots(mask, px_per_mm=1.0, min_spot_mm2=0.0)
    ref, n_ref = ndimage.label(mask, structure=EIGHT)
    assert n == n_ref
    # scipy numbers components in raster order of their first pixel, as we do
    np.testing.assert_array_equal(labels, ref)
    frame = _frame(mask.shape, s=1.0)
    m = measure(
        mask,
        frame=frame,
        analysed=np.ones(mask.shape, bool),
        config=MeasureConfig(min_spot_mm2=0.0, cell_mm=7.0),
    )
    assert m.spot_count == n_ref
    if n_ref:
        com = np.array(ndimage.center_of_mass(mask, ref, range(1, n_ref + 1)))
        # pixel (r, c) centre is at (c + 0.5, r + 0.5) mm at 1 px/mm, origin 0
        np.testing.assert_allclose(m.spots.y_mm, com[:, 0] + 0.5, atol=1e-9)
        np.testing.assert_allclose(m.spots.x_mm, com[:, 1] + 0.5, atol=1e-9)
        props = regionprops(ref)
        np.testing.assert_allclose(m.spots.area_mm2, [p.area for p in props])
        np.testing.assert_allclose(
            m.spots.diameter_mm, [p.equivalent_diameter_area for p in props], rtol=1e-9
        )
        assert m.bearing_percent == pytest.approx(100 * mask.mean())
        assert sum(c.spot_count for c in m.cells) == n_ref


@settings(max_examples=30, deadline=None)
@given(
    arrays(bool, st.tuples(st.integers(5, 40), st.integers(5, 40))),
    st.floats(0.5, 6.0),
)
def test_speck_removal_matches_scipy_sizes(mask, min_area):
    labels, n, _, _ = label_spots(mask, px_per_mm=1.0, min_spot_mm2=min_area)
    ref, n_ref = ndimage.label(mask, structure=EIGHT)
    sizes = ndimage.sum_labels(mask, ref, range(1, n_ref + 1)) if n_ref else np.array([])
    assert n == int(np.sum(sizes >= min_area))
    assert int((labels > 0).sum()) == int(sizes[sizes >= min_area].sum())


def test_counting_by_centroid_matches_scipy_on_random_discs():
    rng = np.random.default_rng(7)
    shape = (300, 300)
    mask = np.zeros(shape, bool)
    for _ in range(60):
        mask |= _disc(shape, *rng.uniform(-5, 305, 2), rng.uniform(2, 8))
    # window inset by 5 mm (50 px) in a frame with visible margin around it
    s = 10.0
    frame = _frame(shape, s=s, origin=(-5.0, -5.0), window=Window(0.0, 0.0, 20.0, 20.0))
    an = _window_mask(frame)
    m = measure(
        mask,
        frame=frame,
        analysed=an,
        config=MeasureConfig(cell_mm=10.0, min_spot_mm2=0.0),
    )
    ref, n_ref = ndimage.label(mask, structure=EIGHT)
    com = np.array(ndimage.center_of_mass(mask, ref, range(1, n_ref + 1)))
    x = -5.0 + (com[:, 1] + 0.5) / s
    y = -5.0 + (com[:, 0] + 0.5) / s
    inside = (x >= 0) & (x < 20) & (y >= 0) & (y < 20)
    assert m.spot_count == int(inside.sum())
    # spots are measured whole past the window edge
    assert len(m.spots) == n_ref
    ref_cells = np.bincount(
        (np.floor(y[inside] / 10) * 2 + np.floor(x[inside] / 10)).astype(int), minlength=4
    )
    got = [c.spot_count for c in m.cells]
    np.testing.assert_array_equal(got, ref_cells)
    assert all(c.complete for c in m.cells)
    assert m.bearing_percent == pytest.approx(100 * mask[an].mean())


# ---------------------------------------------------------------- bare patch


@pytest.mark.parametrize("spot_r_px", [0, 10, 30])
def test_largest_bare_one_spot_in_square_window(spot_r_px):
    """One spot of diameter a at the centre of a square window of side L.

    Plane geometry: the largest circle sits in a corner, touching two sides and the
    spot, so sqrt(2) (L/2 - r) = r + a/2, i.e. r = (sqrt(2) L/2 - a/2) / (1 + sqrt(2)).
    """
    s = 10.0
    n = 400  # L = 40 mm
    frame = _frame((n, n), s=s)
    mask = _disc((n, n), 199.5, 199.5, spot_r_px) if spot_r_px else np.zeros((n, n), bool)
    if not spot_r_px:
        mask[199:201, 199:201] = True  # a 0.2 mm square spot, a ~ 0.2 mm
    a = 2 * math.sqrt(mask.sum() / math.pi) / s
    L = n / s
    r = (math.sqrt(2) * L / 2 - a / 2) / (1 + math.sqrt(2))
    m = measure(
        mask, frame=frame, analysed=_window_mask(frame), config=MeasureConfig(min_spot_mm2=0.01)
    )
    assert m.spot_count == 1
    assert m.largest_bare.diameter_mm == pytest.approx(2 * r, abs=2.5 / s)
    # the circle is in a corner
    cx, cy = m.largest_bare.x_mm, m.largest_bare.y_mm
    assert min(cx, L - cx) == pytest.approx(r, abs=1.5 / s)
    assert min(cy, L - cy) == pytest.approx(r, abs=1.5 / s)


def test_bare_circle_stays_out_of_exclusions():
    s = 10.0
    frame = _frame((100, 300), s=s)
    an = _window_mask(frame)
    mask = np.zeros((100, 300), bool)
    full = measure(mask, frame=frame, analysed=an)
    assert full.largest_bare.diameter_mm == pytest.approx(10.0, abs=0.11)
    an2 = an.copy()
    an2[40:60, :] = False  # a groove across the window: two 4 mm strips remain
    grooved = measure(mask, frame=frame, analysed=an2)
    assert grooved.largest_bare.diameter_mm == pytest.approx(4.0, abs=0.11)
    assert not any(c.complete for c in grooved.cells)


# ---------------------------------------------------------------- cells and window


def test_exclusion_makes_cell_incomplete_and_normalises_density():
    s = 4.0
    frame = _frame((200, 200), s=s)  # 50 x 50 mm window, 25 mm cells -> 2 x 2
    an = _window_mask(frame)
    an[0:20, 0:20] = False  # a 5 x 5 mm hole in cell (0, 0)
    mask = np.zeros((200, 200), bool)
    for cy, cx in [(40, 40), (60, 60), (150, 150)]:
        mask |= _disc((200, 200), cy, cx, 3)
    mask |= _disc((200, 200), 8, 8, 3)  # centroid in the excluded hole: not counted
    m = measure(mask, frame=frame, analysed=an, config=MeasureConfig(cell_mm=25.0))
    assert m.spot_count == 3
    assert len(m.spots) == 4 and m.spots.row.tolist().count(-1) == 1
    by = {(c.row, c.col): c for c in m.cells}
    assert not by[0, 0].complete and by[1, 1].complete and by[0, 1].complete
    assert by[0, 0].area_mm2 == pytest.approx(625 - 25)
    assert by[0, 0].density == pytest.approx(2 * 625 / 600)
    assert m.area_mm2 == pytest.approx(2500 - 25)
    # the excluded spot's pixels are not bearing
    bearing_px = int((m.labels > 0)[an].sum())
    assert m.bearing_percent == pytest.approx(100 * bearing_px / an.sum())


def test_window_not_a_multiple_of_cell_and_offset_origin():
    s = 5.0
    # window 30 x 20 mm at (10, 5) mm, image origin (5, 0) and 40 x 30 mm of image
    window = Window(10.0, 5.0, 30.0, 20.0)
    frame = Frame(px_per_mm=s, origin_mm=(5.0, 0.0), shape=(150, 200), window=window)
    an = _window_mask(frame)
    assert an.sum() == 150 * 100
    m = measure(
        np.zeros((150, 200), bool), frame=frame, analysed=an, config=MeasureConfig(cell_mm=25.4)
    )
    assert (m.rows, m.cols) == (1, 2)
    c0, c1 = m.cells
    assert not c0.complete and not c1.complete  # 20 mm high: no cell is whole
    assert c0.width_mm == pytest.approx(25.4) and c1.width_mm == pytest.approx(4.6)
    assert c0.area_mm2 + c1.area_mm2 == pytest.approx(600.0)
    m2 = measure(
        np.zeros((150, 200), bool), frame=frame, analysed=an, config=MeasureConfig(cell_mm=10.0)
    )
    assert (m2.rows, m2.cols) == (2, 3) and all(c.complete for c in m2.cells)


@pytest.mark.parametrize(
    ("cell_mm", "win_w"),
    [(10.0, 30.0), (7.0, 30.0), (25.4, 30.0), (9.99, 30.0), (14.98, 30.0)],
)
def test_cell_areas_and_bearing_match_scipy_sum_labels(cell_mm: float, win_w: float) -> None:
    # Per-pixel cell map from pixel centres (plane geometry), summed by
    # scipy.ndimage.sum_labels; 9.99 and 14.98 mm leave a cell with no whole pixel column
    # at the window's end (a sliver), the other sizes a partial or no last cell.
    s = 5.0
    window = Window(10.0, 5.0, win_w, 20.0)
    frame = Frame(px_per_mm=s, origin_mm=(5.0, 0.0), shape=(150, 200), window=window)
    rng = np.random.default_rng(int(cell_mm * 100))
    mask = ndimage.binary_opening(rng.random((150, 200)) < 0.35)
    an = _window_mask(frame)
    an[60:80, 90:120] = False  # an exclusion
    m = measure(mask, frame=frame, analysed=an, config=MeasureConfig(cell_mm=cell_mm))
    yc = (np.arange(150) + 0.5) / s - window.y_mm
    xc = (np.arange(200) + 5.0 * s + 0.5) / s - window.x_mm
    n_rows = math.ceil(window.height_mm / cell_mm - 1e-9)
    n_cols = math.ceil(window.width_mm / cell_mm - 1e-9)
    ri = np.minimum(np.floor(yc / cell_mm + 1e-9), n_rows - 1).astype(int)
    ci = np.minimum(np.floor(xc / cell_mm + 1e-9), n_cols - 1).astype(int)
    cell_map = np.where(an, ri[:, None] * n_cols + ci[None, :] + 1, 0)
    index = np.arange(1, n_rows * n_cols + 1)
    area = ndimage.sum_labels(np.ones_like(mask), cell_map, index) / s**2
    contact = ndimage.sum_labels(m.labels > 0, cell_map, index)
    assert (m.rows, m.cols) == (n_rows, n_cols)
    for cell, a, c in zip(m.cells, area, contact, strict=True):
        assert cell.area_mm2 == pytest.approx(a)
        expected = 100.0 * c / (a * s**2) if a else 0.0
        assert cell.bearing_percent == pytest.approx(expected)


# ---------------------------------------------------------------- confidence, guidance


def test_confidence_range_from_alternates():
    frame = _frame((100, 100))
    an = _window_mask(frame)
    base = _disc((100, 100), 30, 30, 5) | _disc((100, 100), 70, 70, 5)
    more = base | _disc((100, 100), 30, 70, 5) | _disc((100, 100), 70, 30, 5)
    fewer = _disc((100, 100), 30, 30, 4)
    m = measure(base, frame=frame, analysed=an, alternates=(fewer, more))
    c = m.confidence
    assert (c.count_low, c.count_high) == (1, 4)
    assert c.bearing_low < m.bearing_percent < c.bearing_high
    assert c.doubtful and "count could be anything from 1 to 4" in c.reason
    steady = measure(base, frame=frame, analysed=an, alternates=(base, base))
    assert not steady.confidence.doubtful
    # with nothing else uncertain the range is the count's own spread: one point either way
    alone = measure(base, frame=frame, analysed=an).confidence
    assert (alone.count_low, alone.count_high) == (1, 3) and not alone.doubtful
    exact = measure(base, frame=frame, analysed=an, config=MeasureConfig(count_spread=0.0))
    assert (exact.confidence.count_low, exact.confidence.count_high) == (1, 3)


@settings(max_examples=25, deadline=None)
@given(seed=st.integers(0, 2**31 - 1), width=st.sampled_from([0.5, 1.0, 1.3, 2.0]))
def test_the_outermost_ring_of_the_contacts_by_scipy(seed: int, width: float) -> None:
    # the contact pixels whose centres lie within ``width`` of the outline, against
    # scipy's exact Euclidean distance transform (distance to the nearest pixel outside;
    # the frame's border is no outline, the contact goes on past it): those at most
    # width + 0.5 from outside
    from printcheck.measure import _outline, _share_of

    rng = np.random.default_rng(seed)
    mask = ndimage.gaussian_filter(rng.random((60, 70)), 2.0) > 0.52
    an = np.zeros(mask.shape, bool)
    an[5:55, 3:66] = True
    expected = 100.0 * np.count_nonzero(an & _within_of_outline(mask, width)) / an.sum()
    assert _share_of(_outline(mask, an, width), int(an.sum())) == pytest.approx(expected, abs=1e-9)


def _disc_grid(centres: range) -> np.ndarray:
    """Discs of radius 6 px (13 px across) at every (row, col) of ``centres``, 100 x 100."""
    mask = np.zeros((100, 100), bool)
    for r in centres:
        for c in centres:
            mask |= _disc((100, 100), r, c, 6)
    return mask


def _within_of_outline(mask: np.ndarray, width: float) -> np.ndarray:
    """The pixels of ``mask`` whose centres lie within ``width`` of its outline, by scipy's
    exact distance transform (to the nearest pixel outside: at most width + 0.5); the
    frame's border is no outline."""
    inside = ndimage.distance_transform_edt(np.pad(mask, 1, constant_values=True))[1:-1, 1:-1]
    return mask & (inside <= width + 0.5)


def test_a_print_too_fine_for_the_photo_reaches_down_by_its_outermost_ring() -> None:
    # contacts of 1.2 mm in a photo resolving 5 px/mm (the resolution check asks 8 px
    # across the smaller contacts): the bearing's range reaches down by the contact
    # pixels within one resolved pixel (2 px here) of their outlines, counted here with
    # scipy's exact distance transform
    frame = _frame((100, 100))  # 10 px/mm
    an = _window_mask(frame)
    mask = _disc_grid(range(15, 90, 15))
    m = measure(mask, frame=frame, analysed=an, photo_px_per_mm=5.0)
    c = m.confidence
    assert c.doubtful and "this photo has 5: move closer" in c.reason
    ring = 100.0 * np.count_nonzero(an & _within_of_outline(mask, 2.0)) / an.sum()
    assert ring > 5.0  # a real part of the bearing
    assert c.bearing_low == pytest.approx(m.bearing_percent - ring)
    sharp = measure(mask, frame=frame, analysed=an, photo_px_per_mm=40.0).confidence
    assert not sharp.doubtful and sharp.bearing_low == pytest.approx(m.bearing_percent)


def test_a_print_crowded_closer_than_the_photo_parts_leaves_out_the_blurs_spill():
    # contacts of 1.3 mm with 2 px (0.2 mm) of bare metal between neighbours, in a photo
    # of 10 px/mm: closer than the 3 px a photo needs to part them on the colour.  The
    # blur of both neighbours fills such gaps, and an outline drawn at 0.175 of the way up
    # a Gaussian-blurred edge lies z(0.825) sigma out (scipy's normal quantile), sigma
    # half a resolved pixel: that share of the contact pixels within one resolved pixel
    # (1 px here) of their outlines, counted here with scipy's exact distance transform,
    # is not contact; window and cells agree, and the range still holds the mask's own
    # reading.  A sharp photo (40 px/mm) parts the gaps, and outlines drawn half way up
    # the edge (compound on the work) lie on it: the mask's bearing as it is
    frame = _frame((100, 100))  # 10 px/mm
    an = _window_mask(frame)
    mask = _disc_grid(range(12, 95, 15))
    config = MeasureConfig(cell_mm=5.0)
    m = measure(mask, frame=frame, analysed=an, config=config, photo_px_per_mm=10.0)
    c = m.confidence
    assert c.doubtful and "closer than this photo can part (3 px at 10 px/mm)" in c.reason
    assert "need at least" not in c.reason  # not too small: 13 px across
    ring = np.count_nonzero(an & _within_of_outline(mask, 1.0))
    read = 100.0 * np.count_nonzero(mask & an) / an.sum()
    out = 0.5 * stats.norm.ppf(1.0 - 0.175)
    assert m.bearing_percent == pytest.approx(read - 100.0 * out * ring / an.sum())
    assert read - m.bearing_percent > 3.0  # a real part of the bearing
    by_cells = sum(cell.bearing_percent * cell.area_mm2 for cell in m.cells)
    assert by_cells / sum(cell.area_mm2 for cell in m.cells) == pytest.approx(m.bearing_percent)
    assert c.bearing_low <= m.bearing_percent < read <= c.bearing_high
    assert c.bearing_low == pytest.approx(read - 100.0 * ring / an.sum())
    sharp = measure(mask, frame=frame, analysed=an, config=config, photo_px_per_mm=40.0)
    assert not sharp.confidence.doubtful
    assert sharp.bearing_percent == pytest.approx(read)
    half_way = replace(config, outline_share=0.5)
    on_work = measure(mask, frame=frame, analysed=an, config=half_way, photo_px_per_mm=10.0)
    assert on_work.confidence.doubtful and on_work.bearing_percent == pytest.approx(read)


@pytest.mark.parametrize(
    ("photo_px_per_mm", "outline_share"),
    [(7.0, 0.175), (10.0, 0.0), (10.0, 0.02)],
)
def test_the_blurs_spill_of_a_crowded_print_by_scipy(
    photo_px_per_mm: float, outline_share: float
) -> None:
    # the same crowded grid of discs (2 px apart), in a photo of 7 px/mm, where one
    # resolved pixel is 1.43 frame pixels (the spill, a band 0.467 x 1.43 px deep, is
    # that share of the ring 1.43 px deep), and with outlines drawn at no share or at
    # 0.02 of the edge, where the spill (scipy's normal quantile x 0.5) is deeper than a
    # resolved pixel: the whole ring as deep as the spill is left out, and no cell (of
    # 0.5 mm, 5 x 5 px) goes below zero.  Cells agree with the window
    frame = _frame((100, 100))  # 10 px/mm
    an = _window_mask(frame)
    mask = _disc_grid(range(12, 95, 15))
    config = MeasureConfig(cell_mm=0.5, outline_share=outline_share)
    m = measure(mask, frame=frame, analysed=an, config=config, photo_px_per_mm=photo_px_per_mm)
    assert m.confidence.doubtful and "closer than this photo can part" in m.confidence.reason
    ring_px = 10.0 / photo_px_per_mm
    deep = 0.5 * stats.norm.ppf(1.0 - max(outline_share, 1e-3)) * ring_px
    width = max(ring_px, 1.0, deep)
    ring = np.count_nonzero(an & _within_of_outline(mask, width))
    read = 100.0 * np.count_nonzero(mask & an) / an.sum()
    assert m.bearing_percent == pytest.approx(read - 100.0 * deep / width * ring / an.sum())
    assert min(cell.bearing_percent for cell in m.cells) >= 0.0
    by_cells = sum(cell.bearing_percent * cell.area_mm2 for cell in m.cells)
    assert by_cells / sum(cell.area_mm2 for cell in m.cells) == pytest.approx(m.bearing_percent)


def test_the_guidance_of_a_crowded_print_reads_its_mask_as_before() -> None:
    # the heavy-bearing areas compare the mask's own local bearing with the window's:
    # the window's bearing less the blur's spill would make every crowded patch look
    # heavy, so the guidance is the same whether the spill is left out or not
    # (30 x 30 mm: the grid of discs all over, a 10 x 10 mm patch of bars 1 mm wide and
    # 0.5 mm apart in its middle)
    frame = _frame((300, 300))
    an = _window_mask(frame)
    mask = np.zeros((300, 300), bool)
    for r in range(12, 295, 15):
        for c in range(12, 295, 15):
            mask |= _disc((300, 300), r, c, 6)
    mask[100:200, 100:200] = (np.arange(100)[:, None] % 15) < 10
    config = MeasureConfig(cell_mm=5.0)
    on_edge = measure(mask, frame=frame, analysed=an, config=config, photo_px_per_mm=10.0)
    half_way = measure(
        mask,
        frame=frame,
        analysed=an,
        config=replace(config, outline_share=0.5),
        photo_px_per_mm=10.0,
    )
    assert any("bearing" in h.reason for h in half_way.guidance.high)  # the patch is heavy
    assert on_edge.bearing_percent < half_way.bearing_percent  # the spill was left out
    assert on_edge.guidance == half_way.guidance


def test_the_segmentations_outline_share_reaches_the_measure_stage() -> None:
    # the pipeline's one join of the two stages: a segmentation whose outlines lie half
    # way up the edge (compound on the work) is measured without the spill
    from printcheck.pipeline import measure_segmented
    from printcheck.segment import Segmentation

    frame = _frame((100, 100))
    an = _window_mask(frame)
    mask = _disc_grid(range(12, 95, 15))
    read = 100.0 * np.count_nonzero(mask & an) / an.sum()
    measured = []
    for share in (0.5, 0.175):
        seg = Segmentation(
            mask=mask,
            alternates=(mask, mask),
            visible=np.ones(mask.shape, bool),
            compound="blue",
            compound_on="work" if share == 0.5 else "reference",
            px_per_mm=10.0,
            compound_level=1.0,
            noise=0.1,
            glare_fraction=0.0,
            outline_share=share,
        )
        m = measure_segmented(seg, frame=frame, analysed=an, photo_px_per_mm=10.0)
        measured.append(m.bearing_percent)
    on_work, on_reference = measured
    assert on_work == pytest.approx(read) and on_reference < read - 3.0


def test_contacts_that_barely_stand_out_reach_the_range_up_by_as_many() -> None:
    # a contact with no pixel clear of the noise barely stands out from it; where a
    # print's contacts run on down to the noise, as many again, fainter still, lie below
    # it unseen (our own model of a count cut by a detection threshold); which contacts
    # have no clear pixel, by scipy's labels and maxima
    frame = _frame((100, 100))
    an = _window_mask(frame)
    centres = [(15 + 14 * i, 15 + 14 * j) for i in range(6) for j in range(6)]
    mask = np.zeros((100, 100), bool)
    for cy, cx in centres:
        mask |= _disc((100, 100), cy, cx, 4)
    rng = np.random.default_rng(5)
    for n_faint, doubtful in ((9, True), (3, False)):
        faint = set(rng.choice(len(centres), n_faint, replace=False).tolist())
        clear = np.zeros((100, 100), bool)
        clear[2, 2] = True  # noise clear of the bare metal's own: no contact
        for k, (cy, cx) in enumerate(centres):
            if k not in faint:
                clear[cy + 1, cx - 2] = True
        lab, n = ndimage.label(mask, EIGHT)
        stands = np.asarray(ndimage.maximum(clear, lab, np.arange(1, n + 1)), bool)
        expected = int(np.count_nonzero(~stands))
        assert expected == n_faint
        m = measure(mask, frame=frame, analysed=an, alternates=(mask, mask), clear=clear)
        c = m.confidence
        assert c.count_high == n + expected and c.count_low == n - 1
        assert c.doubtful == doubtful
        assert (f"{expected} of {n} contacts barely stand out" in c.reason) == doubtful
    # every contact clear of the noise, or no map at all: the range is the count's own
    for clear in (mask.copy(), None):
        c = measure(mask, frame=frame, analysed=an, alternates=(mask, mask), clear=clear)
        assert (c.confidence.count_low, c.confidence.count_high) == (35, 37)
    with pytest.raises(ValueError, match="clear map shape"):
        measure(mask, frame=frame, analysed=an, clear=np.ones((10, 10), bool))


def test_faint_contacts_make_a_small_print_doubtful_only_beyond_its_own_spread() -> None:
    # a count is never surer than one point either way (MeasureConfig.count_spread): one
    # faint contact of five reaches the range no further than that, and the photo is
    # not doubtful for it; two of five reach one point beyond, a fifth of the count, more
    # than the 15 % that makes any range doubtful.  Contacts by scipy's labels
    frame = _frame((100, 100))
    an = _window_mask(frame)
    centres = [(20, 20), (20, 70), (50, 45), (80, 20), (80, 70)]
    mask = np.zeros((100, 100), bool)
    for cy, cx in centres:
        mask |= _disc((100, 100), cy, cx, 5)
    n = ndimage.label(mask, EIGHT)[1]
    assert n == 5
    for n_faint, doubtful in ((1, False), (2, True)):
        clear = np.zeros((100, 100), bool)
        for cy, cx in centres[n_faint:]:
            clear[cy, cx] = True
        c = measure(mask, frame=frame, analysed=an, alternates=(mask, mask), clear=clear)
        c = c.confidence
        assert (c.count_low, c.count_high) == (n - 1, n + max(n_faint, 1))
        assert c.doubtful == doubtful
        assert ("barely stand out" in c.reason) == doubtful


def test_faint_contacts_reach_beyond_a_large_counts_spread_before_it_is_doubtful() -> None:
    # a hundred contacts: the count's own spread is two points (2 % of it, rounded), so
    # faint contacts make the photo doubtful only when they reach more than 15 % of the
    # count beyond those two: 17 faint reach 15 points beyond, not doubtful; 18 reach 16.
    # Contacts by scipy's labels
    shape = (200, 200)
    frame = _frame(shape)
    an = _window_mask(frame)
    centres = [(10 + 20 * i, 10 + 20 * j) for i in range(10) for j in range(10)]
    mask = np.zeros(shape, bool)
    for cy, cx in centres:
        mask |= _disc(shape, cy, cx, 5)
    n = ndimage.label(mask, EIGHT)[1]
    assert n == 100
    for n_faint, doubtful in ((17, False), (18, True)):
        clear = np.zeros(shape, bool)
        for cy, cx in centres[n_faint:]:
            clear[cy, cx] = True
        c = measure(mask, frame=frame, analysed=an, alternates=(mask, mask), clear=clear)
        c = c.confidence
        assert (c.count_low, c.count_high) == (n - 2, n + n_faint)
        assert c.doubtful == doubtful, c.reason
        assert ("barely stand out" in c.reason) == doubtful


def test_the_segmentations_clear_map_reaches_the_measure_stage() -> None:
    # the pipeline's one join of the two stages hands on where the colour stands clear
    from printcheck.pipeline import measure_segmented
    from printcheck.segment import Segmentation

    frame = _frame((100, 100))
    an = _window_mask(frame)
    mask = _disc_grid(range(12, 95, 15))
    n = ndimage.label(mask, EIGHT)[1]
    highs = []
    for clear in (None, np.zeros(mask.shape, bool)):
        seg = Segmentation(
            mask=mask,
            alternates=(mask, mask),
            visible=np.ones(mask.shape, bool),
            compound="blue",
            compound_on="reference",
            px_per_mm=10.0,
            compound_level=1.0,
            noise=0.1,
            glare_fraction=0.0,
            outline_share=0.5,
            clear=clear,
        )
        highs.append(measure_segmented(seg, frame=frame, analysed=an).confidence.count_high)
    assert highs == [n + 1, 2 * n]


def test_alternates_counted_by_scipy_rules():
    # each alternate's count and bearing against scipy: 8-connected components of at
    # least the minimum area, counted where the pixel holding the centroid is analysed
    frame = _frame((120, 100))
    an = _window_mask(frame)
    an[:10, :] = False  # some pixels outside the analysed area
    base = _disc((120, 100), 30, 30, 6) | _disc((120, 100), 80, 70, 7)
    low = base | _disc((120, 100), 30, 70, 5) | _disc((120, 100), 5, 50, 4)
    high = base & ~_disc((120, 100), 80, 70, 7)
    config = MeasureConfig(cell_mm=5.0)
    m = measure(base, frame=frame, analysed=an, config=config, alternates=(low, high))
    s = frame.px_per_mm
    min_px = config.min_spot_mm2 * s * s
    for mask, (n_got, bearing_got) in zip((low, high), m.alternates, strict=True):
        lab, n = ndimage.label(mask, structure=EIGHT)
        index = np.arange(1, n + 1)
        sizes = ndimage.sum_labels(mask, lab, index)
        kept = index[sizes >= min_px]
        centres = ndimage.center_of_mass(mask, lab, kept)
        n_ref = sum(bool(an[int(np.floor(r + 0.5)), int(np.floor(c + 0.5))]) for r, c in centres)
        bearing_ref = 100.0 * np.isin(lab, kept)[an].sum() / an.sum()
        assert n_got == n_ref
        assert bearing_got == pytest.approx(bearing_ref)


def test_too_coarse_a_photo_is_doubtful_and_widens_the_range():
    # 1 mm spots photographed at 4 px/mm: four pixels across, under the eight the check
    # asks for (four colour samples with JPEG's halved colour resolution)
    s = 10.0
    shape = (300, 300)
    frame = _frame(shape, s=s)
    mask = np.zeros(shape, bool)
    for cy in range(20, 300, 30):
        for cx in range(20, 300, 30):
            mask |= _disc(shape, cy, cx, 5)
    fine = measure(mask, frame=frame, analysed=_window_mask(frame), photo_px_per_mm=12.0)
    coarse = measure(mask, frame=frame, analysed=_window_mask(frame), photo_px_per_mm=4.0)
    assert not fine.confidence.doubtful
    c = coarse.confidence
    assert c.doubtful and "need at least 8 px/mm; this photo has 4: move closer" in c.reason
    assert c.count_high == 2 * coarse.spot_count  # merged contacts: up to twice as many


def test_guidance_flags_oversized_spots_and_large_bare_patches():
    s = 10.0
    shape = (400, 400)
    frame = _frame(shape, s=s)
    mask = np.zeros(shape, bool)
    for cy in range(20, 200, 30):
        for cx in range(20, 400, 30):
            mask |= _disc(shape, cy, cx, 4)
    mask |= _disc(shape, 100, 300, 25)  # one big mark, 39x the others' area
    m = measure(
        mask, frame=frame, analysed=_window_mask(frame), config=MeasureConfig(max_bare_mm=10.0)
    )
    big = [h for h in m.guidance.high if "large spot" in h[3]]
    assert len(big) == 1
    assert big[0][0] == pytest.approx(30.05, abs=0.1) and big[0][1] == pytest.approx(10.05, abs=0.1)
    # the lower half (y > 20 mm) is bare: a 19 mm circle fits there (> 10 mm allowed)
    assert m.guidance.bare and m.guidance.bare[0].diameter_mm > 15.0
    assert all(b.y_mm > 19.0 for b in m.guidance.bare)
    heavy = [h for h in m.guidance.high if "heavy bearing" in h[3]]
    assert all(h[1] < 22.0 for h in heavy)


def test_shape_errors():
    frame = _frame((10, 10))
    with pytest.raises(OptionError, match="same"):
        measure(np.zeros((10, 10), bool), frame=frame, analysed=np.ones((9, 10), bool))
    with pytest.raises(OptionError, match="frame shape"):
        measure(np.zeros((9, 10), bool), frame=frame, analysed=np.ones((9, 10), bool))
    with pytest.raises(OptionError, match="cell_mm"):
        measure(
            np.zeros((10, 10), bool),
            frame=frame,
            analysed=np.ones((10, 10), bool),
            config=MeasureConfig(cell_mm=0.0),
        )


def test_outline_share_from_nothing_to_below_one() -> None:
    # as the segment stage's rim and coat shares: 0 is allowed (the outline at the first
    # trace of compound, where the blur's spill is its whole tail), 1 and past are not
    from printcheck.measure import spill

    assert MeasureConfig(outline_share=0.0).outline_share == 0.0
    assert 1.0 < spill(0.0) < 2.0
    for bad in (1.0, -0.1, float("nan")):
        with pytest.raises(OptionError, match="outline_share"):
            MeasureConfig(outline_share=bad)
