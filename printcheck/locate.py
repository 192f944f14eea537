"""Locate: find the layout's markers, fit the homography, rectify to millimetres.

The stage runs in four steps, each in its own module:

1. **Detect** the layout's ArUco markers and refine their corners
   (:mod:`printcheck.markers`).
2. **Fit** the photo-to-layout homography to every corner of every marker found, dropping
   a marker that does not fit the others (:mod:`printcheck.homography`).  The residual is
   the RMS corner reprojection error in mm.
3. **Rectify** the window plus the layout's margin into the layout frame at a px/mm the
   photo really resolves there, with masks of what the photo shows and what is analysed
   (:mod:`printcheck.window`).
4. **Hide** what a card covers: where a printed card's cut-out edge runs along a side of
   the window, the surface beyond it is not visible.

Photo pixel coordinates follow OpenCV: ``x`` = column, ``y`` = row, and the centre of
pixel (row, col) is at ``(x, y) = (col, row)``.  The layout frame is in mm, x right, y
down; see :class:`printcheck.frame.Frame` for how rectified pixels map to it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import cv2
import numpy as np

from printcheck.errors import LocateError, OptionError, PhotoError
from printcheck.frame import Frame
from printcheck.homography import Candidate, fit_homography, local_px_per_mm, rms, robust_fit
from printcheck.layout import (
    CARD_DICTIONARY,
    Layout,
    Window,
    card_ids,
    card_of_layout,
    card_shown,
)
from printcheck.markers import Coarse, Detection, detect_markers, paper_colour
from printcheck.window import (
    check_partial,
    choose_px_per_mm,
    hide_beyond_card,
    masks,
    rectify_window,
)

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

_SCALE_MARGIN_MM = 5.0  # margin kept around a given window with an explicit scale


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
    photo_blur_px: float | None = None  # how far the photo spreads the markers' edges (sigma)


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
    paper_bgr : (float, float, float) or None
        The white paper of the markers as the photo shows it (a neutral under its light,
        :func:`printcheck.markers.paper_colour`); None where there is none to read.
    """

    image: np.ndarray
    frame: Frame
    visible: np.ndarray
    analysed: np.ndarray
    calibration: Calibration
    homography: np.ndarray | None
    warnings: tuple[str, ...] = ()
    paper_bgr: tuple[float, float, float] | None = None


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


def locate(
    image: np.ndarray,
    *,
    layout: Layout,
    config: LocateConfig = LocateConfig(),
    coarse: Coarse | None = None,
) -> Rectified:
    """Find ``layout``'s markers in ``image`` and rectify it to the layout frame.

    Parameters
    ----------
    image : (M, N, 3) uint8 ndarray, BGR
        The photo (not modified).  A grey (M, N) photo is accepted too.
    layout : Layout
        Where the markers sit relative to the window.
    config : LocateConfig
    coarse : Coarse, optional
        The layout's markers already found on a reduced copy of the photo
        (:func:`printcheck.markers.coarse_markers`); by default they are looked for here.

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
    h, used, residual, blur = _fit_markers(photo, layout, config, warnings, coarse)
    win = layout.window
    photo_ppm, _ = local_px_per_mm(
        np.linalg.inv(h), win.x_mm + win.width_mm / 2, win.y_mm + win.height_mm / 2
    )
    margin = layout.margin_mm
    area = (win.width_mm + 2 * margin) * (win.height_mm + 2 * margin)
    s = choose_px_per_mm(photo_ppm, area, config, warnings)
    rect, frame, visible, analysed = rectify_window(
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
    if margin > 0:
        visible = hide_beyond_card(rect, frame, visible)
    calibration = Calibration(
        method="layout",
        layout=layout.name,
        markers=used,
        px_per_mm=s,
        residual_mm=residual,
        photo_px_per_mm=photo_ppm,
        photo_blur_px=blur,
    )
    paper = paper_colour(
        photo,
        [(m.id, np.asarray(m.corners_mm, np.float64)) for m in layout.markers if m.id in used],
        np.linalg.inv(h),
        dictionary=layout.dictionary,
    )
    return Rectified(rect, frame, visible, analysed, calibration, h, tuple(warnings), paper)


def _candidates(
    photo: np.ndarray, layout: Layout, warnings: list[str], coarse: Coarse | None
) -> tuple[list[Candidate], dict[int, list[float]]]:
    """The layout's markers found in the photo, as (id, photo corners, layout corners),
    and each one's edge blur (:attr:`Detection.blur_px`) by id."""
    detections = detect_markers(photo, dictionary=layout.dictionary, coarse=coarse)
    by_id = {m.id: m for m in layout.markers}
    blurs: dict[int, list[float]] = {}
    for d in detections:
        if d.id in by_id and d.blur_px is not None:
            blurs.setdefault(d.id, []).append(d.blur_px)
    cands = [
        (d.id, d.corners_px, np.asarray(by_id[d.id].corners_mm, dtype=np.float64))
        for d in detections
        if d.id in by_id
    ]
    if not cands:
        _say_which_card(photo, layout, detections)
        ids = ", ".join(str(i) for i in layout.marker_ids)
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
    if len({c[0] for c in cands}) == 1 and len(cands) > 1:
        areas = [abs(cv2.contourArea(c[1].astype(np.float32))) for c in cands]
        cands = [cands[int(np.argmax(areas))]]
        warnings.append(f"marker {cands[0][0]} is in view {len(areas)} times; the largest was used")
    return cands, blurs


def _say_which_card(photo: np.ndarray, layout: Layout, detections: tuple[Detection, ...]) -> None:
    """Refuse, naming both, a photo that shows another built-in card than ``layout``.

    Called when none of the layout's markers is in the photo.  Each card size has its own
    marker ids (:data:`printcheck.layout.CARD_SIZES`), so the ids in view say which card
    the photo shows.
    """
    if layout.dictionary != CARD_DICTIONARY:
        detections = detect_markers(photo, dictionary=CARD_DICTIONARY)
    shown = card_shown(d.id for d in detections)
    if shown is None:
        return
    given = card_of_layout(layout)
    if given is not None and given.ids == shown.ids:
        return  # cannot be: the layout's markers would have been found
    given_words = (
        f"the {given.words} card"
        if given is not None
        else f"layout {layout.name} ({layout.source})"
    )
    if shown.window_mm == 0:  # a card of a size without ids of its own
        raise LocateError(
            f"this photo shows a printcheck card of {shown.words} (ids "
            f"{shown.ids[0]}-{shown.ids[-1]}); the layout given is {given_words}: use --layout "
            "with the layout file printed with that card"
        )
    default = " or leave --layout out (it is the default)" if shown.ids == card_ids(50.8) else ""
    raise LocateError(
        f"this photo shows the {shown.words} card; the layout given is {given_words}: "
        f"use --layout with the {shown.words} card's layout file (printcheck card --window "
        f"{shown.option} writes it){default}"
    )


def _fit_markers(
    photo: np.ndarray,
    layout: Layout,
    config: LocateConfig,
    warnings: list[str],
    coarse: Coarse | None,
) -> tuple[np.ndarray, tuple[int, ...], float, float | None]:
    """Homography (photo px -> layout mm), the marker ids it uses, its RMS residual, and
    the median edge blur of those markers (None where none could be read)."""
    cands, blurs = _candidates(photo, layout, warnings, coarse)
    h, kept, dropped = robust_fit(cands, 0.5 * config.max_residual_mm)
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
    best: dict[int, tuple[float, Candidate]] = {}
    for c in kept:
        err = rms(h, c[1], c[2])
        if c[0] not in best or err < best[c[0]][0]:
            best[c[0]] = (err, c)
    if len(best) < len(kept):
        kept = [v[1] for v in best.values()]
        h = fit_homography(
            np.concatenate([c[1] for c in kept]), np.concatenate([c[2] for c in kept])
        )
    used = tuple(sorted(best))
    residual = rms(h, np.concatenate([c[1] for c in kept]), np.concatenate([c[2] for c in kept]))
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
    _note_missing(layout, used, warnings)
    seen = [b for marker_id in used for b in blurs.get(marker_id, ())]
    return h, used, residual, float(np.median(seen)) if seen else None


def _note_missing(layout: Layout, used: tuple[int, ...], warnings: list[str]) -> None:
    missing = [i for i in layout.marker_ids if i not in used]
    if missing:
        warnings.append(
            f"layout {layout.name}: marker{'s' if len(missing) > 1 else ''} "
            f"{', '.join(map(str, missing))} not found; "
            f"scale from marker{'s' if len(used) > 1 else ''} {', '.join(map(str, used))}"
        )
    if len(used) == 1 and len(layout.marker_ids) > 1:
        warnings.append(
            "only one marker found: its corners fix the perspective exactly, "
            "with nothing to check them"
        )


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
        raise OptionError(f"px_per_mm must be a positive number, got {px_per_mm!r}")
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
            s = choose_px_per_mm(s_in, area, config, warnings)
    else:
        s = choose_px_per_mm(s_in, area, config, warnings)
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
        visible, analysed, window_mask = masks(frame, margin, inside, ())
        check_partial(window_mask, analysed, config, warnings, "the window")
    else:
        rect, frame, visible, analysed = rectify_window(
            photo, h, win, margin, (), s, s_in, config, warnings, "the window"
        )
    calibration = Calibration(
        method="scale", layout=None, markers=(), px_per_mm=s, residual_mm=None, photo_px_per_mm=s_in
    )
    return Rectified(rect, frame, visible, analysed, calibration, h, tuple(warnings))
