"""Measure: spots, grid cells, bearing and bare patches of a contact mask.

Counting follows DESIGN.md "Contract: grid and counting": a spot belongs to the window
and the cell that hold its centroid; bearing is on the analysed area (window less
exclusions); density = spot_count * cell_mm**2 / area_mm2.  All lengths here are mm.

(Interface fixed here; the implementation is being built.)
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

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
]


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
    """

    cell_mm: float = 25.4
    min_spot_mm2: float = 0.1
    split_touching: bool = True
    max_bare_mm: float | None = None


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
        Spot sizes in the window: median/p90 area_mm2 and diameter_mm.
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


def measure(
    mask: np.ndarray,
    *,
    frame: Frame,
    analysed: np.ndarray,
    config: MeasureConfig = MeasureConfig(),
    alternates: tuple[np.ndarray, ...] = (),
) -> Measurement:
    """Measure the contact ``mask`` (M, N) bool on rectified ``frame``.

    ``analysed`` (M, N) bool is the window less exclusions; ``alternates`` are masks
    at nudged thresholds from which the confidence range is taken.
    """
    raise NotImplementedError
