"""The contact field: a photo's compound evidence against its local levels.

Steps 3 and 4 of the segment stage (see :mod:`printcheck.segment`): the local bare level
and noise of the evidence, over the pixels that are not contact (what stands clearly
above a coarse first estimate is left out of the fine one, unless it is broader than any
contact island: a broad change of the light or a smear, which the bare level must
follow); then the compound's local level (with compound on the reference) or the depth
from the coat to bare metal (with compound on the work).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import cv2
import numpy as np

from printcheck.contacts import disc, flat_where
from printcheck.evidence import (
    EVIDENCE_FLOOR,
    LOG_OFFSET,
    LevelMaps,
    block_quantiles,
    fill_and_smooth,
    level_maps,
    upsample,
    well_read,
)
from printcheck.ranks import median, quantile

__all__ = ["Field", "colour_spread_px", "contact_field", "relief_of"]

_BROAD_MM2 = 64.0  # no contact island is larger (an 8 mm square)
# A faint film: a mark under this share of the compound's level nearby ...
_FILM_SHARE = 0.3
# ... spread wider than this (a 3 mm square: two background tiles across), mm²
_FILM_MM2 = 9.0


@dataclass(frozen=True, eq=False)
class Field:
    """The evidence of a photo and its local levels, each (M, N) but ``noise``.

    Shared by the segment stage's main and nudged decisions.
    """

    score: np.ndarray  # evidence above the local bare level
    smooth: np.ndarray  # the same, smoothed at spot scale
    z: np.ndarray  # score in noise units
    zs: np.ndarray  # smooth in spot-scale noise units
    local: np.ndarray  # the compound's local level (reference) or the coat's depth (work)
    valid: np.ndarray  # visible and not burnt out
    visible: np.ndarray
    glare: np.ndarray  # burnt out
    noise: float  # median spot-scale noise
    edge: np.ndarray | None = None  # visible, within EDGE_MM of where the surface is hidden
    relief: np.ndarray | None = None  # how much darker than the bare metal (see relief_of())
    relief_noise: float = 0.0  # its spread over the bare metal
    body: np.ndarray | None = None  # inside a contact at spot scale (see segment.with_body())
    colour_spread: float = 0.0  # the colour's edges' spread past the brightness's, px


def map_median(level: np.ndarray, where: np.ndarray) -> float:
    """The median of a smooth map (upsampled from blocks) over ``where``, read on every
    4th row and column (a 16th of the pixels; all of them where that misses ``where``)."""
    sub = level[::4, ::4][where[::4, ::4]]
    return median(sub if sub.size else level[where])


def contact_field(
    evidence: np.ndarray,
    valid: np.ndarray,
    stat: np.ndarray,
    glare: np.ndarray,
    *,
    px_per_mm: float,
    spot_mm: float,
    background_mm: float,
    seed_sigma: float,
    local_mm: float,
    compound_on: str,
) -> Field:
    """The evidence's local levels (see the module docstring).

    Parameters
    ----------
    evidence : (M, N) float32 ndarray
        Colour evidence (negated with compound on the work).
    valid : (M, N) bool ndarray
        Visible and not burnt out.
    stat : (M, N) bool ndarray
        Where the photo's statistics are read (the analysed window, valid).
    glare : (M, N) bool ndarray
        Burnt out.
    px_per_mm, spot_mm, background_mm, seed_sigma, local_mm, compound_on
        As :class:`printcheck.segment.SegmentConfig` has them.
    """
    s = px_per_mm
    shape = evidence.shape
    coarse = max(8, int(round(5.0 * s)))
    q, count = block_quantiles(evidence, stat, coarse, (0.05, 0.5))
    ok = well_read(count, coarse)
    first = upsample(fill_and_smooth(q[1], ok.astype(np.float32), 1.0), coarse, shape)
    noise0 = max(float(np.median((q[1] - q[0])[ok])) / 1.645, EVIDENCE_FLOOR)
    smoothed = cv2.GaussianBlur(evidence, (0, 0), max(spot_mm * s, 0.35))
    marked, film = _marks(evidence, smoothed, first, noise0, valid, stat, s, local_mm)
    near = cv2.dilate(marked.view(np.uint8), disc(max(1, int(round(0.3 * s)))))
    block = max(4, int(round(background_mm * s)))
    bare = stat & ~near.view(bool)
    maps = level_maps(evidence, smoothed, bare & ~film, block=block)
    if film.any():
        # a film of compound has an edge as sharp as a contact's, which no smooth level
        # follows: its own bare level, read over the film alone, holds inside it
        inside = level_maps(evidence, smoothed, bare & film, block=block)
        maps = LevelMaps(
            bare=np.where(film, inside.bare, maps.bare),
            sigma=np.where(film, inside.sigma, maps.sigma),
            sigma_spot=np.where(film, inside.sigma_spot, maps.sigma_spot),
        )
    score = evidence - maps.bare
    smooth = smoothed - maps.bare
    noise = map_median(maps.sigma_spot, stat)
    zs = (smooth / maps.sigma_spot).astype(np.float32, copy=False)
    if compound_on == "reference":
        strong = zs >= 2.0 * seed_sigma
        local = _compound_level(smooth, valid, stat, strong, s, local_mm)
    else:
        local = _coat_depth(score, smooth, maps.bare, stat, evidence)
    return Field(
        score=score.astype(np.float32, copy=False),
        smooth=smooth.astype(np.float32, copy=False),
        z=(score / maps.sigma).astype(np.float32, copy=False),
        zs=zs,
        local=local,
        valid=valid,
        visible=valid | glare,
        glare=glare,
        noise=noise,
    )


def _marks(
    evidence: np.ndarray,
    smoothed: np.ndarray,
    first: np.ndarray,
    noise0: float,
    valid: np.ndarray,
    stat: np.ndarray,
    s: float,
    local_mm: float,
) -> tuple[np.ndarray, np.ndarray]:
    """The marks the fine bare level leaves out: what stands clearly above the coarse one.

    Not left out, because the bare level must follow them: a mark wider than any contact
    island (64 mm², an 8 mm square), which is a broad change of the light; and a faint
    film (under :data:`_FILM_SHARE` of the compound's level nearby, away from any strong
    mark) spread wider than :data:`_FILM_MM2`, which is a smear of compound over bare
    metal (haze), not contact.

    Returns the marks, and the films' regions (holes filled: a pale contact inside a
    film belongs to its region), where the bare level is read over the film alone, so
    that a contact there stands out from the film around it, as it does on a real print.
    """
    marked = (evidence - first) > 5.0 * noise0
    area, lab = _pieces(marked)
    region = np.zeros(marked.shape, bool)
    if (area[1:] > _FILM_MM2 * s * s).any():  # a film is a piece of a mark at least this wide
        rel = smoothed - first
        strong = rel >= 10.0 * noise0
        level = _compound_level(rel, valid, stat, strong, s, local_mm)
        firm = (rel >= _FILM_SHARE * level) & marked
        near = cv2.dilate(firm.view(np.uint8), disc(max(1, int(round(0.3 * s))))).view(bool)
        film = marked & ~near
        film_area, film_lab = _pieces(film)
        wide = film_area > _FILM_MM2 * s * s
        if wide.any():
            from scipy import ndimage

            film_wide = np.take(wide, film_lab)
            region = np.asarray(ndimage.binary_fill_holes(film_wide), bool)
            marked = marked & ~film_wide
            area, lab = _pieces(marked)
    broad = area > _BROAD_MM2 * s * s
    if broad.any():
        marked &= ~np.take(broad, lab)
    return marked, region


def _pieces(mask: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The 8-connected pieces of ``mask``: each label's pixels of ``mask`` (so none for
    the background, label 0) and the labels."""
    n, lab = cv2.connectedComponents(mask.view(np.uint8), connectivity=8, ltype=cv2.CV_32S)
    return np.bincount(lab.ravel()[flat_where(mask)], minlength=n), lab


def _compound_level(
    smooth: np.ndarray,
    valid: np.ndarray,
    stat: np.ndarray,
    strong: np.ndarray,
    s: float,
    local_mm: float,
) -> np.ndarray:
    """The compound's local level: the strongest marks (98th percentile) of each block.

    Blocks without a mark of at least 0.3 of the photo's typical level take their
    neighbours' level, so a block of bare metal does not lower the bar for its haze.
    """
    v = smooth[stat]
    # the top 2 % of the window, or on a sparse print the share that is clearly marked
    # (ten noise levels up), so that a print of a few spots is not judged by its noise
    top = min(max(float(np.count_nonzero(strong & stat)) / max(v.size, 1), 0.002), 0.02)
    typical = median(v[v >= quantile(v, 1.0 - top)]) if v.size else 0.0
    block = max(8, int(round(local_mm * s)))
    q, count = block_quantiles(smooth, valid, block, (0.98,))
    has = (count > 0) & (np.nan_to_num(q[0]) > 0.3 * typical)
    if not has.any():
        return np.full(smooth.shape, max(typical, EVIDENCE_FLOOR), np.float32)
    grid = fill_and_smooth(q[0], has.astype(np.float32), 1.0)
    return np.asarray(np.maximum(upsample(grid, block, smooth.shape), EVIDENCE_FLOOR), np.float32)


def _coat_depth(
    score: np.ndarray,
    smooth: np.ndarray,
    coat: np.ndarray,
    stat: np.ndarray,
    evidence: np.ndarray,
) -> np.ndarray:
    """Compound on the work: how far the evidence falls from the coat to bare metal.

    The bare metal's level is that of the clearest worn-through pixels (over half of the
    deepest); the depth is the local coat level less it.
    """
    v = smooth[stat]
    top = median(v[v >= quantile(v, 0.98)]) if v.size else 0.0
    clear = stat & (smooth >= 0.5 * top)
    metal = median(evidence[clear]) if clear.any() else float(np.max(evidence[stat]))
    return np.maximum(metal - coat, 0.05).astype(np.float32)


#: The compound must darken the metal by this many of the brightness's noise levels (in
#: the middles of the strong contacts) for the brightness to cut contacts apart.
_RELIEF_CONTRAST = 5.0


def relief_of(
    field: Field,
    grey: np.ndarray,
    stat: np.ndarray,
    *,
    px_per_mm: float,
    spot_mm: float,
    background_mm: float,
) -> tuple[np.ndarray | None, float]:
    """The :attr:`Field.relief` of ``field`` and its noise: how much darker than the
    bare metal round it each pixel is (log brightness), where the compound darkens the
    metal; (None, 0.0) where it does not.  It reads the field's noise levels and the
    photo's ``grey`` ((M, N) uint8) alone (not the edge band nor the body).

    A phone stores brightness at full resolution but colour at a quarter of it (JPEG's
    4:2:0 sampling) and then smooths the colour to hide its noise: two contacts 0.2 mm
    apart are one blur in the colour evidence while the bright metal between them still
    shows in the brightness.  The colour says where compound is; inside what it finds,
    the brightness says where one contact ends and the next begins.  Compound darkens
    the metal (it absorbs most of the light it does not reflect in its own colour); a
    photo in which the strong contacts are not clearly darker than the metal round them
    (bright compound, or glare over it) keeps the colour evidence for that
    (``relief`` None).

    The bare level is the median log brightness of the bare pixels block by block
    (``background_mm``), as for the evidence; the noise is the spread of the bare
    pixels' brightness above it (scrape facets, sensor noise), its 95th percentile less
    the median over 1.645.
    """
    s = px_per_mm
    bright = grey.astype(np.float32)
    log_b = cv2.GaussianBlur(
        cv2.log(bright + np.float32(LOG_OFFSET)), (0, 0), max(0.5 * spot_mm * s, 0.35)
    )
    bare = stat & (field.z < 2.0)
    block = max(4, int(round(background_mm * s)))
    q, count = block_quantiles(log_b, bare, block, (0.5, 0.95))
    ok = well_read(count, block, any_if_none=False)
    if not ok.any():
        return None, 0.0
    level = upsample(fill_and_smooth(q[0], ok.astype(np.float32), 1.5), block, log_b.shape)
    relief = (level - log_b).astype(np.float32, copy=False)
    noise = max(float(np.median((q[1] - q[0])[ok])) / 1.645, 1e-4)
    # the middles of the strongly coloured marks (their colour, blurred wider than their
    # darkness, reaches past their edges)
    strong = (field.zs >= 10.0) & field.valid
    if np.count_nonzero(strong) < 20 or quantile(relief[strong], 0.9) < _RELIEF_CONTRAST * noise:
        return None, 0.0
    return relief, noise


#: How far (px) either side of the contacts' outlines their edges are read.
SPREAD_REACH_PX = 8

#: The most the colour's spread is taken to be (px): phones smooth colour over 1-3 px
#: (from memory); a wider reading is the profile of something else round the contacts
#: (a haze or a glare's edge), and would read each film from deep in its middle.
SPREAD_MAX_PX = 3.0


def colour_spread_px(grey: np.ndarray, field: Field, region: np.ndarray) -> float:
    """How much further the colour's edges are spread than the brightness's, as a
    Gaussian's sigma in pixels: sqrt(var_colour - var_brightness), 0 where it is not.

    A phone keeps colour at half the resolution of brightness (JPEG's 4:2:0 sampling)
    and smooths it again against noise, by as much as the phone likes: the colour of a
    contact spreads further over its edge than the blur of the card's edges (a
    brightness edge) says.  Read where the compound darkens the metal (``field`` with a
    relief): at the same edges the brightness steps as the colour does, and a film
    thinning to its rim widens both alike, so the difference of their spreads is the
    colour's own (the brightness: the photo's ``grey``, (M, N) uint8).  ``region`` ((M, N)
    bool) holds the contacts; only those as large as
    a disc :data:`SPREAD_REACH_PX` in radius are read, on their edge profiles averaged
    over every such contact (by the distance from the outline, in whole pixels, out to
    that reach either side): the spread of each profile is the variance of its rise.
    0 with no relief, or with fewer than five contacts that large; never above
    :data:`SPREAD_MAX_PX`.
    """
    if field.relief is None:
        return 0.0
    reach = SPREAD_REACH_PX
    n, lab, stats, _ = cv2.connectedComponentsWithStats(
        region.view(np.uint8), connectivity=8, ltype=cv2.CV_32S
    )
    large = stats[:, cv2.CC_STAT_AREA] >= math.pi * reach * reach
    large[0] = False
    if np.count_nonzero(large) < 5:
        return 0.0
    big = np.take(large.view(np.uint8), lab)
    inside = cv2.distanceTransform(big, cv2.DIST_L2, cv2.DIST_MASK_5)
    outside = cv2.distanceTransform(1 - big, cv2.DIST_L2, cv2.DIST_MASK_5)
    # the large contacts and the bare metal round them (not another contact's pixels),
    # out to the reach; a pixel's centre lies half a pixel from the outline
    limit = np.float32(reach + 0.5)
    near = (inside <= limit) & (outside <= limit) & (field.valid & ~(region & (big == 0)))
    at = flat_where(near)
    d_in, d_out = inside.ravel()[at], outside.ravel()[at]
    signed = np.where(d_in > 0, d_in - 0.5, 0.5 - d_out)
    bins = np.rint(signed).astype(np.int64) + reach
    count = np.bincount(bins, minlength=2 * reach + 1)
    if count.min() < 50:
        return 0.0
    darkness = -np.log(grey.ravel()[at].astype(np.float32) + np.float32(LOG_OFFSET))
    spreads = []
    for values in (field.score.ravel()[at], darkness):
        profile = np.bincount(bins, values.astype(np.float64), minlength=2 * reach + 1) / count
        rise = np.clip(np.diff(profile), 0.0, None)
        if rise.sum() <= 0:
            return 0.0
        w = rise / rise.sum()
        pos = np.arange(rise.size, dtype=np.float64)
        mean = float((w * pos).sum())
        spreads.append(float((w * (pos - mean) ** 2).sum()))
    return min(math.sqrt(max(spreads[0] - spreads[1], 0.0)), SPREAD_MAX_PX)
