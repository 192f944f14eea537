"""Guidance: where to scrape next, and the bare patches of a print.

- **High areas** to break up: spots far larger than the print's median spot, and regions
  whose local bearing (over a box of half a cell) stands well above the window's.
- **Bare patches**: the largest circle inside the analysed area that touches no spot
  (from the Euclidean distance transform of the bare analysed pixels), and every patch
  larger than the spec allows (leave those alone this pass; they come up as the high
  areas around them are scraped).
- **Advice** (:func:`advise`): the places above as a short ranked list in words, with
  positions a fitter can find on the part: the cell's label (column letter, row number:
  ``B2`` is the second column, second row, from the window's top-left) and the distances
  of the place's centre from the nearer side and the nearer end of the window.  The places
  to scrape (heavy bearing, oversized spots) come first, largest area first; then the bare
  patches over the spec's limit (at most ``MAX_BARE``, largest first), to be left alone.
  A place overlapping one ranked before it is the same place and is left out.  A print
  that meets its spec gets at most ``MAX_WHEN_MET`` places, any other ``MAX_PLACES``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import NamedTuple

import cv2
import numpy as np

from printcheck.cells import cell_index
from printcheck.frame import Frame
from printcheck.layout import Window
from printcheck.spots import Spots

__all__ = [
    "ACTIONS",
    "MAX_BARE",
    "MAX_PLACES",
    "MAX_WHEN_MET",
    "Advice",
    "BarePatch",
    "HighArea",
    "Guidance",
    "advise",
    "cell_label",
    "guidance",
    "largest_bare",
]

#: What to do at each kind of place the advice names, in the words the outputs use.
ACTIONS = {
    "heavy bearing": "break up",
    "oversized spot": "split it",
    "bare patch": "leave alone this pass",
}
#: Most places listed for a print that meets its spec, and for any other.
MAX_WHEN_MET = 3
MAX_PLACES = 8
#: Most bare patches listed.
MAX_BARE = 2


@dataclass(frozen=True)
class BarePatch:
    """A region of no contact: the largest circle touching no spot, centre in mm."""

    diameter_mm: float
    x_mm: float
    y_mm: float


class HighArea(NamedTuple):
    """A high area to break up: centre (layout mm), size (mm across) and why."""

    x_mm: float
    y_mm: float
    size_mm: float
    reason: str
    kind: str = "heavy bearing"


@dataclass(frozen=True)
class Guidance:
    """Where to scrape next.

    ``high`` are the high areas to break up (oversized spots, heavy-bearing regions);
    ``bare`` the low areas larger than the spec allows (leave alone this pass).
    """

    high: tuple[HighArea, ...] = ()
    bare: tuple[BarePatch, ...] = ()


def guidance(
    *,
    spots: Spots,
    contact: np.ndarray,
    in_an: np.ndarray,
    frame: Frame,
    bare_edt: np.ndarray,
    bearing: float,
    oversize_factor: float,
    heavy_bearing_factor: float,
    cell_mm: float,
    max_bare_mm: float | None,
) -> Guidance:
    """High areas and over-large bare patches of a measured print (see the module)."""
    s = frame.px_per_mm
    high: list[HighArea] = []
    inw = spots.in_window
    if inw.sum() >= 5:
        med = float(np.median(spots.area_mm2[inw]))
        big = np.flatnonzero(inw & (spots.area_mm2 > oversize_factor * med))
        big = big[np.argsort(-spots.area_mm2[big], kind="stable")][:50]
        for i in big:
            a = float(spots.area_mm2[i])
            high.append(
                HighArea(
                    float(spots.x_mm[i]),
                    float(spots.y_mm[i]),
                    float(spots.diameter_mm[i]),
                    f"large spot {a:.1f} mm² ({a / med:.0f}x the median): break it up",
                    "oversized spot",
                )
            )
    # heavy-bearing regions: local bearing over a box of half a cell
    if in_an.any() and bearing > 0:
        k = max(3, int(round(0.5 * cell_mm * s)) | 1)
        an_f = in_an.astype(np.float32)
        num = cv2.boxFilter(
            (contact & in_an).astype(np.float32),
            -1,
            (k, k),
            normalize=False,
            borderType=cv2.BORDER_CONSTANT,
        )
        den = cv2.boxFilter(an_f, -1, (k, k), normalize=False, borderType=cv2.BORDER_CONSTANT)
        with np.errstate(invalid="ignore", divide="ignore"):
            local = np.where(den > 0.5 * k * k, 100.0 * num / np.maximum(den, 1.0), 0.0)
        limit = max(heavy_bearing_factor * bearing, bearing + 15.0)
        heavy = (local > limit) & in_an
        if heavy.any():
            n, lab, stats, cents = cv2.connectedComponentsWithStats(
                heavy.view(np.uint8), connectivity=8
            )
            order = np.argsort(-stats[1:, cv2.CC_STAT_AREA])[:20] + 1
            for j in order:
                area_px = float(stats[j, cv2.CC_STAT_AREA])
                if area_px < 0.25 * k * k:
                    continue
                cx, cy = frame.to_mm(np.array(cents[j][1]), np.array(cents[j][0]))
                x, y, w, h = (int(v) for v in stats[j, :4])
                box = (slice(y, y + h), slice(x, x + w))
                peak = float(local[box][lab[box] == j].max())
                high.append(
                    HighArea(
                        float(cx),
                        float(cy),
                        2.0 * math.sqrt(area_px / math.pi) / s,
                        f"heavy bearing {peak:.0f}% against {bearing:.0f}% overall: "
                        "scrape this area down",
                        "heavy bearing",
                    )
                )
    bare: list[BarePatch] = []
    if max_bare_mm is not None and bare_edt.size:
        limit_px = 0.5 * max_bare_mm * s
        bare = _bare_patches(bare_edt, limit_px, frame)
    return Guidance(high=tuple(high), bare=tuple(bare))


def _bare_patches(radius: np.ndarray, limit_px: float, frame: Frame) -> list[BarePatch]:
    """Disjoint circles of radius above ``limit_px``, largest first (at most 20)."""
    cand = (radius > limit_px) & (radius >= cv2.dilate(radius, np.ones((3, 3), np.uint8)))
    at = np.flatnonzero(cand)  # row-major, as np.nonzero, in a third of the time
    if at.size == 0:
        return []
    rr, cc = np.divmod(at, cand.shape[1])
    rad = radius[rr, cc]
    order = np.argsort(-rad, kind="stable")
    rr, cc, rad = rr[order], cc[order], rad[order]
    taken: list[int] = []
    alive = np.ones(rr.size, bool)
    for i in range(rr.size):
        if not alive[i]:
            continue
        taken.append(i)
        if len(taken) >= 20:
            break
        d = np.hypot(rr - rr[i], cc - cc[i])
        alive &= d >= rad[i] + rad
    out = []
    for i in taken:
        x, y = frame.to_mm(np.array(float(rr[i])), np.array(float(cc[i])))
        out.append(BarePatch(2.0 * float(rad[i]) / frame.px_per_mm, float(x), float(y)))
    return out


def largest_bare(free: np.ndarray, frame: Frame) -> tuple[BarePatch, np.ndarray]:
    """Largest circle inside ``free`` (bare analysed pixels); also the radius map in px.

    The distance transform gives the distance from each free pixel centre to the
    nearest blocked pixel centre; the blocked pixel's square edge is half a pixel
    nearer, so the circle's radius is that distance less 0.5 px.
    """
    if not free.any():
        x, y = frame.to_mm(np.array(0.0), np.array(0.0))
        return BarePatch(0.0, float(x), float(y)), np.zeros(free.shape, np.float32)
    padded = np.pad(free, 1).view(np.uint8)
    edt = cv2.distanceTransform(padded, cv2.DIST_L2, cv2.DIST_MASK_PRECISE)[1:-1, 1:-1]
    radius = np.maximum(edt - 0.5, 0.0)
    k = int(np.argmax(radius))
    r, c = divmod(k, free.shape[1])
    x, y = frame.to_mm(np.array(float(r)), np.array(float(c)))
    return BarePatch(2.0 * float(radius.flat[k]) / frame.px_per_mm, float(x), float(y)), radius


@dataclass(frozen=True)
class Advice:
    """One place to work on next, as a fitter finds it on the part.

    Attributes
    ----------
    rank : int
        1 for the place that matters most.
    kind : {"heavy bearing", "oversized spot", "bare patch"}
    cell : str
        The counting cell holding the place's centre: column letter, row number (``B2``).
    x, y : float
        Centre of the place from the window's left and top edges, in ``unit``.
    edge_x, edge_y : {"left", "right"}, {"top", "bottom"}
        The nearer side and end of the window.
    from_x, from_y : float
        Distances of the centre from ``edge_x`` and ``edge_y``, in ``unit``.
    size : float
        The place's size across, in ``unit``.
    action : str
        What to do there (:data:`ACTIONS`).
    """

    rank: int
    kind: str
    cell: str
    x: float
    y: float
    edge_x: str
    from_x: float
    edge_y: str
    from_y: float
    size: float
    action: str


def cell_label(row: int, col: int) -> str:
    """A cell's label: column letter(s) then 1-based row number (``cell_label(1, 1)`` is B2).

    Columns past Z run on as AA, AB, ... as in a spreadsheet.
    """
    letters = ""
    k = col + 1
    while k > 0:
        k, rem = divmod(k - 1, 26)
        letters = chr(ord("A") + rem) + letters
    return f"{letters}{row + 1}"


def advise(
    g: Guidance,
    *,
    window: Window,
    cell_mm: float,
    meets: bool | None,
    to_unit: float = 1.0,
    digits: int = 1,
) -> tuple[Advice, ...]:
    """The places of ``g`` as a short ranked list (see the module).

    Parameters
    ----------
    g : Guidance
        High areas and bare patches, centres in mm (layout frame).
    window : Window
        The analysed window, mm (layout frame).
    cell_mm : float
        Side of the counting cell, mm.
    meets : bool or None
        Whether the print meets its spec (True: at most :data:`MAX_WHEN_MET` places).
    to_unit : float
        Factor from mm to the output unit (``1 / 25.4`` for inches).
    digits : int
        Decimals the positions and sizes are rounded to.

    Returns
    -------
    tuple of Advice
        Ranked, the most important first; places never overlap.
    """
    limit = MAX_WHEN_MET if meets else MAX_PLACES
    highs = sorted(
        (
            (h.kind if h.kind in ACTIONS else "heavy bearing", h.x_mm, h.y_mm, h.size_mm)
            for h in g.high
        ),
        key=lambda p: -p[3],
    )
    bares = sorted(
        (("bare patch", b.x_mm, b.y_mm, b.diameter_mm) for b in g.bare), key=lambda p: -p[3]
    )
    n_bare = min(MAX_BARE, len(bares), limit)
    kept: list[tuple[str, float, float, float]] = []
    for group, room in ((highs, limit - n_bare), (bares, n_bare)):
        taken = 0
        for kind, x, y, size in group:
            if taken >= room:
                break
            if any(math.hypot(x - kx, y - ky) < 0.5 * (size + ks) for _k, kx, ky, ks in kept):
                continue
            kept.append((kind, x, y, size))
            taken += 1
    out = []
    w = window
    for rank, (kind, x, y, size) in enumerate(kept, start=1):
        dx, dy = x - w.x_mm, y - w.y_mm
        col = cell_index(dx, w.width_mm, cell_mm)
        row = cell_index(dy, w.height_mm, cell_mm)
        near_x = ("left", dx) if dx <= w.width_mm - dx else ("right", w.width_mm - dx)
        near_y = ("top", dy) if dy <= w.height_mm - dy else ("bottom", w.height_mm - dy)

        def u(mm: float) -> float:
            return round(max(mm, 0.0) * to_unit, digits)

        out.append(
            Advice(
                rank=rank,
                kind=kind,
                cell=cell_label(row, col),
                x=u(dx),
                y=u(dy),
                edge_x=near_x[0],
                from_x=u(near_x[1]),
                edge_y=near_y[0],
                from_y=u(near_y[1]),
                size=u(size),
                action=ACTIONS[kind],
            )
        )
    return tuple(out)
