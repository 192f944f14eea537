"""The rectified frame: how pixels of a rectified image map to the layout frame.

Pixel ``(row, col)`` of a rectified image covers the square
``x in [x0 + col / s, x0 + (col + 1) / s)``, ``y in [y0 + row / s, y0 + (row + 1) / s)``
where ``(x0, y0) = origin_mm`` and ``s = px_per_mm``; its centre is at
``x0 + (col + 0.5) / s``.  Arrays are indexed (row, col); physical points are (x, y) mm.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from printcheck.layout import Window

__all__ = ["Frame"]


@dataclass(frozen=True)
class Frame:
    """Geometry of a rectified image.

    Attributes
    ----------
    px_per_mm : float
        Pixels per millimetre of the rectified image.
    origin_mm : (float, float)
        Layout-frame (x, y) in mm of the top-left corner of pixel (0, 0).
    shape : (int, int)
        (rows, cols) of the rectified image.
    window : Window
        The analysed window in mm (layout frame).
    """

    px_per_mm: float
    origin_mm: tuple[float, float]
    shape: tuple[int, int]
    window: Window

    def to_mm(self, rows: np.ndarray, cols: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Pixel (row, col) centres, possibly fractional, to layout (x, y) in mm."""
        x = self.origin_mm[0] + (np.asarray(cols, dtype=float) + 0.5) / self.px_per_mm
        y = self.origin_mm[1] + (np.asarray(rows, dtype=float) + 0.5) / self.px_per_mm
        return x, y

    def to_px(self, x_mm: np.ndarray, y_mm: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Layout (x, y) mm to fractional pixel (row, col) (inverse of :meth:`to_mm`)."""
        col = (np.asarray(x_mm, dtype=float) - self.origin_mm[0]) * self.px_per_mm - 0.5
        row = (np.asarray(y_mm, dtype=float) - self.origin_mm[1]) * self.px_per_mm - 0.5
        return row, col

    def window_slices(self) -> tuple[slice, slice]:
        """Row and column slices of the pixels whose centres lie inside the window."""
        w = self.window
        r0i = int(np.ceil(self._row(w.y_mm) - 1e-9))
        c0i = int(np.ceil(self._col(w.x_mm) - 1e-9))
        r1i = int(np.floor(self._row(w.y_mm + w.height_mm) - 1e-9)) + 1
        c1i = int(np.floor(self._col(w.x_mm + w.width_mm) - 1e-9)) + 1
        rows, cols = self.shape
        return slice(max(r0i, 0), min(r1i, rows)), slice(max(c0i, 0), min(c1i, cols))

    def _row(self, y_mm: float) -> float:
        return (y_mm - self.origin_mm[1]) * self.px_per_mm - 0.5

    def _col(self, x_mm: float) -> float:
        return (x_mm - self.origin_mm[0]) * self.px_per_mm - 0.5
