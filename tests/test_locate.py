"""Tests of printcheck.locate: detection, homography, rectification, explicit scale.

Photos are rendered here from a known pinhole camera (a plane seen from a camera with
intrinsics K and pose R, t projects by H = K [r1 r2 t], the textbook plane-to-image
homography), so every point's true position is known exactly.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass, replace

import cv2
import numpy as np
import pytest
from scipy import ndimage

from printcheck.errors import LocateError, OptionError, PhotoError
from printcheck.layout import Layout, Marker, Window, card_layout
from printcheck.locate import (
    LocateConfig,
    detect_markers,
    fit_homography,
    local_px_per_mm,
    locate,
    rectify_scale,
)

# --------------------------------------------------------------------------- renderer

_TEX_PX_PER_MM = 25  # texture resolution of the rendered scene
_DOT_DIAMETER_MM = 1.6
_DOTS_MM = tuple((x, y) for y in (6.0, 25.4, 44.8) for x in (6.0, 25.4, 44.8)) + (
    (14.0, 37.0),
    (39.0, 12.5),
)


def _rot(axis: np.ndarray, angle: float) -> np.ndarray:
    return cv2.Rodrigues(np.asarray(axis, dtype=np.float64) * angle)[0]


def _camera_homography(
    layout: Layout,
    *,
    size: tuple[int, int],
    window_fraction: float,
    tilt_deg: float,
    tilt_axis_deg: float,
    roll_deg: float,
    shift: tuple[float, float] = (0.0, 0.0),
    distance_mm: float = 300.0,
) -> np.ndarray:
    """Layout mm -> photo px homography of a pinhole camera looking at the window.

    The plane is tilted by ``tilt_deg`` about an in-plane axis at ``tilt_axis_deg`` and
    rolled by ``roll_deg``; the focal length is set so the window's image spans
    ``window_fraction`` of the photo width; ``shift`` moves it (fractions of the size).
    """
    w, h = size
    win = layout.window
    cx, cy = win.x_mm + win.width_mm / 2, win.y_mm + win.height_mm / 2
    a = math.radians(tilt_axis_deg)
    r = _rot([0, 0, 1], math.radians(roll_deg)) @ _rot(
        [math.cos(a), math.sin(a), 0], math.radians(tilt_deg)
    )
    t = np.array([0.0, 0.0, distance_mm])
    centre = np.array([[1.0, 0, -cx], [0, 1.0, -cy], [0, 0, 1.0]])
    base = np.c_[r[:, 0], r[:, 1], t] @ centre  # focal length 1, principal point 0
    corners = np.array(
        [
            [win.x_mm, win.y_mm],
            [win.x_mm + win.width_mm, win.y_mm],
            [win.x_mm + win.width_mm, win.y_mm + win.height_mm],
            [win.x_mm, win.y_mm + win.height_mm],
        ]
    )
    p = np.c_[corners, np.ones(4)] @ base.T
    xs = p[:, 0] / p[:, 2]
    f = window_fraction * w / (xs.max() - xs.min())
    k = np.array(
        [[f, 0, (w - 1) / 2 + shift[0] * w], [0, f, (h - 1) / 2 + shift[1] * h], [0, 0, 1.0]]
    )
    hom = k @ base
    return hom / hom[2, 2]


def _apply(h: np.ndarray, pts: np.ndarray) -> np.ndarray:
    p = np.c_[pts, np.ones(len(pts))] @ h.T
    return p[:, :2] / p[:, 2:3]


@dataclass(frozen=True, eq=False)
class _Photo:
    image: np.ndarray  # (H, W, 3) uint8 BGR, JPEG-decoded
    h_true: np.ndarray  # layout mm -> photo px
    layout: Layout


def _paste_marker(
    tex: np.ndarray, dictionary: int, marker_id: int, corners_mm, x0: float, y0: float
) -> None:
    t = _TEX_PX_PER_MM
    c = np.asarray(corners_mm)
    side_px = round((c[1, 0] - c[0, 0]) * t)
    col, row = (c[0, 0] - x0) * t, (c[0, 1] - y0) * t
    assert abs(col - round(col)) < 1e-9 and abs(row - round(row)) < 1e-9, (
        "marker off the texture grid"
    )
    assert np.allclose(c, c[0] + np.array([[0, 0], [1, 0], [1, 1], [0, 1]]) * (c[1, 0] - c[0, 0]))
    d = cv2.aruco.getPredefinedDictionary(dictionary)
    cells = d.markerSize + 2
    side_px -= side_px % cells
    img = cv2.aruco.generateImageMarker(d, marker_id, side_px)
    tex[round(row) : round(row) + side_px, round(col) : round(col) + side_px] = np.where(
        img[..., None] > 0, 235, 25
    )


def _render(
    layout: Layout,
    *,
    size: tuple[int, int] = (1600, 1200),
    markers: tuple[int, ...] | None = None,
    strangers: bool = False,
    seed: int = 0,
    jpeg_quality: int = 88,
    **camera,
) -> _Photo:
    """Render a photo of the card ``layout`` (markers as listed, dots in the window)."""
    rng = np.random.default_rng(seed)
    t = _TEX_PX_PER_MM
    win = layout.window
    pad = 35.0
    x0, y0 = win.x_mm - pad, win.y_mm - pad
    n = int(round((win.width_mm + 2 * pad) * t))
    # the surface: grey metal with a fine texture, seen everywhere but on the paper
    noise = cv2.GaussianBlur(rng.normal(0, 1, (n // 4, n // 4)).astype(np.float32), (0, 0), 2.0)
    noise = cv2.resize(noise, (n, n), interpolation=cv2.INTER_CUBIC)
    grey = (150 + 12 * noise / (noise.std() + 1e-9)).clip(0, 255)
    tex = np.empty((n, n, 3), dtype=np.uint8)
    tex[..., 0] = grey
    tex[..., 1] = grey * 0.97
    tex[..., 2] = grey * 0.92
    # the paper card around the window
    lo, hi = round((pad - 22.0) * t), round((win.width_mm + 22.0 + pad) * t)
    wlo, whi = round(pad * t), round((win.width_mm + pad) * t)
    hole = tex[wlo:whi, wlo:whi].copy()
    tex[lo:hi, lo:hi] = 235
    tex[wlo:whi, wlo:whi] = hole
    for m in layout.markers:
        if markers is None or m.id in markers:
            _paste_marker(tex, cv2.aruco.DICT_4X4_50, m.id, m.corners_mm, x0, y0)
    if strangers:  # markers of other dictionaries, and an id the layout does not list
        side = 12.0
        spots = [
            (cv2.aruco.DICT_6X6_250, 3, (-16.0, 19.0)),
            (cv2.aruco.DICT_APRILTAG_36h11, 1, (19.0, -16.0)),
            (cv2.aruco.DICT_5X5_100, 0, (19.0, win.height_mm + 4.0)),
            (cv2.aruco.DICT_4X4_50, 9, (win.width_mm + 4.0, 19.0)),
        ]
        for dictionary, marker_id, (mx, my) in spots:
            corners = ((mx, my), (mx + side, my), (mx + side, my + side), (mx, my + side))
            _paste_marker(tex, dictionary, marker_id, corners, x0, y0)
    # dots of compound at known places in the window
    r = _DOT_DIAMETER_MM / 2 * t
    for dx, dy in _DOTS_MM:
        cx, cy = (dx - x0) * t - 0.5, (dy - y0) * t - 0.5  # texel centres are at integers
        r0, c0 = int(cy - r - 2), int(cx - r - 2)
        yy, xx = np.mgrid[r0 : int(cy + r + 3), c0 : int(cx + r + 3)]
        inside = (xx - cx) ** 2 + (yy - cy) ** 2 <= r * r
        tex[yy[inside], xx[inside]] = (140, 50, 25)
    # the camera: render at twice the resolution, then average 2x2
    w, h = size
    h_true = _camera_homography(layout, size=size, **camera)
    tex_from_layout = np.array([[t, 0, -x0 * t - 0.5], [0, t, -y0 * t - 0.5], [0, 0, 1.0]])
    up = np.array([[2.0, 0, 0.5], [0, 2.0, 0.5], [0, 0, 1.0]])
    m = up @ h_true @ np.linalg.inv(tex_from_layout)
    big = cv2.warpPerspective(
        tex, m, (2 * w, 2 * h), flags=cv2.INTER_LINEAR, borderMode=cv2.BORDER_REPLICATE
    )
    img = cv2.resize(big, (w, h), interpolation=cv2.INTER_AREA).astype(np.float32)
    img = cv2.GaussianBlur(img, (0, 0), 0.8)
    # uneven light: a slope across the photo and a vignette
    gx = np.arange(w, dtype=np.float32)[None, :]
    gy = np.arange(h, dtype=np.float32)[:, None]
    light = (
        0.8
        + 0.25 * (gx / w)
        - 0.1 * (gy / h)
        - 0.25 * (((gx - w / 2) ** 2 + (gy - h / 2) ** 2) / (w * w / 4))
    )
    img *= light[..., None]
    img += 2.5 * rng.standard_normal(img.shape, dtype=np.float32)
    img = cv2.convertScaleAbs(img)  # round and clip to uint8
    ok, buf = cv2.imencode(".jpg", img, [cv2.IMWRITE_JPEG_QUALITY, jpeg_quality])
    assert ok
    return _Photo(cv2.imdecode(buf, cv2.IMREAD_COLOR), h_true, layout)


_CASES = {
    # name: camera (tilt up to 40 degrees, any roll, window 20-60 % of the photo width)
    "tilt40-roll30-w25": dict(window_fraction=0.25, tilt_deg=40, tilt_axis_deg=20, roll_deg=30),
    "tilt20-roll135-w35": dict(window_fraction=0.35, tilt_deg=20, tilt_axis_deg=100, roll_deg=135),
    "tilt0-roll200-w20": dict(
        window_fraction=0.20, tilt_deg=0, tilt_axis_deg=0, roll_deg=200, shift=(0.1, -0.05)
    ),
    "tilt30-roll45-w60": dict(window_fraction=0.60, tilt_deg=30, tilt_axis_deg=45, roll_deg=45),
    "tilt35-roll290-w40": dict(
        window_fraction=0.40, tilt_deg=35, tilt_axis_deg=160, roll_deg=290, shift=(0.0, 0.02)
    ),
}


@pytest.fixture(scope="session")
def card() -> Layout:
    return card_layout()


@pytest.fixture(scope="session")
def photos(card: Layout) -> dict[str, _Photo]:
    return {name: _render(card, seed=i, **cam) for i, (name, cam) in enumerate(_CASES.items())}


# --------------------------------------------------------------------------- checks


def _window_grid(layout: Layout, n: int = 6) -> np.ndarray:
    w = layout.window
    xs = np.linspace(w.x_mm, w.x_mm + w.width_mm, n)
    ys = np.linspace(w.y_mm, w.y_mm + w.height_mm, n)
    return np.array([(x, y) for y in ys for x in xs])


def _distance_errors(truth: np.ndarray, measured: np.ndarray) -> float:
    """Largest error (mm) of the distance between any two points."""
    worst = 0.0
    for i, j in itertools.combinations(range(len(truth)), 2):
        d_true = np.hypot(*(truth[i] - truth[j]))
        d_meas = np.hypot(*(measured[i] - measured[j]))
        worst = max(worst, abs(d_true - d_meas))
    return worst


def _homography_error(photo: _Photo, h_fit: np.ndarray) -> tuple[float, float]:
    """(max position error, max pairwise distance error) in mm over a window grid."""
    pts = _window_grid(photo.layout)
    back = _apply(h_fit, _apply(photo.h_true, pts))
    pos = float(np.max(np.hypot(*(back - pts).T)))
    return pos, _distance_errors(pts, back)


def _dot_centres(rect, offset_mm: float = 0.0) -> np.ndarray:
    """Centroids (mm) of the compound dots in a rectified image, in _DOTS_MM order.

    Dots are the dark blobs (grey < 80, the surface is near 150); each one's centre is
    scipy.ndimage.center_of_mass weighted by how much darker than 80 each pixel is.
    """
    grey = cv2.cvtColor(rect.image, cv2.COLOR_BGR2GRAY).astype(np.float64)
    weight = np.where(rect.visible, np.clip(80.0 - grey, 0.0, None), 0.0)
    labels, count = ndimage.label(weight > 0)
    idx = list(range(1, count + 1))
    centres = ndimage.center_of_mass(weight, labels, idx)
    sizes = ndimage.sum(weight > 0, labels, idx)
    expected_px = math.pi * (_DOT_DIAMETER_MM / 2 * rect.frame.px_per_mm) ** 2
    found = []
    for (r, c), size in zip(centres, sizes, strict=True):
        if 0.3 * expected_px < size < 2.0 * expected_px:
            x, y = rect.frame.to_mm(np.array(r), np.array(c))
            found.append((float(x), float(y)))
    found_arr = np.array(found).reshape(-1, 2)
    out = []
    for dx, dy in _DOTS_MM:
        d = np.hypot(found_arr[:, 0] - dx - offset_mm, found_arr[:, 1] - dy - offset_mm)
        assert d.size and d.min() < 1.0, f"dot at ({dx}, {dy}) not found in the rectified image"
        out.append(found_arr[int(np.argmin(d))])
    return np.array(out)


def _in_view(photo: _Photo, marker_ids) -> tuple[int, ...]:
    """Markers whose corners all lie inside the photo (with a 4 px border), by the truth."""
    h, w = photo.image.shape[:2]
    out = []
    for m in photo.layout.markers:
        if m.id in marker_ids:
            p = _apply(photo.h_true, np.array(m.corners_mm))
            if np.all((p[:, 0] > 4) & (p[:, 0] < w - 5) & (p[:, 1] > 4) & (p[:, 1] < h - 5)):
                out.append(m.id)
    return tuple(sorted(out))


# --------------------------------------------------------------------------- homography


def _random_quads(rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray]:
    base = np.array([[0.0, 0.0], [1.0, 0.0], [1.0, 1.0], [0.0, 1.0]])
    src = base * rng.uniform(200, 900) + rng.uniform(0, 1000, 2) + rng.normal(0, 30, (4, 2))
    dst = base * rng.uniform(10, 60) + rng.uniform(-50, 50, 2) + rng.normal(0, 2, (4, 2))
    return src, dst


@pytest.mark.parametrize("seed", range(5))
def test_fit_homography_equals_get_perspective_transform_on_four_points(seed: int) -> None:
    # reference: cv2.getPerspectiveTransform solves the exact 4-point case directly
    src, dst = (a.astype(np.float32) for a in _random_quads(np.random.default_rng(seed)))
    ours = fit_homography(src.astype(np.float64), dst.astype(np.float64))
    ref = cv2.getPerspectiveTransform(src, dst).astype(np.float64)
    ref /= ref[2, 2]
    assert np.allclose(ours, ref, rtol=1e-5, atol=1e-9)
    probe = src.mean(axis=0) + np.random.default_rng(seed).normal(0, 100, (20, 2))
    assert np.max(np.abs(_apply(ours, probe) - _apply(ref, probe))) < 1e-4  # mm
    assert np.max(np.abs(_apply(ours, src) - dst)) < 1e-5


@pytest.mark.parametrize(("tilt", "roll"), [(0, 0), (25, 70), (40, 200)])
def test_fit_homography_recovers_a_pinhole_projection_of_the_plane(
    tilt: float, roll: float
) -> None:
    # a plane z=0 seen by a camera K [R | t] projects by H = K [r1 r2 t] (pinhole model)
    layout = card_layout()
    h_true = _camera_homography(
        layout,
        size=(4000, 3000),
        window_fraction=0.3,
        tilt_deg=tilt,
        tilt_axis_deg=30,
        roll_deg=roll,
    )
    layout_pts = np.concatenate([np.array(m.corners_mm) for m in layout.markers])
    photo_pts = _apply(h_true, layout_pts)
    h_fit = fit_homography(photo_pts, layout_pts)
    grid = _window_grid(layout, 9)
    assert (
        np.max(np.abs(_apply(h_fit, _apply(h_true, grid)) - grid)) < 1e-5
    )  # mm (OpenCV LM tolerance)
    # with 0.05 px noise on the 16 corners the window still comes back within 0.02 mm
    noisy = photo_pts + np.random.default_rng(1).normal(0, 0.05, photo_pts.shape)
    h_noisy = fit_homography(noisy, layout_pts)
    assert np.max(np.hypot(*(_apply(h_noisy, _apply(h_true, grid)) - grid).T)) < 0.02


def test_local_px_per_mm_of_a_tilted_camera() -> None:
    # analytic: a camera at distance D tilted by theta about the x axis through the
    # point it looks at sees f / D px/mm across the tilt axis and f cos(theta) / D along it
    f, d, theta = 3000.0, 250.0, math.radians(35)
    r = _rot([1, 0, 0], theta)
    k = np.array([[f, 0, 2000], [0, f, 1500], [0, 0, 1.0]])
    h = k @ np.c_[r[:, 0], r[:, 1], [0, 0, d]]
    small, large = local_px_per_mm(h, 0.0, 0.0)
    assert small == pytest.approx(f * math.cos(theta) / d, rel=1e-9)
    assert large == pytest.approx(f / d, rel=1e-9)


def test_fit_homography_refuses_collinear_points() -> None:
    pts = np.array([[0.0, 0.0], [1.0, 1.0], [2.0, 2.0], [3.0, 3.0]])
    with pytest.raises(LocateError, match="degenerate|homography"):
        fit_homography(pts * 100, pts)


# --------------------------------------------------------------------------- rendered photos


@pytest.mark.parametrize("name", list(_CASES))
def test_locate_rendered_photo_within_0_1_mm(photos: dict[str, _Photo], name: str) -> None:
    photo = photos[name]
    rect = locate(photo.image, layout=photo.layout)
    visible = _in_view(photo, photo.layout.marker_ids)
    assert rect.calibration.markers == visible
    assert rect.calibration.method == "layout" and rect.calibration.layout == "card-2in"
    pos, dist = _homography_error(photo, rect.homography)
    bound = 0.1 if len(visible) > 1 else 0.3  # the 60 % window leaves one marker in view
    assert dist < bound, f"{name}: homography distance error {dist:.3f} mm"
    dots = _dot_centres(rect)
    assert _distance_errors(np.array(_DOTS_MM), dots) < bound
    # the photo's own resolution at the window, from the truth homography
    truth_ppm, _ = local_px_per_mm(photo.h_true, 25.4, 25.4)
    assert rect.calibration.photo_px_per_mm == pytest.approx(truth_ppm, rel=0.01)
    assert rect.calibration.px_per_mm <= rect.calibration.photo_px_per_mm  # never upsampled
    assert rect.calibration.px_per_mm > 0.97 * rect.calibration.photo_px_per_mm
    if len(visible) > 1:
        assert rect.calibration.residual_mm < 0.02


def test_locate_ignores_other_dictionaries_and_unlisted_ids(card: Layout) -> None:
    cam = _CASES["tilt40-roll30-w25"]
    plain = locate(_render(card, seed=11, **cam).image, layout=card)
    photo = _render(card, seed=11, strangers=True, **cam)
    # the strangers really are markers: OpenCV finds them with their own dictionaries
    for name, code in (("6X6_250", cv2.aruco.DICT_6X6_250), ("5X5_100", cv2.aruco.DICT_5X5_100)):
        det = cv2.aruco.ArucoDetector(cv2.aruco.getPredefinedDictionary(code))
        assert det.detectMarkers(photo.image)[1] is not None, name
    rect = locate(photo.image, layout=card)
    assert rect.calibration.markers == (0, 1, 2, 3)
    assert not any("9" in w for w in rect.warnings)
    pos, dist = _homography_error(photo, rect.homography)
    assert dist < 0.1
    assert _distance_errors(np.array(_DOTS_MM), _dot_centres(rect)) < 0.1
    assert rect.calibration.residual_mm == pytest.approx(plain.calibration.residual_mm, abs=0.005)


def test_locate_drops_a_second_card_with_the_same_ids(card: Layout) -> None:
    # a second marker 1 elsewhere (another card's) must not pull the fit
    cam = _CASES["tilt20-roll135-w35"]
    photo = _render(card, seed=5, **cam)
    intruder = replace(
        card,
        markers=(
            *card.markers,
            Marker(1, ((19.0, 19.0), (31.0, 19.0), (31.0, 31.0), (19.0, 31.0))),
        ),
    )
    image = _render(intruder, seed=5, **cam).image  # marker 1 twice, once in the window
    rect = locate(image, layout=card)
    assert rect.calibration.markers == (0, 1, 2, 3)
    assert any("second marker 1" in w for w in rect.warnings)
    assert _homography_error(photo, rect.homography)[1] < 0.1


@pytest.fixture(scope="session")
def big_photo(card: Layout) -> _Photo:
    # 12 MP: one 12 mm marker fixes a 50 mm window only if its corners are very exact
    return _render(card, size=(4000, 3000), seed=21, **_CASES["tilt0-roll200-w20"])


@pytest.mark.parametrize("marker_id", [0, 1, 2, 3])
def test_locate_one_marker_within_0_3_mm(card: Layout, big_photo: _Photo, marker_id: int) -> None:
    single = replace(card, markers=(card.marker(marker_id),))
    rect = locate(big_photo.image, layout=single)
    assert rect.calibration.markers == (marker_id,)
    assert rect.calibration.residual_mm == pytest.approx(0.0, abs=1e-4)  # 4 points: exact
    _, dist = _homography_error(replace(big_photo, layout=single), rect.homography)
    assert dist < 0.3, f"marker {marker_id}: {dist:.3f} mm"
    assert _distance_errors(np.array(_DOTS_MM), _dot_centres(rect)) < 0.3


def test_locate_one_marker_drawn_with_strangers_within_0_3_mm(card: Layout) -> None:
    photo = _render(
        card,
        size=(4000, 3000),
        markers=(2,),
        strangers=True,
        seed=22,
        **_CASES["tilt40-roll30-w25"],
    )
    rect = locate(photo.image, layout=card)
    assert rect.calibration.markers == (2,)
    assert any("markers 0, 1, 3 not found" in w for w in rect.warnings)
    assert any("only one marker" in w for w in rect.warnings)
    assert _homography_error(photo, rect.homography)[1] < 0.3
    assert _distance_errors(np.array(_DOTS_MM), _dot_centres(rect)) < 0.3


def test_synth_render_photo_locates_within_0_1_mm() -> None:
    synth = pytest.importorskip("printcheck.synth.render")
    scene = synth.Scene(
        image_size=(1200, 900),
        truth_px_per_mm=10.0,
        camera=synth.Camera(tilt_deg=30, rotation_deg=65, window_fraction=0.3, tilt_axis_deg=40),
    )
    shot = synth.render_photo(scene, seed=4)
    rect = locate(shot.image, layout=scene.layout)
    grid = _window_grid(scene.layout)
    back = _apply(rect.homography, _apply(shot.homography, grid))
    assert _distance_errors(grid, back) < 0.1
    assert len(rect.calibration.markers) >= 2


# --------------------------------------------------------------------------- masks and frame


def test_masks_are_exact_to_a_pixel(photos: dict[str, _Photo]) -> None:
    from matplotlib.path import Path as MplPath

    photo = photos["tilt20-roll135-w35"]
    strip = ((10.0, -1.0), (14.0, -1.0), (14.0, 60.0), (10.0, 60.0))
    hole = tuple(
        (30 + 5 * math.cos(a), 30 + 5 * math.sin(a))
        for a in np.linspace(0, 2 * math.pi, 24, endpoint=False)
    )
    layout = replace(photo.layout, exclusions=(strip, hole), margin_mm=2.0)
    rect = locate(photo.image, layout=layout)
    f = rect.frame
    rows, cols = np.mgrid[0 : f.shape[0], 0 : f.shape[1]]
    x, y = f.to_mm(rows, cols)
    centres = np.c_[x.ravel(), y.ravel()]
    w = f.window
    in_window = (
        (x >= w.x_mm) & (x < w.x_mm + w.width_mm) & (y >= w.y_mm) & (y < w.y_mm + w.height_mm)
    )
    # reference: matplotlib's point-in-polygon test of every pixel centre
    excluded = np.zeros(f.shape, dtype=bool)
    for poly in (strip, hole):
        excluded |= MplPath(np.array(poly)).contains_points(centres).reshape(f.shape)
    differ = rect.analysed != (in_window & ~excluded)
    assert differ.sum() <= 0.002 * in_window.sum()  # pixels on a polygon's edge may go either way
    assert not (rect.analysed & ~in_window).any()  # never a pixel outside the window
    m = layout.margin_mm
    in_outer = (
        (x >= w.x_mm - m)
        & (x < w.x_mm + w.width_mm + m)
        & (y >= w.y_mm - m)
        & (y < w.y_mm + w.height_mm + m)
    )
    assert not (rect.visible & ~in_outer).any()
    # the photo shows a paper card round the window: its cut-out edge is found on every
    # side and the 2 mm margin of the layout is hidden, so what is visible is the window
    # (up to where the edge is seen, at most 0.6 mm out: a registration error of the card)
    out_mm = np.maximum.reduce(
        [w.x_mm - x, x - (w.x_mm + w.width_mm), w.y_mm - y, y - (w.y_mm + w.height_mm)]
    )
    assert out_mm[rect.visible & ~excluded & ~in_window].max(initial=0.0) <= 0.6
    assert (rect.visible & ~excluded).sum() >= 0.998 * (in_window & ~excluded).sum()
    assert f.origin_mm == pytest.approx((-m, -m))
    # the window slice holds exactly the pixels whose centres are in the window
    rs, cs = f.window_slices()
    assert (rs.stop - rs.start) * (cs.stop - cs.start) == in_window.sum()


def test_partial_window_is_refused_then_measured_when_asked(card: Layout) -> None:
    cam = dict(_CASES["tilt20-roll135-w35"], shift=(0.45, 0.0))
    photo = _render(card, seed=8, **cam)
    with pytest.raises(
        LocateError, match=r"runs out of the photo: \d+\.\d% of its area is missing"
    ):
        locate(photo.image, layout=card)
    rect = locate(photo.image, layout=card, config=LocateConfig(allow_partial=True))
    assert any("runs out of the photo" in w for w in rect.warnings)
    # truth: the share of window points (dense grid) that land inside the photo
    g = np.linspace(0, 50.8, 400, endpoint=False) + 50.8 / 800
    pts = np.array([(x, y) for y in g for x in g])
    p = _apply(photo.h_true, pts)
    h, w = photo.image.shape[:2]
    inside = (p[:, 0] >= -0.5) & (p[:, 0] <= w - 0.5) & (p[:, 1] >= -0.5) & (p[:, 1] <= h - 0.5)
    truth_area = inside.mean() * 50.8**2
    area = rect.analysed.sum() / rect.frame.px_per_mm**2
    assert 0.05 < inside.mean() < 0.95
    assert area == pytest.approx(truth_area, rel=0.01)


# --------------------------------------------------------------------------- errors


def test_no_marker_names_the_ids_and_dictionary(card: Layout, photos: dict[str, _Photo]) -> None:
    blank = np.full((600, 800, 3), 128, dtype=np.uint8)
    with pytest.raises(
        LocateError, match=r"no marker of layout card-2in found.*DICT_4X4_50 ids 0, 1, 2, 3"
    ):
        locate(blank, layout=card)
    other = replace(card, dictionary="DICT_5X5_100")
    with pytest.raises(LocateError, match="DICT_5X5_100 ids 0, 1, 2, 3"):
        locate(blank, layout=other)
    # the photo shows a built-in card's markers (of another dictionary): say which card
    with pytest.raises(
        LocateError, match=r"this photo shows the 2 in card; the layout given is layout card-2in"
    ):
        locate(photos["tilt0-roll200-w20"].image, layout=other)


def test_markers_that_do_not_fit_the_layout_are_refused(
    card: Layout, photos: dict[str, _Photo]
) -> None:
    # the photo shows the 2 in card; a layout of a 30 mm window with the same marker ids
    # (a card printed before each size had ids of its own) puts the markers elsewhere
    small = card_layout(30.0)
    same_ids = replace(small, markers=tuple(replace(m, id=i) for i, m in enumerate(small.markers)))
    with pytest.raises(
        LocateError, match=r"do not fit layout card-30mm: RMS corner residual \d+\.\d+ mm"
    ):
        locate(photos["tilt20-roll135-w35"].image, layout=same_ids)


def test_bad_inputs(card: Layout, photos: dict[str, _Photo]) -> None:
    image = photos["tilt0-roll200-w20"].image
    with pytest.raises(PhotoError, match="uint8"):
        locate(image.astype(np.float32), layout=card)
    with pytest.raises(PhotoError, match="shape"):
        locate(image[..., :2], layout=card)
    with pytest.raises(OptionError, match="px_per_mm"):
        locate(image, layout=card, config=LocateConfig(px_per_mm=-1.0))


def test_input_is_not_modified_and_px_per_mm_override(
    photos: dict[str, _Photo], card: Layout
) -> None:
    image = photos["tilt0-roll200-w20"].image
    before = image.copy()
    rect = locate(image, layout=card, config=LocateConfig(px_per_mm=8.0))
    assert np.array_equal(image, before)
    assert rect.calibration.px_per_mm == 8.0
    assert rect.frame.shape == (math.ceil(50.8 * 8), math.ceil(50.8 * 8))
    assert rect.image.shape == (*rect.frame.shape, 3) and rect.image.dtype == np.uint8
    assert _distance_errors(np.array(_DOTS_MM), _dot_centres(rect)) < 0.1


def test_low_resolution_photo_is_warned_about(photos: dict[str, _Photo], card: Layout) -> None:
    small = cv2.resize(photos["tilt20-roll135-w35"].image, (800, 600), interpolation=cv2.INTER_AREA)
    rect = locate(small, layout=card)
    assert rect.calibration.photo_px_per_mm < 4.0
    assert rect.calibration.px_per_mm == 4.0
    assert any("resolves only" in w for w in rect.warnings)


# --------------------------------------------------------------------------- explicit scale


def _square_on(px_per_mm: float, size_mm: tuple[float, float]) -> np.ndarray:
    """A square-on image with dark dots at _DOTS_MM (offset by 10 mm), 3x supersampled."""
    k = 3
    s = px_per_mm * k
    w, h = round(size_mm[0] * px_per_mm), round(size_mm[1] * px_per_mm)
    img = np.full((h * k, w * k), 170.0)
    r = _DOT_DIAMETER_MM / 2
    for dx, dy in _DOTS_MM:
        cx, cy = dx + 10, dy + 10
        r0, c0 = int((cy - r) * s) - 1, int((cx - r) * s) - 1
        yy, xx = np.mgrid[r0 : int((cy + r) * s) + 2, c0 : int((cx + r) * s) + 2]
        x, y = (xx + 0.5) / s, (yy + 0.5) / s  # pixel (row, col) covers [col/s, (col+1)/s)
        inside = (x - cx) ** 2 + (y - cy) ** 2 <= r * r
        img[yy[inside], xx[inside]] = 40.0
    img = cv2.resize(img, (w, h), interpolation=cv2.INTER_AREA)
    return cv2.cvtColor(np.clip(img, 0, 255).astype(np.uint8), cv2.COLOR_GRAY2BGR)


def test_rectify_scale_whole_image_and_window() -> None:
    s = 12.0
    image = _square_on(s, (72.0, 70.0))
    whole = rectify_scale(image, px_per_mm=s)
    assert whole.calibration.method == "scale" and whole.calibration.residual_mm is None
    assert whole.frame.window.width_mm == pytest.approx(image.shape[1] / s)
    assert whole.analysed.all() and whole.image.shape == image.shape
    assert np.array_equal(whole.image, image)  # no resampling at the photo's own scale
    win = Window(10.0, 10.0, 50.8, 50.8)
    rect = rectify_scale(image, px_per_mm=s, window=win)
    dots = _dot_centres(rect, 10.0) - 10.0
    assert np.max(np.hypot(*(dots - np.array(_DOTS_MM)).T)) < 0.02
    assert (
        rect.analysed.sum() == math.ceil(50.8 * s - 1e-9) ** 2
        or rect.analysed.sum() == (round(50.8 * s)) ** 2
    )
    assert rect.visible.sum() > rect.analysed.sum()  # 5 mm of margin shown around
    # resampled to another px/mm, the dots stay where they are
    half = rectify_scale(image, px_per_mm=s, window=win, config=LocateConfig(px_per_mm=7.5))
    assert half.calibration.px_per_mm == 7.5 and half.calibration.photo_px_per_mm == s
    dots = _dot_centres(half, 10.0) - 10.0
    assert np.max(np.hypot(*(dots - np.array(_DOTS_MM)).T)) < 0.03


def test_rectify_scale_errors() -> None:
    image = _square_on(10.0, (60.0, 60.0))
    with pytest.raises(OptionError, match="px_per_mm must be a positive number"):
        rectify_scale(image, px_per_mm=0.0)
    with pytest.raises(LocateError, match="runs out of the image|runs out of the photo"):
        rectify_scale(image, px_per_mm=10.0, window=Window(30.0, 10.0, 50.8, 40.0))
    part = rectify_scale(
        image,
        px_per_mm=10.0,
        window=Window(30.0, 10.0, 50.8, 40.0),
        config=LocateConfig(allow_partial=True),
    )
    assert part.analysed.sum() / 100.0 == pytest.approx(30.0 * 40.0, rel=0.01)


def test_detect_markers_refines_corners_to_hundredths_of_a_pixel(photos: dict[str, _Photo]) -> None:
    # truth: the corners' projections through the camera that rendered the photo
    photo = photos["tilt40-roll30-w25"]
    found = {d.id: d for d in detect_markers(photo.image, dictionary="DICT_4X4_50")}
    assert set(found) == {0, 1, 2, 3}
    for marker_id, det in found.items():
        truth = _apply(photo.h_true, np.array(photo.layout.marker(marker_id).corners_mm))
        assert det.refined
        assert np.max(np.hypot(*(det.corners_px - truth).T)) < 0.1  # px


def _drawn_marker(*, dark: int, light: int) -> tuple[np.ndarray, np.ndarray]:
    """A marker drawn by OpenCV's own ArUco generator (DICT_4X4_50 id 7), 24 px a module,
    in ``dark`` on a page of ``light`` (float32), and its outer corners: they lie on pixel
    edges, 0.5 px off the pixel centres."""
    dictionary = cv2.aruco.getPredefinedDictionary(cv2.aruco.DICT_4X4_50)
    side = 6 * 24
    marker = cv2.aruco.generateImageMarker(dictionary, 7, side)
    page = np.full((side + 120, side + 120), light, np.float32)
    page[60 : 60 + side, 60 : 60 + side] = np.where(marker > 0, light, dark)
    corners = np.array(
        [[59.5, 59.5], [59.5 + side, 59.5], [59.5 + side, 59.5 + side], [59.5, 59.5 + side]]
    )
    return page, corners


@pytest.mark.parametrize("sigma", [1.0, 1.5, 2.5, 4.0])
def test_edge_blur_is_the_gaussian_the_photo_was_blurred_by(sigma: float) -> None:
    # a marker drawn by OpenCV's own ArUco generator, 24 px a module, blurred by
    # cv2.GaussianBlur of known sigma: the edge-spread estimate (10-90 % rise / 2.563,
    # the rise of a Gaussian edge) gives that sigma back; the drawn edge is a step, so
    # nothing else spreads it
    from printcheck.markers import edge_blur_px

    page, corners = _drawn_marker(dark=20, light=235)
    blurred = cv2.GaussianBlur(page, (0, 0), sigma)
    estimate = edge_blur_px(blurred, corners, 4)
    assert estimate is not None
    assert estimate == pytest.approx(sigma, rel=0.08)


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_edge_blur_of_a_dim_noisy_photo_is_not_its_noise(seed: int) -> None:
    # the same marker in a dim photo (a step of 100 levels over 30) with sensor noise of
    # 10 levels, blurred by 1 px: on the dark side a sample passes 10 % of the step by
    # noise alone now and then, well before the edge.  The estimate is still the
    # Gaussian's sigma (an earlier reading took such a sample for the rise's start and
    # gave 2-3 px, calling a sharp photo blurred)
    from printcheck.markers import edge_blur_px

    page, corners = _drawn_marker(dark=30, light=130)
    blurred = cv2.GaussianBlur(page, (0, 0), 1.0)
    noisy = blurred + np.random.default_rng(seed).normal(0.0, 10.0, blurred.shape)
    estimate = edge_blur_px(noisy.astype(np.float32), corners, 4)
    assert estimate is not None
    assert estimate == pytest.approx(1.0, abs=0.15)


def test_markers_found_first_on_a_reduced_decode_give_the_same_fit(
    card: Layout, big_photo: _Photo, tmp_path
) -> None:  # type: ignore[no-untyped-def]
    """inspect finds the markers first on libjpeg's reduced decode of the file (made on a
    spare core while the photo decodes); refined on the photo, the corners are those found
    from OpenCV's reduction by area, to a few thousandths of a pixel."""
    from printcheck.load import read_photo, reduced_grey
    from printcheck.markers import coarse_markers, detect_markers, reduction

    path = tmp_path / "card.jpg"
    cv2.imwrite(str(path), big_photo.image, [cv2.IMWRITE_JPEG_QUALITY, 95])
    file = read_photo(path)
    image = cv2.imread(str(path))
    by = reduction(image.shape)
    assert by == 3  # 4000 px: the copy is libjpeg's 3/8
    copy = reduced_grey(file, by)
    assert copy is not None
    coarse = coarse_markers(*copy, dictionary=card.dictionary)
    assert sorted(i for i, _ in coarse.found) == [0, 1, 2, 3]
    here = {d.id: d.corners_px for d in detect_markers(image, dictionary=card.dictionary)}
    early = {
        d.id: d.corners_px for d in detect_markers(image, dictionary=card.dictionary, coarse=coarse)
    }
    assert sorted(here) == sorted(early) == [0, 1, 2, 3]
    assert max(np.abs(here[i] - early[i]).max() for i in here) < 0.01
    rect = locate(image, layout=card, coarse=coarse)
    assert _homography_error(big_photo, rect.homography)[1] < 0.1


def _card_on_paper(
    paper: tuple[int, int, int], around: tuple[int, int, int] | None = None, ppm: float = 10.0
) -> tuple[np.ndarray, np.ndarray]:
    """The built-in card's markers, drawn by OpenCV's own marker generator in black ink
    on paper of colour ``paper`` (BGR), and ``around`` them (default: the same paper),
    photographed square-on at ``ppm`` px/mm: the photo and its layout-mm -> photo-px
    homography."""
    layout = card_layout()
    dictionary = cv2.aruco.getPredefinedDictionary(cv2.aruco.DICT_4X4_50)
    shift = 20.0  # mm of paper beyond the outermost marker
    h = np.array([[ppm, 0.0, shift * ppm], [0.0, ppm, shift * ppm], [0.0, 0.0, 1.0]])
    side = int(round((50.8 + 2 * shift) * ppm))
    photo = np.empty((side, side, 3), np.uint8)
    photo[:] = paper if around is None else around
    for m in layout.markers:
        (x0, y0) = np.asarray(m.corners_mm)[0]
        n = int(round(12.0 * ppm))
        bits = cv2.aruco.generateImageMarker(dictionary, m.id, n) > 127
        r0, c0 = int(round((y0 + shift) * ppm)), int(round((x0 + shift) * ppm))
        patch = photo[r0 : r0 + n, c0 : c0 + n]
        patch[bits] = paper
        patch[~bits] = (20, 20, 20)
    return photo, h


def test_the_paper_is_read_off_the_markers_white_cells() -> None:
    from printcheck.markers import paper_colour

    layout = card_layout()
    markers = [(m.id, np.asarray(m.corners_mm)) for m in layout.markers]
    paper = (200, 180, 150)  # a warm light on white paper
    photo, h = _card_on_paper(paper)
    got = paper_colour(photo, markers, h, dictionary="DICT_4X4_50")
    assert got is not None and np.allclose(got, paper, atol=0.5), got
    # only the white cells are read, not what lies round the markers
    grey, _ = _card_on_paper(paper, around=(90, 90, 90))
    inside = paper_colour(grey, markers, h, dictionary="DICT_4X4_50")
    assert inside is not None and np.allclose(inside, paper, atol=0.5), inside
    # a channel at its ceiling is read at it (the cast is then a bound); two are no colour
    one, _ = _card_on_paper((255, 200, 160))
    assert paper_colour(one, markers, h, dictionary="DICT_4X4_50") == (255.0, 200.0, 160.0)
    two, _ = _card_on_paper((255, 252, 200))
    assert paper_colour(two, markers, h, dictionary="DICT_4X4_50") is None
