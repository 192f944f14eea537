"""Window: the rectified frame, its masks, and where a card hides the surface.

The window plus the layout's margin is warped into the layout frame at a px/mm the photo
really resolves there; masks say what the photo shows (``visible``) and what is analysed
(the window less exclusions).  A card's cut-out hides the surface beyond the window: where
a printed card's edge lies along a side of the window, nothing beyond it is visible, so a
spot cut by the card is measured by its visible piece.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

import cv2
import numpy as np
from skimage.draw import polygon as _draw_polygon

from printcheck.errors import LocateError, OptionError
from printcheck.frame import Frame
from printcheck.layout import Window

if TYPE_CHECKING:
    from printcheck.locate import LocateConfig

__all__ = [
    "choose_px_per_mm",
    "frame_for",
    "rectify_window",
    "masks",
    "check_partial",
    "hide_beyond_card",
]

_PARTIAL_TOLERANCE = 1e-3  # share of the window that may fall outside before it counts


def choose_px_per_mm(
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


def frame_for(window: Window, margin_mm: float, s: float) -> Frame:
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
    return np.asarray(inside, dtype=bool)


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


def masks(
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
        rr, cc = _draw_polygon(pr, pc, shape=frame.shape)  # type: ignore[no-untyped-call]
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


def check_partial(
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


def rectify_window(
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
    frame = frame_for(window, margin_mm, s)
    m = np.linalg.inv(h_photo_to_layout) @ _rect_to_layout(frame)  # rect px -> photo px
    inside = _inside_photo(m, frame.shape, image.shape[:2])
    visible, analysed, window_mask = masks(frame, margin_mm, inside, exclusions)
    check_partial(window_mask, analysed, config, warnings, what)
    rect = _warp(image, m, frame.shape, photo_ppm / s)
    if not inside.all():
        rect[~inside] = 0
    return rect, frame, visible, analysed


# --------------------------------------------------------------------------- card edges

#: A card edge changes the brightness across the window's side by at least this share.
_CARD_STEP = 0.1
#: ... and lies within this distance of the side, mm (a registration error).
_CARD_EDGE_MM = 0.6


def hide_beyond_card(image: np.ndarray, frame: Frame, visible: np.ndarray) -> np.ndarray:
    """``visible`` less the surface a card hides beyond the sides of the window.

    A printed card laid on the work shows the surface through its cut-out window; past
    the window's edge the photo shows paper.  Each side is tested on its own: the
    brightness profile across the side (the median along it, 3 mm from each corner) must
    step by at least a tenth between 0.8-2 mm inside and 0.8-2 mm outside, and the
    steepest change of the profile must lie within 0.6 mm of the side and be half again
    as steep as anywhere else within 2.5 mm.  A surface that simply goes on past the
    window (a label stuck beside it) shows neither.  Where a side is a card edge, nothing
    beyond the edge found is visible.

    Parameters
    ----------
    image : (M, N, 3) uint8 ndarray, BGR
        The rectified photo.
    frame : Frame
    visible : (M, N) bool ndarray

    Returns
    -------
    (M, N) bool ndarray
    """
    s = frame.px_per_mm
    rows, cols = frame.shape
    ys = frame.origin_mm[1] + (np.arange(rows) + 0.5) / s
    xs = frame.origin_mm[0] + (np.arange(cols) + 0.5) / s
    grey = cv2.cvtColor(image, cv2.COLOR_BGR2GRAY).astype(np.float32)
    w = frame.window
    hidden = np.zeros(frame.shape, bool)
    sides = {
        "top": (w.y_mm - ys, xs, w.x_mm, w.width_mm, 0),
        "bottom": (ys - (w.y_mm + w.height_mm), xs, w.x_mm, w.width_mm, 0),
        "left": (w.x_mm - xs, ys, w.y_mm, w.height_mm, 1),
        "right": (xs - (w.x_mm + w.width_mm), ys, w.y_mm, w.height_mm, 1),
    }
    for out_mm, along_mm, start, length, axis in sides.values():
        along = (along_mm > start + 3.0) & (along_mm < start + length - 3.0)
        near = np.abs(out_mm) < 3.0
        if along.sum() < 8 or near.sum() < 8:
            continue
        if axis == 0:
            strip, shown = grey[near][:, along], visible[near][:, along]
        else:
            strip, shown = grey[:, near][along].T, visible[:, near][along].T
        edge = _card_edge(out_mm[near], strip, shown)
        if edge is not None:
            beyond = out_mm > max(edge, 0.0)
            hidden |= beyond[:, None] if axis == 0 else beyond[None, :]
    return visible & ~hidden


def _card_edge(out_mm: np.ndarray, strip: np.ndarray, shown: np.ndarray) -> float | None:
    """Where a card edge crosses one side's profile (mm outward), or None."""
    counts = shown.sum(axis=1)
    if (counts >= 8).sum() < 8:
        return None
    with np.errstate(all="ignore"):
        import warnings

        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            profile = np.nanmedian(np.where(shown, strip, np.nan), axis=1)
    ok = np.isfinite(profile) & (counts >= 8)
    d, p = out_mm[ok], profile[ok]
    order = np.argsort(d)
    d, p = d[order], p[order]
    inner = p[(d > -2.0) & (d < -0.8)]
    outer = p[(d > 0.8) & (d < 2.0)]
    if inner.size < 2 or outer.size < 2 or d.size < 5:
        return None
    base = max(float(np.median(inner)), 1.0)
    if abs(float(np.median(outer)) - float(np.median(inner))) < _CARD_STEP * base:
        return None
    slope = np.abs(np.gradient(p, d))
    close = np.abs(d) <= _CARD_EDGE_MM
    far = ~close & (np.abs(d) < 2.5)
    if not close.any() or not far.any():
        return None
    k = int(np.argmax(np.where(close, slope, -1.0)))
    if slope[k] <= 1.5 * float(slope[far].max()):
        return None
    return float(d[k])
