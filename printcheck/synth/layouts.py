"""Layouts for rendered scenes beyond the built-in card."""

from __future__ import annotations

from printcheck.layout import Layout, Marker, Window

__all__ = ["slideway_layout"]


def slideway_layout(
    width_mm: float,
    height_mm: float,
    *,
    marker_mm: float = 30.0,
    gap_mm: float = 15.0,
    name: str | None = None,
) -> Layout:
    """A long window (a slideway) with two markers stuck at each end.

    Markers ``DICT_4X4_50`` ids 0 and 1 sit left of the window at its top and bottom,
    ids 2 and 3 right of it; the surface shows around the window (margin 5 mm).
    """
    m, gap = float(marker_mm), float(gap_mm)

    def marker(i: int, x: float, y: float) -> Marker:
        return Marker(i, ((x, y), (x + m, y), (x + m, y + m), (x, y + m)))

    return Layout(
        name=name or f"way-{width_mm:g}x{height_mm:g}",
        dictionary="DICT_4X4_50",
        units="mm",
        window=Window(0.0, 0.0, float(width_mm), float(height_mm)),
        markers=(
            marker(0, -m - gap, 0.0),
            marker(1, -m - gap, height_mm - m),
            marker(2, width_mm + gap, 0.0),
            marker(3, width_mm + gap, height_mm - m),
        ),
        margin_mm=5.0,
    )
