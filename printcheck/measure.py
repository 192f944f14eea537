"""Measure: spots, grid cells, bearing, bare patches and the range of a contact mask.

Counting follows the grid and counting contract (docs/formats.md): a spot belongs to the
window and the cell that hold its centroid; bearing is on the analysed area (window less
exclusions); density = spot_count * cell_mm**2 / area_mm2.  All lengths here are mm.
Spots are labelled by :mod:`printcheck.spots`; where to scrape next and the bare patches
come from :mod:`printcheck.guidance`.

A spot lies in the window (and in a cell) when the pixel holding its centroid is an
analysed pixel (pixel centres decide which pixels belong to the window and to each cell,
as in :meth:`printcheck.frame.Frame.window_slices`).

The range ("24 (22-26)") comes from what is really uncertain in the photo: the segment
stage's decision redone with its thresholds nudged both ways, specks near the minimum
spot area, the contacts that barely stand out from the photo's noise (as many again may
lie below it, unseen), and the resolution of the photo against the size of its
contacts.  A photo too coarse for its contacts is flagged doubtful, with the resolution
it would need; its bearing's range then reaches down by the contacts' outermost pixel
all round (their outlines may lie that far out: see :func:`_outline`).  Where the
contacts are large enough for the photo but crowd closer together than it parts, the
blur of both
neighbours fills the gaps between them: the bearing leaves out the share of that
outermost pixel the blur spills over (:func:`spill`, a little under half where the
outlines are drawn low on the edge), and its range reaches up to the mask's own reading.
"""

from __future__ import annotations

import functools
import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from statistics import NormalDist

import cv2
import numpy as np

from printcheck.cells import Cell, Grid, cell_sums, cells_of, in_window
from printcheck.contacts import flat_where, near_another
from printcheck.errors import OptionError
from printcheck.frame import Frame
from printcheck.guidance import BarePatch, Guidance, HighArea, guidance, largest_bare
from printcheck.spots import Spots, components, diameters, spots_of

__all__ = [
    "MeasureConfig",
    "Spots",
    "Cell",
    "BarePatch",
    "HighArea",
    "Confidence",
    "Guidance",
    "Measurement",
    "measure",
]


@dataclass(frozen=True)
class MeasureConfig:
    """Options of the measure stage.

    Attributes
    ----------
    cell_mm : float
        Side of the counting square in mm (25.4 for 1 in, 25.0 for 25 mm).
    min_spot_mm2 : float
        Specks smaller than this are not spots (default 0.1 mm², docs/formats.md).
    max_bare_mm : float or None
        Bare patches larger than this are flagged in the guidance (from the spec).
    count_spread : float
        The count's range is at least one point, and this share of the count, either
        way: how far the count of a well-resolved photo strays from the rendered truth
        (spots whose pieces at the window edge or whose necks are borderline), which no
        nudge of the thresholds shows.
    doubtful_change : float
        The result is flagged doubtful when the count's range reaches further than this
        share from the count (beyond the ``count_spread``) ...
    doubtful_bearing : float
        ... or the bearing's range further than this many percentage points.
    resolution_px : float
        Pixels the photo must give across its smaller contacts (the lower quartile of
        their diameters as measured) for them to be seen apart; fewer make the photo
        doubtful.  Eight: a JPEG keeps colour at half the resolution of brightness, so
        that is four colour samples across a contact, and contacts a photo cannot part
        come out merged, larger than they are.
    part_px : float
        Photo pixels of bare metal two neighbouring contacts need between them to be
        seen apart: what the segmentation parted them on needs
        (:attr:`printcheck.segment.Segmentation.part_px`; the pipeline passes it).
        Three by default: a photo keeps colour at half the resolution of brightness
        (JPEG and HEIC 4:2:0), so a gap of three pixels is one and a half colour
        samples wide, the least in which the colour can come back to bare metal; two
        where the contacts were cut apart on the brightness, kept at full resolution.
    outline_share : float
        Where on a contact's edge the segmentation drew its outline, as a share of the
        way from the background (bare metal; the coat, with compound on the work) to
        the contact (:attr:`printcheck.segment.Segmentation.outline_share`; the
        pipeline passes it; the default is the rim share of compound on the
        reference): low on the edge, the outline lies out by the blur (see
        :func:`spill`).
    crowded_share : float
        When more than this share of the contacts lie closer than ``part_px`` to a
        neighbour, the print is as fine as the photo's pixels: each such contact may
        hide another merged into it, so the count's range reaches up by one for each,
        and the photo is doubtful (too far away for a print this fine).  A quarter: in
        a print of evenly spread contacts a few pairs always lie close, and contacts
        the segment stage parted at a valley touch their neighbours.
    oversize_factor : float
        Spots larger than this many times the median spot area are high areas.
    heavy_bearing_factor : float
        Regions whose local bearing exceeds this many times the window's bearing (and
        by at least 15 percentage points) are heavy-bearing high areas.
    """

    cell_mm: float = 25.4
    min_spot_mm2: float = 0.1
    max_bare_mm: float | None = None
    count_spread: float = 0.02
    doubtful_change: float = 0.15
    doubtful_bearing: float = 5.0
    resolution_px: float = 8.0
    part_px: float = 3.0
    outline_share: float = 0.175
    crowded_share: float = 0.25
    oversize_factor: float = 4.0
    heavy_bearing_factor: float = 1.5

    def __post_init__(self) -> None:
        if not (math.isfinite(self.cell_mm) and self.cell_mm > 0):
            raise OptionError(f"cell_mm must be greater than zero, got {self.cell_mm!r}")
        if not (math.isfinite(self.min_spot_mm2) and self.min_spot_mm2 >= 0):
            raise OptionError(f"min_spot_mm2 must be zero or more, got {self.min_spot_mm2!r}")
        if self.max_bare_mm is not None and not self.max_bare_mm > 0:
            raise OptionError(f"max_bare_mm must be greater than zero, got {self.max_bare_mm!r}")
        if not (math.isfinite(self.count_spread) and self.count_spread >= 0):
            raise OptionError(f"count_spread must be zero or more, got {self.count_spread!r}")
        for name in (
            "doubtful_change",
            "doubtful_bearing",
            "resolution_px",
            "part_px",
            "crowded_share",
            "oversize_factor",
            "heavy_bearing_factor",
        ):
            value = getattr(self, name)
            if not (math.isfinite(value) and value > 0):
                raise OptionError(f"{name} must be greater than zero, got {value!r}")
        if not (math.isfinite(self.outline_share) and 0 <= self.outline_share < 1):
            raise OptionError(
                f"outline_share must be from 0 to below 1, got {self.outline_share!r}"
            )


@dataclass(frozen=True)
class Confidence:
    """The count and bearing a photo supports, and whether it is doubtful (and why)."""

    count_low: int
    count_high: int
    bearing_low: float
    bearing_high: float
    doubtful: bool
    reason: str = ""


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


# --------------------------------------------------------------------------- measure


def measure(
    mask: np.ndarray,
    *,
    frame: Frame,
    analysed: np.ndarray,
    config: MeasureConfig = MeasureConfig(),
    alternates: Sequence[np.ndarray] = (),
    photo_px_per_mm: float | None = None,
    unseen: np.ndarray | None = None,
    photo_blur_px: float | None = None,
    clear: np.ndarray | None = None,
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
    alternates : sequence of (M, N) bool ndarray
        The segment stage's masks with its thresholds nudged; with none, the range holds
        only what the mask itself says.  Read last (they may still be in the making on a
        spare core).
    photo_px_per_mm : float, optional
        What the photo itself resolves at the window, for the resolution check.
    photo_blur_px : float, optional
        How far the photo spreads sharp edges (the Gaussian sigma at the card's markers,
        photo pixels): a blurred photo resolves less than its pixels
        (:func:`resolving_px_per_mm`).
    unseen : (M, N) bool ndarray, optional
        Pixels where the photo shows nothing of the print (burnt-out highlights): the
        contacts they hide are not counted, and the range reaches up by what they
        would hold at the print's density and bearing elsewhere.
    clear : (M, N) bool ndarray, optional
        Pixels whose colour stands clear of the noise
        (:attr:`printcheck.segment.Segmentation.clear`).  The contacts without one
        barely stand out from it: as many again, fainter still, may lie below it unseen,
        and the count's range reaches up by them.

    Returns
    -------
    Measurement
    """
    mask = np.asarray(mask, dtype=bool)
    analysed = np.asarray(analysed, dtype=bool)
    clear = None if clear is None else np.asarray(clear, dtype=bool)
    _check_shapes(mask, analysed, frame, (), clear)  # the alternates when read, last
    s = float(frame.px_per_mm)
    px_area = 1.0 / (s * s)
    found = components(mask, config.min_spot_mm2 * s * s)
    labels, count, area_px, centroid = spots_of(found)
    contact = labels > 0
    grid = Grid.of(frame, mask.shape, config.cell_mm)
    in_an = in_window(frame, analysed)
    cell_area_px = cell_sums(in_an, grid.row_idx, grid.col_idx, grid.rows, grid.cols)
    cell_contact_px = cell_sums(in_an & contact, grid.row_idx, grid.col_idx, grid.rows, grid.cols)
    spots = _spot_columns(frame, grid, analysed, area_px * px_area, centroid)
    analysed_px = int(in_an.sum())
    window_area = analysed_px * px_area
    spot_count = int(spots.in_window.sum())
    c_mm = float(config.cell_mm)
    density = spot_count * c_mm**2 / window_area if window_area > 0 else 0.0
    resolves = resolving_px_per_mm(photo_px_per_mm, photo_blur_px)
    too_small = _too_small(spots, resolves, config)
    crowded = _crowded(labels, spots, s, resolves, config)
    if not _is_crowded(crowded, spot_count, resolves, config):
        crowded = 0  # a few close pairs: the photo parts the print
    ring_px = s / resolves if resolves else 1.0

    @functools.cache
    def outline(width_px: float) -> np.ndarray:
        return _outline(contact, in_an, width_px)

    read = 100.0 * int(cell_contact_px.sum()) / analysed_px if analysed_px else 0.0
    bearing = read
    cell_bearing_px = cell_contact_px.astype(np.float64)
    out = spill(config.outline_share)
    if out > 0 and too_small is None and crowded:
        # contacts closer together than the photo parts, large enough to be seen: the
        # blur of both neighbours fills the gaps between them, and no bare metal is left
        # there to draw the outline against; that part of the outermost resolved pixel
        # that the blur spills over is not contact: a band ``out * ring_px`` deep all
        # round, taken as that share of a ring at least one frame pixel deep (where the
        # frame is coarser than the photo) and no shallower than the band itself
        deep = out * ring_px
        width = max(ring_px, 1.0, deep)
        share = deep / width  # at most 1: no pixel loses more than itself
        edge = outline(width)
        cell_bearing_px -= share * cell_sums(edge, grid.row_idx, grid.col_idx, grid.rows, grid.cols)
        bearing = 100.0 * float(cell_bearing_px.sum()) / analysed_px
    cell_count = np.bincount(grid.cell_of(spots), minlength=grid.rows * grid.cols)
    cells = cells_of(frame, grid, c_mm, cell_area_px, cell_bearing_px, cell_count, px_area)
    bare = in_an & ~contact
    largest, bare_radius = largest_bare(bare, frame)
    advice = guidance(
        spots=spots,
        contact=contact,
        in_an=in_an,
        frame=frame,
        bare_edt=bare_radius,
        bearing=read,  # the guidance reads the mask's own local bearing against it
        oversize_factor=config.oversize_factor,
        heavy_bearing_factor=config.heavy_bearing_factor,
        cell_mm=c_mm,
        max_bare_mm=config.max_bare_mm,
    )
    faint = _faint(labels, spots, clear)
    marginal = _marginal(found, in_an, frame, config)
    unseen_share = _unseen_share(unseen, bare, analysed_px)
    # the alternates last: the segment stage may still be deciding them on a spare core
    _check_shapes(mask, analysed, frame, alternates)
    alts = tuple(_count_and_bearing(a, frame, in_an, config) for a in alternates)
    confidence = _confidence(
        spot_count,
        bearing,
        alts,
        marginal,
        resolves,
        config,
        small=too_small,
        crowded=crowded,
        unseen_share=unseen_share,
        blur_px=photo_blur_px if _blurred(photo_blur_px) else None,
        outline=lambda: _share_of(outline(ring_px), analysed_px),
        read=read,
        faint=faint,
    )
    return Measurement(
        spots=spots,
        labels=labels,
        area_mm2=float(window_area),
        spot_count=spot_count,
        density=float(density),
        bearing_percent=float(bearing),
        largest_bare=largest,
        cells=cells,
        rows=grid.rows,
        cols=grid.cols,
        cell_mm=c_mm,
        confidence=confidence,
        guidance=advice,
        size_stats=_size_stats(spots),
        alternates=alts,
    )


def _check_shapes(
    mask: np.ndarray,
    analysed: np.ndarray,
    frame: Frame,
    alternates: Sequence[np.ndarray],
    clear: np.ndarray | None = None,
) -> None:
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
    if clear is not None and clear.shape != mask.shape:
        raise OptionError(
            f"clear map shape {clear.shape} != mask shape {mask.shape}; pass the map of "
            "the rectified image that was segmented"
        )
    for i, alt in enumerate(alternates):
        if np.shape(alt) != mask.shape:
            raise OptionError(
                f"alternate mask {i} has shape {np.shape(alt)}, expected {mask.shape}"
            )


def _spot_columns(
    frame: Frame, grid: Grid, analysed: np.ndarray, area_mm2: np.ndarray, centroid: np.ndarray
) -> Spots:
    """The spots' table: areas, centroids, and the window cell holding each centroid."""
    rows_px, cols_px = analysed.shape
    rc, cc = centroid[:, 0], centroid[:, 1]
    x_mm, y_mm = frame.to_mm(rc, cc)
    # the pixel holding the centroid (pixel (r, c) covers [r, r+1) in centre-0.5 units)
    pr = np.floor(rc + 0.5).astype(np.int64)
    pc = np.floor(cc + 0.5).astype(np.int64)
    inside = (pr >= 0) & (pr < rows_px) & (pc >= 0) & (pc < cols_px)
    prc, pcc = np.clip(pr, 0, rows_px - 1), np.clip(pc, 0, cols_px - 1)
    spot_r, spot_c = grid.row_idx[prc], grid.col_idx[pcc]
    in_window = inside & analysed[prc, pcc] & (spot_r >= 0) & (spot_c >= 0)
    return Spots(
        area_mm2=area_mm2,
        diameter_mm=diameters(area_mm2),
        x_mm=np.asarray(x_mm, dtype=np.float64),
        y_mm=np.asarray(y_mm, dtype=np.float64),
        in_window=in_window,
        row=np.where(in_window, spot_r, -1).astype(np.int64),
        col=np.where(in_window, spot_c, -1).astype(np.int64),
    )


def _size_stats(spots: Spots) -> dict[str, float]:
    """Sizes of the counted spots (0 when there are none)."""
    a_in = spots.area_mm2[spots.in_window]
    d_in = spots.diameter_mm[spots.in_window]
    if not a_in.size:
        return dict.fromkeys(
            (
                "median_area_mm2",
                "p90_area_mm2",
                "mean_area_mm2",
                "median_diameter_mm",
                "p90_diameter_mm",
            ),
            0.0,
        )
    return {
        "median_area_mm2": float(np.median(a_in)),
        "p90_area_mm2": float(np.percentile(a_in, 90)),
        "mean_area_mm2": float(np.mean(a_in)),
        "median_diameter_mm": float(np.median(d_in)),
        "p90_diameter_mm": float(np.percentile(d_in, 90)),
    }


# --------------------------------------------------------------------------- the range


def _count_and_bearing(
    mask: np.ndarray, frame: Frame, in_an: np.ndarray, config: MeasureConfig
) -> tuple[int, float]:
    """Spot count and bearing of another mask, by the same rules as the main one."""
    s = float(frame.px_per_mm)
    rows_px, cols_px = mask.shape
    n, lab, stats, cent, keep = components(
        np.asarray(mask, dtype=bool), config.min_spot_mm2 * s * s
    )
    pr = np.clip(np.floor(cent[:, 1] + 0.5).astype(np.int64), 0, rows_px - 1)
    pc = np.clip(np.floor(cent[:, 0] + 0.5).astype(np.int64), 0, cols_px - 1)
    counted = keep & in_an[pr, pc]
    analysed_px = int(np.count_nonzero(in_an))
    bearing_px = int(np.count_nonzero(np.take(keep, lab.ravel()[flat_where(in_an & (lab > 0))])))
    bearing = 100.0 * float(bearing_px) / analysed_px if analysed_px else 0.0
    return int(counted.sum()), bearing


def _marginal(
    found: tuple[int, np.ndarray, np.ndarray, np.ndarray, np.ndarray],
    in_an: np.ndarray,
    frame: Frame,
    config: MeasureConfig,
) -> tuple[int, int]:
    """Marks near the minimum spot area: (counted but under 1.5 times it, left out but over
    two thirds of it), centroids in the window; either could have gone the other way.
    ``found``: the mask's :func:`components`."""
    s = float(frame.px_per_mm)
    min_px = config.min_spot_mm2 * s * s
    if min_px <= 0:
        return 0, 0
    _, lab, stats, cent, _ = found
    area = stats[1:, cv2.CC_STAT_AREA].astype(np.float64)
    rows_px, cols_px = lab.shape
    pr = np.clip(np.floor(cent[1:, 1] + 0.5).astype(np.int64), 0, rows_px - 1)
    pc = np.clip(np.floor(cent[1:, 0] + 0.5).astype(np.int64), 0, cols_px - 1)
    inside = in_an[pr, pc]
    just_in = inside & (area >= min_px) & (area < 1.5 * min_px)
    just_out = inside & (area < min_px) & (area >= min_px / 1.5)
    return int(just_in.sum()), int(just_out.sum())


def _faint(labels: np.ndarray, spots: Spots, clear: np.ndarray | None) -> int:
    """How many of the window's contacts have no pixel ``clear`` of the noise (0 without
    ``clear``)."""
    if clear is None or len(spots.in_window) == 0:
        return 0
    stands = np.zeros(len(spots.in_window) + 1, bool)
    stands[np.take(labels.ravel(), flat_where(clear & (labels > 0)))] = True
    return int(np.count_nonzero(spots.in_window & ~stands[1:]))


def _unseen_share(unseen: np.ndarray | None, bare: np.ndarray, analysed_px: int) -> float:
    """Share of the analysed window that is ``unseen`` and not found to be contact."""
    if unseen is None or not analysed_px:
        return 0.0
    hidden = int(np.count_nonzero(np.asarray(unseen, dtype=bool) & bare))
    return min(hidden / analysed_px, 0.9)


#: The edge spread (Gaussian sigma, px) of a photo in focus: a phone camera's lens and
#: demosaicing spread an edge by about 0.4-1 px (measured at the card's markers on
#: printcheck's renders and an independent simulator's photos); more is blur.
SHARP_BLUR_PX = 1.0


def resolving_px_per_mm(photo_px_per_mm: float | None, blur_px: float | None) -> float | None:
    """What a photo resolves at the window, in px/mm of a sharp photo.

    A photo blurred by ``blur_px`` (sigma, its own pixels) over :data:`SHARP_BLUR_PX`
    parts no finer detail than a sharp one with that many times fewer pixels: the
    resolution scales by ``SHARP_BLUR_PX / blur_px``.  None without the photo's own
    resolution.

    Examples
    --------
    >>> resolving_px_per_mm(12.0, 0.7), resolving_px_per_mm(12.0, 3.0)
    (12.0, 4.0)
    """
    if photo_px_per_mm is None:
        return None
    if blur_px is None or not _blurred(blur_px):
        return photo_px_per_mm
    return photo_px_per_mm * SHARP_BLUR_PX / blur_px


def _blurred(blur_px: float | None) -> bool:
    """Whether a photo's edge spread is past a sharp photo's."""
    return blur_px is not None and blur_px > SHARP_BLUR_PX


def _crowded(
    labels: np.ndarray,
    spots: Spots,
    px_per_mm: float,
    photo_px_per_mm: float | None,
    config: MeasureConfig,
) -> int:
    """How many counted spots lie within ``config.part_px`` photo pixels of another spot.

    ``labels`` (M, N) int: the spots, numbered as ``spots`` has them (0 is no spot).
    Without the photo's own resolution (an explicit scale) there is nothing to say: 0.
    """
    if photo_px_per_mm is None or not spots.in_window.any():
        return 0
    # a neighbour k pixels away (centre to centre) leaves a gap of k - 1 pixels
    k = max(2, int(round(config.part_px * px_per_mm / photo_px_per_mm)))
    touched = near_another(labels, k)
    near = np.zeros(int(labels.max()) + 1, bool)
    near[labels[touched]] = True
    return int(np.count_nonzero(near[1:][spots.in_window]))


#: The colour's blur (Gaussian sigma) in pixels of what the photo resolves: about half a
#: resolved pixel.  Read from the share of the outermost pixel by which the bearing of
#: crowded fine prints is over against their truth: printcheck's own at 8 and 10 px/mm
#: and two of an independent simulator's at 11-17 px/mm.  Checked on that simulator's
#: photos taken again from farther off (all four crowded: errors of 1.1-5.3 points fall
#: to 0.2-3.2) and softer (one crowded: 2.3 to 0.9).
COLOUR_BLUR_RESOLVED_PX = 0.5


def spill(outline_share: float) -> float:
    """How far (resolved pixels) an outline drawn at ``outline_share`` of the way from
    bare metal to a contact lies outside a sharp edge the colour's blur spread:
    ``sigma * z`` with ``z`` the standard normal quantile of ``1 - outline_share``
    (a Gaussian-blurred step crosses that share there); none at half or above.  An
    outline drawn at no share at all is taken as one at a thousandth (3.1 sigma out).

    Examples
    --------
    >>> round(spill(0.175), 3), spill(0.5), round(spill(0.0), 2)
    (0.467, 0.0, 1.55)
    """
    share = min(max(outline_share, 1e-3), 1.0 - 1e-3)
    return max(NormalDist().inv_cdf(1.0 - share), 0.0) * COLOUR_BLUR_RESOLVED_PX


def _outline(contact: np.ndarray, in_an: np.ndarray, width_px: float) -> np.ndarray:
    """The ``contact`` pixels of the analysed window (``in_an``) whose centres lie within
    ``width_px`` of the contacts' outline, (M, N) bool.

    A contact a few of the photo's pixels across is seen through the blur of the photo's
    colour, which spreads its colour a pixel or so past its edge: the share of its peak
    at which its outline is drawn lies outside it, by up to a pixel of what the photo
    resolves all round (``width_px``, rectified pixels).  On contacts large against the
    pixels that ring is a small part of them; on a print as fine as the pixels it can be
    half of what is found, and the bearing is that much over.
    """
    if not contact.any():
        return np.zeros(contact.shape, bool)
    # beyond the frame's border the contact goes on (it is no outline): padded with ones
    padded = np.pad(contact.view(np.uint8), 1, constant_values=1)
    inside = cv2.distanceTransform(padded, cv2.DIST_L2, cv2.DIST_MASK_PRECISE)[1:-1, 1:-1]
    # an outline pixel's centre lies half a pixel inside the outline, 1 from the outside
    return contact & in_an & (inside <= width_px + 0.5)


def _share_of(pixels: np.ndarray, analysed_px: int) -> float:
    """Percentage points of ``analysed_px`` pixels that ``pixels`` (bool) holds."""
    return 100.0 * int(np.count_nonzero(pixels)) / analysed_px if analysed_px else 0.0


def _too_small(
    spots: Spots, photo_px_per_mm: float | None, config: MeasureConfig
) -> tuple[float, float] | None:
    """(diameter mm, px/mm it needs) of the smaller contacts (the lower quartile of the
    counted spots' diameters) when the photo resolves fewer than ``config.resolution_px``
    across them; None when it resolves enough, or cannot say (fewer than five spots, or
    no resolution of the photo's own)."""
    d_in = spots.diameter_mm[spots.in_window]
    if photo_px_per_mm is None or d_in.size < 5:
        return None
    small = float(np.percentile(d_in, 25))
    needed = config.resolution_px / max(small, 1e-6)
    return (small, needed) if photo_px_per_mm < needed else None


def _is_crowded(
    crowded: int, count: int, photo_px_per_mm: float | None, config: MeasureConfig
) -> bool:
    """Whether so many contacts lie closer to a neighbour than the photo parts (``crowded``
    of ``count``, :func:`_crowded`) that the print is as fine as the photo's pixels."""
    return photo_px_per_mm is not None and crowded > config.crowded_share * count


def _beyond(excess: float, count: int, config: MeasureConfig) -> bool:
    """Whether a range reaching ``excess`` points beyond the count's own spread reaches so
    far from ``count`` that the photo is doubtful (at least a whole point, and more than
    ``config.doubtful_change`` of the count)."""
    return excess >= 1 and excess / max(count, 1) > config.doubtful_change


def _confidence(
    count: int,
    bearing: float,
    alts: tuple[tuple[int, float], ...],
    marginal: tuple[int, int],
    photo_px_per_mm: float | None,
    config: MeasureConfig,
    *,
    small: tuple[float, float] | None = None,
    crowded: int = 0,
    unseen_share: float = 0.0,
    blur_px: float | None = None,
    outline: Callable[[], float] | None = None,
    read: float | None = None,
    faint: int = 0,
) -> Confidence:
    """The range and the doubtful flag (see the module docstring); ``photo_px_per_mm``
    is what the photo resolves, ``small`` its contacts too small for it
    (:func:`_too_small`), ``crowded`` how many lie closer to a neighbour than it parts
    where so many do that the print is as fine as its pixels (:func:`_is_crowded`; 0
    otherwise), ``blur_px`` its blur where that lowered it, ``outline``
    the bearing in the contacts' outermost resolved pixel (:func:`_outline`, read only
    for a photo too coarse for its contacts), ``read`` the contact mask's own bearing
    where ``bearing`` is not it (a print crowded closer than the photo parts), ``faint``
    how many contacts barely stand out from the noise (:func:`_faint`)."""
    read = bearing if read is None else read
    counts = [count] + [a for a, _ in alts]
    bears = [bearing, read] + [b for _, b in alts]
    spread = max(1, int(round(config.count_spread * count))) if count else 0
    lo = min(min(counts) - marginal[0], count - spread)
    hi = max(max(counts) + marginal[1], count + spread)
    reasons = []
    how = "move closer" if blur_px is None else "hold the phone still and let it focus"
    blurred = None if blur_px is None else f"blurred (the card's edges spread {blur_px:.1f} px)"
    if small is not None:
        # contacts the photo cannot part come out merged: how many there really are
        # cannot be read from it, and the range says so (up to twice the count)
        hi = max(hi, 2 * count)
        has = (
            f"has {photo_px_per_mm:.0f}"
            if blurred is None
            else f"is {blurred} and resolves like {photo_px_per_mm:.0f}"
        )
        reasons.append(
            f"contacts of {small[0]:.1f} mm need at least {small[1]:.0f} px/mm; this photo "
            f"{has}: {how}"
        )
        blurred = None  # said once
    if crowded and photo_px_per_mm is not None:
        # a print as fine as the photo's pixels: each contact closer to a neighbour than
        # the photo can part may hide another merged into it
        hi = max(hi, count + crowded)
        gap_mm = config.part_px / photo_px_per_mm
        why = "" if blurred is None else f"the photo is {blurred}: "
        reasons.append(
            f"{crowded} of {count} contacts lie within {gap_mm:.2f} mm of a neighbour, "
            f"closer than this photo can part ({config.part_px:g} px at "
            f"{photo_px_per_mm:.0f} px/mm): {why}{how}"
        )
    coarse = bool(reasons)  # too coarse for its contacts: too small, or too close together
    if faint:
        # contacts that barely stand out from the noise: where a print's contacts run on
        # down to it, as many again, fainter still, lie below it unseen; doubtful by the
        # same test as the whole range, beyond the count's own spread
        hi = max(hi, count + faint)
        if _beyond(faint - spread, count, config):
            reasons.append(
                f"{faint} of {count} contacts barely stand out from the noise, and as many "
                "again may be lost in it: light it brighter and more evenly"
            )
    if unseen_share > 0:
        # what the burnt-out share of the window would hold at the density seen elsewhere
        hi = max(hi, count + math.ceil(count * unseen_share / (1.0 - unseen_share)))
    # how far the range reaches beyond the count's own spread
    excess = max(count - lo, hi - count) - spread
    if _beyond(excess, count, config) and not reasons:
        reasons.append(f"the count could be anything from {lo} to {hi}")
    blo, bhi = min(bears), max(bears)
    if coarse and outline is not None:
        # the contacts' outlines may each lie a resolved pixel out
        blo = min(blo, max(read - outline(), 0.0))
    if unseen_share > 0:
        bhi = max(bhi, read / (1.0 - unseen_share))
    if max(bearing - blo, bhi - bearing) > config.doubtful_bearing:
        reasons.append(f"the bearing could be anything from {blo:.1f} to {bhi:.1f}%")
    reason = "; ".join(reasons)
    return Confidence(
        count_low=max(int(lo), 0),
        count_high=int(hi),
        bearing_low=float(blo),
        bearing_high=float(bhi),
        doubtful=bool(reasons),
        reason=reason,
    )
