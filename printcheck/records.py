"""Records: the typed, array-free figures that travel past the pipeline.

A :class:`printcheck.result.Result` holds the stages' arrays and lives only as long as
one photo is being measured.  What the outputs need of it is a :class:`PassSummary`:
frozen, small, made of numbers and text, so it crosses the process boundary of a batch,
is stored by the history (as the result JSON) and read back as the same type.  Batch,
history, progress, the terminal summary and the report all work on these records;
:mod:`printcheck.serde` turns them into and out of the plain dicts of the JSON formats
(docs/formats.md).

Figures are as the result JSON gives them: lengths in ``unit``, areas in ``unit``²,
densities in points per ``cell`` square, rounded as written.  A figure the measurement
could not give (no analysed area) is None, as it is ``null`` in the JSON.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime
from typing import TYPE_CHECKING

from printcheck.judge import Verdict
from printcheck.spec import Spec

if TYPE_CHECKING:
    from printcheck.guidance import Advice

__all__ = [
    "CalibrationSummary",
    "WindowSummary",
    "CellSummary",
    "ConfidenceSummary",
    "HighArea",
    "BareArea",
    "PassSummary",
    "StoredPass",
    "PutOutcome",
    "SurfaceInfo",
    "EarlierResult",
    "StationFigure",
    "StationProgress",
    "Targets",
    "Projection",
    "ProgressRow",
    "Progress",
]


@dataclass(frozen=True)
class CalibrationSummary:
    """How the photo was scaled: ``method`` ``"layout"`` or ``"scale"``, the layout's
    name, the marker ids found, the rectified ``px_per_mm``, the marker fit's
    ``residual_mm``, the ``photo_px_per_mm`` the photo resolves at the window and the
    ``photo_blur_px`` it spreads the markers' edges by (None: not read)."""

    method: str
    layout: str | None
    markers: tuple[int, ...]
    px_per_mm: float
    residual_mm: float | None
    photo_px_per_mm: float | None
    photo_blur_px: float | None = None


@dataclass(frozen=True)
class WindowSummary:
    """The window's ``width`` and ``height`` and its analysed ``area`` (window less
    exclusions), in ``unit`` and ``unit``²."""

    width: float
    height: float
    area: float


@dataclass(frozen=True)
class CellSummary:
    """One counting cell: 0-based ``row``/``col`` from the window's top-left, whether it
    is ``complete`` (wholly inside the window, no exclusion), its spots, density
    (points per cell square), bearing percent and analysed ``area`` in ``unit``²."""

    row: int
    col: int
    complete: bool
    spot_count: int
    density: float
    bearing_percent: float
    area: float


@dataclass(frozen=True)
class SegmentationSummary:
    """How the compound stood out: which side it was on, its level and the noise (log-ratio
    units of the colour evidence).  A pass recorded by an earlier method holds only its
    threshold; the fields a record does not hold are None."""

    compound_on: str | None = None
    compound_level: float | None = None
    noise: float | None = None
    threshold: float | None = None


@dataclass(frozen=True)
class ConfidenceSummary:
    """The count and bearing the photo supports, and whether it is doubtful (and why)."""

    spot_count_low: int
    spot_count_high: int
    bearing_percent_low: float
    bearing_percent_high: float
    doubtful: bool
    reason: str


@dataclass(frozen=True)
class HighArea:
    """A high area to break up: centre ``x``, ``y`` and ``size`` in ``unit``, and why."""

    x: float
    y: float
    size: float
    reason: str


@dataclass(frozen=True)
class BareArea:
    """A bare patch larger than the spec allows: centre ``x``, ``y`` and ``diameter``."""

    x: float
    y: float
    diameter: float


@dataclass(frozen=True)
class PassSummary:
    """One measured photo of one print: every figure of the result JSON, typed.

    Attributes
    ----------
    photo : str
        The photo's file name.
    surface : str or None
    taken : datetime or None
        When the photo was taken (EXIF, else the file time), to the second.
    unit : {"in", "mm"}
    cell : float
        Side of the counting cell in ``unit``.
    calibration : CalibrationSummary
    window : WindowSummary
    spot_count : int
        Spots whose centroid lies in the analysed window.
    density, bearing_percent : float or None
    largest_bare : float or None
        Diameter of the largest bare patch, in ``unit``.
    cells : tuple of CellSummary, row-major
    verdict : Verdict or None
        None when no spec was asked for; values rounded as in the JSON.
    sha256 : str or None
        Hash of the photo file (the history's identity for it).
    confidence : ConfidenceSummary or None
    spot_sizes : tuple of (name, value)
        Spot-size statistics (``median_area_mm2`` ...), in their own units.
    compound : str
        The compound colour the photo was segmented for.
    segmentation : SegmentationSummary
        How the compound stood out in the photo.
    high, bare : tuples of HighArea, BareArea
        Where to scrape next.
    warnings : tuple of str
    advice : tuple of Advice
        Where to scrape next as a short ranked list (:func:`printcheck.guidance.advise`);
        None for a pass recorded before the list was made.
    """

    photo: str
    surface: str | None
    taken: datetime | None
    unit: str
    cell: float
    calibration: CalibrationSummary
    window: WindowSummary
    spot_count: int
    density: float | None
    bearing_percent: float | None
    largest_bare: float | None
    cells: tuple[CellSummary, ...]
    verdict: Verdict | None
    sha256: str | None
    confidence: ConfidenceSummary | None
    spot_sizes: tuple[tuple[str, float | None], ...]
    compound: str
    segmentation: SegmentationSummary
    high: tuple[HighArea, ...] = ()
    bare: tuple[BareArea, ...] = ()
    warnings: tuple[str, ...] = ()
    advice: tuple[Advice, ...] | None = None

    @property
    def meets(self) -> bool | None:
        """The verdict: True or False, None when no spec was asked for."""
        return None if self.verdict is None else self.verdict.meets


@dataclass(frozen=True)
class StoredPass:
    """One pass of a surface as the history keeps it.

    Attributes
    ----------
    number : int
        1-based, in the order the photos were taken.
    summary : PassSummary
    spec_name : str or None
        The spec the pass was judged against, as recorded.
    spec : Spec or None
        That spec's targets, when the history kept them (schema 2 on).
    recorded : str
        When the pass was recorded (UTC, ISO 8601).
    station : str or None
        The photo's station within its pass (schema 3 on); None: the pass's only photo.
    pass_key : str or None
        What groups the photos of one pass (a subfolder's name, a pass number); None:
        the photo is a pass of its own.
    note : str or None
        The pass's note (who scraped, compound, reference), when one was given.
    settings : str or None
        The measuring settings the figures were measured with (None before schema 3).
    method : int
        The measuring method's version (0: recorded before it was recorded).
    """

    number: int
    summary: PassSummary
    spec_name: str | None
    spec: Spec | None
    recorded: str
    station: str | None = None
    pass_key: str | None = None
    note: str | None = None
    settings: str | None = None
    method: int = 0


@dataclass(frozen=True)
class PutOutcome:
    """What recording a photo did: ``state`` is ``"new"``, ``"same"``, ``"replaced"``
    or ``"removed"``; ``earlier`` is the replaced figures' summary."""

    state: str
    earlier: PassSummary | None = None


@dataclass(frozen=True)
class SurfaceInfo:
    """One surface of the history: its name, passes, photos, first folder, latest time."""

    name: str
    passes: int
    photos: int
    folder: str | None
    latest: str | None


@dataclass(frozen=True)
class EarlierResult:
    """Figures a pass had before it was re-measured (or removed), kept in the record."""

    photo: str
    summary: PassSummary
    settings: str | None
    method: int
    recorded: str
    replaced: str
    why: str


@dataclass(frozen=True)
class Targets:
    """A spec's targets in the progress's terms (densities per its cell square)."""

    density: float | None
    cell_density: float | None
    bearing_min: float | None
    bearing_max: float | None


@dataclass(frozen=True)
class Projection:
    """Passes still needed to reach the density target (see :mod:`printcheck.progress`).

    ``high`` is None when the trend's slowest likely rate would never get there;
    ``rate`` and ``rate_stderr`` (points per pass) are None when too few passes were
    fitted (a pass already on target needs no fit).
    """

    passes_to_spec: int
    low: int
    high: int | None
    rate: float | None
    rate_stderr: float | None
    fit_passes: int
    target: float


@dataclass(frozen=True)
class ProgressRow:
    """One pass in a surface's progress; ``density`` is per the latest pass's cell."""

    number: int
    photo: str
    taken: datetime | None
    density: float | None
    bearing_percent: float | None
    meets: bool | None
    spot_count: int
    uniformity: float | None
    cells_meeting_percent: float | None
    stations: tuple[StationFigure, ...] = ()
    worst_station: str | None = None
    note: str | None = None


@dataclass(frozen=True)
class StationFigure:
    """One station of a pass: its photo and figures (density per the progress's cell)."""

    station: str
    photo: str
    density: float | None
    bearing_percent: float | None
    meets: bool | None
    spot_count: int


@dataclass(frozen=True)
class StationProgress:
    """One station over the passes: its density per pass (None where it has no photo)
    and its own projection."""

    station: str
    densities: tuple[float | None, ...]
    bearings: tuple[float | None, ...]
    projection: Projection | None


@dataclass(frozen=True)
class Progress:
    """A surface's passes so far, the spec's targets and the projection.

    ``unit`` and ``cell`` are the latest pass's (None without passes); ``spec`` is the
    spec's name, or None.
    """

    surface: str
    spec: str | None
    unit: str | None
    cell: float | None
    targets: Targets
    passes: tuple[ProgressRow, ...]
    projection: Projection | None
    stations: tuple[StationProgress, ...] = ()
    slowest_station: str | None = None
