"""Measure: spots, grid cells, bearing and bare patches of a contact mask.

Counting follows DESIGN.md "Contract: grid and counting": a spot belongs to the window
and the cell that hold its centroid; bearing is on the analysed area (window less
exclusions); density = spot_count * cell_mm**2 / area_mm2.  All lengths here are mm.

Conventions chosen here (where the contract is silent):

- Spots are 8-connected groups of contact pixels (pixels touching at a corner are one
  mark), the same as ``scipy.ndimage.label(mask, structure=np.ones((3, 3)))``.
- Specks below ``min_spot_mm2`` are not spots and do not count as contact either: the
  bearing is the share of analysed pixels covered by spots.
- A spot's centroid is the mean of its pixel centres; it lies in the window (and in a
  cell) when the pixel holding it is an analysed pixel (pixel centres decide which
  pixels belong to the window and to each cell, as in
  :meth:`printcheck.frame.Frame.window_slices`).
- Touching spots are split where a hairline neck joins two round bodies: the
  distance transform of the spot has two peaks ``r1 <= r2`` joined by a saddle ``d``
  with ``d < neck_ratio * r1`` and ``d <= neck_mm`` (at least one pixel).  Such bridges
  are what blur and JPEG draw between spots that are apart on the metal; one irregular
  spot, whose lobes join through wider necks, stays one spot.
- The largest bare patch is the largest circle that lies inside the analysed area (the
  window less exclusions) and touches no spot; its diameter comes from the Euclidean
  distance transform of the bare analysed pixels.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field

import cv2
import numpy as np

from printcheck.errors import OptionError
from printcheck.frame import Frame

__all__ = [
    "MeasureConfig",
    "Spots",
    "Cell",
    "BarePatch",
    "Confidence",
    "Guidance",
    "Measurement",
    "measure",
    "label_spots",
    "confidence_counts",
    "with_confidence",
    "bare_map",
]

_EIGHT = np.ones((3, 3), dtype=bool)


@dataclass(frozen=True)
class MeasureConfig:
    """Options of the measure stage.

    Attributes
    ----------
    cell_mm : float
        Side of the counting square in mm (25.4 for 1 in, 25.0 for 25 mm).
    min_spot_mm2 : float
        Specks smaller than this are not spots (default 0.1 mm², DESIGN.md).
    split_touching : bool
        Separate spots that merely touch (a narrow neck) into their own spots.
    max_bare_mm : float or None
        Bare patches larger than this are flagged in the guidance (from the spec).
    neck_ratio : float
        Two bodies of one mark are split when the neck between them is narrower than
        this share of the smaller body's inscribed radius (0 < neck_ratio < 1).
    neck_mm : float
        ... and the neck's half-width is at most this (mm, and at least one pixel): only
        hairline bridges are split, such as blur and JPEG draw between spots that are
        apart on the metal.  A spot is one connected mark (DESIGN.md); a real neck of
        metal in contact, however narrow-looking, is kept whole.
    doubtful_change : float
        The result is flagged doubtful when the count at a nudged threshold differs
        from the count by more than this share (or the bearing by more than
        ``doubtful_bearing`` percentage points).
    doubtful_bearing : float
        See ``doubtful_change``; percentage points.
    oversize_factor : float
        Spots larger than this many times the median spot area are high areas.
    heavy_bearing_factor : float
        Regions whose local bearing exceeds this many times the window's bearing (and
        by at least 15 percentage points) are heavy-bearing high areas.
    """

    cell_mm: float = 25.4
    min_spot_mm2: float = 0.1
    split_touching: bool = True
    max_bare_mm: float | None = None
    neck_ratio: float = 0.3
    neck_mm: float = 0.05
    doubtful_change: float = 0.15
    doubtful_bearing: float = 5.0
    oversize_factor: float = 4.0
    heavy_bearing_factor: float = 1.5


@dataclass(frozen=True, eq=False)
class Spots:
    """Every spot found, in the window or past its edge (K spots), as columns.

    Attributes
    ----------
    area_mm2, diameter_mm : (K,) float ndarray
        Area and equivalent-circle diameter.
    x_mm, y_mm : (K,) float ndarray
        Centroid in the layout frame.
    in_window : (K,) bool ndarray
        Centroid in the analysed area (window less exclusions): the spot counts.
    row, col : (K,) int ndarray
        Cell holding the centroid, -1 outside the window.
    """

    area_mm2: np.ndarray
    diameter_mm: np.ndarray
    x_mm: np.ndarray
    y_mm: np.ndarray
    in_window: np.ndarray
    row: np.ndarray
    col: np.ndarray

    def __len__(self) -> int:
        return int(self.area_mm2.shape[0])


@dataclass(frozen=True)
class Cell:
    """One counting cell.  ``density`` is points per cell_mm² of analysed area."""

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


@dataclass(frozen=True)
class BarePatch:
    """A region of no contact: the largest circle touching no spot, centre in mm."""

    diameter_mm: float
    x_mm: float
    y_mm: float


@dataclass(frozen=True)
class Confidence:
    """Count and bearing range from nudging the segmentation threshold both ways."""

    count_low: int
    count_high: int
    bearing_low: float
    bearing_high: float
    doubtful: bool
    reason: str = ""


@dataclass(frozen=True)
class Guidance:
    """Where to scrape next.

    ``high`` are the high areas to break up (oversized spots, heavy-bearing regions);
    ``bare`` the low areas larger than the spec allows (leave alone this pass).
    Each high area is (x_mm, y_mm, size_mm, reason).
    """

    high: tuple[tuple[float, float, float, str], ...] = ()
    bare: tuple[BarePatch, ...] = ()


@dataclass(frozen=True, eq=False)
class Measurement:
    """Everything measured on one print.

    Attributes
    ----------
    spots : Spots
    labels : (M, N) int32 ndarray
        Spot label image (0 background, k+1 for spot k of ``spots``).
    area_mm2 : float
        Analysed area of the window.
    spot_count : int
    density : float
        Points per ``cell_mm``² over the window.
    bearing_percent : float
    largest_bare : BarePatch
    cells : tuple of Cell, row-major
    rows, cols : int
    cell_mm : float
    confidence : Confidence or None
    guidance : Guidance
    size_stats : dict of str to float
        Spot sizes in the window: median/p90 area_mm2 and diameter_mm (0 when there
        are no spots), and ``mean_area_mm2``.
    alternates : tuple of (int, float)
        (spot_count, bearing_percent) measured on each alternate mask, in order.
    """

    spots: Spots
    labels: np.ndarray
    area_mm2: float
    spot_count: int
    density: float
    bearing_percent: float
    largest_bare: BarePatch
    cells: tuple[Cell, ...]
    rows: int
    cols: int
    cell_mm: float
    confidence: Confidence | None
    guidance: Guidance
    size_stats: dict[str, float]
    alternates: tuple[tuple[int, float], ...] = field(default=())


# --------------------------------------------------------------------------- spots


def label_spots(
    mask: np.ndarray,
    *,
    px_per_mm: float,
    min_spot_mm2: float = 0.1,
    split_touching: bool = True,
    neck_ratio: float = 0.3,
    neck_mm: float = 0.05,
) -> tuple[np.ndarray, int]:
    """Label the spots of a contact mask.

    Parameters
    ----------
    mask : (M, N) bool ndarray
        Contact pixels.
    px_per_mm : float
        Resolution, for the minimum spot area.
    min_spot_mm2 : float
        Components smaller than this (in mm²) are dropped.
    split_touching : bool
        Split marks joined by a narrow neck (see the module docstring).
    neck_ratio : float
        Neck width, as a share of the smaller body's inscribed radius, below which two
        bodies are split.
    neck_mm : float
        Largest neck half-width (mm, at least one pixel) that is split.

    Returns
    -------
    labels : (M, N) int32 ndarray
        0 for background, 1..K for the spots, numbered in raster order of each spot's
        first pixel (as ``scipy.ndimage.label`` numbers components).
    count : int
        K.
    """
    mask = np.asarray(mask, dtype=bool)
    if mask.ndim != 2:
        raise OptionError(f"contact mask must be 2-D (M, N), got shape {mask.shape}")
    min_px = min_spot_mm2 * px_per_mm**2
    n, comp, stats, _, keep = _components(mask, min_px)
    n -= 1
    if n == 0:
        return np.zeros(mask.shape, np.int32), 0
    if not keep[1:].all():
        lut = np.where(keep, np.arange(n + 1), 0).astype(np.int32)
        comp = lut[comp]
    if split_touching and keep.any():
        comp = _split(
            comp, keep, stats, px_per_mm=px_per_mm, min_px=min_px, neck_ratio=neck_ratio,
            neck_mm=neck_mm,
        )
    return _renumber(comp)


def _components(
    mask: np.ndarray, min_px: float
) -> tuple[int, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """8-connected components of ``mask`` and which of them are spots.

    Returns ``(n, labels, stats, centroids, keep)`` as
    ``cv2.connectedComponentsWithStats`` gives them (``n`` counts the background, label
    0), and ``keep[i]``: component i has at least ``min_px`` pixels (never the
    background).
    """
    n, lab, stats, cent = cv2.connectedComponentsWithStats(
        mask.view(np.uint8), connectivity=8, ltype=cv2.CV_32S
    )
    keep = stats[:, cv2.CC_STAT_AREA] >= min_px - 1e-9
    keep[0] = False
    return n, lab, stats, cent, keep


def _renumber(labels: np.ndarray) -> tuple[np.ndarray, int]:
    """Renumber labels 1..K in raster order of each label's first pixel."""
    flat = labels.ravel()
    nz = np.flatnonzero(flat)
    if nz.size == 0:
        return np.zeros(labels.shape, np.int32), 0
    vals = flat[nz]
    first = np.full(int(vals.max()) + 1, np.iinfo(np.int64).max, np.int64)
    np.minimum.at(first, vals, nz)
    values = np.flatnonzero(first != np.iinfo(np.int64).max)
    order = np.argsort(first[values], kind="stable")
    lut = np.zeros(first.size, np.int32)
    lut[values[order]] = np.arange(1, values.size + 1, dtype=np.int32)
    return lut[labels], int(values.size)


def _split(
    comp: np.ndarray,
    keep: np.ndarray,
    stats: np.ndarray,
    *,
    px_per_mm: float,
    min_px: float,
    neck_ratio: float,
    neck_mm: float,
    body_mm: float = 0.6,
) -> np.ndarray:
    """Split kept components at narrow necks; return a label image (any numbering).

    ``comp`` holds the kept components only (the others already 0); ``stats`` are their
    ``cv2.connectedComponentsWithStats`` rows (bounding boxes).
    """
    kept = comp > 0
    padded = np.pad(kept, 1).view(np.uint8)
    edt = cv2.distanceTransform(padded, cv2.DIST_L2, cv2.DIST_MASK_5)[1:-1, 1:-1]
    # regional-maximum candidates (plateau pixels included; merging below sorts them out)
    peaks = (edt >= cv2.dilate(edt, np.ones((3, 3), np.uint8))) & kept
    pn, plab = cv2.connectedComponents(peaks.view(np.uint8), connectivity=8, ltype=cv2.CV_32S)
    pn -= 1
    # components holding more than one peak candidate are the only ones worth splitting
    first_peak_comp = np.zeros(pn + 1, np.int64)
    first_peak_comp[plab[peaks]] = comp[peaks]
    peaks_in_comp = np.bincount(first_peak_comp[1:], minlength=keep.size)
    multi = (peaks_in_comp >= 2) & keep
    min_radius = max(0.5 * math.sqrt(min_px / math.pi), body_mm * px_per_mm)
    neck_px = max(1.0, neck_mm * px_per_mm)
    if multi.any() and neck_px < min_radius:
        # A split needs two bodies, each reaching min_radius, joined by a saddle no
        # wider than neck_px < min_radius: so their deep cores (edt >= min_radius) are
        # apart.  A component with fewer than two deep cores is never split; leaving it
        # out of the watershed changes nothing and saves most of the work.
        deep = edt >= min_radius - 1e-6
        dn, dlab = cv2.connectedComponents(deep.view(np.uint8), connectivity=8, ltype=cv2.CV_32S)
        core_comp = np.zeros(dn, np.int64)
        core_comp[dlab[deep]] = comp[deep]
        multi &= np.bincount(core_comp[1:], minlength=keep.size) >= 2
    if not multi.any():
        return comp
    # each candidate is split on its own bounding box: the watershed and the saddle scan
    # then cost in proportion to the candidates, not to the whole image
    out = comp.copy()
    base = int(stats.shape[0])
    for label_id in np.flatnonzero(multi):
        x, y, w, h = (int(v) for v in stats[label_id, :4])
        box = (slice(y, y + h), slice(x, x + w))
        region = comp[box] == label_id
        pieces = _split_component(
            region, edt[box], plab[box], min_px=min_px, min_radius=min_radius,
            neck_px=neck_px, neck_ratio=neck_ratio,
        )
        if pieces is None:
            continue
        out[box] = np.where(region, base + pieces, out[box])
        base += int(pieces.max()) + 1
    return out


def _split_component(
    region: np.ndarray,
    edt: np.ndarray,
    plab: np.ndarray,
    *,
    min_px: float,
    min_radius: float,
    neck_px: float,
    neck_ratio: float,
) -> np.ndarray | None:
    """Watershed pieces (0..P, merged across wide saddles) of one component, or None."""
    from skimage.segmentation import watershed

    markers = np.where(region, plab, 0)
    ids = np.unique(markers[markers > 0])
    if ids.size < 2:
        return None
    lut = np.zeros(int(ids.max()) + 1, np.int32)
    lut[ids] = np.arange(1, ids.size + 1, dtype=np.int32)
    markers = lut[markers]
    ws = watershed(-edt, markers=markers, mask=region, connectivity=2)
    nws = ids.size + 1
    # each watershed region's peak is its marker's value (a marker is a plateau)
    peak = np.zeros(nws, np.float64)
    mk = markers > 0
    peak[markers[mk]] = edt[mk]
    area = np.bincount(ws.ravel(), minlength=nws).astype(np.float64)
    # saddles between touching watershed regions: max over neighbour pairs of min(edt),
    # on the region's pixels only (forward neighbours: each pair once)
    wsp = np.pad(ws, 1)
    flat = wsp.ravel()
    ef = np.pad(edt, 1).ravel()
    idx = np.flatnonzero(flat)
    here = flat[idx].astype(np.int64)
    eh = ef[idx]
    wp = wsp.shape[1]
    keys_l: list[np.ndarray] = []
    vals_l: list[np.ndarray] = []
    for off in (1, wp - 1, wp, wp + 1):
        nb = flat[idx + off].astype(np.int64)
        sel = (nb != 0) & (nb != here)
        if not sel.any():
            continue
        la, lb = here[sel], nb[sel]
        keys_l.append(np.minimum(la, lb) * nws + np.maximum(la, lb))
        vals_l.append(np.minimum(eh[sel], ef[idx[sel] + off]))
    if not keys_l:
        return None
    keys = np.concatenate(keys_l)
    vals = np.concatenate(vals_l)
    order = np.argsort(keys, kind="stable")
    keys, vals = keys[order], vals[order]
    starts = np.flatnonzero(np.r_[True, keys[1:] != keys[:-1]])
    ukeys = keys[starts]
    saddle = np.maximum.reduceat(vals, starts)
    # merge in order of decreasing saddle (a persistence merge with a relative criterion)
    parent = np.arange(nws)
    top = peak.copy()
    size = area.copy()

    def find(i: int) -> int:
        root = i
        while parent[root] != root:
            root = parent[root]
        while parent[i] != root:
            parent[i], i = root, parent[i]
        return root

    split_any = False
    for k in np.argsort(-saddle, kind="stable"):
        ra, rb = find(int(ukeys[k] // nws)), find(int(ukeys[k] % nws))
        if ra == rb:
            continue
        s = float(saddle[k])
        low = min(top[ra], top[rb])
        split = (
            s <= neck_px
            and s < neck_ratio * low
            and low - s >= 1.0
            and low >= min_radius
            and min(size[ra], size[rb]) >= min_px
        )
        if split:
            split_any = True
        else:
            parent[rb] = ra
            top[ra] = max(top[ra], top[rb])
            size[ra] += size[rb]
    if not split_any:
        return None
    roots = np.array([find(i) for i in range(nws)], dtype=np.int64)
    return np.where(ws > 0, roots[ws], 0).astype(np.int32)


def _spot_table(labels: np.ndarray, count: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Pixel area and mean pixel (row, col) of each label 1..count."""
    flat = labels.ravel()
    sel = flat > 0
    idx = flat[sel]
    pos = np.flatnonzero(sel)
    cols_n = labels.shape[1]
    area = np.bincount(idx, minlength=count + 1)[1:].astype(np.float64)
    rsum = np.bincount(idx, weights=(pos // cols_n).astype(np.float64), minlength=count + 1)[1:]
    csum = np.bincount(idx, weights=(pos % cols_n).astype(np.float64), minlength=count + 1)[1:]
    with np.errstate(invalid="ignore", divide="ignore"):
        return area, rsum / area, csum / area


# --------------------------------------------------------------------------- geometry


def _axis_cells(n_px: int, origin: float, s: float, start: float, length: float, cell: float):
    """Per-pixel cell index along one axis (-1 outside the window), and cell count."""
    centres = origin + (np.arange(n_px) + 0.5) / s
    t = (centres - start) / cell
    n_cells = max(1, int(math.ceil(length / cell - 1e-9)))
    idx = np.floor(t + 1e-9).astype(np.int64)
    inside = (centres >= start - 1e-9 / s) & (centres < start + length - 1e-9 / s)
    idx[~inside] = -1
    idx[idx >= n_cells] = n_cells - 1
    return idx, n_cells


def _cell_sums(
    mask: np.ndarray, row_idx: np.ndarray, col_idx: np.ndarray, n_rows: int, n_cols: int
) -> np.ndarray:
    """Pixels of ``mask`` in each cell, flat (row-major), from per-axis cell indices.

    The cells are blocks of whole pixel rows and columns (the indices from
    :func:`_axis_cells` rise along each axis), so the sums are block sums.
    """
    r_in, c_in = np.flatnonzero(row_idx >= 0), np.flatnonzero(col_idx >= 0)
    if r_in.size == 0 or c_in.size == 0:
        return np.zeros(n_rows * n_cols, np.int64)
    r_cells, c_cells = row_idx[r_in], col_idx[c_in]
    if np.unique(r_cells).size != n_rows or np.unique(c_cells).size != n_cols:
        # a cell without a whole pixel row or column (a sliver at the window's end)
        cell_of = r_cells[:, None] * n_cols + c_cells[None, :]
        sub = mask[r_in[0] : r_in[-1] + 1, c_in[0] : c_in[-1] + 1]
        return np.bincount(cell_of[sub], minlength=n_rows * n_cols)
    sub = mask[r_in[0] : r_in[-1] + 1, c_in[0] : c_in[-1] + 1].view(np.uint8)
    r_starts = np.flatnonzero(np.r_[True, r_cells[1:] != r_cells[:-1]])
    c_starts = np.flatnonzero(np.r_[True, c_cells[1:] != c_cells[:-1]])
    by_rows = np.add.reduceat(sub, r_starts, axis=0, dtype=np.int64)
    return np.add.reduceat(by_rows, c_starts, axis=1).ravel()


def _count_centres(origin: float, s: float, lo: float, hi: float) -> int:
    """Number of pixel centres (unbounded grid) in [lo, hi) along one axis."""
    a = math.ceil((lo - origin) * s - 0.5 - 1e-9)
    b = math.ceil((hi - origin) * s - 0.5 - 1e-9)
    return max(0, b - a)


# --------------------------------------------------------------------------- measure


def measure(
    mask: np.ndarray,
    *,
    frame: Frame,
    analysed: np.ndarray,
    config: MeasureConfig = MeasureConfig(),
    alternates: tuple[np.ndarray, ...] = (),
    bare: tuple[BarePatch, np.ndarray] | Callable[[], tuple[BarePatch, np.ndarray]] | None = None,
) -> Measurement:
    """Measure the contact ``mask`` (M, N) bool on rectified ``frame``.

    Parameters
    ----------
    mask : (M, N) bool ndarray
        Contact pixels (from the segment stage).
    frame : Frame
        Pixel geometry; ``frame.shape`` must equal ``mask.shape``.
    analysed : (M, N) bool ndarray
        The window less exclusions (and less what the photo does not show).
    config : MeasureConfig
    alternates : tuple of (M, N) bool ndarray
        Masks at nudged thresholds from which the confidence range is taken; with
        none, ``confidence`` is None.
    bare : (BarePatch, (M, N) float32 ndarray) or a function returning one, optional
        :func:`bare_map` of the same mask, frame, analysed area and config, when it is
        computed elsewhere (the pipeline runs it beside measure and passes its future's
        ``result``, called when measure comes to the bare patch); else measure computes
        it.

    Returns
    -------
    Measurement
    """
    mask = np.asarray(mask, dtype=bool)
    analysed = np.asarray(analysed, dtype=bool)
    if mask.ndim != 2 or mask.shape != analysed.shape:
        raise OptionError(
            f"contact mask {mask.shape} and analysed mask {analysed.shape} must be the same "
            "2-D shape; pass masks of the rectified image"
        )
    if tuple(frame.shape) != mask.shape:
        raise OptionError(
            f"frame shape {tuple(frame.shape)} does not match the mask {mask.shape}; "
            "pass the frame of the rectified image that was segmented"
        )
    if not config.cell_mm > 0:
        raise OptionError(f"cell_mm must be greater than zero, got {config.cell_mm!r}")
    if not config.min_spot_mm2 >= 0:
        raise OptionError(f"min_spot_mm2 must be zero or more, got {config.min_spot_mm2!r}")
    if not 0 < config.neck_ratio < 1:
        raise OptionError(f"neck_ratio must be between 0 and 1, got {config.neck_ratio!r}")
    for i, alt in enumerate(alternates):
        if np.shape(alt) != mask.shape:
            raise OptionError(
                f"alternate mask {i} has shape {np.shape(alt)}, expected {mask.shape}"
            )

    s = float(frame.px_per_mm)
    px_area = 1.0 / (s * s)
    win = frame.window
    c_mm = float(config.cell_mm)
    rows_px, cols_px = mask.shape

    labels, count = label_spots(
        mask,
        px_per_mm=s,
        min_spot_mm2=config.min_spot_mm2,
        split_touching=config.split_touching,
        neck_ratio=config.neck_ratio,
    )
    contact = labels > 0

    # --- cells: per-pixel cell index by pixel centre
    row_idx, n_rows = _axis_cells(rows_px, frame.origin_mm[1], s, win.y_mm, win.height_mm, c_mm)
    col_idx, n_cols = _axis_cells(cols_px, frame.origin_mm[0], s, win.x_mm, win.width_mm, c_mm)
    n_cells = n_rows * n_cols
    in_an = _in_window(frame, analysed)
    cell_area_px = _cell_sums(in_an, row_idx, col_idx, n_rows, n_cols)
    cell_contact_px = _cell_sums(in_an & contact, row_idx, col_idx, n_rows, n_cols)

    # --- spots
    area_px, rc, cc = _spot_table(labels, count)
    x_mm, y_mm = frame.to_mm(rc, cc)
    # the pixel holding the centroid (pixel (r, c) covers [r, r+1) in centre-0.5 units)
    pr = np.floor(rc + 0.5).astype(np.int64)
    pc = np.floor(cc + 0.5).astype(np.int64)
    inside = (pr >= 0) & (pr < rows_px) & (pc >= 0) & (pc < cols_px)
    prc, pcc = np.clip(pr, 0, rows_px - 1), np.clip(pc, 0, cols_px - 1)
    spot_r, spot_c = row_idx[prc], col_idx[pcc]
    spot_cell = np.where(inside & (spot_r >= 0) & (spot_c >= 0), spot_r * n_cols + spot_c, -1)
    in_window = inside & analysed[prc, pcc] & (spot_cell >= 0)
    spot_cell = np.where(in_window, spot_cell, -1)
    spot_row = np.where(in_window, spot_cell // n_cols, -1).astype(np.int64)
    spot_col = np.where(in_window, spot_cell % n_cols, -1).astype(np.int64)
    area_mm2 = area_px * px_area
    spots = Spots(
        area_mm2=area_mm2,
        diameter_mm=np.sqrt(4.0 * area_mm2 / math.pi),
        x_mm=np.asarray(x_mm, dtype=np.float64),
        y_mm=np.asarray(y_mm, dtype=np.float64),
        in_window=in_window,
        row=spot_row,
        col=spot_col,
    )
    cell_count = np.bincount(spot_cell[in_window], minlength=n_cells)

    analysed_px = int(in_an.sum())
    window_area = analysed_px * px_area
    spot_count = int(in_window.sum())
    density = spot_count * c_mm**2 / window_area if window_area > 0 else 0.0
    bearing = 100.0 * int(cell_contact_px.sum()) / analysed_px if analysed_px else 0.0

    cells: list[Cell] = []
    for r in range(n_rows):
        for c in range(n_cols):
            k = r * n_cols + c
            x0 = win.x_mm + c * c_mm
            y0 = win.y_mm + r * c_mm
            x1 = min(x0 + c_mm, win.x_mm + win.width_mm)
            y1 = min(y0 + c_mm, win.y_mm + win.height_mm)
            a_mm2 = float(cell_area_px[k]) * px_area
            full = (
                _count_centres(frame.origin_mm[0], s, x0, x1)
                * _count_centres(frame.origin_mm[1], s, y0, y1)
            )
            complete = (
                x0 + c_mm <= win.x_mm + win.width_mm + 1e-6
                and y0 + c_mm <= win.y_mm + win.height_mm + 1e-6
                and int(cell_area_px[k]) == full
                and full > 0
            )
            n_here = int(cell_count[k])
            cells.append(
                Cell(
                    row=r,
                    col=c,
                    x_mm=float(x0),
                    y_mm=float(y0),
                    width_mm=float(x1 - x0),
                    height_mm=float(y1 - y0),
                    area_mm2=a_mm2,
                    complete=bool(complete),
                    spot_count=n_here,
                    density=n_here * c_mm**2 / a_mm2 if a_mm2 > 0 else 0.0,
                    bearing_percent=(
                        100.0 * float(cell_contact_px[k]) / float(cell_area_px[k])
                        if cell_area_px[k]
                        else 0.0
                    ),
                )
            )

    # --- bare patches
    if bare is None:
        largest, bare_edt = _largest_bare(in_an & ~contact, frame)
    else:
        largest, bare_edt = bare() if callable(bare) else bare
        if bare_edt.shape != mask.shape:
            raise OptionError(f"bare map has shape {bare_edt.shape}, expected {mask.shape}")

    # --- size statistics of the counted spots
    a_in = area_mm2[in_window]
    d_in = spots.diameter_mm[in_window]
    if a_in.size:
        size_stats = {
            "median_area_mm2": float(np.median(a_in)),
            "p90_area_mm2": float(np.percentile(a_in, 90)),
            "mean_area_mm2": float(np.mean(a_in)),
            "median_diameter_mm": float(np.median(d_in)),
            "p90_diameter_mm": float(np.percentile(d_in, 90)),
        }
    else:
        size_stats = dict.fromkeys(
            ("median_area_mm2", "p90_area_mm2", "mean_area_mm2", "median_diameter_mm",
             "p90_diameter_mm"),
            0.0,
        )

    # --- confidence from the alternate masks
    meas_alts: tuple[tuple[int, float], ...] = ()
    confidence = None
    if alternates:
        counts = confidence_counts(
            (mask, *alternates), frame=frame, analysed=analysed, config=config
        )
        confidence, meas_alts = _confidence_from_counts(spot_count, bearing, counts, config)

    guidance = _guidance(
        spots=spots,
        contact=contact,
        in_an=in_an,
        frame=frame,
        bare_edt=bare_edt,
        bearing=bearing,
        config=config,
    )

    return Measurement(
        spots=spots,
        labels=labels,
        area_mm2=float(window_area),
        spot_count=spot_count,
        density=float(density),
        bearing_percent=float(bearing),
        largest_bare=largest,
        cells=tuple(cells),
        rows=n_rows,
        cols=n_cols,
        cell_mm=c_mm,
        confidence=confidence,
        guidance=guidance,
        size_stats=size_stats,
        alternates=meas_alts,
    )


def bare_map(
    mask: np.ndarray,
    *,
    frame: Frame,
    analysed: np.ndarray,
    config: MeasureConfig = MeasureConfig(),
) -> tuple[BarePatch, np.ndarray]:
    """The largest bare patch of a contact mask, and the radius map it comes from.

    What :func:`measure` computes for its ``largest_bare`` (and its bare-patch
    guidance), on its own: the spots are the 8-connected components of ``mask`` of at
    least ``config.min_spot_mm2`` (splitting touching spots moves no pixel), the bare
    area the analysed window less them.  Independent of :func:`measure`, so it may run
    beside it; pass the result to ``measure(..., bare=...)``.
    """
    mask = np.asarray(mask, dtype=bool)
    analysed = np.asarray(analysed, dtype=bool)
    _, lab, _, _, keep = _components(mask, config.min_spot_mm2 * frame.px_per_mm**2)
    contact = keep[lab] if not keep[1:].all() else mask
    return _largest_bare(_in_window(frame, analysed) & ~contact, frame)


def _largest_bare(free: np.ndarray, frame: Frame) -> tuple[BarePatch, np.ndarray]:
    """Largest circle inside ``free`` (bare analysed pixels); also the radius map in px.

    The distance transform gives the distance from each free pixel centre to the
    nearest blocked pixel centre; the blocked pixel's square edge is half a pixel
    nearer, so the circle's radius is that distance less 0.5 px.
    """
    if not free.any():
        x, y = frame.to_mm(np.array(0.0), np.array(0.0))
        return BarePatch(0.0, float(x), float(y)), np.zeros(free.shape, np.float32)
    padded = np.pad(free, 1).view(np.uint8)
    edt = cv2.distanceTransform(padded, cv2.DIST_L2, cv2.DIST_MASK_PRECISE)[1:-1, 1:-1]
    radius = np.maximum(edt - 0.5, 0.0)
    k = int(np.argmax(radius))
    r, c = divmod(k, free.shape[1])
    x, y = frame.to_mm(np.array(float(r)), np.array(float(c)))
    return BarePatch(2.0 * float(radius.flat[k]) / frame.px_per_mm, float(x), float(y)), radius


def _in_window(frame: Frame, analysed: np.ndarray) -> np.ndarray:
    """``analysed`` less any pixel whose centre lies outside the window."""
    s = float(frame.px_per_mm)
    win = frame.window
    rows_px, cols_px = analysed.shape
    # the cell size does not move the window's pixel rows and columns
    row_idx, _ = _axis_cells(rows_px, frame.origin_mm[1], s, win.y_mm, win.height_mm, 1.0)
    col_idx, _ = _axis_cells(cols_px, frame.origin_mm[0], s, win.x_mm, win.width_mm, 1.0)
    return analysed & (row_idx[:, None] >= 0) & (col_idx[None, :] >= 0)


def confidence_counts(
    masks: tuple[np.ndarray, ...] | list[np.ndarray],
    *,
    frame: Frame,
    analysed: np.ndarray,
    config: MeasureConfig = MeasureConfig(),
) -> list[tuple[int, float]]:
    """Spot count and bearing of each mask, for the confidence range.

    The masks are labelled without the neck split (the costly part of labelling): each
    8-connected component of at least ``config.min_spot_mm2`` counts when its centroid's
    pixel is analysed, and its analysed pixels bear.  Pass the main contact mask first
    and the alternates after it, and hand the result to :func:`with_confidence`; the
    spots the split adds on the main mask are added back to the alternates' counts.

    Independent of :func:`measure`, so it may run beside it (another thread).
    """
    analysed = np.asarray(analysed, dtype=bool)
    s = float(frame.px_per_mm)
    rows_px, cols_px = analysed.shape
    in_an = _in_window(frame, analysed)
    analysed_px = int(np.count_nonzero(in_an))
    min_px = config.min_spot_mm2 * s**2
    outside_flat = np.flatnonzero(~in_an.ravel())
    out: list[tuple[int, float]] = []
    for m in masks:
        if np.shape(m) != analysed.shape:
            raise OptionError(
                f"alternate mask has shape {np.shape(m)}, expected {analysed.shape}"
            )
        n, lab, stats, cent, keep = _components(np.asarray(m, dtype=bool), min_px)
        apr = np.floor(cent[:, 1] + 0.5).astype(np.int64)
        apc = np.floor(cent[:, 0] + 0.5).astype(np.int64)
        ok = keep & (apr >= 0) & (apr < rows_px) & (apc >= 0) & (apc < cols_px)
        ok &= in_an[np.clip(apr, 0, rows_px - 1), np.clip(apc, 0, cols_px - 1)]
        # pixels in the analysed area: all, less the (few) outside it
        in_analysed = stats[:, cv2.CC_STAT_AREA] - np.bincount(
            lab.ravel()[outside_flat], minlength=n
        )
        bearing = 100.0 * int(in_analysed[keep].sum()) / analysed_px if analysed_px else 0.0
        out.append((int(ok.sum()), bearing))
    return out


def with_confidence(
    measurement: Measurement,
    counts: list[tuple[int, float]],
    config: MeasureConfig = MeasureConfig(),
) -> Measurement:
    """``measurement`` with the confidence range from :func:`confidence_counts` output."""
    from dataclasses import replace

    confidence, alts = _confidence_from_counts(
        measurement.spot_count, measurement.bearing_percent, counts, config
    )
    return replace(measurement, confidence=confidence, alternates=alts)


def _confidence_from_counts(
    spot_count: int, bearing: float, counts: list[tuple[int, float]], config: MeasureConfig
) -> tuple[Confidence, tuple[tuple[int, float], ...]]:
    main, *alts = counts
    split_added = spot_count - main[0] if config.split_touching else 0
    shifted = [(n + split_added, b) for n, b in alts]
    return _confidence(spot_count, bearing, shifted, config), tuple(shifted)


def _confidence(
    count: int, bearing: float, alts: list[tuple[int, float]], config: MeasureConfig
) -> Confidence:
    counts = [count] + [a for a, _ in alts]
    bears = [bearing] + [b for _, b in alts]
    lo, hi = min(counts), max(counts)
    blo, bhi = min(bears), max(bears)
    change = max(abs(c - count) for c in counts) / max(count, 1)
    bchange = max(abs(b - bearing) for b in bears)
    reasons = []
    if change > config.doubtful_change and max(abs(c - count) for c in counts) > 1:
        reasons.append(
            f"spot count moves {lo}-{hi} (±{100 * change:.0f}%) when the compound "
            "threshold is nudged"
        )
    if bchange > config.doubtful_bearing:
        reasons.append(
            f"bearing moves {blo:.1f}-{bhi:.1f}% when the compound threshold is nudged"
        )
    reason = "; ".join(reasons)
    if reason:
        reason += ": the photo may be blurred, glary or badly lit; retake it"
    return Confidence(
        count_low=int(lo),
        count_high=int(hi),
        bearing_low=float(blo),
        bearing_high=float(bhi),
        doubtful=bool(reasons),
        reason=reason,
    )


def _guidance(
    *,
    spots: Spots,
    contact: np.ndarray,
    in_an: np.ndarray,
    frame: Frame,
    bare_edt: np.ndarray,
    bearing: float,
    config: MeasureConfig,
) -> Guidance:
    s = frame.px_per_mm
    high: list[tuple[float, float, float, str]] = []
    inw = spots.in_window
    if inw.sum() >= 5:
        med = float(np.median(spots.area_mm2[inw]))
        big = np.flatnonzero(inw & (spots.area_mm2 > config.oversize_factor * med))
        big = big[np.argsort(-spots.area_mm2[big], kind="stable")][:50]
        for i in big:
            a = float(spots.area_mm2[i])
            high.append(
                (
                    float(spots.x_mm[i]),
                    float(spots.y_mm[i]),
                    float(spots.diameter_mm[i]),
                    f"large spot {a:.1f} mm² ({a / med:.0f}x the median): break it up",
                )
            )
    # heavy-bearing regions: local bearing over a box of half a cell
    if in_an.any() and bearing > 0:
        k = max(3, int(round(0.5 * config.cell_mm * s)) | 1)
        an_f = in_an.astype(np.float32)
        num = cv2.boxFilter((contact & in_an).astype(np.float32), -1, (k, k), normalize=False,
                            borderType=cv2.BORDER_CONSTANT)
        den = cv2.boxFilter(an_f, -1, (k, k), normalize=False, borderType=cv2.BORDER_CONSTANT)
        with np.errstate(invalid="ignore", divide="ignore"):
            local = np.where(den > 0.5 * k * k, 100.0 * num / np.maximum(den, 1.0), 0.0)
        limit = max(config.heavy_bearing_factor * bearing, bearing + 15.0)
        heavy = (local > limit) & in_an
        if heavy.any():
            n, lab, stats, cents = cv2.connectedComponentsWithStats(
                heavy.view(np.uint8), connectivity=8
            )
            order = np.argsort(-stats[1:, cv2.CC_STAT_AREA])[:20] + 1
            for j in order:
                area_px = float(stats[j, cv2.CC_STAT_AREA])
                if area_px < 0.25 * k * k:
                    continue
                cx, cy = frame.to_mm(np.array(cents[j][1]), np.array(cents[j][0]))
                x, y, w, h = (int(v) for v in stats[j, :4])
                box = (slice(y, y + h), slice(x, x + w))
                peak = float(local[box][lab[box] == j].max())
                high.append(
                    (
                        float(cx),
                        float(cy),
                        2.0 * math.sqrt(area_px / math.pi) / s,
                        f"heavy bearing {peak:.0f}% against {bearing:.0f}% overall: "
                        "scrape this area down",
                    )
                )
    bare: list[BarePatch] = []
    if config.max_bare_mm is not None and bare_edt.size:
        limit_px = 0.5 * config.max_bare_mm * s
        bare = _bare_patches(bare_edt, limit_px, frame)
    return Guidance(high=tuple(high), bare=tuple(bare))


def _bare_patches(radius: np.ndarray, limit_px: float, frame: Frame) -> list[BarePatch]:
    """Disjoint circles of radius above ``limit_px``, largest first (at most 20)."""
    cand = (radius > limit_px) & (radius >= cv2.dilate(radius, np.ones((3, 3), np.uint8)))
    rr, cc = np.nonzero(cand)
    if rr.size == 0:
        return []
    rad = radius[rr, cc]
    order = np.argsort(-rad, kind="stable")
    rr, cc, rad = rr[order], cc[order], rad[order]
    taken: list[int] = []
    alive = np.ones(rr.size, bool)
    for i in range(rr.size):
        if not alive[i]:
            continue
        taken.append(i)
        if len(taken) >= 20:
            break
        d = np.hypot(rr - rr[i], cc - cc[i])
        alive &= d >= rad[i] + rad
    out = []
    for i in taken:
        x, y = frame.to_mm(np.array(float(rr[i])), np.array(float(cc[i])))
        out.append(BarePatch(2.0 * float(rad[i]) / frame.px_per_mm, float(x), float(y)))
    return out
