"""Segment: the marking-compound contact mask of a rectified photo.

How the compound is told from bare metal
----------------------------------------
1. **Colour-opponent evidence.**  Marking compound is strongly coloured; scraped steel
   or cast iron is grey.  The evidence is a log ratio of colour channels (blue: blue
   over red; red: red over the mean of green and blue).  A ratio does not change when
   the light gets brighter or dimmer, so vignetting, uneven light, facet brightness of
   the scrape strokes and dark (thick) compound centres do not move it; a white-balance
   shift multiplies channels by constants and so only offsets it.
2. **Flattening.**  What is left of uneven light (a colour cast that varies across the
   photo, a haze of compound over bare areas) is a slowly varying offset.  The level
   of the non-contact class is taken as a low quantile of the evidence in tiles about
   ``background_mm`` wide, smoothed across tiles and subtracted.
3. **Glare.**  Specular glare is bright and desaturated: it washes colour out, so it
   never reads as compound, but with compound on the work (where contact is the
   *absence* of colour) it would read as contact.  Glare pixels (clipped, or much
   brighter than the photo's typical bare-metal level and nearly grey) are therefore
   never contact, except small glints wholly inside a spot, which are filled.
4. **An adaptive threshold.**  The bare-metal spread is measured on the lower side of
   its mode (which the compound cannot contaminate); the compound level is the median
   of the clearly coloured pixels.  The threshold sits a fixed share of the way from
   the bare level to the compound level, and never closer to the bare level than a
   multiple of the bare noise, so a faint haze stays below it.  Pixels down to a lower
   threshold are kept where they join a spot's core (hysteresis): pale rims are kept,
   isolated haze is not.
5. **Clean-up** scaled by ``px_per_mm``: a light smoothing of the evidence before the
   threshold, and small holes in spots filled.

With compound on the work the evidence is negated: contact is where the coat was
rubbed through to bare metal.  ``compound="auto"`` picks the colour whose evidence has
the clearer two-class split in the photo.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from typing import Literal

import cv2
import numpy as np

from printcheck.errors import OptionError, PhotoError

__all__ = [
    "SegmentConfig",
    "Segmentation",
    "segment",
    "segment_levels",
    "mask_at",
    "compound_evidence",
]

Compound = Literal["blue", "red", "auto"]
CompoundOn = Literal["reference", "work"]

_EPS = 4.0  # added to 8-bit channel values before the log ratio (tames dark noise)


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
    background_mm : float
        Tile size for the background (non-contact) level, mm; larger than any spot.
    level : float
        Where the threshold sits between the bare level (0) and the compound level (1).
    noise_floor : float
        The threshold is at least this many bare-metal standard deviations above the
        bare level.
    hysteresis : float
        Pixels down to ``threshold - hysteresis * (threshold - bare level)`` are kept
        where they join a spot.
    smooth_mm : float
        Gaussian smoothing of the evidence before the threshold (sigma, mm).
    close_mm : float or None
        Radius of a morphological closing of the mask (mm); None or 0: none.  With
        compound on the work a rubbed-through spot can show as patches of thinned coat
        that belong together; a closing of about 0.1 mm joins them (and also joins
        separate spots closer than that, so it is off by default).
    """

    compound: Compound = "blue"
    compound_on: CompoundOn = "reference"
    px_per_mm: float = 10.0
    background_mm: float = 10.0
    level: float = 0.5
    noise_floor: float = 5.0
    hysteresis: float = 0.4
    smooth_mm: float = 0.04
    close_mm: float | None = None
    rim_share: float = 0.5
    rim_noise: float = 4.0


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
    visible : (M, N) bool ndarray
        Where contact may be found.
    px_per_mm : float
    warnings : tuple of str
        E.g. glare over much of the window, very low contrast.
    low_gap : float
        Hysteresis: pixels down to ``t - low_gap`` join spots found at ``t``.
    blocked : (M, N) bool ndarray or None
        Pixels that are never contact (glare) unless enclosed by a spot.
    floor : (M, N) float32 ndarray or None
        Local noise floor: a spot must hold pixels above it (its rim may go lower, down
        to the hysteresis threshold), whatever the threshold.
    bare_level, compound_level, bare_sigma : float
        The score statistics the threshold was chosen from.
    glare_fraction : float
        Share of ``visible`` taken as glare.
    """

    mask: np.ndarray
    score: np.ndarray
    threshold: float
    compound: str
    spread: float
    visible: np.ndarray
    px_per_mm: float
    warnings: tuple[str, ...] = ()
    low_gap: float = 0.0
    blocked: np.ndarray | None = field(default=None)
    bare_level: float = 0.0
    compound_level: float = 0.0
    bare_sigma: float = 0.0
    glare_fraction: float = 0.0
    floor: np.ndarray | None = field(default=None)
    close_px: int = 0
    rim_gap: float = 0.0
    rim_share: float = 0.5


# --------------------------------------------------------------------------- evidence


def compound_evidence(image: np.ndarray, compound: str) -> np.ndarray:
    """Colour-opponent evidence of ``compound`` in ``image``, before flattening.

    Parameters
    ----------
    image : (M, N, 3) uint8 ndarray, BGR
    compound : {"blue", "red"}

    Returns
    -------
    (M, N) float32 ndarray
        ``log(B + e) - log(R + e)`` for blue, ``log(R + e) - log((G + B) / 2 + e)`` for
        red (natural log, ``e`` = 4 in 8-bit units).  Grey is 0; the compound is
        positive.
    """
    if compound not in ("blue", "red"):
        raise OptionError(f"compound must be 'blue' or 'red', got {compound!r}")
    return _log_ratio(image.astype(np.float32), compound)


def _log_ratio(img: np.ndarray, compound: str) -> np.ndarray:
    img = img + _EPS
    if compound == "blue":
        return cv2.log(img[..., 0]) - cv2.log(img[..., 2])
    return cv2.log(img[..., 2]) - cv2.log(0.5 * (img[..., 0] + img[..., 1]))


def _tile_grid(
    values: np.ndarray, valid: np.ndarray, tile_px: int, quantile: float
) -> np.ndarray | None:
    """(ty, tx) grid of the ``quantile`` of ``values`` over ``valid`` in square tiles.

    Tiles with too few valid pixels take their nearest filled neighbour; None when no
    tile has enough.
    """
    grids = _tile_grids(values, valid, tile_px, (quantile,))
    return None if grids is None else grids[0]


def _tile_grids(
    values: np.ndarray, valid: np.ndarray, tile_px: int, quantiles: tuple[float, ...]
) -> list[np.ndarray] | None:
    """:func:`_tile_grid` for several quantiles at once (one sort of the tiles)."""
    rows, cols = values.shape
    ty, tx = max(1, math.ceil(rows / tile_px)), max(1, math.ceil(cols / tile_px))
    ph, pw = ty * tile_px - rows, tx * tile_px - cols
    v = np.pad(np.where(valid, values, np.nan), ((0, ph), (0, pw)), constant_values=np.nan)
    blocks = v.reshape(ty, tile_px, tx, tile_px).transpose(0, 2, 1, 3).reshape(ty, tx, -1)
    counts = np.sum(~np.isnan(blocks), axis=2)
    enough = counts >= 0.3 * tile_px * tile_px
    if not enough.any():
        return None
    ordered = np.sort(blocks[enough], axis=1)
    nearest = None
    if not enough.all():
        from scipy import ndimage

        _, nearest = ndimage.distance_transform_edt(~enough, return_indices=True)
    grids = []
    for quantile in quantiles:
        grid = np.full((ty, tx), np.nan, np.float32)
        grid[enough] = _quantile_of_sorted(ordered, counts[enough], quantile)
        if nearest is not None:
            grid = grid[nearest[0], nearest[1]]
        grids.append(grid)
    return grids


def _quantile_of_sorted(ordered: np.ndarray, counts: np.ndarray, quantile: float) -> np.ndarray:
    """``np.nanquantile(rows, quantile, axis=1)`` (linear method) of rows sorted already.

    NaNs sort last, so the valid values of row i are its first ``counts[i]`` entries.
    """
    pos = quantile * (counts - 1)
    lo = np.floor(pos).astype(np.intp)
    hi = np.minimum(lo + 1, counts - 1)
    idx = np.arange(ordered.shape[0])
    a = ordered[idx, lo]
    b = ordered[idx, hi]
    return a + (pos - lo) * (b - a)


def _upsample(grid: np.ndarray, tile_px: int, shape: tuple[int, int]) -> np.ndarray:
    """Bilinear map of a tile grid to full resolution (tile centres at tile centres)."""
    ty, tx = grid.shape
    big = cv2.resize(grid.astype(np.float32), (tx * tile_px, ty * tile_px),
                     interpolation=cv2.INTER_LINEAR)
    return np.ascontiguousarray(big[: shape[0], : shape[1]], dtype=np.float32)


def _background(
    score: np.ndarray, valid: np.ndarray, tile_px: int, quantile: float
) -> np.ndarray:
    """Smooth map of the ``quantile`` of ``score`` over ``valid`` in square tiles."""
    grid = _tile_grid(score, valid, tile_px, quantile)
    if grid is None:
        v = score[valid]
        level = float(np.quantile(v, quantile)) if v.size else 0.0
        return np.full(score.shape, level, np.float32)
    if min(grid.shape) >= 3:
        grid = cv2.medianBlur(grid, 3)
    return _upsample(grid, tile_px, score.shape)


def _smooth_model(grid: np.ndarray) -> np.ndarray:
    """Robust low-order (quadratic) fit to a grid of log brightness: the diffuse light.

    Iteratively refitted to the points within a few robust standard deviations of the
    fit, so neither a bright bump (glare) nor dark tiles (all compound) pull it.
    """
    ty, tx = grid.shape
    yy, xx = np.mgrid[:ty, :tx]
    x = (xx.ravel() + 0.5) / tx - 0.5
    y = (yy.ravel() + 0.5) / ty - 0.5
    z = grid.ravel().astype(np.float64)
    degree = 2 if min(ty, tx) >= 5 else (1 if min(ty, tx) >= 2 else 0)
    terms = [x**i * y**j for i in range(degree + 1) for j in range(degree + 1 - i)]
    a = np.stack(terms, axis=1)
    use = np.isfinite(z)
    if use.sum() > 3 * a.shape[1]:
        # start from the darker tiles, away from any bright bump
        use &= z <= np.quantile(z[use], 0.6)
    fit = np.full(z.shape, np.nanmedian(z) if use.any() else 0.0)
    for _ in range(10):
        if use.sum() < a.shape[1] + 2:
            break
        coef, *_ = np.linalg.lstsq(a[use], z[use], rcond=None)
        fit = a @ coef
        resid = z - fit
        scale = 1.4826 * float(np.median(np.abs(resid[use]))) + 1e-3
        new = np.isfinite(z) & (np.abs(resid) < 2.5 * scale)
        if np.array_equal(new, use):
            break
        use = new
    return fit.reshape(ty, tx).astype(np.float32)


_TO_LINEAR = ((np.arange(256) / 255.0) ** 2.2).astype(np.float32)


def _glare_field(
    image: np.ndarray, valid: np.ndarray, px_per_mm: float
) -> tuple[np.ndarray | None, np.ndarray, float]:
    """Broad specular glare as an additive white light field.

    The brightest pixels of a small tile are bare metal (or, in a tile of solid coat,
    coat); across the photo their level follows the smooth diffuse light (vignetting,
    a gradient: a low-order fit).  Glare adds white light on top as a broad bump: the
    tile levels stand above the fit over many neighbouring tiles (a median over 5 x 5
    tiles keeps such bumps and drops single tiles that merely hold brighter metal).

    Returns
    -------
    glare : (M, N) float32 ndarray or None
        Additive glare in linear units (None when there is none worth correcting).
    diffuse : (M, N) float32 ndarray
        The smooth diffuse level of the bare metal's brightest channel, linear.
    share : float
        Share of ``valid`` where glare adds more than a quarter of the diffuse light.
    """
    # cv2.LUT: the same table look-up as _TO_LINEAR[...], ~10x faster
    lin_max = cv2.LUT(cv2.max(cv2.max(image[..., 0], image[..., 1]), image[..., 2]), _TO_LINEAR)
    # keep clear of the edge of what is shown (a card's cut-out edge is white paper)
    k = 2 * max(1, int(round(0.3 * px_per_mm))) + 1
    valid = cv2.erode(valid.view(np.uint8), np.ones((k, k), np.uint8)).view(bool)
    block = max(4, int(round(2.5 * px_per_mm)))
    # keep the grid at most ~96 tiles a side (the model is smooth)
    block = max(block, int(math.ceil(max(image.shape[:2]) / 96)))
    grid = _tile_grid(lin_max, valid, block, 0.9)
    if grid is None:
        return None, np.ones(image.shape[:2], np.float32), 0.0
    loggrid = np.log(np.maximum(grid, 1e-4)).astype(np.float32)
    fit = _smooth_model(loggrid)
    resid = loggrid - fit
    if min(resid.shape) >= 5:
        resid = cv2.medianBlur(resid, 5)
    elif min(resid.shape) >= 3:
        resid = cv2.medianBlur(resid, 3)
    model = np.exp(fit)
    diffuse = _upsample(model, block, image.shape[:2])
    # a glare lobe: a broad connected bump of tiles, strong at its centre
    bump = resid > 0.12
    if bump.any():
        n, lab = cv2.connectedComponents(bump.view(np.uint8), connectivity=8)
        # the peak must be off the grid's outer ring: a strip along the edge of what is
        # shown (card paper, a locate error of a fraction of a mm) is not glare
        inner = bump.copy()
        if min(bump.shape) >= 5:
            inner[0, :] = inner[-1, :] = inner[:, 0] = inner[:, -1] = False
        peak = np.zeros(n, np.float32)
        np.maximum.at(peak, lab[inner], resid[inner])
        size = np.bincount(lab[bump], minlength=n)
        good = (peak > 0.5) & (size >= 12)
        good[0] = False
        bump = good[lab]
    if not bump.any():
        return None, diffuse, 0.0
    excess = np.where(bump, model * (np.exp(resid) - 1.0), 0.0).astype(np.float32)
    g = _upsample(excess, block, image.shape[:2])
    share = float(np.count_nonzero((g > 0.25 * diffuse) & valid)) / max(
        int(np.count_nonzero(valid)), 1
    )
    return g, diffuse, share


def _evidence(image: np.ndarray, compound: str, glare: np.ndarray | None) -> np.ndarray:
    """Compound evidence, with broad glare subtracted (in linear light) first."""
    if glare is None:
        return compound_evidence(image, compound)
    lin = cv2.LUT(image, _TO_LINEAR)
    # additive white light can never exceed the darkest channel of a pixel
    low = cv2.min(cv2.min(lin[..., 0], lin[..., 1]), lin[..., 2])
    lin = lin - np.minimum(glare, 0.9 * low)[..., None]
    gam = cv2.pow(np.maximum(lin, 0.0), 1.0 / 2.2) * 255.0
    return _log_ratio(gam, compound)


def _stats(score: np.ndarray, valid: np.ndarray) -> tuple[float, float, float, float]:
    """(bare level, bare sigma, compound level, clear share) of ``score`` over ``valid``.

    The bare (non-contact) mode is the histogram peak; its spread is measured on the
    lower side, which contact cannot contaminate.  The compound level is the median of
    pixels clearly above the bare noise.
    """
    v = score[valid]
    if v.size < 16:
        return 0.0, 1e-3, 1e-3, 0.0
    lo, hi = _tail_quantiles(v, 0.001, 0.999)
    if not hi > lo:
        return float(lo), 1e-3, float(lo) + 1e-3, 0.0
    # cv2.calcHist: np.histogram's counts (bar a value at the very top edge, which
    # np.histogram puts in the last bin) about 3x faster
    edges = np.linspace(float(lo), float(hi), 257)
    hist = cv2.calcHist(
        [np.ascontiguousarray(v, dtype=np.float32).reshape(-1, 1)], [0], None, [256],
        [float(lo), float(hi)],
    ).ravel()
    sm = np.convolve(hist.astype(float), np.ones(5) / 5.0, mode="same")
    k = int(np.argmax(sm))
    mode = 0.5 * (edges[k] + edges[k + 1])
    below = v[v <= mode]
    sigma = float(np.sqrt(np.mean((below - mode) ** 2))) if below.size > 8 else 0.0
    sigma = max(sigma, 1e-3, float(hi - lo) / 256.0)
    clear = v[v > mode + 6.0 * sigma]
    comp = float(np.median(clear)) if clear.size else mode + 6.0 * sigma
    return float(mode), sigma, comp, clear.size / v.size


def _tail_quantiles(v: np.ndarray, low: float, high: float) -> tuple[float, float]:
    """``np.quantile(v, [low, high])`` for a low and a high quantile of a 1-D array.

    The same values, without partitioning all of ``v``: the order statistics wanted lie
    among the values beyond thresholds read off a strided sample (checked by count;
    np.quantile itself when the check fails), and they are interpolated by np.quantile
    with numpy's own weights.
    """
    n = v.size
    if n < 20_000 or not 0 < low < 0.5 < high < 1:
        a, b = np.quantile(v, [low, high])
        return float(a), float(b)
    stride = 64
    sample = np.sort(v[::stride])
    out = []
    for q in (low, high):
        pos = q * (n - 1)
        k = math.floor(pos)
        k1 = min(k + 1, n - 1)
        if q < 0.5:
            t = sample[min(sample.size - 1, int(1.5 * (k1 + 1) / stride) + 8)]
            cand = v[v <= t]
            first = 0  # rank in v of cand's smallest
            ok = cand.size >= k1 + 1
        else:
            t = sample[max(0, sample.size - 1 - int(1.5 * (n - k) / stride) - 8)]
            cand = v[v >= t]
            first = n - cand.size
            ok = k >= first
        if not ok:
            a, b = np.quantile(v, [low, high])
            return float(a), float(b)
        part = np.partition(cand, [k - first, k1 - first])
        pair = np.array([part[k - first], part[k1 - first]], dtype=v.dtype)
        # q as a float64 array, as np.quantile(v, [low, high]) has it: the same arithmetic
        out.append(float(np.quantile(pair, np.array([pos - k]))[0]))
    return out[0], out[1]


def _choose_compound(image: np.ndarray, valid: np.ndarray, on: str) -> tuple[str, float, float]:
    """Pick "blue" or "red": the one whose evidence splits more clearly into two classes."""
    best: tuple[float, str] | None = None
    sep: dict[str, float] = {}
    sub = _subsample(valid)
    for name in ("blue", "red"):
        ev = compound_evidence(image[sub], name)
        if on == "work":
            ev = -ev
        m0, s0, m1, share = _stats(ev, valid[sub])
        # separation of the classes in bare-noise units, weighted by how many pixels
        # clearly carry the colour
        score = (m1 - m0) / s0 * math.sqrt(max(share, 0.0))
        sep[name] = score
        if best is None or score > best[0]:
            best = (score, name)
    assert best is not None
    other = "red" if best[1] == "blue" else "blue"
    return best[1], sep[best[1]], sep[other]


def _subsample(valid: np.ndarray) -> tuple[slice, slice]:
    step = max(1, int(math.sqrt(valid.size / 250_000.0)))
    return (slice(None, None, step), slice(None, None, step))


# --------------------------------------------------------------------------- masks


def _hysteresis(
    score: np.ndarray,
    high: float,
    low: float,
    allowed: np.ndarray,
    floor: np.ndarray | None = None,
    rim: tuple[float, float, float] | None = None,
) -> np.ndarray:
    """Pixels above ``low`` connected to a seed above ``high`` (and above ``floor``).

    With ``rim = (lowest, bare, share)``, a mark whose peak stands only a little above
    the bare level (a small spot, softened by the optics) keeps its pixels down to
    ``bare + share * (peak - bare)`` (its half-height contour when ``share`` is 0.5),
    but never below ``lowest``; a mark with a high peak keeps pixels down to ``low``.
    """
    if rim is None or not rim[0] < low:
        base = low
    else:
        base = rim[0]
    weak = (score > base) & allowed
    n, lab = cv2.connectedComponents(weak.view(np.uint8), connectivity=8, ltype=cv2.CV_32S)
    if n <= 1:
        return weak
    strong = (score > high) & weak
    if floor is not None:
        strong &= score > floor
    keep = np.zeros(n, bool)
    keep[lab[strong]] = True
    keep[0] = False
    if base >= low:
        return keep[lab]
    assert rim is not None

    lowest, bare, share = rim
    # each mark's peak score (the same as ndimage.maximum over the labels, ~9x faster)
    sel = lab > 0
    peak = np.full(n, -np.inf, np.float32)
    np.maximum.at(peak, lab[sel], score[sel])
    level = np.clip(bare + share * (peak - bare), lowest, low).astype(np.float32)
    level[~keep] = np.inf
    weak = score > level[lab]
    # the raised level may cut a mark off its seed: keep only pieces holding a seed
    n, lab = cv2.connectedComponents(weak.view(np.uint8), connectivity=8, ltype=cv2.CV_32S)
    if n <= 1:
        return weak
    keep = np.zeros(n, bool)
    keep[lab[strong & weak]] = True
    keep[0] = False
    return keep[lab]


def _fill_small_holes(mask: np.ndarray, max_px: float, extra: np.ndarray | None) -> np.ndarray:
    """Fill background holes of ``mask`` smaller than ``max_px`` (or wholly in ``extra``)."""
    inv = ~mask
    n, lab, stats, _ = cv2.connectedComponentsWithStats(inv.view(np.uint8), connectivity=4)
    if n <= 1:
        return mask
    area = stats[:, cv2.CC_STAT_AREA]
    x, y = stats[:, cv2.CC_STAT_LEFT], stats[:, cv2.CC_STAT_TOP]
    w, h = stats[:, cv2.CC_STAT_WIDTH], stats[:, cv2.CC_STAT_HEIGHT]
    rows, cols = mask.shape
    border = (x == 0) | (y == 0) | (x + w == cols) | (y + h == rows)
    fill = (area <= max_px) & ~border
    if extra is not None:
        # glints inside a spot: holes up to 20x larger that are all glare
        glare_px = np.bincount(lab[extra], minlength=n)
        fill |= (area <= 20 * max_px) & ~border & (glare_px >= 0.5 * area)
    fill[0] = False
    if not fill.any():
        return mask
    return mask | fill[lab]


def mask_at(segmentation: Segmentation, threshold: float) -> np.ndarray:
    """The cleaned contact mask at another threshold (for the confidence range).

    Parameters
    ----------
    segmentation : Segmentation
    threshold : float
        Threshold on ``segmentation.score``.

    Returns
    -------
    (M, N) bool ndarray
        Contact inside ``segmentation.visible``; equal to ``segmentation.mask`` at
        ``segmentation.threshold``.
    """
    seg = segmentation
    allowed = seg.visible if seg.blocked is None else seg.visible & ~seg.blocked
    low = float(threshold) - seg.low_gap
    rim = None
    if seg.rim_gap > 0:
        rim = (low - seg.rim_gap, seg.bare_level + float(threshold) - seg.threshold,
               seg.rim_share)
    m = _hysteresis(seg.score, float(threshold), low, allowed, seg.floor, rim)
    if seg.close_px > 0:
        k = 2 * seg.close_px + 1
        kernel = cv2.getStructuringElement(cv2.MORPH_ELLIPSE, (k, k))
        m = cv2.morphologyEx(m.view(np.uint8), cv2.MORPH_CLOSE, kernel).view(bool) & allowed
    max_hole = 0.05 * seg.px_per_mm**2
    m = _fill_small_holes(m, max_hole, seg.blocked)
    return _drop_edge_slivers(m & seg.visible, seg.visible, seg.px_per_mm)


def _drop_edge_slivers(mask: np.ndarray, visible: np.ndarray, px_per_mm: float) -> np.ndarray:
    """Drop marks lying mostly in a thin band along the edge of ``visible``.

    Such a mark is the edge of a card's cut-out (white paper) or its shadow, shown
    through a registration error of a fraction of a millimetre; a real spot cut by the
    edge keeps most of its area inside.  The band is ``max(1, 0.1 * px_per_mm)`` pixels
    wide.
    """
    w = max(1, int(round(0.1 * px_per_mm)))
    inner = cv2.erode(visible.view(np.uint8), np.ones((2 * w + 1, 2 * w + 1), np.uint8),
                      borderType=cv2.BORDER_CONSTANT, borderValue=0).view(bool)
    band = mask & ~inner
    if not band.any():
        return mask
    n, lab, stats, _ = cv2.connectedComponentsWithStats(
        mask.view(np.uint8), connectivity=8, ltype=cv2.CV_32S
    )
    area = stats[:, cv2.CC_STAT_AREA]
    in_band = np.bincount(lab[band], minlength=n)
    drop = in_band > 0.5 * area
    drop[0] = False
    if not drop.any():
        return mask
    return mask & ~drop[lab]


# --------------------------------------------------------------------------- segment


# Evidence (log channel ratio) of a surface that is compound nearly everywhere: bare
# metal reads near 0 (about +-0.2 under a white-balance shift), a compound mark 0.7-1.8.
_COVERED_EVIDENCE = 0.4


def _mostly_compound(
    raw: np.ndarray,
    usable: np.ndarray,
    visible: np.ndarray,
    glare: np.ndarray,
    compound: str,
    s: float,
    warnings: list[str],
) -> Segmentation | None:
    """A Segmentation for a surface that bears nearly everywhere, else None.

    The threshold normally sits above the *local* bare-metal level, which does not exist
    when compound covers the whole window (a surface that bears all over, or a print
    smeared by too thick a film).  When four fifths of the surface carry compound, the
    threshold is taken on the evidence itself, half-way up to the compound's level.
    """
    v = raw[usable]
    # a sample of every 7th pixel decides the common case (bare metal shows) cheaply
    if not np.quantile(v[::7], 0.2) > _COVERED_EVIDENCE:
        return None
    q20, q50 = np.quantile(v, [0.2, 0.5])
    if not q20 > _COVERED_EVIDENCE:
        return None
    t = 0.5 * float(q50)
    warnings.append(
        f"{compound} compound covers nearly the whole surface: a film too thick, or the "
        "work was coated (use --compound-on work)"
    )
    seg = Segmentation(
        mask=np.zeros(raw.shape, bool),
        score=raw.astype(np.float32),
        threshold=t,
        compound=compound,
        spread=0.15 * t,
        visible=visible,
        px_per_mm=s,
        warnings=tuple(warnings),
        blocked=glare,
        bare_level=0.0,
        compound_level=float(q50),
        bare_sigma=max(float(np.std(v)), 1e-3),
    )
    return seg


def _low_gap(config: SegmentConfig, t: float, m0: float) -> float:
    return config.hysteresis * (t - m0)


def segment(
    image: np.ndarray, *, visible: np.ndarray, config: SegmentConfig = SegmentConfig()
) -> Segmentation:
    """Segment the contact marks of a rectified photo.

    The same as :func:`segment_levels` followed by
    ``replace(levels, mask=mask_at(levels, levels.threshold))``.

    Parameters
    ----------
    image : (M, N, 3) uint8 ndarray, BGR
        The rectified photo.
    visible : (M, N) bool ndarray
        Where the photo shows surface that may hold spots; nothing outside is contact.
    config : SegmentConfig

    Returns
    -------
    Segmentation
    """
    levels = segment_levels(image, visible=visible, config=config)
    return replace(levels, mask=mask_at(levels, levels.threshold))


def segment_levels(
    image: np.ndarray, *, visible: np.ndarray, config: SegmentConfig = SegmentConfig()
) -> Segmentation:
    """Everything :func:`segment` finds but the mask: score, threshold, levels, warnings.

    The returned Segmentation's ``mask`` is empty (all False);
    ``mask_at(levels, levels.threshold)`` is the contact mask, and ``mask_at`` at other
    thresholds gives the confidence range's masks, so a caller may compute them all at
    once (the pipeline does, on two threads).

    Parameters and errors are those of :func:`segment`.
    """
    image = np.asarray(image)
    if image.ndim != 3 or image.shape[2] != 3 or image.dtype != np.uint8:
        raise PhotoError(
            f"segment needs an (M, N, 3) uint8 BGR image, got shape {image.shape} "
            f"dtype {image.dtype}; decode the photo with printcheck.load first"
        )
    visible = np.asarray(visible, dtype=bool)
    if visible.shape != image.shape[:2]:
        raise OptionError(
            f"visible mask {visible.shape} must match the image {image.shape[:2]}"
        )
    if config.compound not in ("blue", "red", "auto"):
        raise OptionError(f"compound must be blue, red or auto, got {config.compound!r}")
    if config.compound_on not in ("reference", "work"):
        raise OptionError(
            f"compound_on must be reference or work, got {config.compound_on!r}"
        )
    if not config.px_per_mm > 0:
        raise OptionError(f"px_per_mm must be greater than zero, got {config.px_per_mm!r}")
    s = float(config.px_per_mm)
    warnings: list[str] = []

    compound: str = config.compound
    if compound == "auto":
        compound, best, other = _choose_compound(image, visible, config.compound_on)
        if best < 1.5 * other:
            warnings.append(
                f"compound colour is uncertain (chose {compound}); "
                "pass --compound blue or --compound red"
            )

    tile = max(8, int(round(config.background_mm * s)))
    tile = max(tile, int(math.ceil(max(image.shape[:2]) / 128)))
    clipped = cv2.max(cv2.max(image[..., 0], image[..., 1]), image[..., 2]) >= 250
    n_visible = max(int(visible.sum()), 1)
    if config.compound_on == "reference" or np.count_nonzero(clipped & visible) > 0.002 * n_visible:
        glare_add, diffuse, glare_fraction = _glare_field(image, visible, s)
    else:
        # with compound on the work the brightest things are the rubbed-through spots
        # themselves, so a broad bright excess is only taken for glare where the photo
        # also clips; milder glare is left to the flattening
        glare_add, diffuse, glare_fraction = None, np.ones(image.shape[:2], np.float32), 0.0
    # never contact: clipped highlights, and where glare outshines the surface
    glare = clipped
    if glare_add is not None:
        glare = glare | (glare_add > 0.3 * diffuse)
    glare &= visible
    if glare_add is None:
        glare_fraction = max(glare_fraction, float(glare.sum()) / max(int(visible.sum()), 1))
    raw = _evidence(image, compound, glare_add)
    if config.compound_on == "work":
        raw = -raw
    sigma_px = config.smooth_mm * s
    if sigma_px >= 0.3:
        raw = cv2.GaussianBlur(raw, (0, 0), sigma_px)
    usable = visible & ~glare
    if config.compound_on == "reference" and np.count_nonzero(usable) >= 16:
        covered = _mostly_compound(raw, usable, visible, glare, compound, s, warnings)
        if covered is not None:
            return covered
    # the non-contact class is the lower side of the evidence; its local level is a
    # low quantile (a tile is rarely more than 80% contact)
    bg = _background(raw, usable, tile, 0.2)
    score = (raw - bg).astype(np.float32)

    m0, s0, m1, share = _stats(score, usable)
    contrast = (m1 - m0) / s0
    t = max(m0 + config.level * (m1 - m0), m0 + config.noise_floor * s0)
    # where the bare metal is locally noisier (dim corners, glare, JPEG), the floor rises
    q = _tile_grids(score, usable, tile, (0.05, 0.2))
    floor = None
    if q is not None:
        local_sigma = np.maximum((q[1] - q[0]) / 0.8, 0.0)
        if min(local_sigma.shape) >= 3:
            local_sigma = cv2.medianBlur(local_sigma.astype(np.float32), 3)
        sig_map = _upsample(local_sigma, tile, score.shape)
        floor = (m0 + config.noise_floor * sig_map).astype(np.float32)
        if not (floor > t - _low_gap(config, t, m0)).any():
            floor = None
    low_gap = config.hysteresis * (t - m0)
    rim_gap = max(0.0, (t - low_gap) - (m0 + config.rim_noise * s0))
    spread = max(0.15 * (t - m0), 0.5 * s0)

    if glare_fraction > 0.05:
        warnings.append(
            f"glare covers {100 * glare_fraction:.0f}% of the surface; spots under it "
            "are not seen: shade the light or move it and retake the photo"
        )
    if share < 1e-4:
        warnings.append(
            f"no {compound} compound found on the surface: check --compound and "
            "--compound-on"
        )
    elif contrast < 10.0:
        warnings.append(
            f"the compound barely stands out from the bare metal (contrast {contrast:.1f}); "
            "retake the photo in even, brighter light"
        )

    close_mm = config.close_mm
    if close_mm is None:
        close_mm = 0.0
    close_px = int(round(close_mm * s))
    seg = Segmentation(
        mask=np.zeros(image.shape[:2], bool),
        score=score,
        threshold=float(t),
        compound=compound,
        spread=float(spread),
        visible=visible,
        px_per_mm=s,
        warnings=tuple(warnings),
        low_gap=float(low_gap),
        rim_gap=float(rim_gap),
        rim_share=float(config.rim_share),
        floor=floor,
        close_px=close_px,
        blocked=glare,
        bare_level=float(m0),
        compound_level=float(m1),
        bare_sigma=float(s0),
        glare_fraction=glare_fraction,
    )
    return seg
