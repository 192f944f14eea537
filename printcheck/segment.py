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

__all__ = ["SegmentConfig", "Segmentation", "segment", "mask_at", "compound_evidence"]

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
    """

    compound: Compound = "blue"
    compound_on: CompoundOn = "reference"
    px_per_mm: float = 10.0
    background_mm: float = 10.0
    level: float = 0.35
    noise_floor: float = 5.0
    hysteresis: float = 0.4
    smooth_mm: float = 0.04


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
    img = image.astype(np.float32) + _EPS
    logs = cv2.log(img)
    lb, lg, lr = cv2.split(logs)
    if compound == "blue":
        return lb - lr
    if compound == "red":
        gb = cv2.log(0.5 * (img[..., 0] + img[..., 1]))
        return lr - gb
    raise OptionError(f"compound must be 'blue' or 'red', got {compound!r}")


def _background(
    score: np.ndarray, valid: np.ndarray, tile_px: int, quantile: float
) -> np.ndarray:
    """Smooth map of the ``quantile`` of ``score`` over ``valid`` in square tiles."""
    rows, cols = score.shape
    ty, tx = max(1, math.ceil(rows / tile_px)), max(1, math.ceil(cols / tile_px))
    ph, pw = ty * tile_px - rows, tx * tile_px - cols
    s = np.pad(np.where(valid, score, np.nan), ((0, ph), (0, pw)), constant_values=np.nan)
    blocks = s.reshape(ty, tile_px, tx, tile_px).transpose(0, 2, 1, 3).reshape(ty, tx, -1)
    counts = np.sum(~np.isnan(blocks), axis=2)
    enough = counts >= 0.1 * tile_px * tile_px
    grid = np.full((ty, tx), np.nan, np.float32)
    if enough.any():
        grid[enough] = np.nanquantile(blocks[enough], quantile, axis=1)
    else:
        v = score[valid]
        return np.full(score.shape, float(np.quantile(v, quantile)) if v.size else 0.0,
                       np.float32)
    if not enough.all():
        from scipy import ndimage

        _, (ii, jj) = ndimage.distance_transform_edt(~enough, return_indices=True)
        grid = grid[ii, jj]
    if min(ty, tx) >= 3:
        grid = cv2.medianBlur(grid.astype(np.float32), 3)
    big = cv2.resize(grid, (tx * tile_px, ty * tile_px), interpolation=cv2.INTER_LINEAR)
    return np.ascontiguousarray(big[:rows, :cols], dtype=np.float32)


def _glare(image: np.ndarray, valid: np.ndarray, tile_px: int) -> np.ndarray:
    """Specular glare: clipped, or far brighter than the bare level and nearly grey."""
    b, g, r = cv2.split(image)
    vmax = cv2.max(cv2.max(b, g), r).astype(np.float32)
    vmin = cv2.min(cv2.min(b, g), r).astype(np.float32)
    sat = (vmax - vmin) / np.maximum(vmax, 1.0)
    clipped = vmax >= 250.0
    if not valid.any():
        return clipped & valid
    # typical brightness of the photo (a local median, so vignetting and uneven light
    # do not read as glare); glare is a bright outlier against it
    local = _background(vmax, valid & ~clipped, tile_px * 3, 0.5)
    bright = vmax > np.maximum(1.6 * local, local + 60.0)
    grey = sat < 0.12
    return (clipped | (bright & grey)) & valid


def _stats(score: np.ndarray, valid: np.ndarray) -> tuple[float, float, float, float]:
    """(bare level, bare sigma, compound level, clear share) of ``score`` over ``valid``.

    The bare (non-contact) mode is the histogram peak; its spread is measured on the
    lower side, which contact cannot contaminate.  The compound level is the median of
    pixels clearly above the bare noise.
    """
    v = score[valid]
    if v.size < 16:
        return 0.0, 1e-3, 1e-3, 0.0
    lo, hi = np.quantile(v, [0.001, 0.999])
    if not hi > lo:
        return float(lo), 1e-3, float(lo) + 1e-3, 0.0
    hist, edges = np.histogram(v, bins=256, range=(float(lo), float(hi)))
    sm = np.convolve(hist.astype(float), np.ones(5) / 5.0, mode="same")
    k = int(np.argmax(sm))
    mode = 0.5 * (edges[k] + edges[k + 1])
    below = v[v <= mode]
    sigma = float(np.sqrt(np.mean((below - mode) ** 2))) if below.size > 8 else 0.0
    sigma = max(sigma, 1e-3, float(hi - lo) / 256.0)
    clear = v[v > mode + 6.0 * sigma]
    comp = float(np.median(clear)) if clear.size else mode + 6.0 * sigma
    return float(mode), sigma, comp, clear.size / v.size


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


def _hysteresis(score: np.ndarray, high: float, low: float, allowed: np.ndarray) -> np.ndarray:
    weak = (score > low) & allowed
    n, lab = cv2.connectedComponents(weak.view(np.uint8), connectivity=8, ltype=cv2.CV_32S)
    if n <= 1:
        return weak
    strong = (score > high) & weak
    keep = np.zeros(n, bool)
    keep[lab[strong]] = True
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
    m = _hysteresis(seg.score, float(threshold), float(threshold) - seg.low_gap, allowed)
    max_hole = 0.05 * seg.px_per_mm**2
    m = _fill_small_holes(m, max_hole, seg.blocked)
    return m & seg.visible


# --------------------------------------------------------------------------- segment


def segment(
    image: np.ndarray, *, visible: np.ndarray, config: SegmentConfig = SegmentConfig()
) -> Segmentation:
    """Segment the contact marks of a rectified photo.

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

    compound = config.compound
    if compound == "auto":
        compound, best, other = _choose_compound(image, visible, config.compound_on)
        if best < 1.5 * other:
            warnings.append(
                f"compound colour is uncertain (chose {compound}); "
                "pass --compound blue or --compound red"
            )

    tile = max(8, int(round(config.background_mm * s)))
    glare = _glare(image, visible, tile)
    glare_fraction = float(glare.sum()) / max(int(visible.sum()), 1)
    raw = compound_evidence(image, compound)
    if config.compound_on == "work":
        raw = -raw
    sigma_px = config.smooth_mm * s
    if sigma_px >= 0.3:
        raw = cv2.GaussianBlur(raw, (0, 0), sigma_px)
    usable = visible & ~glare
    # the non-contact class is the lower side of the evidence; its local level is a
    # low quantile (a tile is rarely more than 80% contact)
    bg = _background(raw, usable, tile, 0.2)
    score = (raw - bg).astype(np.float32)

    m0, s0, m1, share = _stats(score, usable)
    contrast = (m1 - m0) / s0
    t = max(m0 + config.level * (m1 - m0), m0 + config.noise_floor * s0)
    low_gap = config.hysteresis * (t - m0)
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
        blocked=glare,
        bare_level=float(m0),
        compound_level=float(m1),
        bare_sigma=float(s0),
        glare_fraction=glare_fraction,
    )
    return replace(seg, mask=mask_at(seg, t))
