"""Cells: the counting grid over the window, by the rules of docs/formats.md.

Cells start at the window's top-left corner and run right and down, side ``cell_mm``;
a pixel belongs to the window, and to a cell, by where its centre lies.  A cell not wholly
inside the window (or with analysed pixels missing, an exclusion) is not complete; its
density is still per the area it really has.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from printcheck.frame import Frame
from printcheck.spots import Spots

__all__ = [
    "EDGE_STRIP",
    "Cell",
    "Grid",
    "cell_count",
    "cell_index",
    "cell_sums",
    "cells_of",
    "edge_strip",
    "in_window",
]

#: A last row or column narrower than this share of a cell is an edge strip: a cell of the
#: grid (docs/formats.md), never complete, that the maps and the terminal leave out.
EDGE_STRIP = 0.25


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


def _axis_cells(
    n_px: int, origin: float, s: float, start: float, length: float, cell: float
) -> tuple[np.ndarray, int]:
    """Per-pixel cell index along one axis (-1 outside the window), and cell count."""
    centres = origin + (np.arange(n_px) + 0.5) / s
    t = (centres - start) / cell
    n_cells = cell_count(length, cell)
    idx = np.floor(t + 1e-9).astype(np.int64)
    inside = (centres >= start - 1e-9 / s) & (centres < start + length - 1e-9 / s)
    idx[~inside] = -1
    idx[idx >= n_cells] = n_cells - 1
    return idx, n_cells


def cell_count(length: float, cell: float) -> int:
    """How many cells of side ``cell`` a window ``length`` long holds along one axis (the
    last one shorter where the window is not a whole number of cells)."""
    return max(1, int(math.ceil(length / cell - 1e-9)))


def cell_index(offset: float, length: float, cell: float) -> int:
    """The cell along one axis that holds a point ``offset`` from the window's start
    (clamped to the window's cells)."""
    return min(max(int(math.floor(offset / cell + 1e-9)), 0), cell_count(length, cell) - 1)


def edge_strip(length: float, cell: float) -> float | None:
    """The width of the last row or column along ``length`` when it is an edge strip.

    The grid's cells have side ``cell`` from the window's top-left (the contract); where
    the window is not a whole number of cells the last one is shorter, and a remainder
    under :data:`EDGE_STRIP` of a cell is a sliver whose count means nothing on its own
    (common practice).  It stays in the result as an incomplete cell; its spots count in
    the window's figures.  None when the last cell is not such a strip.

    Examples
    --------
    >>> round(edge_strip(50.8, 25.0), 3), edge_strip(50.8, 25.4), edge_strip(60.0, 25.0)
    (0.8, None, None)
    """
    n = cell_count(length, cell)
    rest = length - (n - 1) * cell
    return rest if n > 1 and rest < EDGE_STRIP * cell - 1e-9 else None


def cell_sums(
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


def in_window(frame: Frame, analysed: np.ndarray) -> np.ndarray:
    """``analysed`` less any pixel whose centre lies outside the window."""
    s = float(frame.px_per_mm)
    win = frame.window
    rows_px, cols_px = analysed.shape
    # the cell size does not move the window's pixel rows and columns
    row_idx, _ = _axis_cells(rows_px, frame.origin_mm[1], s, win.y_mm, win.height_mm, 1.0)
    col_idx, _ = _axis_cells(cols_px, frame.origin_mm[0], s, win.x_mm, win.width_mm, 1.0)
    return np.asarray(analysed & (row_idx[:, None] >= 0) & (col_idx[None, :] >= 0), dtype=bool)


@dataclass(frozen=True, eq=False)
class Grid:
    """Per-pixel cell index along each axis (-1 outside the window) and the cell counts."""

    row_idx: np.ndarray
    col_idx: np.ndarray
    rows: int
    cols: int

    @classmethod
    def of(cls, frame: Frame, shape: tuple[int, int], cell_mm: float) -> Grid:
        s = float(frame.px_per_mm)
        win = frame.window
        row_idx, rows = _axis_cells(
            shape[0], frame.origin_mm[1], s, win.y_mm, win.height_mm, cell_mm
        )
        col_idx, cols = _axis_cells(
            shape[1], frame.origin_mm[0], s, win.x_mm, win.width_mm, cell_mm
        )
        return cls(row_idx, col_idx, rows, cols)

    def cell_of(self, spots: Spots) -> np.ndarray:
        """Flat cell index of each counted spot."""
        sel = spots.in_window
        return np.asarray(spots.row[sel] * self.cols + spots.col[sel], dtype=np.int64)


def cells_of(
    frame: Frame,
    grid: Grid,
    c_mm: float,
    cell_area_px: np.ndarray,
    cell_bearing_px: np.ndarray,
    cell_count: np.ndarray,
    px_area: float,
) -> tuple[Cell, ...]:
    """The cells of ``grid``, from per-cell (flat, row-major) analysed pixels, contact
    pixels (``cell_bearing_px``: a float where a pixel counts only in part as contact)
    and spot counts."""
    s = float(frame.px_per_mm)
    win = frame.window
    cells: list[Cell] = []
    for r in range(grid.rows):
        for c in range(grid.cols):
            k = r * grid.cols + c
            x0 = win.x_mm + c * c_mm
            y0 = win.y_mm + r * c_mm
            x1 = min(x0 + c_mm, win.x_mm + win.width_mm)
            y1 = min(y0 + c_mm, win.y_mm + win.height_mm)
            a_mm2 = float(cell_area_px[k]) * px_area
            full = _count_centres(frame.origin_mm[0], s, x0, x1) * _count_centres(
                frame.origin_mm[1], s, y0, y1
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
                        100.0 * float(cell_bearing_px[k]) / float(cell_area_px[k])
                        if cell_area_px[k]
                        else 0.0
                    ),
                )
            )
    return tuple(cells)
