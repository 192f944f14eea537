"""Truth statistics of a known contact mask, by the counting rules of docs/formats.md.

This code is deliberately independent of :mod:`printcheck.measure` (it is what the
measure stage is checked against): plain ``scipy.ndimage.label`` (8-connected) and
centroids, no splitting of touching spots.

* Specks smaller than ``min_spot_mm2`` are not spots.
* A spot belongs to the window, and to the cell, that holds its centroid (the centroid
  must also lie outside every exclusion).
* Bearing is contact on the analysed area (window less exclusions), by pixel count.
* Cells start at the window's top-left, side ``cell_mm``; density = count * cell² / area.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import ndimage

from printcheck.errors import OptionError
from printcheck.frame import Frame
from printcheck.layout import Layout

__all__ = ["TruthCell", "Truth", "truth_stats", "layout_masks"]

_EIGHT = np.ones((3, 3), dtype=bool)


@dataclass(frozen=True)
class TruthCell:
    """One counting cell of the truth.  ``density`` is points per ``cell_mm``²."""

    row: int
    col: int
    x_mm: float
    y_mm: float
    width_mm: float
    height_mm: float
    area_mm2: float
    complete: bool
    spot_count: int
    density: float
    bearing_percent: float


@dataclass(frozen=True, eq=False)
class Truth:
    """The exact contact of a print and its counts.

    Attributes
    ----------
    mask : (M, N) bool ndarray
        Contact the photo shows (inside ``visible``), in the layout frame on ``frame``.
    frame : Frame
        Grid geometry of ``mask`` (px_per_mm, origin_mm, shape, window).
    visible : (M, N) bool ndarray
        Surface the photo shows that may hold spots (window plus margin, less exclusions).
    analysed : (M, N) bool ndarray
        Window less exclusions.
    area_mm2 : float
        Analysed area (pixel count / px_per_mm²).
    spot_count : int
        Spots whose centroid lies in the analysed area.
    density : float
        Points per ``cell_mm``² (points per square inch for the default 25.4 mm cell).
    bearing_percent : float
    cell_mm : float
    rows, cols : int
    cells : tuple of TruthCell, row-major
    spot_x_mm, spot_y_mm, spot_area_mm2 : (K,) float ndarray
        Centroid and area of every spot (specks removed), in the window or not.
    spot_in_window : (K,) bool ndarray
    film_um : float or None
        Film thickness the mask was made with, when known.
    """

    mask: np.ndarray
    frame: Frame
    visible: np.ndarray
    analysed: np.ndarray
    area_mm2: float
    spot_count: int
    density: float
    bearing_percent: float
    cell_mm: float
    rows: int
    cols: int
    cells: tuple[TruthCell, ...]
    spot_x_mm: np.ndarray
    spot_y_mm: np.ndarray
    spot_area_mm2: np.ndarray
    spot_in_window: np.ndarray
    film_um: float | None = None


def layout_masks(layout: Layout, frame: Frame) -> tuple[np.ndarray, np.ndarray]:
    """(visible, analysed) masks of ``layout`` on ``frame``, by pixel centres.

    ``visible`` is the window grown by ``layout.margin_mm`` less exclusions; ``analysed``
    the window less exclusions.
    """
    rows, cols = frame.shape
    x, y = frame.to_mm(np.arange(rows), np.arange(cols))  # x from cols, y from rows
    w = layout.window
    m = layout.margin_mm

    def rect(x0: float, y0: float, x1: float, y1: float) -> np.ndarray:
        return ((y[:, None] >= y0) & (y[:, None] < y1)) & ((x[None, :] >= x0) & (x[None, :] < x1))

    analysed = rect(w.x_mm, w.y_mm, w.x_mm + w.width_mm, w.y_mm + w.height_mm)
    visible = rect(w.x_mm - m, w.y_mm - m, w.x_mm + w.width_mm + m, w.y_mm + w.height_mm + m)
    if layout.exclusions:
        excluded = _polygons_mask(layout.exclusions, x, y)
        analysed &= ~excluded
        visible &= ~excluded
    return visible, analysed


def _polygons_mask(
    polygons: tuple[tuple[tuple[float, float], ...], ...], x: np.ndarray, y: np.ndarray
) -> np.ndarray:
    """Pixel centres (x cols, y rows) inside any polygon (even-odd rule)."""
    inside = np.zeros((y.size, x.size), dtype=bool)
    xx = x[None, :]
    yy = y[:, None]
    for poly in polygons:
        hit = np.zeros_like(inside)
        pts = list(poly)
        for (x0, y0), (x1, y1) in zip(pts, pts[1:] + pts[:1], strict=True):
            if y0 == y1:
                continue
            crosses = (yy >= min(y0, y1)) & (yy < max(y0, y1))
            xcross = x0 + (yy - y0) * (x1 - x0) / (y1 - y0)
            hit ^= crosses & (xx < xcross)
        inside |= hit
    return inside


def _run(index: np.ndarray, value: int) -> tuple[int, int]:
    """Start and stop of the run of ``value`` in the non-decreasing ``index``."""
    return int(np.searchsorted(index, value, "left")), int(np.searchsorted(index, value, "right"))


def truth_stats(
    mask: np.ndarray,
    *,
    frame: Frame,
    analysed: np.ndarray,
    visible: np.ndarray | None = None,
    exclusions: tuple[tuple[tuple[float, float], ...], ...] = (),
    cell_mm: float = 25.4,
    min_spot_mm2: float = 0.1,
    film_um: float | None = None,
) -> Truth:
    """Count the spots, density and bearing of a known contact mask.

    Parameters
    ----------
    mask : (M, N) bool ndarray
        Contact on ``frame``; only the part inside ``visible`` is used.
    frame : Frame
        Grid geometry and window.
    analysed : (M, N) bool ndarray
        Window less exclusions.
    visible : (M, N) bool ndarray or None
        Surface shown (default: ``analysed``).
    exclusions : tuple of polygons (mm)
        A spot whose centroid falls in one does not count.
    cell_mm : float
        Side of the counting cell in mm.
    min_spot_mm2 : float
        Smaller components are specks, not spots.
    film_um : float or None
        Recorded in the result.

    Returns
    -------
    Truth
    """
    mask = np.asarray(mask, dtype=bool)
    analysed = np.asarray(analysed, dtype=bool)
    if mask.shape != frame.shape or analysed.shape != frame.shape:
        raise OptionError(
            f"truth_stats: mask {mask.shape} and analysed {analysed.shape} must both have "
            f"the frame's shape {frame.shape}"
        )
    if cell_mm <= 0:
        raise OptionError(f"cell_mm must be greater than zero, got {cell_mm!r}")
    vis = analysed if visible is None else np.asarray(visible, dtype=bool)
    contact = mask & vis
    s = frame.px_per_mm
    labels, count = ndimage.label(contact, structure=_EIGHT)
    if count:
        index = np.arange(1, count + 1)
        rr, cc = np.nonzero(labels)
        flat = labels[rr, cc]
        npx = np.bincount(flat, minlength=count + 1)[1:].astype(float)
        row_sum = np.bincount(flat, weights=rr, minlength=count + 1)[1:]
        col_sum = np.bincount(flat, weights=cc, minlength=count + 1)[1:]
        area = npx / s**2
        keep = area >= min_spot_mm2 - 1e-12
        area = area[keep]
        cx, cy = frame.to_mm(row_sum[keep] / npx[keep], col_sum[keep] / npx[keep])
        kept_labels = index[keep]
    else:
        area = np.zeros(0)
        cx = cy = np.zeros(0)
        kept_labels = np.zeros(0, dtype=int)
    # Clean the mask of specks: the truth mask holds only spots.
    if count:
        lut = np.zeros(count + 1, dtype=bool)
        lut[kept_labels] = True
        clean = lut[labels]
    else:
        clean = np.zeros_like(contact)

    w = frame.window
    in_window = (
        (cx >= w.x_mm) & (cx < w.x_mm + w.width_mm) & (cy >= w.y_mm) & (cy < w.y_mm + w.height_mm)
    )
    if exclusions and cx.size:
        in_ex = np.array(
            [
                bool(_polygons_mask(exclusions, np.array([a]), np.array([b]))[0, 0])
                for a, b in zip(cx, cy, strict=True)
            ]
        )
        in_window &= ~in_ex

    area_px = int(analysed.sum())
    area_mm2 = area_px / s**2
    spot_count = int(in_window.sum())
    density = spot_count * cell_mm**2 / area_mm2 if area_mm2 > 0 else 0.0
    bearing = 100.0 * float((clean & analysed).sum()) / area_px if area_px else 0.0

    ncols = max(math.ceil(w.width_mm / cell_mm - 1e-9), 1)
    nrows = max(math.ceil(w.height_mm / cell_mm - 1e-9), 1)
    xs, ys = frame.to_mm(np.arange(frame.shape[0]), np.arange(frame.shape[1]))
    pix_col = np.floor((xs - w.x_mm) / cell_mm + 1e-9).astype(int)
    pix_row = np.floor((ys - w.y_mm) / cell_mm + 1e-9).astype(int)
    spot_col = np.floor((cx - w.x_mm) / cell_mm + 1e-9).astype(int)
    spot_row = np.floor((cy - w.y_mm) / cell_mm + 1e-9).astype(int)
    cells: list[TruthCell] = []
    for r in range(nrows):
        rsel = slice(*_run(pix_row, r))
        for c in range(ncols):
            csel = slice(*_run(pix_col, c))
            x0 = w.x_mm + c * cell_mm
            y0 = w.y_mm + r * cell_mm
            cw = min(cell_mm, w.x_mm + w.width_mm - x0)
            ch = min(cell_mm, w.y_mm + w.height_mm - y0)
            sel = analysed[rsel, csel]
            cell_px = int(sel.sum())
            cell_area = cell_px / s**2
            n = int((in_window & (spot_row == r) & (spot_col == c)).sum())
            complete = abs(cw - cell_mm) < 1e-9 and abs(ch - cell_mm) < 1e-9 and cell_px == sel.size
            cells.append(
                TruthCell(
                    row=r,
                    col=c,
                    x_mm=x0,
                    y_mm=y0,
                    width_mm=cw,
                    height_mm=ch,
                    area_mm2=cell_area,
                    complete=bool(complete and sel.size > 0),
                    spot_count=n,
                    density=n * cell_mm**2 / cell_area if cell_area > 0 else 0.0,
                    bearing_percent=100.0 * float((clean[rsel, csel] & sel).sum()) / cell_px
                    if cell_px
                    else 0.0,
                )
            )
    return Truth(
        mask=clean,
        frame=frame,
        visible=vis,
        analysed=analysed,
        area_mm2=area_mm2,
        spot_count=spot_count,
        density=float(density),
        bearing_percent=float(bearing),
        cell_mm=float(cell_mm),
        rows=nrows,
        cols=ncols,
        cells=tuple(cells),
        spot_x_mm=np.asarray(cx, dtype=float),
        spot_y_mm=np.asarray(cy, dtype=float),
        spot_area_mm2=np.asarray(area, dtype=float),
        spot_in_window=np.asarray(in_window, dtype=bool),
        film_um=film_um,
    )
