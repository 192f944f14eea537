"""The cell maps' colours read apart to a colour-blind eye and in grey print.

Lightness is CIE L* from skimage.color.rgb2lab (sRGB, D65), the reference; the
contrast ratio is WCAG 2.x's, from relative luminance (W3C, WCAG 2.1, "relative
luminance" and "contrast ratio").  Colour-blind views are simulated with the
Machado, Oliveira and Fernandes (2009) matrices at full severity (the figures from
memory, not re-checked against the paper here).
"""

from __future__ import annotations

import numpy as np
import pytest
from skimage.color import rgb2lab

from printcheck.report.html import CELL_COLOURS, bearing_class, density_class

ORDER = ("short", "close", "meets")  # worst to best

# Machado et al. (2009), severity 1.0, linear RGB
MACHADO = {
    "protanopia": [
        [0.152286, 1.052583, -0.204868],
        [0.114503, 0.786281, 0.099216],
        [-0.003882, -0.048116, 1.051998],
    ],
    "deuteranopia": [
        [0.367322, 0.860646, -0.227968],
        [0.280085, 0.672501, 0.047413],
        [-0.011820, 0.042940, 0.968881],
    ],
    "tritanopia": [
        [1.255528, -0.076749, -0.178779],
        [-0.078411, 0.930809, 0.147602],
        [0.004733, 0.691367, 0.303900],
    ],
}


def _linear(rgb: tuple[int, int, int]) -> np.ndarray:
    c = np.asarray(rgb, float) / 255.0
    return np.where(c <= 0.04045, c / 12.92, ((c + 0.055) / 1.055) ** 2.4)


def _luminance(rgb: tuple[int, int, int]) -> float:
    r, g, b = _linear(rgb)
    return float(0.2126 * r + 0.7152 * g + 0.0722 * b)  # WCAG relative luminance


def _lab(rgb_linear: np.ndarray) -> np.ndarray:
    c = np.clip(rgb_linear, 0.0, 1.0)
    srgb = np.where(c <= 0.0031308, 12.92 * c, 1.055 * c ** (1 / 2.4) - 0.055)
    return rgb2lab(srgb.reshape(1, 1, 3))[0, 0]


def test_lightness_rises_in_clear_steps_from_short_to_meets() -> None:
    lightness = [_lab(_linear(CELL_COLOURS[k]))[0] for k in ORDER]
    assert lightness == sorted(lightness)
    assert np.min(np.diff(lightness)) >= 20.0  # grey print: steps a reader can tell
    # and by WCAG: each step at least 1.5:1 in contrast
    lum = [_luminance(CELL_COLOURS[k]) for k in ORDER]
    for a, b in zip(lum, lum[1:], strict=False):
        assert (b + 0.05) / (a + 0.05) >= 1.5


@pytest.mark.parametrize("kind", sorted(MACHADO))
def test_classes_stay_apart_to_a_colour_blind_eye(kind: str) -> None:
    m = np.asarray(MACHADO[kind])
    seen = {k: _lab(m @ _linear(rgb)) for k, rgb in CELL_COLOURS.items()}
    keys = sorted(seen)
    for i, a in enumerate(keys):
        for b in keys[i + 1 :]:
            # CIE76 colour difference; 10 is a difference plain to see side by side
            assert np.linalg.norm(seen[a] - seen[b]) >= 10.0, (kind, a, b)


def test_classes_by_target() -> None:
    assert density_class(16.5, 16.5) == "meets"
    assert density_class(12.4, 16.5) == "close"  # 75 % of the target and up
    assert density_class(12.3, 16.5) == "short"
    assert bearing_class(30.0, 20.0, 60.0) == "meets"
    assert bearing_class(16.0, 20.0, 60.0) == "close"
    assert bearing_class(10.0, 20.0, 60.0) == "short"
    assert bearing_class(70.0, 20.0, 60.0) == "over"
