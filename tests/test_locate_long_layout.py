"""locate: the marker fit on a long whole-surface layout (markers at both ends).

The truth is known from how the corners were made: a pinhole camera's homography of the
layout plane (the synth renderer's camera model) applied to the layout's marker corners,
with Gaussian noise of the size a real detector's corners carry (0.15 px RMS).
"""

from __future__ import annotations

import cv2
import numpy as np
import pytest

from printcheck.homography import robust_fit as _robust_fit
from printcheck.layout import Layout
from printcheck.synth.layouts import slideway_layout
from printcheck.synth.render import Camera, camera_homography


def _way(width_mm: float, height_mm: float) -> Layout:
    return slideway_layout(width_mm, height_mm, name="way")


def _candidates(layout: Layout, seed: int, shift: dict[int, float] | None = None):  # noqa: ANN202
    hom = camera_homography(
        Camera(tilt_deg=10.0, rotation_deg=3.0, window_fraction=0.8), layout, (6000, 4000)
    )
    rng = np.random.default_rng(seed)
    out = []
    for mk in layout.markers:
        mm = np.asarray(mk.corners_mm, dtype=np.float64)
        moved = mm + [(shift or {}).get(mk.id, 0.0), 0.0]  # a label stuck off its place
        px = cv2.perspectiveTransform(moved[None], hom)[0] + rng.normal(0, 0.15, (4, 2))
        out.append((mk.id, px, mm))
    return out, hom


@pytest.mark.parametrize("width", [600.0, 900.0])
@pytest.mark.parametrize("seed", range(5))
def test_all_markers_of_a_long_layout_are_kept(width: float, seed: int) -> None:
    layout = _way(width, width / 3)
    cands, hom = _candidates(layout, seed)
    h, kept, dropped = _robust_fit(cands, 0.25)  # locate's default: half of 0.5 mm
    assert sorted(c[0] for c in kept) == [0, 1, 2, 3] and dropped == []
    # the fit maps the photo to the layout: the far window corner within 0.2 mm
    assert _far_error_mm(h, hom, width, width / 3) < 0.2


def _far_error_mm(h: np.ndarray, hom: np.ndarray, x_mm: float, y_mm: float) -> float:
    """How far the fitted photo-to-layout ``h`` puts the true image of (x_mm, y_mm)."""
    true = np.array([[[x_mm, y_mm]]])
    back = cv2.perspectiveTransform(cv2.perspectiveTransform(true, hom), h)[0, 0]
    return float(np.hypot(*(back - true[0, 0])))


@pytest.mark.parametrize("shift_mm", [5.0, 10.0])
def test_only_the_marker_off_its_place_is_dropped(shift_mm: float) -> None:
    # marker 3 (far end) stuck shift_mm off its place: marker 2 beside it still counts,
    # so the far end of the window stays calibrated
    layout = _way(900.0, 300.0)
    cands, hom = _candidates(layout, 0, shift={3: shift_mm})
    h, kept, dropped = _robust_fit(cands, 0.25)
    assert [d[0] for d in dropped] == [3] and sorted(c[0] for c in kept) == [0, 1, 2]
    assert _far_error_mm(h, hom, 900.0, 100.0) < 0.2
