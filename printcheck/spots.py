"""Spots: the contact marks of a mask, labelled and tabled.

Conventions (where the counting contract in docs/formats.md is silent):

- Spots are 8-connected groups of contact pixels (pixels touching at a corner are one
  mark), the same as ``scipy.ndimage.label(mask, structure=np.ones((3, 3)))``.  The
  segment stage has already cut touching contacts apart where the evidence shows two.
- Specks below the minimum spot area are not spots and do not count as contact either:
  the bearing is the share of analysed pixels covered by spots.
- A spot's centroid is the mean of its pixel centres.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import cv2
import numpy as np

from printcheck.errors import OptionError

__all__ = ["Spots", "label_spots", "spots_of", "components"]


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


def components(
    mask: np.ndarray, min_px: float
) -> tuple[int, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """8-connected components of ``mask`` and which of them are spots.

    Returns ``(n, labels, stats, centroids, keep)`` as
    ``cv2.connectedComponentsWithStats`` gives them (``n`` counts the background, label
    0), and ``keep[i]``: component i has at least ``min_px`` pixels (never the
    background).
    """
    n, lab, stats, cent = cv2.connectedComponentsWithStats(
        np.ascontiguousarray(mask, dtype=bool).view(np.uint8),
        connectivity=8,
        ltype=cv2.CV_32S,
    )
    keep = stats[:, cv2.CC_STAT_AREA] >= min_px - 1e-9
    keep[0] = False
    return n, lab, stats, cent, keep


def label_spots(
    mask: np.ndarray, *, px_per_mm: float, min_spot_mm2: float
) -> tuple[np.ndarray, int, np.ndarray, np.ndarray]:
    """Label the spots of a contact mask.

    Parameters
    ----------
    mask : (M, N) bool ndarray
        Contact pixels.
    px_per_mm : float
        Resolution, for the minimum spot area.
    min_spot_mm2 : float
        Components smaller than this (mm²) are dropped.

    Returns
    -------
    labels : (M, N) int32 ndarray
        0 for background, 1..K for the spots, numbered in raster order of each spot's
        first pixel (as ``scipy.ndimage.label`` numbers components).
    count : int
        K.
    area_px : (K,) float ndarray
        Pixels of each spot.
    centroid : (K, 2) float ndarray
        Each spot's mean pixel (row, col).
    """
    mask = np.asarray(mask, dtype=bool)
    if mask.ndim != 2:
        raise OptionError(f"contact mask must be 2-D (M, N), got shape {mask.shape}")
    return spots_of(components(mask, min_spot_mm2 * px_per_mm**2))


def spots_of(
    found: tuple[int, np.ndarray, np.ndarray, np.ndarray, np.ndarray],
) -> tuple[np.ndarray, int, np.ndarray, np.ndarray]:
    """:func:`label_spots` from the :func:`components` of the mask (found once, used
    twice)."""
    n, lab, stats, cent, keep = found
    kept = np.flatnonzero(keep)
    kept = kept[np.argsort(_first_pixels(lab, stats, kept), kind="stable")]
    lut = np.zeros(n, np.int32)
    lut[kept] = np.arange(1, kept.size + 1, dtype=np.int32)
    labels = np.take(lut, lab)
    area = stats[kept, cv2.CC_STAT_AREA].astype(np.float64)
    centroid = cent[kept][:, ::-1].astype(np.float64)  # cv2 gives (x, y)
    return labels, int(kept.size), area, centroid


def _first_pixels(lab: np.ndarray, stats: np.ndarray, ids: np.ndarray) -> np.ndarray:
    """Raster index of each component's first pixel (it lies in the component's top row)."""
    cols = lab.shape[1]
    tops = stats[ids, cv2.CC_STAT_TOP]
    first = np.zeros(ids.size, np.int64)
    for r in np.unique(tops):
        row = lab[r]
        at = np.flatnonzero(row)
        values, index = np.unique(row[at], return_index=True)
        sel = np.flatnonzero(tops == r)
        first[sel] = r * cols + at[index[np.searchsorted(values, ids[sel])]]
    return first


def diameters(area_mm2: np.ndarray) -> np.ndarray:
    """Equivalent-circle diameters of areas (mm)."""
    return np.sqrt(4.0 * np.asarray(area_mm2, dtype=np.float64) / math.pi)
