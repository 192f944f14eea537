"""Markers: find a layout's ArUco markers in a photo and refine their corners.

Markers are detected (``cv2.aruco``, the layout's dictionary only) on a copy of the photo
reduced to about 1600 px on its long side, so that 12-24 MP photos are quick; markers of
other dictionaries are ignored.  Every corner is then refined at full resolution: each of
the marker's four outer edges is located to sub-pixel accuracy along many short profiles
across it (the centroid of the intensity gradient), a straight line is fitted to each
edge, and the corners are the intersections of neighbouring lines.  A whole edge is far
better evidence than the few pixels around a corner.

Photo pixel coordinates follow OpenCV: ``x`` = column, ``y`` = row.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import cv2
import numpy as np

from printcheck.errors import LocateError
from printcheck.evidence import CLIPPED

__all__ = ["Coarse", "Detection", "coarse_markers", "detect_markers", "paper_colour", "reduction"]

_DETECT_LONG_SIDE = 1600  # about the long side of the reduced copy markers are found on, px


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
    blur_px : float or None
        How far the photo spreads the marker's sharp printed edges: the sigma (px) of a
        Gaussian blur with the same 10-90 % edge rise (:func:`edge_blur_px`); None
        where the edges could not be read.
    """

    id: int
    corners_px: np.ndarray
    refined: bool = field(default=True)
    blur_px: float | None = None


def _grey(image: np.ndarray) -> np.ndarray:
    return image if image.ndim == 2 else cv2.cvtColor(image, cv2.COLOR_BGR2GRAY)


def _dictionary(name: str) -> cv2.aruco.Dictionary:
    code = getattr(cv2.aruco, name, None)
    if code is None:
        raise LocateError(
            f"ArUco dictionary {name!r} is not known to this OpenCV; use e.g. DICT_4X4_50"
        )
    return cv2.aruco.getPredefinedDictionary(code)


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
    grad = np.gradient(prof, axis=1)  # central differences inside, one-sided at the ends
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
        d = pts - centre
        # the principal axis of the 2 x 2 scatter, in closed form (what an SVD of the
        # centred points gives as its first right singular vector, but for its sign)
        sxx, syy, sxy = float(d[:, 0] @ d[:, 0]), float(d[:, 1] @ d[:, 1]), float(d[:, 0] @ d[:, 1])
        angle = 0.5 * math.atan2(2.0 * sxy, sxx - syy)
        direction = np.array([math.cos(angle), math.sin(angle)])
        normal = np.array([-direction[1], direction[0]])
        dist = d @ normal
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
    return np.asarray(p1 + s[0] * d1, dtype=np.float64)


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


def reduction(shape: tuple[int, ...]) -> int:
    """By how much a side markers are first looked for on a reduced copy of a photo of
    ``shape`` (1: on the photo itself): a whole factor, to a long side of about 1600 px."""
    return max(1, math.ceil(max(shape[0], shape[1]) / _DETECT_LONG_SIDE - 0.25))


@dataclass(frozen=True)
class Coarse:
    """Markers found on a reduced copy of a photo: each (id, corners in the photo's
    pixels), and how far (px) those corners may be off."""

    found: tuple[tuple[int, np.ndarray], ...]
    tolerance: float


def coarse_markers(small: np.ndarray, scale: tuple[float, float], *, dictionary: str) -> Coarse:
    """The markers of ``dictionary`` in ``small``, a grey copy of a photo reduced by
    ``scale`` (photo pixels per copy pixel, x and y), in the photo's pixels."""
    found = _detect_raw(small, _dictionary(dictionary))
    fx, fy = scale
    # pixel centres: small (x) <-> full ((x + 0.5) * f - 0.5)
    return Coarse(
        tuple((i, (c + 0.5) * np.array([fx, fy]) - 0.5) for i, c in found),
        1.0 * max(fx, fy) + 1.0,
    )


def detect_markers(
    image: np.ndarray, *, dictionary: str, coarse: Coarse | None = None
) -> tuple[Detection, ...]:
    """Find the markers of ``dictionary`` in ``image`` and refine their corners.

    Parameters
    ----------
    image : (M, N, 3) or (M, N) uint8 ndarray
        The photo (BGR or grey).
    dictionary : str
        One of OpenCV's predefined ArUco dictionary names, e.g. ``"DICT_4X4_50"``.
    coarse : Coarse, optional
        The markers already found on a reduced copy of the photo (:func:`coarse_markers`);
        by default the photo is reduced by :func:`reduction` here.

    Returns
    -------
    tuple of Detection
        Every marker of that dictionary found, in detector order (an id may repeat when
        two markers with the same id are in view).
    """
    arr = np.asarray(image)
    rows, cols = arr.shape[:2]
    aruco_dict = _dictionary(dictionary)
    factor = reduction((rows, cols))
    # the grey of the whole photo where the markers are looked for on it; with them found
    # on a reduced copy, only that of each marker's crop (the conversion is per pixel)
    grey_full = None
    if coarse is None and factor >= 2:  # by a whole factor (OpenCV's area average is fastest so)
        grey_full = _grey(arr)
        crop = grey_full[: rows - rows % factor, : cols - cols % factor]
        small = cv2.resize(
            crop, (crop.shape[1] // factor, crop.shape[0] // factor), interpolation=cv2.INTER_AREA
        )
        coarse = coarse_markers(small, (float(factor), float(factor)), dictionary=dictionary)
    if coarse is not None and coarse.found:
        raw, tolerance = list(coarse.found), coarse.tolerance
    else:  # small markers may only show at full resolution
        grey_full = _grey(arr) if grey_full is None else grey_full
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
        crop = _grey(arr[y0:y1, x0:x1]).astype(np.float32)
        offset = np.array([x0, y0], dtype=np.float64)
        refined = _refine_corners(crop, corners - offset, bits, tolerance)
        if refined is None:
            found.append(Detection(marker_id, corners, refined=False))
        else:
            blur = edge_blur_px(crop, refined, bits)
            found.append(Detection(marker_id, refined + offset, refined=True, blur_px=blur))
    return tuple(found)


#: A Gaussian edge rises from 10 % to 90 % of its step over 2.563 sigma (2 x 1.2816).
_RISE_PER_SIGMA = 2.0 * 1.2816


def edge_blur_px(grey: np.ndarray, corners: np.ndarray, bits: int) -> float | None:
    """The photo's blur at a marker, from the edge spread of its printed outer border.

    A printed edge is a sharp step; the photo spreads it (focus, shake, the lens, JPEG).
    Across each of the four outer edges, profiles from 20 % to 80 % of the way along it
    (to the black border's inner side and as far outside, at most 14 px) are read; the
    distance over which each rises from 10 % to 90 % of its step is that of a Gaussian
    blur of sigma = rise / 2.563 (the edge-spread idea of slanted-edge resolution tests,
    e.g. ISO 12233; from memory).  Returns the median sigma in photo pixels, or None
    when too few profiles show a clear step (glare on the marker, too small).

    ``grey`` is a float32 crop; ``corners`` (4, 2) are its refined corners in it.
    """
    side = float(np.mean([np.hypot(*(corners[(i + 1) % 4] - corners[i])) for i in range(4)]))
    half = min(0.9 * side / (bits + 2), 14.0)  # within the one-module black border
    if half < 2.0:
        return None
    step = 0.25
    offsets = np.arange(-half, half + step / 2, step)
    centre = corners.mean(axis=0)
    bases, outs = [], []
    for i in range(4):
        a, b = corners[i], corners[(i + 1) % 4]
        d = (b - a) / max(float(np.hypot(*(b - a))), 1e-9)
        n = np.array([d[1], -d[0]])
        if np.dot((a + b) / 2 - centre, n) < 0:
            n = -n
        t = np.linspace(0.2, 0.8, 24)
        bases.append(a[None, :] + t[:, None] * (b - a)[None, :])
        outs.append(np.broadcast_to(n, (t.size, 2)))
    base, out = np.concatenate(bases), np.concatenate(outs)
    map_x = (base[:, 0, None] + offsets[None, :] * out[:, 0, None]).astype(np.float32)
    map_y = (base[:, 1, None] + offsets[None, :] * out[:, 1, None]).astype(np.float32)
    prof = cv2.remap(grey, map_x, map_y, cv2.INTER_LINEAR, borderMode=cv2.BORDER_REPLICATE)
    prof = prof.astype(np.float64)
    k = max(2, int(0.15 * offsets.size))
    dark = np.median(prof[:, :k], axis=1)
    light = np.median(prof[:, -k:], axis=1)
    ok = light - dark >= 20.0  # a clear step (8-bit levels)
    frac = ((prof - dark[:, None]) / np.where(ok, light - dark, 1.0)[:, None])[ok]
    # on each profile, the rise's ends are sought outward from the edge's middle (its
    # first sample at half the step): on a dim, noisy photo a sample of the dark side
    # passes 10 % by noise alone, well before the edge, and read from the profile's
    # start it was taken for the rise's beginning (a sharp marker read as blurred 3 px).
    # The samples after the last one below 10 % before the middle, and the first at
    # 90 % from the middle on; each crossing is interpolated from the sample before it
    n = frac.shape[1]
    i50 = np.argmax(frac >= 0.5, axis=1)
    ahead = np.arange(n)[None, :] < i50[:, None]
    below = (frac < 0.1) & ahead
    above = (frac >= 0.9) & ~ahead
    i10 = n - np.argmax(below[:, ::-1], axis=1)  # one past the last sample below 10 %
    i90 = np.argmax(above, axis=1)
    clear = (i50 > 0) & below.any(axis=1) & above.any(axis=1)
    rows = np.arange(frac.shape[0])[clear]
    i10, i90 = i10[clear], i90[clear]
    if rows.size < 12:
        return None
    x10 = _crossing(frac, rows, i10, 0.1, offsets, step)
    x90 = _crossing(frac, rows, i90, 0.9, offsets, step)
    return float(np.median(x90 - x10)) / _RISE_PER_SIGMA


def _crossing(
    frac: np.ndarray,
    rows: np.ndarray,
    at: np.ndarray,
    level: float,
    offsets: np.ndarray,
    step: float,
) -> np.ndarray:
    """Where each profile ``frac[rows]`` crosses ``level`` between samples ``at - 1`` and
    ``at`` (linear interpolation), in the units of ``offsets``."""
    before, after = frac[rows, at - 1], frac[rows, at]
    return offsets[at - 1] + (level - before) / (after - before) * step


def paper_colour(
    photo: np.ndarray,
    markers_mm: list[tuple[int, np.ndarray]],
    photo_from_layout: np.ndarray,
    *,
    dictionary: str,
) -> tuple[float, float, float] | None:
    """The colour (B, G, R, 8-bit) of the white paper the markers are printed on, as this
    photo shows it: a neutral under the photo's light, or None where it cannot be read.

    The white cells of each marker are known from its dictionary; each is read at nine
    points in its middle half (clear of the blurred edges of its black neighbours).
    White paper is often the brightest thing in a photo, and under a colour cast one of
    its channels may burn out: that channel is read at its ceiling, which only
    understates the cast (a channel at 255 was at least that).  Samples with two
    channels or more at the ceiling carry no colour and are left out, and so are those
    much darker than the brightest (a cell the fit placed on ink).  The median of at
    least nine samples is the paper's colour.

    Parameters
    ----------
    photo : (H, W, 3) uint8 ndarray, BGR
    markers_mm : list of (id, (4, 2) ndarray)
        The markers to read: id and layout corners (mm) in OpenCV's order.
    photo_from_layout : (3, 3) ndarray
        Layout mm (x, y) to photo pixels (x, y).
    dictionary : str
        The markers' ArUco dictionary, e.g. "DICT_4X4_50".
    """
    d = _dictionary(dictionary)
    to_photo = np.asarray(photo_from_layout, np.float64)
    n = int(d.markerSize)
    side = n + 2  # cells across, the black border included
    square = np.array([[0, 0], [side, 0], [side, side], [0, side]], np.float32)
    # nine points in the middle half of a cell, (x, y) from its corner, in cells
    nine = np.stack(np.meshgrid([0.25, 0.5, 0.75], [0.25, 0.5, 0.75]), axis=-1).reshape(-1, 2)
    points = []
    for marker_id, corners in markers_mm:
        if not 0 <= marker_id < d.bytesList.shape[0]:
            continue
        bits = cv2.aruco.Dictionary.getBitsFromByteList(d.bytesList[marker_id : marker_id + 1], n)
        rows, cols = np.nonzero(bits)  # the white cells, inside the border
        if rows.size == 0:
            continue
        cells = (np.stack([cols, rows], axis=1)[:, None, :] + 1 + nine[None]).reshape(-1, 2)
        to_mm = cv2.getPerspectiveTransform(square, np.asarray(corners, np.float32))
        points.append(cv2.perspectiveTransform(cells[None], to_photo @ to_mm)[0])
    if not points:
        return None
    px = np.rint(np.concatenate(points)).astype(int)
    xs, ys = px[:, 0], px[:, 1]
    inside = (xs >= 0) & (ys >= 0) & (xs < photo.shape[1]) & (ys < photo.shape[0])
    samples = photo[ys[inside], xs[inside]].astype(np.float64)
    samples = samples[(samples >= CLIPPED).sum(axis=1) <= 1]
    if samples.shape[0] < 9:
        return None
    grey = samples.mean(axis=1)
    samples = samples[grey >= 0.6 * float(np.percentile(grey, 90))]
    if samples.shape[0] < 9:
        return None
    b, g, r = np.median(samples, axis=0)
    return float(b), float(g), float(r)
