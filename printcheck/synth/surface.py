"""Scraped surfaces as height fields, their contact with a flat reference, scraping passes.

A surface is a height field in micrometres sampled on a square grid in the layout frame
(x right, y down, mm).  Pixel ``(row, col)`` covers the square described in
:mod:`printcheck.frame`: its centre is at ``origin_mm + ((col + 0.5), (row + 0.5)) / px_per_mm``.

The model is the shop's, not a drawing:

* a machined face with a slight form error (crown, hollow or twist) and fine roughness;
* scrape strokes, each a shallow scoop (a parabola across the blade, rising and falling
  along the stroke) that removes material from wherever it lands, laid in rows in two
  crossing directions (a crosshatch);
* a flat reference rests on the highest point; with a film of marking compound of
  thickness ``film_um`` between them, contact is wherever the surface stands within
  ``film_um`` of that plane (:func:`contact_mask`);
* a scraping pass (:func:`scrape_pass`) lays strokes on the current high spots, so the
  next print has more, smaller spots.

Besides heights each field keeps, for rendering, the lay direction and a facet
brightness of the last stroke that cut every pixel (a scraped facet reflects light by
the direction of its tool marks).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from typing import Literal

import numpy as np
from scipy import ndimage

from printcheck.errors import OptionError
from printcheck.frame import Frame
from printcheck.layout import Layout, Window

__all__ = [
    "HeightField",
    "Form",
    "make_surface",
    "field_for_layout",
    "contact_mask",
    "scrape_pass",
    "cut_exclusions",
    "layout_extent_mm",
]

Form = Literal["crown", "hollow", "twist"]

#: Depth below the lowest scraped point at which an excluded area (oil groove) is cut, µm.
GROOVE_DEPTH_UM = 500.0


@dataclass(frozen=True, eq=False)
class HeightField:
    """A surface height field on a square grid in the layout frame.

    Attributes
    ----------
    height_um : (M, N) float64 ndarray
        Height of the surface in micrometres (larger is higher, toward the reference).
    px_per_mm : float
        Grid pixels per millimetre.
    origin_mm : (float, float)
        Layout (x, y) in mm of the top-left corner of pixel (0, 0).
    lay_rad : (M, N) float32 ndarray
        Direction (radians, from the layout x axis toward y) of the tool marks of the
        last stroke that cut each pixel; NaN where no stroke has cut (machined face).
    facet : (M, N) float32 ndarray
        Relative reflectance of the scraped facet at each pixel, about 0 (range about
        -1 to 1): per-stroke brightness plus the fine tool-edge streaks along the stroke.
    excluded : (M, N) bool ndarray or None
        Pixels cut away as an excluded area (an oil groove), never in contact.
    """

    height_um: np.ndarray
    px_per_mm: float
    origin_mm: tuple[float, float]
    lay_rad: np.ndarray
    facet: np.ndarray
    excluded: np.ndarray | None = None

    @property
    def shape(self) -> tuple[int, int]:
        """(rows, cols) of the grid."""
        return (int(self.height_um.shape[0]), int(self.height_um.shape[1]))

    @property
    def size_mm(self) -> tuple[float, float]:
        """(width, height) of the grid in mm."""
        rows, cols = self.shape
        return (cols / self.px_per_mm, rows / self.px_per_mm)

    def frame(self, window: Window) -> Frame:
        """The :class:`printcheck.frame.Frame` of this grid with ``window``."""
        return Frame(
            px_per_mm=float(self.px_per_mm),
            origin_mm=(float(self.origin_mm[0]), float(self.origin_mm[1])),
            shape=self.shape,
            window=window,
        )


# --------------------------------------------------------------------------- geometry


def layout_extent_mm(
    layout: Layout, *, px_per_mm: float, pad_mm: float = 8.0
) -> tuple[tuple[float, float], tuple[int, int]]:
    """Grid origin (mm) and shape (rows, cols) covering ``layout`` with ``pad_mm`` to spare.

    The grid covers the window plus the layout's margin plus ``pad_mm`` on every side, and
    the bounding box of the markers.  The origin is a whole number of pixels from the
    window's top-left corner, so the window edges fall on pixel boundaries.
    """
    w = layout.window
    xs = [w.x_mm - layout.margin_mm - pad_mm, w.x_mm + w.width_mm + layout.margin_mm + pad_mm]
    ys = [w.y_mm - layout.margin_mm - pad_mm, w.y_mm + w.height_mm + layout.margin_mm + pad_mm]
    for m in layout.markers:
        for x, y in m.corners_mm:
            xs.append(x - 1.0)
            xs.append(x + 1.0)
            ys.append(y - 1.0)
            ys.append(y + 1.0)
    s = float(px_per_mm)
    left = math.ceil((w.x_mm - min(xs)) * s)
    top = math.ceil((w.y_mm - min(ys)) * s)
    origin = (w.x_mm - left / s, w.y_mm - top / s)
    cols = math.ceil((max(xs) - origin[0]) * s)
    rows = math.ceil((max(ys) - origin[1]) * s)
    return origin, (rows, cols)


def _grid_mm(
    shape: tuple[int, int], px_per_mm: float, origin_mm: tuple[float, float]
) -> tuple[np.ndarray, np.ndarray]:
    rows, cols = shape
    x = origin_mm[0] + (np.arange(cols) + 0.5) / px_per_mm
    y = origin_mm[1] + (np.arange(rows) + 0.5) / px_per_mm
    return x, y


# --------------------------------------------------------------------------- strokes


@dataclass(frozen=True)
class _Stroke:
    x_mm: float
    y_mm: float
    angle_rad: float
    length_mm: float
    width_mm: float
    depth_um: float
    brightness: float
    streak_phase: tuple[float, float, float]
    streak_wave_mm: tuple[float, float, float]


def _random_stroke(
    rng: np.random.Generator,
    x: float,
    y: float,
    angle: float,
    stroke_mm: tuple[float, float],
    depth_um: float,
) -> _Stroke:
    length, width = stroke_mm
    return _Stroke(
        x_mm=float(x),
        y_mm=float(y),
        angle_rad=float(angle + rng.normal(0.0, math.radians(6.0))),
        length_mm=float(length * rng.uniform(0.8, 1.2)),
        width_mm=float(width * rng.uniform(0.8, 1.2)),
        depth_um=float(depth_um * rng.uniform(0.7, 1.3)),
        brightness=float(rng.normal(0.0, 0.35)),
        streak_phase=tuple(rng.uniform(0, 2 * math.pi, 3)),  # type: ignore[arg-type]
        streak_wave_mm=tuple(rng.uniform(0.12, 0.6, 3)),  # type: ignore[arg-type]
    )


# Depth profile along a stroke, t = 0 where the blade enters to 1 where it lifts: it
# digs in quickly and lifts out gradually (a skewed bump), tabulated for speed.
_ALONG_T = np.linspace(0.0, 1.0, 257)
_ALONG = np.sin(np.pi * _ALONG_T**0.8) ** 0.7


def _stamp(
    height: np.ndarray,
    lay: np.ndarray,
    facet: np.ndarray,
    stroke: _Stroke,
    px_per_mm: float,
    origin_mm: tuple[float, float],
) -> None:
    """Cut one stroke into the (private, writable) arrays in place."""
    s = px_per_mm
    ca, sa = math.cos(stroke.angle_rad), math.sin(stroke.angle_rad)
    hl, hw = stroke.length_mm / 2, stroke.width_mm / 2
    hx = abs(hl * ca) + abs(hw * sa) + 0.05
    hy = abs(hl * sa) + abs(hw * ca) + 0.05
    c0 = max(int(math.floor((stroke.x_mm - hx - origin_mm[0]) * s)), 0)
    c1 = min(int(math.ceil((stroke.x_mm + hx - origin_mm[0]) * s)), height.shape[1])
    r0 = max(int(math.floor((stroke.y_mm - hy - origin_mm[1]) * s)), 0)
    r1 = min(int(math.ceil((stroke.y_mm + hy - origin_mm[1]) * s)), height.shape[0])
    if c1 <= c0 or r1 <= r0:
        return
    x = (origin_mm[0] + (np.arange(c0, c1) + 0.5) / s - stroke.x_mm).astype(np.float32)
    y = (origin_mm[1] + (np.arange(r0, r1) + 0.5) / s - stroke.y_mm).astype(np.float32)
    t = (x[None, :] * (ca / stroke.length_mm) + y[:, None] * (sa / stroke.length_mm)) + 0.5
    v = -x[None, :] * sa + y[:, None] * ca  # across the stroke, mm
    across = 1.0 - (v * (1.0 / hw)) ** 2
    inside = (t > 0.0) & (t < 1.0) & (across > 0.0)
    if not inside.any():
        return
    along = np.interp(t[inside], _ALONG_T, _ALONG)
    depth_in = stroke.depth_um * along * across[inside]
    patch = height[r0:r1, c0:c1]
    patch[inside] -= depth_in
    cut_in = depth_in > 0.5 * stroke.depth_um
    if cut_in.any():
        rows, cols = np.nonzero(inside)
        rows, cols = rows[cut_in], cols[cut_in]
        vv = v[rows, cols]
        streak = np.zeros_like(vv)
        for phase, wave in zip(stroke.streak_phase, stroke.streak_wave_mm, strict=True):
            streak += np.sin(vv * (2 * np.pi / wave) + phase)
        facet[r0:r1, c0:c1][rows, cols] = (stroke.brightness + 0.12 * streak).astype(np.float32)
        lay[r0:r1, c0:c1][rows, cols] = np.float32(stroke.angle_rad)


def _crosshatch(
    rng: np.random.Generator,
    extent: tuple[float, float, float, float],
    angle: float,
    stroke_mm: tuple[float, float],
    depth_um: float,
) -> list[_Stroke]:
    """Rows of overlapping strokes in direction ``angle`` covering ``extent`` (x0,y0,x1,y1)."""
    x0, y0, x1, y1 = extent
    cx, cy = (x0 + x1) / 2, (y0 + y1) / 2
    radius = 0.5 * math.hypot(x1 - x0, y1 - y0) + stroke_mm[0]
    step_u = 0.75 * stroke_mm[0]
    step_v = 0.9 * stroke_mm[1]
    ca, sa = math.cos(angle), math.sin(angle)
    strokes: list[_Stroke] = []
    v = -radius
    while v <= radius:
        u = -radius + rng.uniform(0, step_u)
        while u <= radius:
            uu = u + rng.normal(0, 0.15 * step_u)
            vv = v + rng.normal(0, 0.2 * step_v)
            x = cx + uu * ca - vv * sa
            y = cy + uu * sa + vv * ca
            if (
                x0 - stroke_mm[0] <= x <= x1 + stroke_mm[0]
                and y0 - stroke_mm[0] <= y <= y1 + stroke_mm[0]
            ):
                strokes.append(_random_stroke(rng, x, y, angle, stroke_mm, depth_um))
            u += step_u
        v += step_v
    order = rng.permutation(len(strokes))
    return [strokes[i] for i in order]


def _form(
    form: str | None,
    form_um: float,
    x: np.ndarray,
    y: np.ndarray,
    extent: tuple[float, float, float, float] | None = None,
) -> np.ndarray:
    """Form error: 0 at the centre of ``extent`` (x0, y0, x1, y1; default the grid),
    ``form_um`` deep (or high) at its corners, continuing beyond it."""
    if extent is None:
        extent = (float(x[0]), float(y[0]), float(x[-1]), float(y[-1]))
    xc, yc = 0.5 * (extent[0] + extent[2]), 0.5 * (extent[1] + extent[3])
    a = max(0.5 * (extent[2] - extent[0]), 1e-9)
    b = max(0.5 * (extent[3] - extent[1]), 1e-9)
    xn = ((x - xc) / a)[None, :]
    yn = ((y - yc) / b)[:, None]
    if form is None or form_um == 0:
        return np.zeros((y.size, x.size))
    if form == "crown":
        return -form_um * (xn**2 + yn**2) / 2.0
    if form == "hollow":
        return form_um * (xn**2 + yn**2) / 2.0
    if form == "twist":
        return form_um * xn * yn
    raise OptionError(f"form must be 'crown', 'hollow', 'twist' or None, got {form!r}")


def make_surface(
    *,
    size_mm: tuple[float, float] = (66.8, 66.8),
    px_per_mm: float = 20.0,
    seed: int = 0,
    origin_mm: tuple[float, float] = (0.0, 0.0),
    stroke_mm: tuple[float, float] = (11.0, 5.5),
    depth_um: float = 3.0,
    layers: int = 2,
    form: Form | None = "crown",
    form_um: float = 4.0,
    roughness_um: float = 0.08,
    angle_deg: float = 45.0,
    form_extent_mm: tuple[float, float, float, float] | None = None,
) -> HeightField:
    """A roughed-in scraped surface: form error, fine roughness and a crosshatch of strokes.

    Parameters
    ----------
    size_mm : (float, float)
        (width, height) of the grid in mm.
    px_per_mm : float
        Grid resolution; 20 or more resolves sub-millimetre spots.
    seed : int
        Seed of every random choice; the same seed gives the same surface.
    origin_mm : (float, float)
        Layout (x, y) of the grid's top-left corner.
    stroke_mm : (float, float)
        Mean (length, width) of a scrape stroke in mm.
    depth_um : float
        Mean depth of one stroke's scoop in µm.
    layers : int
        Crosshatch layers; layer k is laid at ``+angle_deg`` or ``-angle_deg`` alternately.
    form, form_um : {"crown", "hollow", "twist", None}, float
        Overall form error: a crown (high middle), hollow (low middle) or twist (saddle),
        ``form_um`` from the centre to the corners.
    roughness_um : float
        RMS of the fine machined roughness (correlation about 0.15 mm).
    angle_deg : float
        Crosshatch angle from the layout x axis.
    form_extent_mm : (x0, y0, x1, y1) or None
        The rectangle the form error is scaled to (0 at its centre, ``form_um`` at its
        corners, continuing beyond); default the whole grid.

    Returns
    -------
    HeightField
    """
    if px_per_mm <= 0:
        raise OptionError(f"px_per_mm must be greater than zero, got {px_per_mm!r}")
    if size_mm[0] <= 0 or size_mm[1] <= 0:
        raise OptionError(f"size_mm must be two positive lengths, got {size_mm!r}")
    if stroke_mm[0] <= 0 or stroke_mm[1] <= 0:
        raise OptionError(f"stroke_mm must be (length, width) > 0, got {stroke_mm!r}")
    rng = np.random.default_rng(seed)
    shape = (max(int(round(size_mm[1] * px_per_mm)), 1), max(int(round(size_mm[0] * px_per_mm)), 1))
    x, y = _grid_mm(shape, px_per_mm, origin_mm)
    height = _form(form, form_um, x, y, form_extent_mm)
    if roughness_um > 0:
        noise = ndimage.gaussian_filter(rng.standard_normal(shape), 0.15 * px_per_mm)
        noise /= max(float(noise.std()), 1e-12)
        height = height + roughness_um * noise
    lay = np.full(shape, np.nan, dtype=np.float32)
    facet = (0.15 * rng.standard_normal(shape)).astype(np.float32)
    facet = ndimage.gaussian_filter(facet, 0.05 * px_per_mm)
    extent = (
        origin_mm[0],
        origin_mm[1],
        origin_mm[0] + shape[1] / px_per_mm,
        origin_mm[1] + shape[0] / px_per_mm,
    )
    base = math.radians(angle_deg)
    for k in range(layers):
        angle = base if k % 2 == 0 else -base
        for stroke in _crosshatch(rng, extent, angle, stroke_mm, depth_um):
            _stamp(height, lay, facet, stroke, px_per_mm, origin_mm)
    return HeightField(
        height, float(px_per_mm), (float(origin_mm[0]), float(origin_mm[1])), lay, facet
    )


def field_for_layout(
    layout: Layout,
    *,
    px_per_mm: float = 20.0,
    seed: int = 0,
    pad_mm: float | None = None,
    **kwargs: object,
) -> HeightField:
    """:func:`make_surface` over the extent of ``layout`` (see :func:`layout_extent_mm`),
    with the layout's exclusions cut as grooves.  ``kwargs`` go to :func:`make_surface`;
    the form error is scaled to the window unless ``form_extent_mm`` is given.

    ``pad_mm`` defaults to 8 mm for a card (the paper hides the surface around the
    window) and 15 mm otherwise (the photo shows the surface around the markers).
    """
    if pad_mm is None:
        pad_mm = 8.0 if layout.margin_mm == 0 else 15.0
    origin, (rows, cols) = layout_extent_mm(layout, px_per_mm=px_per_mm, pad_mm=pad_mm)
    w = layout.window
    kwargs.setdefault("form_extent_mm", (w.x_mm, w.y_mm, w.x_mm + w.width_mm, w.y_mm + w.height_mm))
    field = make_surface(
        size_mm=(cols / px_per_mm, rows / px_per_mm),
        px_per_mm=px_per_mm,
        seed=seed,
        origin_mm=origin,
        **kwargs,  # type: ignore[arg-type]
    )
    return cut_exclusions(field, layout.exclusions)


def cut_exclusions(
    field: HeightField, polygons: tuple[tuple[tuple[float, float], ...], ...]
) -> HeightField:
    """Cut each polygon (mm, layout frame) into ``field`` as a groove that never bears.

    The groove floor lies ``GROOVE_DEPTH_UM`` below the lowest point; ``excluded`` marks it.
    """
    if not polygons:
        return field
    import cv2

    rows, cols = field.shape
    mask = np.zeros((rows, cols), dtype=np.uint8)
    shift = 8
    s = field.px_per_mm
    for poly in polygons:
        pts = np.array(
            [
                [(px - field.origin_mm[0]) * s - 0.5, (py - field.origin_mm[1]) * s - 0.5]
                for px, py in poly
            ]
        )
        cv2.fillPoly(
            mask,
            [np.round(pts * (1 << shift)).astype(np.int32)],
            1,
            lineType=cv2.LINE_8,
            shift=shift,
        )
    excluded = mask.astype(bool)
    if field.excluded is not None:
        excluded |= field.excluded
    height = field.height_um.copy()
    floor = float(height[~excluded].min()) if (~excluded).any() else 0.0
    height[excluded] = floor - GROOVE_DEPTH_UM
    return replace(field, height_um=height, excluded=excluded)


# --------------------------------------------------------------------------- contact


def contact_mask(height: HeightField | np.ndarray, film_um: float) -> np.ndarray:
    """Where the surface bears on a flat reference through a compound film.

    The reference plane rests on the highest point; contact is wherever the surface stands
    within ``film_um`` of it: ``height >= height.max() - film_um``.

    Parameters
    ----------
    height : HeightField or (M, N) float ndarray
        Heights in µm.
    film_um : float
        Thickness of the compound film in µm (> 0).

    Returns
    -------
    (M, N) bool ndarray
    """
    h = height.height_um if isinstance(height, HeightField) else np.asarray(height, dtype=float)
    if not film_um > 0:
        raise OptionError(f"film_um must be greater than zero, got {film_um!r}")
    return h >= float(h.max()) - float(film_um)


def scrape_pass(
    field: HeightField,
    mask: np.ndarray,
    *,
    seed: int = 0,
    stroke_mm: tuple[float, float] = (8.0, 4.0),
    depth_um: float = 1.0,
    angle_deg: float = 45.0,
    film_um: float = 1.5,
    max_strokes: int = 20000,
) -> HeightField:
    """One scraping pass: every marked high spot is scraped down.

    Greedy, as a scraper works the print: a stroke is laid at the highest marked pixel
    that still stands within ``film_um`` of the print's top plus ``depth_um / 2``, cutting
    as deep as that pixel stands above the contact level (top - film) plus ``depth_um``
    (times a random 0.7 to 1.3), until every marked pixel has been taken down.  Strokes
    run at ``angle_deg`` (alternate its sign pass by pass for a crosshatch), so large
    spots are broken up into several scoops.

    Parameters
    ----------
    field : HeightField
        The surface before the pass (not modified).
    mask : (M, N) bool ndarray
        The print's contact (usually ``contact_mask(field, film_um)``).
    seed : int
    stroke_mm : (float, float)
        Mean (length, width) of a stroke in mm.
    depth_um : float
        Mean depth cut below the contact level, µm.
    angle_deg : float
        Direction of this pass's strokes from the layout x axis.
    film_um : float
        The print's film thickness in µm.
    max_strokes : int
        Safety limit on the number of strokes in the pass.

    Returns
    -------
    HeightField
        The surface after the pass.
    """
    mask = np.asarray(mask, dtype=bool)
    if mask.shape != field.shape:
        raise OptionError(f"mask shape {mask.shape} does not match the field's {field.shape}")
    rng = np.random.default_rng(seed)
    height = field.height_um.copy()
    lay = field.lay_rad.copy()
    facet = field.facet.copy()
    s = field.px_per_mm
    rr, cc = np.nonzero(mask)
    if rr.size:
        angle = math.radians(angle_deg)
        top = float(height[rr, cc].max())
        level = top - film_um
        stop = level - 0.5 * depth_um
        # Strokes are laid in rounds: in each round the highest marked pixel of every
        # other block (blocks a stroke long, one parity of the four) gets a stroke, so
        # strokes in one round do not overlap much and the highest points go first.
        block = max(stroke_mm[0] * s, 1.0)
        bi = (rr / block).astype(np.int64)
        bj = (cc / block).astype(np.int64)
        nbj = int(bj.max()) + 1
        key = bi * nbj + bj
        parity = (bi % 2) * 2 + (bj % 2)
        made = 0
        idle = 0
        round_no = 0
        while made < max_strokes and idle < 4:
            hs = height[rr, cc]
            live = (hs > stop) & (parity == round_no % 4)
            round_no += 1
            if not live.any():
                idle += 1
                if not (hs > stop).any():
                    break
                continue
            idle = 0
            cand = np.nonzero(live)[0]
            order = cand[np.lexsort((-hs[cand], key[cand]))]
            first = np.ones(order.size, dtype=bool)
            first[1:] = key[order[1:]] != key[order[:-1]]
            for i in order[first][: max_strokes - made]:
                y = field.origin_mm[1] + (rr[i] + 0.5) / s
                x = field.origin_mm[0] + (cc[i] + 0.5) / s
                stroke = _random_stroke(rng, x, y, angle, stroke_mm, depth_um)
                stroke = replace(stroke, depth_um=stroke.depth_um + float(hs[i]) - level)
                _stamp(height, lay, facet, stroke, s, field.origin_mm)
                made += 1
    if field.excluded is not None:
        floor = float(height[~field.excluded].min()) if (~field.excluded).any() else 0.0
        height[field.excluded] = np.minimum(height[field.excluded], floor - GROOVE_DEPTH_UM)
    return replace(field, height_um=height, lay_rad=lay, facet=facet)
