"""Compound evidence: how strongly each pixel carries marking compound, and its local levels.

Marking compound is strongly coloured; scraped steel and cast iron are grey.  The
evidence of a pixel is a log ratio of its colour channels (blue compound: blue over red;
red compound: red over the mean of green and blue).  A ratio does not change when the
light gets brighter or dimmer, so vignetting, light falling off across the window, the
brightness of the scrape facets and dark, thick compound do not move it; a white-balance
error multiplies channels by constants and so only offsets it.  With compound on the
work the evidence is negated: contact is where the coat was rubbed through.

What is left varies slowly across a photo: a colour cast that changes with the light, a
thin smear of compound over the bare metal (haze).  :func:`level_maps` measures, block by
block over the pixels that are not contact, the local bare level, the local noise of the
evidence (from the lower side of the bare distribution, which contact cannot reach) and
the local level of the compound itself (which broad glare lowers by washing its colour
out).  Contacts are then judged against those local levels (:mod:`printcheck.contacts`).
"""

from __future__ import annotations

import functools
import math
from collections.abc import Sequence
from dataclasses import dataclass

import cv2
import numpy as np

from printcheck.errors import OptionError
from printcheck.ranks import median
from printcheck.sparecore import on_spare_core, spare_core_helps

__all__ = [
    "EVIDENCE_FLOOR",
    "LevelMaps",
    "LOG_OFFSET",
    "CLIPPED",
    "OWN_CHANNEL",
    "compound_evidence",
    "rebuilt_highlights",
    "divisor_clipped",
    "neutral_evidence",
    "choose_compound",
    "level_maps",
    "block_quantiles",
    "block_read",
    "well_read",
    "fill_and_smooth",
]

#: Added to 8-bit channel values before a log (the colour ratio, the brightness): it
#: tames the noise of dark pixels.
LOG_OFFSET = 4.0

#: Smallest noise level of the evidence.  One 8-bit step of a mid-grey channel moves the
#: log ratio by about 1/150; JPEG smooths colour so much that a measured spread can come
#: out far below that, which would make every faint colour fringe look significant.
EVIDENCE_FLOOR = 0.004


def compound_evidence(image: np.ndarray, compound: str) -> np.ndarray:
    """Colour-opponent evidence of ``compound`` in ``image``.

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
    img = image.astype(np.float32) + np.float32(LOG_OFFSET)
    return _log_ratio(img[..., 0], img[..., 1], img[..., 2], compound)


def _log_ratio(b: np.ndarray, g: np.ndarray, r: np.ndarray, compound: str) -> np.ndarray:
    """The evidence from channels already offset by :data:`LOG_OFFSET` (see
    :func:`compound_evidence`)."""
    if compound == "blue":
        return cv2.log(b) - cv2.log(r)
    return cv2.log(r) - cv2.log(np.float32(0.5) * (b + g))


#: The BGR channel each compound's colour is strongest in.
OWN_CHANNEL = {"blue": 0, "red": 2}

#: An 8-bit channel at or above this is taken as at its ceiling (clipped).
CLIPPED = 250


#: The channels each compound's evidence divides by, and the neighbour each is rebuilt
#: from where it alone is clipped (BGR indices): red from green for blue compound; green
#: from blue and blue from green for red compound.
_REBUILT_FROM = {"blue": ((2, 1),), "red": ((1, 0), (0, 1))}


def rebuilt_highlights(
    evidence: np.ndarray, image: np.ndarray, compound: str, where: np.ndarray
) -> np.ndarray:
    """``evidence`` (:func:`compound_evidence` of ``image``), read again where a channel
    it divides by is at its ceiling; ``where``: the pixels to learn the metal's colour on.

    A channel at its ceiling only says that the light was at least that bright.  Under a
    warm light the red of the brightest metal burns out first; read as blue over red,
    such a highlight looks bluer than the metal is, and a highlight that brightens
    towards its middle looks like a broad contact.  Where the divisor is clipped and the
    channel next to it is not, the divisor is rebuilt from that channel by the ratio the
    two have over the photo's unclipped pixels (the metal's colour under this light,
    what raw converters do to reconstruct highlights), but never below what was
    recorded.  Compound lowers the divisor against its neighbour, so over a pale spot
    in a highlight the rebuilt divisor is too high and the spot reads paler than it is,
    never the reverse.  Pixels with two channels clipped are glare (unseen) and left.
    """
    chans = cv2.split(image)
    pairs = _REBUILT_FROM[compound]
    if max(int(chans[lost].max()) for lost, _ in pairs) < CLIPPED:
        return evidence  # nothing clipped: the common case, decided in one pass
    clipped = [c >= CLIPPED for c in chans]
    rebuilt = [c.astype(np.float32) + np.float32(LOG_OFFSET) for c in chans]
    changed = False
    for lost, kept in pairs:
        lone = clipped[lost] & ~clipped[kept]
        if not lone.any():
            continue
        sel = where & ~clipped[lost] & ~clipped[kept]
        if np.count_nonzero(sel) < 64:
            continue
        ratio = np.float32(median(rebuilt[lost][sel] / rebuilt[kept][sel]))
        rebuilt[lost] = np.where(
            lone, np.maximum(rebuilt[lost], ratio * rebuilt[kept]), rebuilt[lost]
        )
        changed = True
    if not changed:
        return evidence
    return _log_ratio(rebuilt[0], rebuilt[1], rebuilt[2], compound)


def neutral_evidence(paper_bgr: tuple[float, float, float] | None, compound: str) -> float:
    """:func:`compound_evidence` of a neutral under the photo's light: of the white
    paper's colour ``paper_bgr`` (B, G, R, 8-bit) as the photo shows it, or 0 (grey)
    when it is not known.  A white-balance error offsets every pixel's evidence by it.

    Never below 0: markers may be printed on tinted labels (a yellowish paper reads as
    less blue than grey), so the paper may only say that the light leans toward the
    compound's colour, never make a grey window look coloured all over."""
    if paper_bgr is None:
        return 0.0
    b, g, r = (np.array([v + LOG_OFFSET], np.float32) for v in paper_bgr)
    return max(0.0, float(_log_ratio(b, g, r, compound)[0]))


def divisor_clipped(image: np.ndarray, compound: str) -> np.ndarray:
    """Pixels at which a channel the evidence of ``compound`` divides by is at its
    ceiling (red for blue compound; green or blue for red compound).

    There the evidence is only a bound: the divisor was at least what was recorded, so
    the colour is at most as strong as it reads, and :func:`rebuilt_highlights` can only
    guess the rest from the metal's usual colour.  A highlight lit by a second, cooler
    light (a window beside a warm lamp) is whiter than the metal round it and reads as
    compound there.  The compound itself absorbs exactly that channel: a contact whose
    divisor still burns out is too pale to tell from the metal anyway.
    """
    out = np.zeros(image.shape[:2], bool)
    for divisor, _ in _REBUILT_FROM[compound]:
        channel = cv2.extractChannel(image, divisor)
        if int(channel.max()) >= CLIPPED:  # else none: the common case, in one pass
            out |= channel >= CLIPPED
    return out


def choose_compound(
    image: np.ndarray,
    where: np.ndarray,
    compound_on: str,
    *,
    paper_bgr: tuple[float, float, float] | None = None,
) -> tuple[str, float]:
    """The compound colour the photo shows, and how clearly (a ratio >= 1).

    With compound on the reference the spots are the strongly coloured tail of the
    evidence; with compound on the work the rubbed-through metal is the tail below the
    coat.  The colour whose tail stands further from the bulk wins (or, with a window
    coloured all over, the colour of the bulk); the ratio of the two says how clear the
    choice was.

    Parameters
    ----------
    image : (M, N, 3) uint8 ndarray, BGR
    where : (M, N) bool ndarray
        The pixels to judge by (the analysed window).
    compound_on : {"reference", "work"}
    paper_bgr : (float, float, float), optional
        The white paper as the photo shows it: a window is coloured all over when its
        bulk is far from the paper's colour (default: from grey).
    """
    # every k-th row and column, some 60 000 pixels or more: the 0.5 % tails read on 300
    step = max(1, int(math.sqrt(max(int(where.sum()), 1) / 60_000.0)))
    sub = (slice(None, None, step), slice(None, None, step))
    sel = where[sub]
    channels = cv2.split(np.ascontiguousarray(image[sub]))
    tails = {}
    for name in ("blue", "red"):
        if np.count_nonzero(sel) < 16:
            tails[name] = 0.0
            continue
        lo, mid, hi = _evidence_quantiles(channels, sel, name, (0.005, 0.5, 0.995))
        tails[name] = float(hi - mid) if compound_on == "reference" else float(mid - lo)
        bulk = float(mid) - neutral_evidence(paper_bgr, name)
        if compound_on == "reference" and bulk > 0.4:
            # the window is coloured all over (a surface covered in compound): no white
            # balance error the paper does not tell moves grey metal this far, so the
            # bulk itself tells the colour
            tails[name] = max(tails[name], bulk)
    best = max(tails, key=lambda k: tails[k])
    other = tails["red" if best == "blue" else "blue"]
    return best, tails[best] / max(other, 1e-6)


@functools.lru_cache(maxsize=2)
def _evidence_table(compound: str) -> tuple[np.ndarray, np.ndarray]:
    """Every value :func:`compound_evidence` can take, sorted, and their codes' order.

    The evidence is a function of two 8-bit numbers (blue: B and R, code ``B * 256 + R``;
    red: R and G + B, code ``R * 511 + G + B``): :func:`compound_evidence` of one pixel
    per code gives every value, so a histogram of the codes gives its quantiles exactly.
    """
    first = np.arange(256, dtype=np.uint8)[:, None]
    pixels = np.zeros((256, 511 if compound == "red" else 256, 3), np.uint8)
    if compound == "blue":  # B, R
        pixels[..., 0] = first
        pixels[..., 2] = np.arange(256, dtype=np.uint8)[None, :]
    else:  # R, and G + B split as G = min(sum, 255), B = the rest
        total = np.arange(511)[None, :]
        pixels[..., 2] = first
        pixels[..., 1] = np.minimum(total, 255)
        pixels[..., 0] = total - np.minimum(total, 255)
    flat = compound_evidence(pixels, compound).ravel()
    order = np.argsort(flat, kind="stable")
    return flat[order], order


def _evidence_quantiles(
    channels: Sequence[np.ndarray], where: np.ndarray, compound: str, qs: tuple[float, ...]
) -> list[float]:
    """``np.quantile(compound_evidence(image, compound)[where], qs)`` (linear, numpy's
    default), from a histogram of the pixels' codes: the same values, without sorting
    the pixels (tested against numpy)."""
    b, g, r = channels
    if compound == "blue":
        code = b.astype(np.int32) * 256 + r
    else:
        code = r.astype(np.int32) * 511 + b.astype(np.int32) + g
    values, order = _evidence_table(compound)
    cum = np.cumsum(np.bincount(code[where], minlength=values.size)[order])
    n = int(cum[-1])
    out = []
    for q in qs:
        h = (n - 1) * q
        k = math.floor(h)
        ranks = np.array([k, min(k + 1, n - 1)])
        a, b2 = values[np.searchsorted(cum, ranks, side="right")]
        # numpy's own interpolation between the two order statistics around rank h
        out.append(float(np.quantile(np.array([a, b2]), [h - k])[0]))
    return out


def block_quantiles(
    values: np.ndarray, where: np.ndarray, block: int, quantiles: tuple[float, ...]
) -> tuple[np.ndarray, np.ndarray]:
    """Quantiles of ``values`` over ``where`` in square blocks of ``block`` pixels.

    The quantiles are numpy's (linear interpolation between order statistics), of every
    pixel of a block up to 24 x 24; a larger block is read on every k-th row and column
    (k the whole factor that brings it to 24 or fewer), which a smooth level does not
    miss.  Where a spare core helps and there are pixels enough to read (a few ms'
    work), the lower half of the rows of blocks is read there meanwhile (each block is
    read alone: the same grids).

    Returns
    -------
    q : (Q, BY, BX) float32 ndarray
        One grid per quantile (NaN in blocks without any pixel).
    count : (BY, BX) int ndarray
        Pixels of ``where`` read in each block.
    """
    by = math.ceil(values.shape[0] / block)
    read_px = values.size // max(1, block // 24) ** 2
    if by < 2 or read_px < _SPLIT_READ_PX or not spare_core_helps(values.size):
        return _block_quantiles(values, where, block, quantiles)
    half = (by // 2) * block
    lower = on_spare_core(
        values.size, _block_quantiles, values[half:], where[half:], block, quantiles
    )
    q, count = _block_quantiles(values[:half], where[:half], block, quantiles)
    q_low, count_low = lower.result()
    return np.concatenate([q, q_low], axis=1), np.concatenate([count, count_low])


#: The pixels :func:`block_quantiles` reads from which it reads half on a spare core:
#: below, handing the work over costs more than it saves (measured on 0.7 MP frames).
_SPLIT_READ_PX = 250_000


def _block_quantiles(
    values: np.ndarray, where: np.ndarray, block: int, quantiles: tuple[float, ...]
) -> tuple[np.ndarray, np.ndarray]:
    """:func:`block_quantiles` in this thread."""
    rows, cols = values.shape
    by, bx = max(1, math.ceil(rows / block)), max(1, math.ceil(cols / block))
    step = max(1, block // 24)
    # the rows and columns read: every step-th of each block, those inside the image
    # picked before anything is masked (a fraction 1 / step**2 of the pixels)
    read = np.arange(0, block, step)
    r_at = (np.arange(by)[:, None] * block + read).ravel()
    c_at = (np.arange(bx)[:, None] * block + read).ravel()
    r_in, c_in = r_at[r_at < rows], c_at[c_at < cols]
    if step > 1:
        values, where = values[np.ix_(r_in, c_in)], where[np.ix_(r_in, c_in)]
    padded = np.full((r_at.size, c_at.size), np.inf, np.float32)
    padded[: r_in.size, : c_in.size] = np.where(where, values, np.inf)
    blocks = padded.reshape(by, read.size, bx, read.size).transpose(0, 2, 1, 3).reshape(by, bx, -1)
    count = np.count_nonzero(np.isfinite(blocks), axis=2)
    ordered = np.sort(blocks, axis=2)  # the pixels outside ``where`` (inf) sort last
    out = np.full((len(quantiles), by, bx), np.nan, np.float32)
    have = count > 0
    n = count[have]
    rows_sorted = ordered[have]
    idx = np.arange(rows_sorted.shape[0])
    for k, q in enumerate(quantiles):
        pos = q * (n - 1)
        lo = np.floor(pos).astype(np.intp)
        hi = np.minimum(lo + 1, n - 1)
        a, b = rows_sorted[idx, lo], rows_sorted[idx, hi]
        out[k][have] = a + (pos - lo) * (b - a)
    return out, count


def block_read(block: int) -> int:
    """How many pixels of a full block of ``block`` pixels :func:`block_quantiles`
    reads (every k-th row and column of a block over 24)."""
    return len(range(0, block, max(1, block // 24))) ** 2


def well_read(count: np.ndarray, block: int, *, any_if_none: bool = True) -> np.ndarray:
    """The blocks a level may be read from: those of which :func:`block_quantiles` read
    at least a quarter of a full block's pixels (``count``); where there is none, with
    ``any_if_none``, every block with a pixel."""
    ok = count >= 0.25 * block_read(block)
    if any_if_none and not ok.any():
        return np.asarray(count > 0)
    return np.asarray(ok)


def fill_and_smooth(grid: np.ndarray, weight: np.ndarray, sigma: float) -> np.ndarray:
    """Normalised convolution: ``grid`` smoothed where ``weight`` > 0 and filled elsewhere.

    Blocks far from any weighted block take the value of the nearest one.
    """
    g = np.where(weight > 0, np.nan_to_num(grid), 0.0).astype(np.float32)
    w = weight.astype(np.float32)
    num = cv2.GaussianBlur(g * w, (0, 0), sigma, borderType=cv2.BORDER_REFLECT)
    den = cv2.GaussianBlur(w, (0, 0), sigma, borderType=cv2.BORDER_REFLECT)
    out = num / np.maximum(den, 1e-6)
    empty = den < 1e-3
    if empty.any() and not empty.all():
        from scipy import ndimage

        _, nearest = ndimage.distance_transform_edt(empty, return_indices=True)
        out = out[nearest[0], nearest[1]]
    return out.astype(np.float32)


def upsample(grid: np.ndarray, block: int, shape: tuple[int, int]) -> np.ndarray:
    """Bilinear map of a block grid to pixels (block centres at block centres)."""
    by, bx = grid.shape
    big = cv2.resize(
        grid.astype(np.float32), (bx * block, by * block), interpolation=cv2.INTER_LINEAR
    )
    return np.ascontiguousarray(big[: shape[0], : shape[1]])


@dataclass(frozen=True, eq=False)
class LevelMaps:
    """Local levels of the evidence, each an (M, N) float32 map.

    Attributes
    ----------
    bare : the evidence of bare metal (or, with compound on the work, of the coat)
    sigma : the noise of the evidence over bare metal, per pixel
    sigma_spot : the noise of the evidence smoothed at spot scale
    """

    bare: np.ndarray
    sigma: np.ndarray
    sigma_spot: np.ndarray


def level_maps(
    evidence: np.ndarray,
    smoothed: np.ndarray,
    bare: np.ndarray,
    *,
    block: int,
) -> LevelMaps:
    """Local bare level and noise of ``evidence`` over the ``bare`` pixels.

    Parameters
    ----------
    evidence : (M, N) float32 ndarray
    smoothed : (M, N) float32 ndarray
        The evidence smoothed at spot scale, whose noise ``sigma_spot`` measures.
    bare : (M, N) bool ndarray
        Pixels taken to be bare metal (contact and its surroundings left out).
    block : int
        Block side in pixels; blocks with less than a quarter bare are filled in from
        their neighbours.
    """
    q, count = block_quantiles(evidence, bare, block, (0.05, 0.5))
    ok = well_read(count, block)
    weight = ok.astype(np.float32)
    level = fill_and_smooth(q[1], weight, 1.5)
    sigma = _noise_grid(q[1] - q[0], ok)
    qs, count_s = block_quantiles(
        smoothed - upsample(level, block, evidence.shape), bare, block, (0.05, 0.5)
    )
    ok_s = well_read(count_s, block)
    sigma_s = _noise_grid(qs[1] - qs[0], ok_s)
    shape = evidence.shape
    return LevelMaps(
        bare=upsample(level, block, shape),
        sigma=np.maximum(
            upsample(fill_and_smooth(sigma, weight, 1.5), block, shape), EVIDENCE_FLOOR
        ),
        sigma_spot=np.maximum(
            upsample(fill_and_smooth(sigma_s, ok_s.astype(np.float32), 1.5), block, shape),
            EVIDENCE_FLOOR,
        ),
    )


def _noise_grid(spread: np.ndarray, ok: np.ndarray) -> np.ndarray:
    """Noise per block from the (median - 5th percentile) spread of its bare pixels.

    A block is never taken as quieter than half the photo's typical block: a block of
    flat JPEG colour has almost no spread but is no more trustworthy than its neighbours.
    """
    sigma = np.nan_to_num(spread / 1.645)
    if ok.any():
        sigma = np.maximum(sigma, 0.5 * float(np.median(sigma[ok])))
    return sigma.astype(np.float32)
