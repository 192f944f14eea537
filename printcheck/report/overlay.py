"""Overlay: the rectified print with its spots, grid, figures and guidance drawn on it.

What is drawn (all with OpenCV, so it stays fast):

- the rectified window (plus whatever margin the photo shows), the part outside the
  analysed area dimmed;
- the outline of every spot: yellow when it counts (centroid in the window), grey when it
  lies past the window edge;
- the grid of counting cells, each with its density (large) and bearing (small) written in
  its top-left corner on a dark halo; figures of incomplete cells in grey;
- the guidance list (:func:`printcheck.guidance.advise`), each place numbered by its
  rank: heavy bearing as an orange hatched circle, an oversized spot as a magenta diamond,
  a bare patch over the spec's limit as a cyan dashed circle (the places never overlap).

The key to the marks is not drawn into the image: the HTML report gives it beside the
image (:data:`LEGEND`), where it stays legible on a phone.

The image is scaled so its longer side lies between ``min_side`` and ``max_side`` pixels,
and fonts and line widths scale with it, so the figures stay legible.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING, NamedTuple

import numpy as np

from printcheck.wording import cell_figure

if TYPE_CHECKING:
    from printcheck.result import Result
    from printcheck.serde import OverlayMarks

__all__ = ["OverlayStyle", "COLOURS", "LEGEND", "draw_overlay", "spot_boundaries"]

# BGR colours
COLOURS: dict[str, tuple[int, int, int]] = {
    "spot": (0, 255, 255),  # yellow: a counted spot's outline
    "spot_outside": (170, 170, 170),  # grey: a spot past the window edge
    "grid": (255, 255, 255),
    "halo": (20, 20, 20),
    "text": (255, 255, 255),
    "text_partial": (185, 185, 185),
    "high": (0, 140, 255),  # orange: heavy bearing
    "oversized": (255, 0, 255),  # magenta: an oversized spot
    "bare": (255, 255, 0),  # cyan
}

#: The overlay's marks, for the key the report gives beside it: (colour key, shape, words).
LEGEND: tuple[tuple[str, str, str], ...] = (
    ("spot", "outline", "spot (counted)"),
    ("spot_outside", "outline", "spot past the window edge (not counted)"),
    ("high", "hatched circle", "heavy bearing: break up"),
    ("oversized", "diamond", "oversized spot: split it"),
    ("bare", "dashed circle", "bare patch over the spec's limit: leave alone this pass"),
)


@dataclass(frozen=True)
class OverlayStyle:
    """Sizes of the overlay.

    Attributes
    ----------
    min_side, max_side : int
        The longer side of the drawn image is scaled into this range (pixels).
    dim : float
        Brightness kept outside the analysed area (0 black .. 1 unchanged).
    """

    min_side: int = 720
    max_side: int = 1800
    dim: float = 0.45


def spot_boundaries(labels: np.ndarray) -> np.ndarray:
    """Inner boundary of each labelled spot: pixels of a spot with a 4-neighbour not in it.

    Parameters
    ----------
    labels : (M, N) int ndarray
        0 background, k > 0 the spots.

    Returns
    -------
    (M, N) bool ndarray
        True on the spots' edge pixels (also where two spots touch).  The image border
        counts as outside.  ``skimage.segmentation.find_boundaries`` with
        ``connectivity=1, mode="inner"``.
    """
    from skimage.segmentation import find_boundaries

    # a ring of background makes the image border a boundary, as find_boundaries does not
    # count the border as outside
    padded = np.pad(np.asarray(labels), 1, mode="constant", constant_values=0)
    edge = find_boundaries(padded, connectivity=1, mode="inner")  # type: ignore[no-untyped-call]
    return np.asarray(edge[1:-1, 1:-1])


def _crop_box(result: Result) -> tuple[int, int, int, int]:
    """(r0, r1, c0, c1) of the window plus the visible margin, inside the image."""
    rect = result.rectified
    rows, cols = rect.image.shape[:2]
    rs, cs = rect.frame.window_slices()
    r0, r1, c0, c1 = rs.start, rs.stop, cs.start, cs.stop
    vis = np.asarray(rect.visible)
    if vis.shape == (rows, cols) and vis.any():
        rr = np.flatnonzero(vis.any(axis=1))
        cc = np.flatnonzero(vis.any(axis=0))
        r0, r1 = min(r0, int(rr[0])), max(r1, int(rr[-1]) + 1)
        c0, c1 = min(c0, int(cc[0])), max(c1, int(cc[-1]) + 1)
    r0, c0 = max(r0, 0), max(c0, 0)
    r1, c1 = min(r1, rows), min(c1, cols)
    if r1 <= r0 or c1 <= c0:
        return 0, rows, 0, cols
    return r0, r1, c0, c1


def _resample(
    array: np.ndarray, box: tuple[int, int, int, int], shape: tuple[int, int]
) -> np.ndarray:
    """Nearest-neighbour resample of ``array[box]`` to ``shape`` (exact for labels)."""
    r0, r1, c0, c1 = box
    h, w = shape
    if (h, w) == (r1 - r0, c1 - c0):  # unscaled: the crop itself (a view, not a copy)
        return array[r0:r1, c0:c1]
    ri = r0 + np.minimum(((np.arange(h) + 0.5) * (r1 - r0) / h).astype(np.intp), r1 - r0 - 1)
    ci = c0 + np.minimum(((np.arange(w) + 0.5) * (c1 - c0) / w).astype(np.intp), c1 - c0 - 1)
    return np.asarray(array[np.ix_(ri, ci)])


def _put_text(
    img: np.ndarray,
    text: str,
    org: tuple[int, int],
    scale: float,
    colour: tuple[int, int, int],
    thickness: int,
) -> None:
    import cv2

    halo = thickness + max(2, int(round(scale * 2.5)))
    cv2.putText(img, text, org, cv2.FONT_HERSHEY_SIMPLEX, scale, COLOURS["halo"], halo, cv2.LINE_AA)
    cv2.putText(img, text, org, cv2.FONT_HERSHEY_SIMPLEX, scale, colour, thickness, cv2.LINE_AA)


class _Pen(NamedTuple):
    """A colour (BGR) and a line width in pixels."""

    colour: tuple[int, int, int]
    thickness: int


def _dashed_circle(img: np.ndarray, centre: tuple[int, int], radius: int, pen: _Pen) -> None:
    import cv2

    colour, thickness = pen
    # dashes about 3 line widths long, at least 12 around
    n = max(12, int(2 * math.pi * radius / max(6 * thickness, 8)))
    step = 360.0 / n
    for i in range(n):
        a0 = i * step
        cv2.ellipse(
            img, centre, (radius, radius), 0.0, a0, a0 + step * 0.55, colour, thickness, cv2.LINE_AA
        )


def _hatched_circle(img: np.ndarray, centre: tuple[int, int], radius: int, pen: _Pen) -> None:
    import cv2

    colour, thickness = pen
    h, w = img.shape[:2]
    cx, cy = centre
    x0, x1 = max(cx - radius, 0), min(cx + radius + 1, w)
    y0, y1 = max(cy - radius, 0), min(cy + radius + 1, h)
    if x1 > x0 and y1 > y0:
        patch = img[y0:y1, x0:x1]
        layer = patch.copy()
        gap = max(4 * thickness, 6)
        size = (y1 - y0) + (x1 - x0)
        for k in range(-size, size, gap):
            cv2.line(layer, (k, 0), (k + size, size), colour, max(1, thickness // 2), cv2.LINE_AA)
        disc = np.zeros(patch.shape[:2], np.uint8)
        cv2.circle(disc, (cx - x0, cy - y0), radius, 255, -1)
        inside = disc > 0
        patch[inside] = (0.55 * patch[inside] + 0.45 * layer[inside]).astype(np.uint8)
    cv2.circle(img, centre, radius, COLOURS["halo"], thickness + 2, cv2.LINE_AA)
    cv2.circle(img, centre, radius, colour, thickness, cv2.LINE_AA)


@dataclass(frozen=True)
class _View:
    """Where layout-frame millimetres land on the drawn image.

    ``origin_mm`` and ``px_per_mm`` are the rectified image's; ``r0``, ``c0`` the top-left
    of the crop in it; ``sx``, ``sy`` the drawing's scale per axis.
    """

    origin_mm: tuple[float, float]
    px_per_mm: float
    r0: int
    c0: int
    sx: float
    sy: float

    def px(self, x_mm: float, y_mm: float) -> tuple[int, int]:
        """(x, y) pixel of the drawing at (x_mm, y_mm)."""
        ox, oy = self.origin_mm
        return (
            int(round(((x_mm - ox) * self.px_per_mm - self.c0) * self.sx)),
            int(round(((y_mm - oy) * self.px_per_mm - self.r0) * self.sy)),
        )

    def length(self, mm: float) -> int:
        """A length in drawing pixels (at least 2)."""
        return max(2, int(round(mm * self.px_per_mm * (self.sx + self.sy) / 2)))


def _scale(box: tuple[int, int, int, int], style: OverlayStyle) -> float:
    """The factor that brings the crop's longer side within the style's range."""
    r0, r1, c0, c1 = box
    long_side = max(r1 - r0, c1 - c0)
    if long_side < style.min_side:
        return style.min_side / long_side
    if long_side > style.max_side:
        return style.max_side / long_side
    return 1.0


def _backdrop(
    result: Result, box: tuple[int, int, int, int], shape: tuple[int, int], style: OverlayStyle
) -> np.ndarray:
    """The crop of the rectified image at the drawing's size ``shape`` (h, w), dimmed
    outside the analysed area: a new (h, w, 3) uint8 image."""
    import cv2

    rect = result.rectified
    r0, r1, c0, c1 = box
    h, w = shape
    crop = np.asarray(rect.image)[r0:r1, c0:c1]
    if crop.ndim == 2:
        crop = np.repeat(crop[:, :, None], 3, axis=2)
    if (h, w) == (r1 - r0, c1 - c0):
        img: np.ndarray = np.array(crop, dtype=np.uint8, copy=True)
    else:
        interp = cv2.INTER_AREA if _scale(box, style) < 1 else cv2.INTER_LINEAR
        img = cv2.resize(np.ascontiguousarray(crop, dtype=np.uint8), (w, h), interpolation=interp)
    analysed = np.asarray(rect.analysed)
    if analysed.shape == rect.image.shape[:2]:
        outside = ~_resample(analysed, box, (h, w))
        if outside.any():
            img[outside] = (img[outside] * style.dim).astype(np.uint8)
    return img


def _draw_outlines(
    img: np.ndarray, marks: OverlayMarks, box: tuple[int, int, int, int], thick: int
) -> None:
    """Each spot's outline: yellow when it counts, grey past the window edge."""
    import cv2

    labels = marks.labels
    if not labels.any():
        return
    lab = _resample(labels, box, img.shape[:2])
    edge = spot_boundaries(lab)
    if thick > 1:  # thicken inwards, so each edge pixel keeps its own spot's label
        k = np.ones((thick, thick), np.uint8)
        edge = (cv2.dilate(edge.astype(np.uint8), k) > 0) & (lab > 0)
    n = int(labels.max())
    counted = np.zeros(n + 1, bool)
    inw = marks.counted
    counted[1 : 1 + min(n, inw.size)] = inw[:n]
    # look up the edge pixels only (a few percent of the image)
    edge_counted = counted[np.clip(lab[edge], 0, n)]
    img[edge] = np.where(
        edge_counted[:, None],
        np.array(COLOURS["spot"], np.uint8),
        np.array(COLOURS["spot_outside"], np.uint8),
    )


def _diamond(img: np.ndarray, centre: tuple[int, int], radius: int, pen: _Pen) -> None:
    import cv2

    colour, thickness = pen
    cx, cy = centre
    pts = np.array([[cx, cy - radius], [cx + radius, cy], [cx, cy + radius], [cx - radius, cy]])
    cv2.polylines(img, [pts.astype(np.int32)], True, COLOURS["halo"], thickness + 2, cv2.LINE_AA)
    cv2.polylines(img, [pts.astype(np.int32)], True, colour, thickness, cv2.LINE_AA)


def _rank_label(img: np.ndarray, centre: tuple[int, int], radius: int, rank: int) -> None:
    """The place's rank in white on a dark disc, up and right of the mark, in the image."""
    import cv2

    h, w = img.shape[:2]
    scale = max(0.5, min(h, w) / 1200.0)
    thick = max(1, int(round(scale * 2)))
    text = str(rank)
    (tw, th), _ = cv2.getTextSize(text, cv2.FONT_HERSHEY_SIMPLEX, scale, thick)
    r = int(max(tw, th) * 0.8) + 2
    d = int(radius * 0.71) + r
    x = min(max(centre[0] + d, r), w - r - 1)
    y = min(max(centre[1] - d, r), h - r - 1)
    cv2.circle(img, (x, y), r, COLOURS["halo"], -1, cv2.LINE_AA)
    cv2.putText(
        img,
        text,
        (x - tw // 2, y + th // 2),
        cv2.FONT_HERSHEY_SIMPLEX,
        scale,
        COLOURS["text"],
        thick,
        cv2.LINE_AA,
    )


def _draw_guidance(img: np.ndarray, result: Result, view: _View, thick: int) -> None:
    """The ranked places: a mark of its own for each kind of advice, and the rank."""
    from printcheck.guidance import advise

    win = result.rectified.frame.window
    m = result.measurement
    places = advise(m.guidance, window=win, cell_mm=float(m.cell_mm), meets=result.meets, digits=3)
    pen = thick + 1
    for a in places:
        centre = view.px(win.x_mm + a.x, win.y_mm + a.y)
        radius = max(view.length(a.size / 2), 3 * pen)
        if a.kind == "bare patch":
            _dashed_circle(img, centre, radius, _Pen(COLOURS["bare"], pen))
        elif a.kind == "oversized spot":
            _diamond(img, centre, max(radius, 5 * pen), _Pen(COLOURS["oversized"], pen))
        else:
            _hatched_circle(img, centre, radius, _Pen(COLOURS["high"], pen))
        _rank_label(img, centre, radius, a.rank)


def _draw_grid(img: np.ndarray, marks: OverlayMarks, view: _View, thick: int) -> None:
    """The counting cells: white lines on a dark halo."""
    import cv2

    for colour, width in ((COLOURS["halo"], thick + 2), (COLOURS["grid"], thick)):
        for c in marks.cells:
            p0 = view.px(c.x_mm, c.y_mm)
            p1 = view.px(c.x_mm + c.width_mm, c.y_mm + c.height_mm)
            cv2.rectangle(img, p0, p1, colour, width, cv2.LINE_AA)


def _draw_figures(img: np.ndarray, marks: OverlayMarks, view: _View) -> None:
    """Each cell's density (large) and bearing (small) in its top-left corner."""
    import cv2

    font = cv2.FONT_HERSHEY_SIMPLEX
    cell_px = min(view.length(marks.cell_mm), max(img.shape[:2]))
    big = max(0.45, cell_px / 9 / 22.0)  # Hershey simplex: ~22 px cap height at scale 1
    for c in marks.cells:
        x, y = view.px(c.x_mm, c.y_mm)
        cw = view.px(c.x_mm + c.width_mm, c.y_mm)[0] - x
        ch = view.px(c.x_mm, c.y_mm + c.height_mm)[1] - y
        f = big if min(cw, ch) >= cell_px * 0.5 else big * 0.6
        tb = max(1, int(round(f * 1.8)))
        (_, th1), _ = cv2.getTextSize("0", font, f, tb)
        colour = COLOURS["text"] if c.complete else COLOURS["text_partial"]
        margin = max(4, int(th1 * 0.4))
        _put_text(img, cell_figure(c.density), (x + margin, y + margin + th1), f, colour, tb)
        fs = f * 0.62
        ts = max(1, int(round(fs * 1.8)))
        (_, th2), _ = cv2.getTextSize("0", font, fs, ts)
        origin = (x + margin, y + 2 * margin + th1 + th2)
        _put_text(img, f"{c.bearing_percent:.0f}%", origin, fs, colour, ts)


def draw_overlay(result: Result, *, style: OverlayStyle = OverlayStyle()) -> np.ndarray:
    """Draw the overlay of one photo's result.

    Parameters
    ----------
    result : Result
        Uses ``rectified`` (image (M, N, 3) uint8 BGR, frame, visible, analysed), the
        spots, cells and guidance of its measurement
        (:func:`printcheck.serde.overlay_marks`), ``unit`` and ``cell``.
    style : OverlayStyle

    Returns
    -------
    (H, W, 3) uint8 ndarray, BGR
        A new image: the window (plus visible margin) scaled by ``s`` so its longer side is
        within ``style.min_side .. style.max_side``.  The key to its marks is
        :data:`LEGEND` (the report shows it beside the image).
        The inputs are never modified.
    """
    from printcheck.serde import overlay_marks

    rect = result.rectified
    marks = overlay_marks(result)
    box = _crop_box(result)
    r0, r1, c0, c1 = box
    s = _scale(box, style)
    h, w = max(1, int(round((r1 - r0) * s))), max(1, int(round((c1 - c0) * s)))
    # exact per-axis factors after rounding
    view = _View(rect.frame.origin_mm, rect.frame.px_per_mm, r0, c0, w / (c1 - c0), h / (r1 - r0))
    img = _backdrop(result, box, (h, w), style)
    thick = max(1, int(round(min(h, w) / 600)))
    if marks.labels.shape == rect.image.shape[:2]:
        _draw_outlines(img, marks, box, thick)
    _draw_grid(img, marks, view, thick)
    _draw_figures(img, marks, view)
    # the guidance last, so its marks and ranks are not hidden under the grid's figures
    _draw_guidance(img, result, view, thick)
    return img
