"""Tests of printcheck.card: the printable card and its layout file."""

from __future__ import annotations

import math
import re
import xml.etree.ElementTree as ET
from dataclasses import replace
from pathlib import Path

import cv2
import numpy as np
import pytest
from PIL import Image

from printcheck.card import SCALE_BAR_MM, card_sheet, render_card, write_card
from printcheck.errors import OptionError, ReportError
from printcheck.layout import card_layout, read_layout
from printcheck.locate import locate

_DPI = 300


@pytest.fixture(scope="session")
def raster() -> np.ndarray:
    return render_card(2 * 25.4, dpi=_DPI)


def _px_to_mm(
    u: np.ndarray, v: np.ndarray, window_mm: float = 50.8
) -> tuple[np.ndarray, np.ndarray]:
    """Raster (x, y) px, OpenCV convention (pixel centres at integers), to layout mm."""
    x0, y0 = card_sheet(window_mm).origin_mm
    s = _DPI / 25.4
    return x0 + (u + 0.5) / s, y0 + (v + 0.5) / s


def test_card_png_detected_by_aruco_gives_its_own_layout(raster: np.ndarray) -> None:
    # reference: OpenCV's own ArUco detector with its sub-pixel corner refinement
    params = cv2.aruco.DetectorParameters()
    params.cornerRefinementMethod = cv2.aruco.CORNER_REFINE_SUBPIX
    det = cv2.aruco.ArucoDetector(cv2.aruco.getPredefinedDictionary(cv2.aruco.DICT_4X4_50), params)
    corners, ids, _ = det.detectMarkers(raster)
    layout = card_layout()
    assert ids is not None and sorted(ids.ravel().tolist()) == [0, 1, 2, 3]
    for c, marker_id in zip(corners, ids.ravel(), strict=True):
        x, y = _px_to_mm(c[0][:, 0], c[0][:, 1])
        truth = np.array(layout.marker(int(marker_id)).corners_mm)
        err = np.hypot(x - truth[:, 0], y - truth[:, 1])
        assert err.max() < 0.1, f"marker {marker_id}: corners off by {err.max():.3f} mm"


def test_card_png_locates_to_its_window(raster: np.ndarray) -> None:
    image = cv2.cvtColor(raster, cv2.COLOR_GRAY2BGR)
    rect = locate(image, layout=card_layout())
    assert rect.calibration.markers == (0, 1, 2, 3)
    assert rect.calibration.residual_mm < 0.02
    assert rect.calibration.photo_px_per_mm == pytest.approx(_DPI / 25.4, rel=0.002)
    # the window's corners come back where the raster has them, within 0.1 mm
    s = _DPI / 25.4
    x0, y0 = card_sheet().origin_mm
    win_px = np.array(
        [[(0 - x0) * s - 0.5, (0 - y0) * s - 0.5], [(50.8 - x0) * s - 0.5, (50.8 - y0) * s - 0.5]]
    )
    back = cv2.perspectiveTransform(win_px[None], rect.homography)[0]
    assert np.abs(back - np.array([[0.0, 0.0], [50.8, 50.8]])).max() < 0.1


def test_scale_bar_is_100_mm_long(raster: np.ndarray) -> None:
    # the bar's row: the longest dark run in the strip below the card, coverage-weighted
    sheet = card_sheet()
    s = _DPI / 25.4
    y_bar = 50.8 + 4 + 12 + 6 + 5.0 + 0.5  # middle of the 1 mm bar (layout mm)
    row = int(round((y_bar - sheet.origin_mm[1]) * s - 0.5))
    darkness = (255.0 - raster[row].astype(float)) / 255.0
    length_mm = darkness.sum() / s
    assert length_mm == pytest.approx(SCALE_BAR_MM, abs=0.1)


def test_window_is_clear_inside_the_cut_line(raster: np.ndarray) -> None:
    # cutting on the line must leave the whole window open: no ink within it near its edge
    s = _DPI / 25.4
    x0, y0 = card_sheet().origin_mm
    c_lo, c_hi = int(math.ceil((0.0 - x0) * s)), int(math.floor((50.8 - x0) * s))
    r_lo, r_hi = int(math.ceil((0.0 - y0) * s)), int(math.floor((50.8 - y0) * s))
    band = raster[r_lo + 1 : r_hi - 1, c_lo + 1 : c_hi - 1].copy()
    band[10:-10, 10:-10] = 255  # only the 10 px (0.85 mm) band inside the edge
    assert band.min() >= 250
    # and the line itself is there, just outside
    assert raster[r_lo - 3 : r_lo, (c_lo + c_hi) // 2].min() < 100
    assert raster[(r_lo + r_hi) // 2, c_hi + 1 : c_hi + 4].min() < 100


@pytest.mark.parametrize("suffix", [".pdf", ".png", ".svg"])
def test_write_card_formats_at_physical_size(tmp_path: Path, suffix: str) -> None:
    card_path, layout_path = write_card(tmp_path / f"card{suffix}", window_mm=50.0, dpi=_DPI)
    assert card_path == tmp_path / f"card{suffix}" and layout_path == tmp_path / "card.toml"
    width_mm, height_mm = card_sheet(50.0).size_mm
    if suffix == ".pdf":
        data = card_path.read_bytes()
        assert data.startswith(b"%PDF")
        box = re.search(rb"/MediaBox\s*\[\s*0 0 ([0-9.]+) ([0-9.]+)\s*\]", data)
        assert box is not None
        # PDF user space is 1/72 in (ISO 32000-1, 8.3.2.3)
        assert float(box.group(1)) * 25.4 / 72 == pytest.approx(width_mm, abs=0.01)
        assert float(box.group(2)) * 25.4 / 72 == pytest.approx(height_mm, abs=0.01)
    elif suffix == ".png":
        with Image.open(card_path) as im:
            assert im.info["dpi"][0] == pytest.approx(_DPI, abs=0.01)
            assert im.size == (
                math.ceil(width_mm * _DPI / 25.4 - 1e-6),
                math.ceil(height_mm * _DPI / 25.4 - 1e-6),
            )
    else:
        root = ET.parse(card_path).getroot()
        assert root.get("width") == f"{width_mm:g}mm" or float(
            root.get("width")[:-2]
        ) == pytest.approx(width_mm)
        assert float(root.get("height")[:-2]) == pytest.approx(height_mm)
        vb = [float(v) for v in root.get("viewBox").split()]
        assert vb[2:] == pytest.approx([width_mm, height_mm])
        # the first filled path holds the markers' black cells: marker 0's outer square
        ns = {"svg": "http://www.w3.org/2000/svg"}
        d = root.findall("svg:path", ns)[0].get("d")
        nums = np.array([float(v) for v in re.findall(r"-?[0-9.]+", d)]).reshape(-1, 2)
        m0 = nums[(nums[:, 0] < 0) & (nums[:, 1] < 0)]
        assert m0.min(axis=0) == pytest.approx([-16.0, -16.0]) and m0.max(axis=0) == pytest.approx(
            [-4.0, -4.0]
        )
    written = read_layout(layout_path)
    assert replace(written, source="built-in") == card_layout(50.0)


def test_write_card_adds_pdf_and_refuses_bad_options(tmp_path: Path) -> None:
    card_path, _ = write_card(tmp_path / "plain")
    assert card_path.suffix == ".pdf" and card_path.exists()
    with pytest.raises(OptionError, match=r"must end in \.pdf, \.png or \.svg"):
        write_card(tmp_path / "card.jpg")
    with pytest.raises(OptionError, match="between 10 mm and 200 mm"):
        write_card(tmp_path / "card.pdf", window_mm=5.0)
    with pytest.raises(ReportError, match="does not exist"):
        write_card(tmp_path / "missing" / "card.pdf")
    assert not list(tmp_path.glob(".*"))  # no temporary files left behind
