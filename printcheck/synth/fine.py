"""Fine prints: the last passes on a precision surface, many small contacts close together.

The scraped surface of a nearly finished precision way, straightedge or master plate bears
on many small high spots, 0.5-1.5 mm across, a good share of them in short chains with
only 0.2-0.35 mm of bare metal between neighbours.  :func:`fine_surface` builds such a
surface directly: each contact is a low cap on the surface whose top stands within the
compound film of the reference, so the contact (the truth) is exactly the cap's footprint
and the chains' gaps are exactly as wide as asked.  The scraped look around them (stroke
facets and lay) is a scraped surface's.
"""

from __future__ import annotations

import math

import numpy as np

from printcheck.layout import Layout
from printcheck.synth.surface import HeightField, field_for_layout

__all__ = ["fine_surface"]


def fine_surface(
    layout: Layout,
    density: float,
    *,
    seed: int = 0,
    px_per_mm: float = 25.0,
    film_um: float = 1.5,
    contact_mm: tuple[float, float] = (0.5, 1.5),
    gap_mm: tuple[float, float] = (0.2, 0.35),
    chain_share: float = 0.45,
) -> HeightField:
    """A surface bearing on about ``density`` points per square inch of small contacts.

    Parameters
    ----------
    layout : Layout
        The surface covers its extent (as :func:`printcheck.synth.field_for_layout`).
    density : float
        Points per square inch wanted over the window (40-60 for a fine print).
    seed : int
    px_per_mm : float
        Grid resolution (25 resolves a 0.2 mm gap with 5 pixels).
    film_um : float
        The compound film the print is made through; a contact's cap rises
        ``film_um`` above its rim.
    contact_mm : (float, float)
        Range of contact diameters.
    gap_mm : (float, float)
        Range of the bare gaps between neighbours in a chain.
    chain_share : float
        Share of contacts that start a chain of two to four.

    Returns
    -------
    HeightField
        Heights in µm: the contacts' caps stand 0 to ``film_um`` below the top, the rest
        of the surface at least ``2 * film_um`` below it.
    """
    rng = np.random.default_rng(seed)
    base = field_for_layout(layout, px_per_mm=px_per_mm, seed=seed, form=None, layers=2)
    rows, cols = base.shape
    s = px_per_mm
    top = 0.0
    height = np.full((rows, cols), top - 3.0 * film_um, np.float64)
    height += (
        0.3
        * film_um
        * (base.height_um - base.height_um.max())
        / max(float(np.ptp(base.height_um)), 1e-9)
    )
    w = layout.window
    area_in2 = w.width_mm * w.height_mm / 25.4**2
    want = int(round(density * area_in2 * 1.15))  # a few fall outside or merge
    centres: list[tuple[float, float, float]] = []
    tries = 0
    while len(centres) < want and tries < 50 * want:
        tries += 1
        x = rng.uniform(w.x_mm - 1.0, w.x_mm + w.width_mm + 1.0)
        y = rng.uniform(w.y_mm - 1.0, w.y_mm + w.height_mm + 1.0)
        group = [(x, y, rng.uniform(*contact_mm))]
        if rng.random() < chain_share:
            angle = rng.uniform(0, math.pi)
            for _ in range(int(rng.integers(1, 4))):
                px_, py_, pd = group[-1]
                d = rng.uniform(*contact_mm)
                step = pd / 2 + d / 2 + rng.uniform(*gap_mm)
                angle += rng.normal(0, 0.4)
                group.append((px_ + step * math.cos(angle), py_ + step * math.sin(angle), d))
        if all(_clear(c, centres, gap_mm[1] + 0.3) for c in group):
            centres.extend(group)
    yy, xx = np.mgrid[0:rows, 0:cols]
    for x, y, d in centres:
        r = d / 2
        cr = (y - base.origin_mm[1]) * s
        cc = (x - base.origin_mm[0]) * s
        k = int(math.ceil((r + 0.1) * s)) + 2
        r0, r1 = max(int(cr) - k, 0), min(int(cr) + k + 1, rows)
        c0, c1 = max(int(cc) - k, 0), min(int(cc) + k + 1, cols)
        if r0 >= r1 or c0 >= c1:
            continue
        ys, xs = yy[r0:r1, c0:c1], xx[r0:r1, c0:c1]
        angle = np.arctan2(ys + 0.5 - cr, xs + 0.5 - cc)
        wobble = 1.0 + 0.12 * np.sin(3 * angle + rng.uniform(0, 2 * np.pi))
        dist = np.hypot(ys + 0.5 - cr, xs + 0.5 - cc) / (r * s * wobble)
        # a cap: the top at the centre, the rim exactly one film below it, and below
        # that it falls away fast enough to leave the gaps bare
        cap = top - film_um * np.where(dist <= 1.0, dist**2, 1.0 + 6.0 * (dist - 1.0))
        height[r0:r1, c0:c1] = np.maximum(height[r0:r1, c0:c1], cap)
    excluded = base.excluded
    if excluded is not None:
        height[excluded] = top - 5.0 * film_um
    return HeightField(height, base.px_per_mm, base.origin_mm, base.lay_rad, base.facet, excluded)


def _clear(
    c: tuple[float, float, float], placed: list[tuple[float, float, float]], margin: float
) -> bool:
    """Whether contact ``c`` keeps ``margin`` mm of bare metal from every placed one."""
    x, y, d = c
    for px_, py_, pd in placed:
        if math.hypot(x - px_, y - py_) < (d + pd) / 2 + margin:
            return False
    return True
