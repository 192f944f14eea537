"""Locate: find the layout's markers, fit the homography, rectify to millimetres.

(Interface fixed here; the implementation is being built.)
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from printcheck.frame import Frame
from printcheck.layout import Layout, Window

__all__ = ["LocateConfig", "Calibration", "Rectified", "locate", "rectify_scale"]


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
    """

    px_per_mm: float | None = None
    max_residual_mm: float = 0.5
    allow_partial: bool = False


@dataclass(frozen=True)
class Calibration:
    """How scale and perspective were found (the result JSON's ``calibration``)."""

    method: str  # "layout" or "scale"
    layout: str | None
    markers: tuple[int, ...]
    px_per_mm: float  # resolution of the rectified image
    residual_mm: float | None  # RMS corner residual of the fit, None for "scale"
    photo_px_per_mm: float | None = None  # what the photo itself resolves at the window


@dataclass(frozen=True, eq=False)
class Rectified:
    """The photo warped into the layout frame.

    Attributes
    ----------
    image : (M, N, 3) uint8 ndarray, BGR
        The rectified photo; see :class:`printcheck.frame.Frame` for the pixel mapping.
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
    """

    image: np.ndarray
    frame: Frame
    visible: np.ndarray
    analysed: np.ndarray
    calibration: Calibration
    homography: np.ndarray | None
    warnings: tuple[str, ...] = ()


def locate(image: np.ndarray, *, layout: Layout, config: LocateConfig = LocateConfig()) -> Rectified:
    """Find ``layout``'s markers in ``image`` (M, N, 3) uint8 BGR and rectify it."""
    raise NotImplementedError


def rectify_scale(
    image: np.ndarray,
    *,
    px_per_mm: float,
    window: Window | None = None,
    config: LocateConfig = LocateConfig(),
) -> Rectified:
    """Treat a square-on ``image`` as already rectified at ``px_per_mm``.

    The window is the whole image, or ``window`` (mm, from the image's top-left).
    """
    raise NotImplementedError
