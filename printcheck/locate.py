"""Locate: find the layout's markers, fit the homography, rectify to millimetres.

The stage runs in four steps:

1. **Detect** the layout's ArUco markers (``cv2.aruco``, the layout's dictionary only) on
   a copy of the photo reduced to about 1600 px on its long side, so that 12-24 MP photos
   are quick.  Markers of other dictionaries, and ids the layout does not list, are
   ignored.
2. **Refine** every corner at full resolution: each of the marker's four outer edges is
   located to sub-pixel accuracy along many short profiles across it (the centroid of the
   intensity gradient), a straight line is fitted to each edge, and the corners are the
   intersections of neighbouring lines.  A whole edge is far better evidence than the
   few pixels around a corner.
3. **Fit** the photo-to-layout homography to every corner of every marker found (least
   squares after a normalised DLT, as ``cv2.findHomography`` with method 0 does, which
   minimises the reprojection error in the layout frame, in mm).  With three or more
   markers, a marker that does not fit the others (judged by leaving it out) is dropped.
   The residual is the RMS corner reprojection error in mm.
4. **Rectify** the window plus the layout's margin into the layout frame at a px/mm the
   photo really resolves there, with masks of what the photo shows and what is analysed.

Photo pixel coordinates follow OpenCV: ``x`` = column, ``y`` = row, and the centre of
pixel (row, col) is at ``(x, y) = (col, row)``.  The layout frame is in mm, x right, y
down; see :class:`printcheck.frame.Frame` for how rectified pixels map to it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import cv2
import numpy as np
from skimage.draw import polygon as _draw_polygon

from printcheck.errors import LocateError, OptionError, PhotoError
from printcheck.frame import Frame
from printcheck.layout import Layout, Window

__all__ = [
    "LocateConfig",
    "Calibration",
    "Rectified",
    "Detection",
    "locate",
    "rectify_scale",
    "detect_markers",
    "fit_homography",
    "local_px_per_mm",
]

_DETECT_LONG_SIDE = 1600  # about the long side of the reduced copy markers are found on, px
_PARTIAL_TOLERANCE = 1e-3  # share of the window that may fall outside before it counts
_SCALE_MARGIN_MM = 5.0  # margin kept around a given window with an explicit scale
_SEED_TOLERANCE_MM = 5.0  # how far one marker's homography may miss another that agrees


@dataclass(frozen=True)
class LocateConfig:
    """Options of the locate stage.

    Attributes
    ----------
    px_per_mm : float or None
        Resolution of the rectified image; ``None`` picks it from what the photo resolves
        at the window (never upsampling far beyond it).
    max_residual_mm : float
        Largest RMS corner residual accepted before the photo is refused as inconsistent
        with the layout.
    allow_partial : bool
        Measure the visible part when the window runs out of the photo, instead of refusing.
    max_px_per_mm : float
        Ceiling of the automatically chosen resolution (a finer photo is reduced).  At
        16 px/mm the smallest spot (0.1 mm², 0.36 mm across) is still 5.7 px across, and
        segment and measure cost a sixth of what they would at 40 px/mm.
    min_px_per_mm : float
        Floor of the automatically chosen resolution; a photo resolving less is warned
        about.
    max_pixels : int
        Ceiling on the rectified image's pixel count; the automatic resolution is lowered
        to keep within it (for large layouts).
    """

    px_per_mm: float | None = None
    max_residual_mm: float = 0.5
    allow_partial: bool = False
    max_px_per_mm: float = 16.0
    min_px_per_mm: float = 4.0
    max_pixels: int = 40_000_000


@dataclass(frozen=True)
class Calibration:
    """How scale and perspective were found (the result JSON's ``calibration``)."""

    method: str  # "layout" or "scale"
    layout: str | None
    markers: tuple[int, ...]
    px_per_mm: float  # resolution of the rectified image
    residual_mm: float | None  # RMS corner residual of the fit, None for "scale"
    photo_px_per_mm: float | None = None  # what the photo itself resolves at the window


@dataclass(frozen=True, eq=False)
class Rectified:
    """The photo warped into the layout frame.

    Attributes
    ----------
    image : (M, N, 3) uint8 ndarray, BGR
        The rectified photo; see :class:`printcheck.frame.Frame` for the pixel mapping.
        Pixels the photo does not show are 0.
    frame : Frame
    visible : (M, N) bool ndarray
        Surface the photo shows and that may hold spots: inside the photo, within the
        window plus the layout's margin, not excluded.
    analysed : (M, N) bool ndarray
        The analysed area: inside the window, shown by the photo, less exclusions.
    calibration : Calibration
    homography : (3, 3) float ndarray or None
        Photo pixel (x=col, y=row) to layout mm.
    warnings : tuple of str
    """

    image: np.ndarray
    frame: Frame
    visible: np.ndarray
    analysed: np.ndarray
    calibration: Calibration
    homography: np.ndarray | None
    warnings: tuple[str, ...] = ()


@dataclass(frozen=True, eq=False)
class Detection:
    """One marker found in a photo.

    Attributes
    ----------
    id : int
        The marker's id in its dictionary.
    corners_px : (4, 2) float ndarray
        Photo (x, y) pixel coordinates of its corners in OpenCV's order (the marker's
        top-left, top-right, bottom-right, bottom-left), refined at full resolution.
    refined : bool
        Whether the edge refinement succeeded (else the corners are the detector's).
    """

    id: int
    corners_px: np.ndarray
    refined: bool = field(default=True)


# --------------------------------------------------------------------------- input


def _as_bgr(image: np.ndarray) -> np.ndarray:
    arr = np.asarray(image)
    if arr.dtype != np.uint8:
        raise PhotoError(
            f"photo must be 8-bit (uint8), got dtype {arr.dtype}; decode it with printcheck.load"
        )
    if arr.ndim == 2:
        return cv2.cvtColor(arr, cv2.COLOR_GRAY2BGR)
    if arr.ndim != 3 or arr.shape[2] != 3:
        raise PhotoError(f"photo must be an (M, N, 3) BGR array, got shape {arr.shape}")
    if arr.shape[0] < 8 or arr.shape[1] < 8:
        raise PhotoError(f"photo is too small to measure: {arr.shape[1]}x{arr.shape[0]} px")
    return arr


def _grey(image: np.ndarray) -> np.ndarray:
    return image if image.ndim == 2 else cv2.cvtColor(image, cv2.COLOR_BGR2GRAY)


def _dictionary(name: str) -> cv2.aruco.Dictionary:
    code = getattr(cv2.aruco, name, None)
    if code is None:
        raise LocateError(
            f"ArUco dictionary {name!r} is not known to this OpenCV; use e.g. DICT_4X4_50"
        )
    return cv2.aruco.getPredefinedDictionary(code)


# --------------------------------------------------------------------------- detection


def _detect_raw(grey: np.ndarray, dictionary: cv2.aruco.Dictionary) -> list[tuple[int, np.ndarray]]:
    params = cv2.aruco.DetectorParameters()
    params.cornerRefinementMethod = cv2.aruco.CORNER_REFINE_SUBPIX
    detector = cv2.aruco.ArucoDetector(dictionary, params)
    corners, ids, _ = detector.detectMarkers(grey)
    if ids is None:
        return []
    return [
        (int(i), np.asarray(c, dtype=np.float64).reshape(4, 2))
        for i, c in zip(ids.ravel(), corners, strict=True)
    ]


def _edge_points(
    grey: np.ndarray, edges: list[tuple[np.ndarray, np.ndarray, np.ndarray]], half_width: float
) -> list[np.ndarray]:
    """Sub-pixel points on each dark-to-light edge ``(a, b, outward)``, from ``a`` to ``b``.

    Profiles across the edge (dark inside, light outside along ``outward``), from 15 % to
    85 % of the way along it, are sampled at 0.25 px steps (coarser for wide profiles);
    the edge on each is the centroid of the intensity gradient over the run of samples
    around its peak where it exceeds a quarter of the peak.  Returns one (K, 2) array of
    photo (x, y) points per edge.  The edges' profiles are sampled and reduced together
    (each profile on its own, so the result is that of one edge at a time).
    """
    step = max(0.25, 2.0 * half_width / 48.0)
    offsets = np.arange(-half_width, half_width + step / 2, step)
    bases, outwards, sizes = [], [], []
    for a, b, outward in edges:
        length = float(np.hypot(*(b - a)))
        n_profiles = int(np.clip(length / 1.5, 8, 120))
        t = np.linspace(0.15, 0.85, n_profiles)
        bases.append(a[None, :] + t[:, None] * (b - a)[None, :])  # (P, 2)
        outwards.append(np.broadcast_to(outward, (n_profiles, 2)))
        sizes.append(n_profiles)
    base = np.concatenate(bases)
    out = np.concatenate(outwards)
    # sample positions (P, S): profile p, offset s
    map_x = (base[:, 0, None] + offsets[None, :] * out[:, 0, None]).astype(np.float32)
    map_y = (base[:, 1, None] + offsets[None, :] * out[:, 1, None]).astype(np.float32)
    prof = cv2.remap(grey, map_x, map_y, cv2.INTER_LINEAR, borderMode=cv2.BORDER_REPLICATE)
    prof = prof.astype(np.float64)
    # np.gradient(prof, axis=1): central differences inside, one-sided at the ends
    grad = np.empty_like(prof)
    grad[:, 1:-1] = (prof[:, 2:] - prof[:, :-2]) / 2.0
    grad[:, 0] = prof[:, 1] - prof[:, 0]
    grad[:, -1] = prof[:, -1] - prof[:, -2]
    n_samples = grad.shape[1]
    idx = np.arange(n_samples)[None, :]
    j = np.argmax(grad, axis=1)[:, None]
    peak = np.take_along_axis(grad, j, axis=1)
    level = 0.25 * peak
    below = grad <= level
    left = np.where(below & (idx < j), idx, -1).max(axis=1)  # last sample below, left of peak
    right = np.where(below & (idx > j), idx, n_samples).min(axis=1)
    contrast = prof.max(axis=1) - prof.min(axis=1)
    ok = (peak[:, 0] > 0) & (contrast >= 8.0) & (left >= 0) & (right <= n_samples - 1)
    run = (idx > left[:, None]) & (idx < right[:, None])
    w = np.where(run, grad - level, 0.0)
    total = w.sum(axis=1)
    ok &= total > 0
    shift = (w * offsets[None, :]).sum(axis=1) / np.where(total > 0, total, 1.0)
    pts = base + shift[:, None] * out
    bounds = np.cumsum([0, *sizes])
    return [pts[b0:b1][ok[b0:b1]] for b0, b1 in zip(bounds[:-1], bounds[1:], strict=True)]


def _fit_line(points: np.ndarray) -> tuple[np.ndarray, np.ndarray] | None:
    """Total-least-squares line through ``points`` with 3-MAD outlier rejection.

    Returns (a point on the line, unit direction), or None with too few points.
    """
    pts = points
    for _ in range(3):
        if len(pts) < 5:
            return None
        centre = pts.mean(axis=0)
        _, _, vt = np.linalg.svd(pts - centre, full_matrices=False)
        direction = vt[0]
        normal = np.array([-direction[1], direction[0]])
        dist = (pts - centre) @ normal
        mad = float(np.median(np.abs(dist - np.median(dist)))) * 1.4826
        keep = np.abs(dist) <= max(3.0 * mad, 0.05)
        if keep.all():
            break
        pts = pts[keep]
    return centre, direction


def _intersect(
    l1: tuple[np.ndarray, np.ndarray], l2: tuple[np.ndarray, np.ndarray]
) -> np.ndarray | None:
    (p1, d1), (p2, d2) = l1, l2
    m = np.array([d1, -d2]).T
    if abs(np.linalg.det(m)) < 1e-6:
        return None
    s = np.linalg.solve(m, p2 - p1)
    return p1 + s[0] * d1


def _refine_corners(
    grey: np.ndarray, corners: np.ndarray, bits: int, tolerance: float
) -> np.ndarray | None:
    """Refine a marker's four corners from its four outer edges (see module docstring).

    ``grey`` is a float32 crop; ``corners`` (4, 2) are in its coordinates; ``bits`` is
    the marker's data size (the black border adds one module each side); ``tolerance``
    is how far (px) the detector's corners may be off.
    """
    current = corners.copy()
    side = float(np.mean([np.hypot(*(current[(i + 1) % 4] - current[i])) for i in range(4)]))
    module = side / (bits + 2)
    first = max(0.7 * module, tolerance + 2.0)
    first = min(first, 0.85 * module) if module > 4 else first
    for half_width in (first, float(np.clip(0.5 * module, 2.5, 10.0))):
        centre = current.mean(axis=0)
        edges = []
        for i in range(4):
            a, b = current[i], current[(i + 1) % 4]
            d = (b - a) / max(np.hypot(*(b - a)), 1e-9)
            n = np.array([d[1], -d[0]])
            if np.dot((a + b) / 2 - centre, n) < 0:
                n = -n
            edges.append((a, b, n))
        lines = []
        for pts in _edge_points(grey, edges, half_width):
            line = _fit_line(pts)
            if line is None:
                return None
            lines.append(line)
        new = []
        for i in range(4):
            p = _intersect(lines[(i - 1) % 4], lines[i])  # corner i is where edge i-1 meets edge i
            if p is None:
                return None
            new.append(p)
        new_arr = np.asarray(new)
        if np.max(np.hypot(*(new_arr - corners).T)) > tolerance + 0.5 * module:
            return None
        current = new_arr
    return current


def detect_markers(image: np.ndarray, *, dictionary: str) -> tuple[Detection, ...]:
    """Find the markers of ``dictionary`` in ``image`` and refine their corners.

    Parameters
    ----------
    image : (M, N, 3) or (M, N) uint8 ndarray
        The photo (BGR or grey).
    dictionary : str
        One of OpenCV's predefined ArUco dictionary names, e.g. ``"DICT_4X4_50"``.

    Returns
    -------
    tuple of Detection
        Every marker of that dictionary found, in detector order (an id may repeat when
        two markers with the same id are in view).
    """
    arr = np.asarray(image)
    grey_full = _grey(arr)
    rows, cols = grey_full.shape
    aruco_dict = _dictionary(dictionary)
    factor = math.ceil(max(rows, cols) / _DETECT_LONG_SIDE - 0.25)
    if factor >= 2:  # by a whole factor (OpenCV's area average is fastest so)
        crop = grey_full[: rows - rows % factor, : cols - cols % factor]
        small = cv2.resize(
            crop, (crop.shape[1] // factor, crop.shape[0] // factor), interpolation=cv2.INTER_AREA
        )
        fx = fy = float(factor)
        raw = _detect_raw(small, aruco_dict)
        # pixel centres: small (x) <-> full ((x + 0.5) * f - 0.5)
        raw = [(i, (c + 0.5) * np.array([fx, fy]) - 0.5) for i, c in raw]
        tolerance = 1.0 * max(fx, fy) + 1.0
        if not raw:  # small markers may only show at full resolution
            raw = _detect_raw(grey_full, aruco_dict)
            tolerance = 1.5
    else:
        raw = _detect_raw(grey_full, aruco_dict)
        tolerance = 1.5
    bits = int(aruco_dict.markerSize)
    found = []
    for marker_id, corners in raw:
        side = float(np.mean([np.hypot(*(corners[(i + 1) % 4] - corners[i])) for i in range(4)]))
        pad = int(math.ceil(0.5 * side + tolerance + 4))
        x0 = max(int(np.floor(corners[:, 0].min())) - pad, 0)
        y0 = max(int(np.floor(corners[:, 1].min())) - pad, 0)
        x1 = min(int(np.ceil(corners[:, 0].max())) + pad + 1, cols)
        y1 = min(int(np.ceil(corners[:, 1].max())) + pad + 1, rows)
        crop = grey_full[y0:y1, x0:x1].astype(np.float32)
        offset = np.array([x0, y0], dtype=np.float64)
        refined = _refine_corners(crop, corners - offset, bits, tolerance)
        if refined is None:
            found.append(Detection(marker_id, corners, refined=False))
        else:
            found.append(Detection(marker_id, refined + offset, refined=True))
    return tuple(found)


# --------------------------------------------------------------------------- homography


def fit_homography(photo_px: np.ndarray, layout_mm: np.ndarray) -> np.ndarray:
    """Least-squares homography from photo pixels to layout mm.

    A normalised DLT followed by Levenberg-Marquardt refinement of the reprojection error
    in the layout frame (``cv2.findHomography`` with method 0).

    Parameters
    ----------
    photo_px : (K, 2) float ndarray
        Photo (x, y) pixel coordinates, K >= 4.
    layout_mm : (K, 2) float ndarray
        The same points' layout (x, y) in mm.

    Returns
    -------
    (3, 3) float ndarray
        ``H`` with ``H[2, 2] == 1`` mapping homogeneous photo (x, y, 1) to layout mm.

    Raises
    ------
    LocateError
        When the points are degenerate (fewer than 4, or collinear).
    """
    src = np.asarray(photo_px, dtype=np.float64).reshape(-1, 2)
    dst = np.asarray(layout_mm, dtype=np.float64).reshape(-1, 2)
    if len(src) < 4 or len(src) != len(dst):
        raise LocateError(
            f"a homography needs 4 or more point pairs, got {len(src)} and {len(dst)}"
        )
    h, _ = cv2.findHomography(src, dst, 0)
    if h is None or not np.all(np.isfinite(h)) or abs(h[2, 2]) < 1e-12:
        raise LocateError("the marker corners are degenerate (collinear); no homography fits them")
    return h / h[2, 2]


def _apply(h: np.ndarray, pts: np.ndarray) -> np.ndarray:
    p = np.c_[pts, np.ones(len(pts))] @ h.T
    return p[:, :2] / p[:, 2:3]


def local_px_per_mm(h_layout_to_photo: np.ndarray, x_mm: float, y_mm: float) -> tuple[float, float]:
    """Local scale of the layout-to-photo map at layout point (x, y).

    Returns
    -------
    (float, float)
        The smaller and larger singular values of the map's Jacobian there: the photo's
        px/mm along its least and best resolved directions.
    """
    h = h_layout_to_photo
    p = h @ np.array([x_mm, y_mm, 1.0])
    u, v, w = p[0] / p[2], p[1] / p[2], p[2]
    jac = np.array(
        [
            [(h[0, 0] - u * h[2, 0]) / w, (h[0, 1] - u * h[2, 1]) / w],
            [(h[1, 0] - v * h[2, 0]) / w, (h[1, 1] - v * h[2, 1]) / w],
        ]
    )
    s = np.linalg.svd(jac, compute_uv=False)
    return float(s[-1]), float(s[0])


def _rms(h: np.ndarray, photo: np.ndarray, layout: np.ndarray) -> float:
    d = _apply(h, photo) - layout
    return float(np.sqrt(np.mean(np.sum(d * d, axis=1))))


def _fits_all(
    cands: list[tuple[int, np.ndarray, np.ndarray]], tolerance_mm: float
) -> np.ndarray | None:
    """The homography of all candidates when every one is within ``tolerance_mm`` (RMS)."""
    try:
        h = fit_homography(
            np.concatenate([c[1] for c in cands]), np.concatenate([c[2] for c in cands])
        )
    except LocateError:
        return None
    return h if all(_rms(h, c[1], c[2]) <= tolerance_mm for c in cands) else None


def _robust_fit(
    cands: list[tuple[int, np.ndarray, np.ndarray]], drop_above_mm: float
) -> tuple[np.ndarray, list[tuple[int, np.ndarray, np.ndarray]], list[tuple[int, float]]]:
    """Fit to the candidates (id, photo (4, 2), layout (4, 2)) that agree, dropping misfits.

    When the fit to all candidates (each id once) has every candidate within
    ``drop_above_mm``, all are kept.  Otherwise, with three or more candidates: first a
    consensus, seeded by each candidate in turn (its 4 corners fix a homography exactly)
    and by each pair of candidates (whose seed counts only with a third marker agreeing);
    candidates whose corners land within ``_SEED_TOLERANCE_MM`` of their layout places
    agree with it, and the largest consensus wins.  Then, leaving one out at a time, the
    worst is dropped while its corners miss by more than ``drop_above_mm`` (RMS) and by
    more than 4 times the others' own RMS, until the fit of all that are left has every
    one within ``drop_above_mm``.  (On a long layout -- markers at both ends of a
    slideway -- one marker's homography, or one end's, extrapolated to the other end
    misses it by far more than the fit of all does: pairs across the ends seed well.)
    Returns the homography, the kept candidates and the dropped (id, miss in mm).
    """
    kept = list(cands)
    dropped: list[tuple[int, float]] = []
    unique = len({c[0] for c in kept}) == len(kept)
    if len(kept) >= 3 and unique:
        h_all = _fits_all(kept, drop_above_mm)
        if h_all is not None:
            return h_all, kept, dropped
    if len(kept) >= 3:
        best: tuple[int, float] = (0, 0.0)
        best_set = list(range(len(kept)))
        seeds: list[tuple[int, ...]] = [(j,) for j in range(len(kept))]
        seeds += [
            (i, j)
            for i in range(len(kept))
            for j in range(i + 1, len(kept))
            if kept[i][0] != kept[j][0]
        ]
        for seed in seeds:
            try:
                h = fit_homography(
                    np.concatenate([kept[j][1] for j in seed]),
                    np.concatenate([kept[j][2] for j in seed]),
                )
            except LocateError:
                continue
            miss = [_rms(h, c[1], c[2]) for c in kept]
            agree = [i for i, m in enumerate(miss) if m <= _SEED_TOLERANCE_MM]
            n_ids = len({kept[i][0] for i in agree})
            if len(seed) == 2 and n_ids < 3:
                continue  # a pair's own fit is no evidence: a third marker must agree
            score = (n_ids, -sum(miss[i] for i in agree))
            if score > best:
                best, best_set = score, agree
        if best[0] >= 2 and len(best_set) < len(kept):  # two or more markers agree
            h = fit_homography(
                np.concatenate([kept[i][1] for i in best_set]),
                np.concatenate([kept[i][2] for i in best_set]),
            )
            dropped = [(c[0], _rms(h, c[1], c[2])) for i, c in enumerate(kept) if i not in best_set]
            kept = [kept[i] for i in best_set]
    while len(kept) >= 3:
        if len({c[0] for c in kept}) == len(kept) and _fits_all(kept, drop_above_mm) is not None:
            break
        worst, worst_miss, worst_rest = -1, -1.0, 0.0
        for j in range(len(kept)):
            rest = kept[:j] + kept[j + 1 :]
            ph = np.concatenate([c[1] for c in rest])
            la = np.concatenate([c[2] for c in rest])
            try:
                h = fit_homography(ph, la)
            except LocateError:
                continue
            miss_j = _rms(h, kept[j][1], kept[j][2])
            if miss_j > worst_miss:
                worst, worst_miss, worst_rest = j, miss_j, _rms(h, ph, la)
        if worst < 0 or worst_miss <= max(drop_above_mm, 4.0 * worst_rest):
            break
        dropped.append((kept[worst][0], worst_miss))
        del kept[worst]
    ph = np.concatenate([c[1] for c in kept])
    la = np.concatenate([c[2] for c in kept])
    return fit_homography(ph, la), kept, dropped


# --------------------------------------------------------------------------- rectification


def _choose_px_per_mm(
    photo_ppm: float, area_mm2: float, config: LocateConfig, warnings: list[str]
) -> float:
    if config.px_per_mm is not None:
        s = float(config.px_per_mm)
        if not (math.isfinite(s) and s > 0):
            raise OptionError(f"px_per_mm must be a positive number, got {config.px_per_mm!r}")
        if area_mm2 * s * s > config.max_pixels:
            raise OptionError(
                f"px_per_mm {s:g} makes a rectified image of {area_mm2 * s * s / 1e6:.0f} MP, "
                f"over the "
                f"{config.max_pixels / 1e6:.0f} MP limit; choose at most "
                f"{math.sqrt(config.max_pixels / area_mm2):.1f}"
            )
        return s
    s = min(photo_ppm, config.max_px_per_mm)
    cap = math.sqrt(config.max_pixels / max(area_mm2, 1e-9))
    if photo_ppm < config.min_px_per_mm:
        warnings.append(
            f"the photo resolves only {photo_ppm:.1f} px/mm at the window (less than "
            f"{config.min_px_per_mm:g}); small spots may be missed: move the camera closer"
        )
        s = config.min_px_per_mm
    if s > cap:
        s = cap
        warnings.append(
            f"rectified at {cap:.1f} px/mm to keep the image within "
            f"{config.max_pixels / 1e6:.0f} MP"
        )
    return math.floor(s * 10.0) / 10.0 if s >= 10.0 else math.floor(s * 100.0) / 100.0


def _frame_for(window: Window, margin_mm: float, s: float) -> Frame:
    x0, y0 = window.x_mm - margin_mm, window.y_mm - margin_mm
    cols = int(math.ceil((window.width_mm + 2 * margin_mm) * s - 1e-6))
    rows = int(math.ceil((window.height_mm + 2 * margin_mm) * s - 1e-6))
    return Frame(px_per_mm=s, origin_mm=(x0, y0), shape=(rows, cols), window=window)


def _rect_to_layout(frame: Frame) -> np.ndarray:
    """Rectified pixel centre (x=col, y=row) -> layout mm, as a 3x3 matrix."""
    s = frame.px_per_mm
    x0, y0 = frame.origin_mm
    return np.array([[1 / s, 0, x0 + 0.5 / s], [0, 1 / s, y0 + 0.5 / s], [0, 0, 1.0]])


def _inside_photo(
    m: np.ndarray, shape: tuple[int, int], photo_shape: tuple[int, int]
) -> np.ndarray:
    """Which rectified pixels map (by ``m``: rect px -> photo px) inside the photo."""
    rows, cols = shape
    ph, pw = photo_shape
    corners = np.array(
        [[-0.5, -0.5], [cols - 0.5, -0.5], [cols - 0.5, rows - 0.5], [-0.5, rows - 0.5]]
    )
    hom = np.c_[corners, np.ones(4)] @ m.T
    if np.all(hom[:, 2] > 0):
        p = hom[:, :2] / hom[:, 2:3]
        if np.all(
            (p[:, 0] >= -0.5) & (p[:, 0] <= pw - 0.5) & (p[:, 1] >= -0.5) & (p[:, 1] <= ph - 0.5)
        ):
            return np.ones(shape, dtype=bool)  # a convex region wholly inside
    c = np.arange(cols, dtype=np.float64)[None, :]
    r = np.arange(rows, dtype=np.float64)[:, None]
    w = m[2, 0] * c + m[2, 1] * r + m[2, 2]
    with np.errstate(divide="ignore", invalid="ignore"):
        u = (m[0, 0] * c + m[0, 1] * r + m[0, 2]) / w
        v = (m[1, 0] * c + m[1, 1] * r + m[1, 2]) / w
        inside = (w > 0) & (u >= -0.5) & (u <= pw - 0.5) & (v >= -0.5) & (v <= ph - 0.5)
    return inside


def _warp(image: np.ndarray, m: np.ndarray, shape: tuple[int, int], ratio: float) -> np.ndarray:
    """Sample ``image`` at rectified pixels; ``m`` maps rect px -> photo px.

    Only the photo region needed is read.  When the photo is finer than the output by 2
    or more (``ratio``), that region is first reduced by a whole factor (area average) so
    the warp does not alias.
    """
    rows, cols = shape
    ph, pw = image.shape[:2]
    corners = np.array(
        [[-0.5, -0.5], [cols - 0.5, -0.5], [cols - 0.5, rows - 0.5], [-0.5, rows - 0.5]]
    )
    hom = np.c_[corners, np.ones(4)] @ m.T
    if np.all(hom[:, 2] > 0):
        p = hom[:, :2] / hom[:, 2:3]
        x0 = int(np.clip(np.floor(p[:, 0].min()) - 3, 0, pw - 1))
        y0 = int(np.clip(np.floor(p[:, 1].min()) - 3, 0, ph - 1))
        x1 = int(np.clip(np.ceil(p[:, 0].max()) + 4, x0 + 1, pw))
        y1 = int(np.clip(np.ceil(p[:, 1].max()) + 4, y0 + 1, ph))
    else:
        x0, y0, x1, y1 = 0, 0, pw, ph
    roi = image[y0:y1, x0:x1]
    shift = np.array([[1.0, 0, -x0], [0, 1.0, -y0], [0, 0, 1.0]])
    m_roi = shift @ m
    k = int(math.floor(ratio))
    if k >= 2 and roi.shape[0] >= 2 * k and roi.shape[1] >= 2 * k:
        small = cv2.resize(
            roi, (roi.shape[1] // k, roi.shape[0] // k), interpolation=cv2.INTER_AREA
        )
        fx = small.shape[1] / roi.shape[1]
        fy = small.shape[0] / roi.shape[0]
        # pixel centres: roi x -> small (x + 0.5) * f - 0.5
        down = np.array([[fx, 0, 0.5 * fx - 0.5], [0, fy, 0.5 * fy - 0.5], [0, 0, 1.0]])
        roi, m_roi = small, down @ m_roi
    return cv2.warpPerspective(
        roi,
        m_roi,
        (cols, rows),
        flags=cv2.INTER_LINEAR | cv2.WARP_INVERSE_MAP,
        borderMode=cv2.BORDER_REPLICATE,
    )


def _masks(
    frame: Frame,
    margin_mm: float,
    inside: np.ndarray,
    exclusions: tuple[tuple[tuple[float, float], ...], ...],
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(visible, analysed, window) masks; a pixel counts by where its centre lies."""
    w = frame.window
    outer = Window(
        w.x_mm - margin_mm,
        w.y_mm - margin_mm,
        w.width_mm + 2 * margin_mm,
        w.height_mm + 2 * margin_mm,
    )
    outer_rows, outer_cols = Frame(
        frame.px_per_mm, frame.origin_mm, frame.shape, outer
    ).window_slices()
    win_rows, win_cols = frame.window_slices()
    excluded = np.zeros(frame.shape, dtype=bool)
    for poly in exclusions:
        xs = np.array([p[0] for p in poly])
        ys = np.array([p[1] for p in poly])
        pr, pc = frame.to_px(xs, ys)
        rr, cc = _draw_polygon(pr, pc, shape=frame.shape)
        excluded[rr, cc] = True
    window = np.zeros(frame.shape, dtype=bool)
    window[win_rows, win_cols] = True
    visible = np.zeros(frame.shape, dtype=bool)
    visible[outer_rows, outer_cols] = True
    visible &= inside & ~excluded
    analysed = window & inside & ~excluded
    return visible, analysed, window & ~excluded


def _sides_missing(window_mask: np.ndarray, analysed: np.ndarray) -> str:
    rows = np.flatnonzero(window_mask.any(axis=1))
    cols = np.flatnonzero(window_mask.any(axis=0))
    if rows.size == 0:
        return ""
    missing = window_mask & ~analysed
    names = []
    if missing[rows[0], :].any():
        names.append("top")
    if missing[rows[-1], :].any():
        names.append("bottom")
    if missing[:, cols[0]].any():
        names.append("left")
    if missing[:, cols[-1]].any():
        names.append("right")
    return " and ".join(names)


def _check_partial(
    window_mask: np.ndarray,
    analysed: np.ndarray,
    config: LocateConfig,
    warnings: list[str],
    what: str,
) -> None:
    total = int(window_mask.sum())
    shown = int(analysed.sum())
    if total == 0 or shown == 0:
        raise LocateError(
            f"{what} lies wholly outside the photo; take the photo with the window in view"
        )
    missing = 1.0 - shown / total
    if missing <= _PARTIAL_TOLERANCE:
        return
    sides = _sides_missing(window_mask, analysed)
    at = f" at its {sides} edge" if sides else ""
    if not config.allow_partial:
        raise LocateError(
            f"{what} runs out of the photo: {100 * missing:.1f}% of its area is missing{at}; "
            f"retake the photo with the whole window in view, or measure the visible "
            f"{100 * (1 - missing):.1f}% with --partial"
        )
    warnings.append(
        f"{what} runs out of the photo: {100 * missing:.1f}% of its area is missing{at}; "
        "measuring the rest"
    )


def _rectify(
    image: np.ndarray,
    h_photo_to_layout: np.ndarray,
    window: Window,
    margin_mm: float,
    exclusions: tuple[tuple[tuple[float, float], ...], ...],
    s: float,
    photo_ppm: float,
    config: LocateConfig,
    warnings: list[str],
    what: str,
) -> tuple[np.ndarray, Frame, np.ndarray, np.ndarray]:
    frame = _frame_for(window, margin_mm, s)
    m = np.linalg.inv(h_photo_to_layout) @ _rect_to_layout(frame)  # rect px -> photo px
    inside = _inside_photo(m, frame.shape, image.shape[:2])
    visible, analysed, window_mask = _masks(frame, margin_mm, inside, exclusions)
    _check_partial(window_mask, analysed, config, warnings, what)
    rect = _warp(image, m, frame.shape, photo_ppm / s)
    if not inside.all():
        rect[~inside] = 0
    return rect, frame, visible, analysed


# --------------------------------------------------------------------------- entry points


def locate(
    image: np.ndarray, *, layout: Layout, config: LocateConfig = LocateConfig()
) -> Rectified:
    """Find ``layout``'s markers in ``image`` and rectify it to the layout frame.

    Parameters
    ----------
    image : (M, N, 3) uint8 ndarray, BGR
        The photo (not modified).  A grey (M, N) photo is accepted too.
    layout : Layout
        Where the markers sit relative to the window.
    config : LocateConfig

    Returns
    -------
    Rectified
        The window plus ``layout.margin_mm`` warped to the layout frame, its masks, the
        calibration (markers used, RMS corner residual in mm, px/mm) and warnings.

    Raises
    ------
    LocateError
        When no marker of the layout is found, when the markers found do not fit the
        layout (residual over ``config.max_residual_mm``), or when the window runs out of
        the photo and ``config.allow_partial`` is False.
    """
    photo = _as_bgr(image)
    warnings: list[str] = []
    expected = layout.marker_ids
    detections = detect_markers(photo, dictionary=layout.dictionary)
    by_id = {m.id: m for m in layout.markers}
    cands = [
        (d.id, d.corners_px, np.asarray(by_id[d.id].corners_mm, dtype=np.float64))
        for d in detections
        if d.id in by_id
    ]
    if not cands:
        ids = ", ".join(str(i) for i in expected)
        others = sorted({d.id for d in detections})
        extra = (
            f" (found ids {', '.join(map(str, others))}, which the layout does not list)"
            if others
            else ""
        )
        raise LocateError(
            f"no marker of layout {layout.name} found in the photo: "
            f"expected {layout.dictionary} ids {ids}"
            f"{extra}; check the layout matches the card and that its markers are in view and sharp"
        )
    unrefined = sorted({d.id for d in detections if d.id in by_id and not d.refined})
    if unrefined:
        warnings.append(
            f"marker {', '.join(map(str, unrefined))}: edges could not be refined; "
            "detector corners used"
        )
    # duplicate ids: with a single id, keep the largest; otherwise let the fit decide
    ids_found = {c[0] for c in cands}
    if len(ids_found) == 1 and len(cands) > 1:
        areas = [abs(cv2.contourArea(c[1].astype(np.float32))) for c in cands]
        cands = [cands[int(np.argmax(areas))]]
        warnings.append(f"marker {cands[0][0]} is in view {len(areas)} times; the largest was used")
    h, kept, dropped = _robust_fit(cands, 0.5 * config.max_residual_mm)
    kept_ids = {c[0] for c in kept}
    for marker_id, miss in dropped:
        if marker_id in kept_ids:
            warnings.append(
                f"a second marker {marker_id} in view does not fit the layout "
                f"(off by {miss:.1f} mm): ignored"
            )
        else:
            warnings.append(
                f"marker {marker_id} does not fit the others (off by {miss:.2f} mm): left out; "
                f"is it flat and in its place?"
            )
    # any id still seen twice: keep the better fitting one
    best: dict[int, tuple[float, tuple[int, np.ndarray, np.ndarray]]] = {}
    for c in kept:
        err = _rms(h, c[1], c[2])
        if c[0] not in best or err < best[c[0]][0]:
            best[c[0]] = (err, c)
    if len(best) < len(kept):
        kept = [v[1] for v in best.values()]
        h = fit_homography(
            np.concatenate([c[1] for c in kept]), np.concatenate([c[2] for c in kept])
        )
    used = tuple(sorted(best))
    residual = _rms(h, np.concatenate([c[1] for c in kept]), np.concatenate([c[2] for c in kept]))
    if residual > config.max_residual_mm:
        raise LocateError(
            f"markers {', '.join(map(str, used))} do not fit layout {layout.name}: "
            f"RMS corner residual {residual:.2f} mm, over {config.max_residual_mm:g} mm; "
            f"check the layout matches the card, the "
            f"card was printed at 100% and lies flat"
        )
    if residual > 0.5 * config.max_residual_mm:
        warnings.append(
            f"calibration residual {residual:.2f} mm is high; check that the card lies flat"
        )
    missing = [i for i in expected if i not in best]
    if missing:
        warnings.append(
            f"layout {layout.name}: marker{'s' if len(missing) > 1 else ''} "
            f"{', '.join(map(str, missing))} not found; "
            f"scale from marker{'s' if len(used) > 1 else ''} {', '.join(map(str, used))}"
        )
    if len(used) == 1 and len(expected) > 1:
        warnings.append(
            "only one marker found: its corners fix the perspective exactly, "
            "with nothing to check them"
        )

    win = layout.window
    h_lp = np.linalg.inv(h)
    photo_ppm, _ = local_px_per_mm(h_lp, win.x_mm + win.width_mm / 2, win.y_mm + win.height_mm / 2)
    margin = layout.margin_mm
    area = (win.width_mm + 2 * margin) * (win.height_mm + 2 * margin)
    s = _choose_px_per_mm(photo_ppm, area, config, warnings)
    rect, frame, visible, analysed = _rectify(
        photo,
        h,
        win,
        margin,
        layout.exclusions,
        s,
        photo_ppm,
        config,
        warnings,
        f"the window of layout {layout.name}",
    )
    calibration = Calibration(
        method="layout",
        layout=layout.name,
        markers=used,
        px_per_mm=s,
        residual_mm=residual,
        photo_px_per_mm=photo_ppm,
    )
    return Rectified(rect, frame, visible, analysed, calibration, h, tuple(warnings))


def rectify_scale(
    image: np.ndarray,
    *,
    px_per_mm: float,
    window: Window | None = None,
    config: LocateConfig = LocateConfig(),
) -> Rectified:
    """Treat a square-on ``image`` as already rectified at ``px_per_mm``.

    The window is the whole image, or ``window`` (mm, from the image's top-left: pixel
    (row, col) covers ``x in [col / px_per_mm, (col + 1) / px_per_mm)``).  With a given
    window, up to 5 mm of the image around it is kept as margin.  The image is resampled
    only when ``config.px_per_mm`` asks for another resolution, or when it is finer than
    ``config.max_px_per_mm``.

    Raises
    ------
    OptionError
        When ``px_per_mm`` is not a positive number.
    LocateError
        When the window runs out of the image (unless ``config.allow_partial``).
    """
    photo = _as_bgr(image)
    s_in = (
        float(px_per_mm)
        if isinstance(px_per_mm, int | float) and not isinstance(px_per_mm, bool)
        else math.nan
    )
    if not (math.isfinite(s_in) and s_in > 0):
        raise OptionError(f"--px-per-mm must be a positive number, got {px_per_mm!r}")
    rows, cols = photo.shape[:2]
    warnings: list[str] = []
    if window is None:
        win = Window(0.0, 0.0, cols / s_in, rows / s_in)
        margin = 0.0
    else:
        win = window
        if not (win.width_mm > 0 and win.height_mm > 0):
            raise OptionError(
                f"the window must have a positive size, got {win.width_mm:g} x {win.height_mm:g} mm"
            )
        margin = _SCALE_MARGIN_MM
    h = np.array([[1 / s_in, 0, 0.5 / s_in], [0, 1 / s_in, 0.5 / s_in], [0, 0, 1.0]])
    area = (win.width_mm + 2 * margin) * (win.height_mm + 2 * margin)
    if config.px_per_mm is None and config.min_px_per_mm <= s_in <= config.max_px_per_mm:
        s = s_in
        if area * s * s > config.max_pixels:
            s = _choose_px_per_mm(s_in, area, config, warnings)
    else:
        s = _choose_px_per_mm(s_in, area, config, warnings)
    if s == s_in:
        # no resampling: crop whole pixels, with the frame's origin on the pixel grid
        c0 = int(math.floor((win.x_mm - margin) * s + 1e-6))
        r0 = int(math.floor((win.y_mm - margin) * s + 1e-6))
        c1 = int(math.ceil((win.x_mm + win.width_mm + margin) * s - 1e-6))
        r1 = int(math.ceil((win.y_mm + win.height_mm + margin) * s - 1e-6))
        frame = Frame(s, (c0 / s, r0 / s), (r1 - r0, c1 - c0), win)
        rr = np.arange(r0, r1)
        cc = np.arange(c0, c1)
        inside = ((rr >= 0) & (rr < rows))[:, None] & ((cc >= 0) & (cc < cols))[None, :]
        rect = np.zeros((*frame.shape, 3), dtype=np.uint8)
        src_r = slice(min(max(r0, 0), rows), max(min(r1, rows), 0))
        src_c = slice(min(max(c0, 0), cols), max(min(c1, cols), 0))
        if src_r.stop > src_r.start and src_c.stop > src_c.start:
            rect[src_r.start - r0 : src_r.stop - r0, src_c.start - c0 : src_c.stop - c0] = photo[
                src_r, src_c
            ]
        visible, analysed, window_mask = _masks(frame, margin, inside, ())
        _check_partial(window_mask, analysed, config, warnings, "the window")
    else:
        rect, frame, visible, analysed = _rectify(
            photo, h, win, margin, (), s, s_in, config, warnings, "the window"
        )
    calibration = Calibration(
        method="scale", layout=None, markers=(), px_per_mm=s, residual_mm=None, photo_px_per_mm=s_in
    )
    return Rectified(rect, frame, visible, analysed, calibration, h, tuple(warnings))
