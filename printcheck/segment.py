"""Segment: the marking-compound contact mask of a rectified photo.

(Interface fixed here; the implementation is being built.)
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

import numpy as np

__all__ = ["SegmentConfig", "Segmentation", "segment", "mask_at"]

Compound = Literal["blue", "red", "auto"]
CompoundOn = Literal["reference", "work"]


@dataclass(frozen=True)
class SegmentConfig:
    """Options of the segment stage.

    Attributes
    ----------
    compound : {"blue", "red", "auto"}
        Colour of the marking compound; "auto" chooses from the photo.
    compound_on : {"reference", "work"}
        "reference": the spots carry compound. "work": the window is coated and the
        spots are where the reference rubbed it through.
    px_per_mm : float
        Resolution of the image (for sizes of filters and clean-up).
    """

    compound: Compound = "blue"
    compound_on: CompoundOn = "reference"
    px_per_mm: float = 10.0


@dataclass(frozen=True, eq=False)
class Segmentation:
    """Result of the segment stage.

    Attributes
    ----------
    mask : (M, N) bool ndarray
        Contact (the spots), only inside ``visible``.
    score : (M, N) float32 ndarray
        Contact evidence; ``mask`` is ``mask_at(self, threshold)``.
    threshold : float
        The threshold chosen for this photo.
    compound : str
        The compound colour used ("blue" or "red").
    spread : float
        A threshold step for the confidence range: the count is redone at
        ``threshold - spread`` and ``threshold + spread``.
    warnings : tuple of str
        E.g. glare over much of the window, very low contrast.
    """

    mask: np.ndarray
    score: np.ndarray
    threshold: float
    compound: str
    spread: float
    visible: np.ndarray
    px_per_mm: float
    warnings: tuple[str, ...] = ()


def segment(image: np.ndarray, *, visible: np.ndarray, config: SegmentConfig = SegmentConfig()) -> Segmentation:
    """Segment the contact marks of rectified ``image`` (M, N, 3) uint8 BGR."""
    raise NotImplementedError


def mask_at(segmentation: Segmentation, threshold: float) -> np.ndarray:
    """The cleaned contact mask at another threshold (for the confidence range)."""
    raise NotImplementedError
