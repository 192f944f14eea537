"""Contacts: from the evidence and its local levels to the contact marks.

A contact is decided in four steps, each a rule a fitter would recognise:

1. **Seeds** -- where the print is unmistakably marked: the evidence, smoothed at the
   scale of the smallest spot, stands several noise levels above the bare metal *and* a
   share of the compound's local level.  The second test is what keeps a thin smear of
   compound (haze) and the colour fringes of bright scrape facets out, however wide they
   are, while a spot washed pale by glare still counts (glare lowers the local compound
   level with it).
2. **Growth** -- from each seed, every connected pixel whose evidence is still clearly
   above the bare noise: the pale rim of a spot belongs to the spot.
3. **Separation** -- neighbouring contacts often touch once blurred.  The grown region is
   cut along the valleys of the evidence between its peaks (a watershed), and two
   neighbours stay apart when the evidence between them dips below a share of the weaker
   one's peak: two contacts have bare metal, or at least thinner compound, between them;
   one irregular contact does not.  Each contact then keeps the pixels above a share of
   its own peak (its rim, where the film thins to nothing), and a one-pixel gap is cut
   where two contacts meet, so that they are counted apart.
4. **Clean-up** -- small holes in a contact (a glint) are filled.

With compound on the work the same steps run on the share of the way from the local coat
level to the bare metal: a worn-through contact is where the coat is more than half gone.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import cv2
import numpy as np

from printcheck.sparecore import on_spare_core, spare_core_helps

__all__ = [
    "disc",
    "seeds_and_growth",
    "separate",
    "contact_labels",
    "watershed_regions",
    "merge_regions",
    "Boundary",
    "boundary",
    "finish",
    "fill_small_holes",
    "drop_edge_slivers",
    "near_another",
]


def flat_where(mask: np.ndarray) -> np.ndarray:
    """Row-major flat indices of the true pixels of a 2-D bool mask (``np.flatnonzero``).

    NumPy 2 finds them in bool masks several times faster than OpenCV's ``findNonZero``
    where a mask is not sparse (a fifth of the frame or more: 0.5 against 2-3 ms on a
    0.7 MP mask), and as fast where it is."""
    return np.flatnonzero(np.asarray(mask, dtype=bool))


def disc(radius: int) -> np.ndarray:
    """An elliptic (disc) structuring element of ``radius`` pixels, for OpenCV's morphology."""
    return cv2.getStructuringElement(cv2.MORPH_ELLIPSE, (2 * radius + 1, 2 * radius + 1))


def seeds_and_growth(seeds: np.ndarray, grow: np.ndarray) -> np.ndarray:
    """The pixels of ``grow`` 8-connected to a pixel of ``seeds`` (hysteresis)."""
    n, lab = cv2.connectedComponents(grow.view(np.uint8), connectivity=8, ltype=cv2.CV_32S)
    if n <= 1:
        return np.zeros(grow.shape, bool)
    keep = np.zeros(n, bool)
    keep[lab[seeds & grow]] = True
    keep[0] = False
    return np.take(keep, lab)


def separate(
    region: np.ndarray,
    seeds: np.ndarray,
    height: np.ndarray,
    *,
    px_per_mm: float,
    split_share: float,
    min_dip: float,
    rim_share: float | None,
    score: np.ndarray | None = None,
    large_lobes_deeper: bool = True,
) -> np.ndarray:
    """Cut ``region`` into contacts along the valleys of ``height``.

    Parameters
    ----------
    region : (M, N) bool ndarray
        The grown contact region.
    seeds : (M, N) bool ndarray
        A contact must hold a seed pixel.
    height : (M, N) float32 ndarray
        The evidence smoothed at spot scale (what the valleys are read on).
    px_per_mm : float
    split_share : float
        Two neighbours stay apart when the highest point of the valley between them is
        below ``split_share`` times the lower of their peaks ...
    min_dip : float
        ... and at least ``min_dip`` below it (noise units of ``height``).
    rim_share : float or None
        Each contact keeps its pixels above ``rim_share`` times its own peak of
        ``score``; None keeps the whole region.
    score : (M, N) float32 ndarray, optional
        The evidence the rim is cut on (default ``height``).
    large_lobes_deeper : bool
        Between lobes over 1.5 mm across, ask for a deeper valley (down to 0.4 of
        ``split_share`` at 3 mm): a real gap between large lobes shows deep, so a shallow
        valley there is the film thinning within one contact.  With compound on the work
        the coat between two worn-through contacts never belongs to either: off.

    Returns
    -------
    (M, N) bool ndarray
        The contacts, with a one-pixel gap wherever two of them would touch.
    """
    labels = contact_labels(
        region,
        height,
        px_per_mm=px_per_mm,
        split_share=split_share,
        min_dip=min_dip,
        large_lobes_deeper=large_lobes_deeper,
        seeds=seeds,
    )
    return finish(labels, seeds, height, rim_share=rim_share, score=score)


def contact_labels(
    region: np.ndarray,
    height: np.ndarray,
    *,
    px_per_mm: float,
    split_share: float,
    min_dip: float,
    large_lobes_deeper: bool = True,
    seeds: np.ndarray | None = None,
) -> np.ndarray:
    """Label image of the contacts ``region`` holds (see :func:`separate`), rims uncut."""
    if not region.any():
        return np.zeros(region.shape, np.int32)
    regions, n = watershed_regions(region, height, px_per_mm=px_per_mm, seeds=seeds)
    rule = {"split_share": split_share, "min_dip": min_dip, "px_per_mm": px_per_mm}
    return merge_regions(regions, n, height, large_lobes_deeper=large_lobes_deeper, **rule)


def watershed_regions(
    region: np.ndarray,
    height: np.ndarray,
    *,
    px_per_mm: float,
    seeds: np.ndarray | None = None,
) -> tuple[np.ndarray, int]:
    """The watershed regions of ``region`` (labels, largest label); see :func:`separate`.

    Cut once on the loosest of several decisions, they serve the stricter ones too: a
    stricter decision keeps a subset of the grown components, and its regions are those
    regions restricted to it (:func:`merge_regions` then joins what its own rule joins).
    """
    if not region.any():
        return np.zeros(region.shape, np.int32), 0
    return _watershed(region, height, px_per_mm, seeds)


def finish(
    labels: np.ndarray,
    seeds: np.ndarray,
    height: np.ndarray,
    *,
    rim_share: float | None,
    score: np.ndarray | None = None,
    min_core_px: float = 0.0,
    level: np.ndarray | None = None,
    rejoin_px: int = 0,
    rim_of_film: float | None = None,
    film_depth_px: float = 2.0,
    hidden: np.ndarray | None = None,
) -> np.ndarray:
    """Cut each contact at ``rim_share`` of its peak, keep those with a seed (and, with
    ``min_core_px``, at least that many pixels above half their peak, or with ``level``
    as much evidence in all as that many pixels at the compound's full level), carve
    gaps.

    The half-height footprint of a speck smaller than the blur does not grow past the
    blur's; but a small contact whose film thins to its rim (a dome) keeps only a part
    of its area above half its peak.  Its evidence in all, over the compound's level
    where it lies (``level``, (M, N)), is its area whatever the blur: blur spreads the
    evidence but keeps its sum.

    With ``rim_of_film``, each contact's outline is drawn again at that share of its
    film's level just inside the first outline (:func:`_film_shares`), where the film
    lies ``film_depth_px`` inside it, clear of the blur; where the surface is
    ``hidden`` ((M, N) bool, a card's cut-out), a contact the card cuts has no edge.

    With ``rejoin_px``, lobes of one contact that the rim cut parted are joined again
    across a neck up to twice that wide (:func:`_rejoined`)."""
    # on the contact pixels alone, by their flat indices (row-major, as numpy orders them)
    idx = flat_where(labels > 0)
    lab = labels.ravel()[idx].astype(np.intp)  # a table lookup by intp is the fastest
    if rim_share is not None:
        sc = (height if score is None else score).ravel()[idx]
        n = int(labels.max()) + 1
        peak = _label_max(lab, sc, n)
        keep = sc > (rim_share * peak)[lab]
        if rim_of_film is not None:
            of_peak = np.where(peak > 0, rim_of_film / np.where(peak > 0, peak, 1), np.nan)
            share = _film_shares(
                labels.shape, idx, lab, sc, keep, n, film_depth_px, of_peak, rim_share, hidden
            )
            keep = sc > (share * peak)[lab]
        if min_core_px > 0:
            core = np.bincount(lab[sc > (0.5 * peak)[lab]], minlength=n)
            if level is not None:
                core = np.maximum(core, _mass_px(lab, sc, level.ravel()[idx], n))
            small = core < min_core_px
            small[0] = False
            keep &= ~small[lab]
        idx, lab = idx[keep], lab[keep]
    has_seed = np.zeros(int(labels.max()) + 1, bool)
    has_seed[lab[seeds.ravel()[idx]]] = True
    keep = has_seed[lab]
    idx, lab = idx[keep], lab[keep]
    kept = np.zeros(labels.size, labels.dtype)
    kept[idx] = lab
    kept = kept.reshape(labels.shape)
    idx = idx[~_carved(kept, idx, height)]
    mask, pieces, owner = _drop_crumbs(
        idx, kept, height, seeds=seeds, lobe_px=_LOBE_SPOTS * min_core_px
    )
    if rejoin_px > 0:
        mask = _rejoined(mask, labels, height, rejoin_px, pieces, owner)
    return mask


def _film_shares(
    shape: tuple[int, int],
    idx: np.ndarray,
    lab: np.ndarray,
    sc: np.ndarray,
    keep: np.ndarray,
    n: int,
    depth_px: float,
    of_peak: np.ndarray,
    default: float,
    hidden: np.ndarray | None = None,
) -> np.ndarray:
    """Each of ``n`` labels' rim share of its peak: ``of_peak`` (the share of the film
    asked, over each peak) times the mean value of its pixels between ``depth_px`` and a
    pixel more inside its first outline (``keep`` of the pixels ``idx``, labelled
    ``lab``, valued ``sc``); ``default`` where it has none so deep.  Never above half
    the peak (a blurred step's edge), nor above ``default`` where that is higher.

    The depth is taken from the outer edge of the film alone: a hole in a contact (its
    middle worn through) is not where its film ends, nor is ``hidden`` surface (a card's
    cut-out, under which a contact it cuts goes on).

    A contact's film thins towards its rim, by as much as a print's compound and its
    pressure make it: one contact's middle is several times darker than its rim, the
    next is almost flat.  The blur spreads the edge of the film where it ends, and the
    edge lies where the blurred film has fallen to a share of its level just inside,
    whatever its middle does; a share of the peak draws the outline of a contact with a
    dark middle too far in.  The film's level is read where the blur no longer reaches
    (two blur sigmas in), the share of it (:attr:`printcheck.segment.SegmentConfig.
    rim_of_film`) holds on the prints of both renderers the project is measured on."""
    first = np.zeros(shape[0] * shape[1], np.uint8)
    first[idx[keep]] = 1
    # a speck too small to hold a ring of film that deep does not part a hole from the
    # contact round it (a grain of compound left in a worn-through middle)
    speck = np.bincount(lab[keep], minlength=n) < math.pi * (depth_px + 1.0) ** 2
    wall = keep & ~speck[lab]
    first = _holes_filled(first.reshape(shape), idx[wall], lab[wall])
    if hidden is not None:
        first[hidden] = 1
    inside = cv2.distanceTransform(first, cv2.DIST_L2, cv2.DIST_MASK_3)
    depth = inside.ravel()[idx]
    ring = keep & (depth >= depth_px) & (depth < depth_px + 1.0)
    count = np.bincount(lab[ring], minlength=n)
    total = np.bincount(lab[ring], sc[ring].astype(np.float64), minlength=n)
    film = total / np.maximum(count, 1)
    share = np.where((count > 0) & np.isfinite(of_peak), of_peak * film, default)
    return np.minimum(share, max(0.5, default)).astype(np.float32)


def _holes_filled(mask: np.ndarray, at: np.ndarray, lab: np.ndarray) -> np.ndarray:
    """``mask`` (uint8, 0 or 1) with 1 in every part of its 0s (4-connected) that does
    not reach the frame's border and whose 4-neighbours are all of one contact: the
    pixels ``at`` (flat, ascending) labelled ``lab``; bare metal that several contacts
    enclose between them stays bare, and neighbours not among ``at`` part nothing."""
    holes = _enclosed(mask == 0)
    if not holes.any() or not at.size:
        return mask
    n, parts = cv2.connectedComponents(holes.view(np.uint8), connectivity=4, ltype=cv2.CV_32S)
    # each hole's neighbouring contacts: (hole, label) pairs across the four sides, on
    # the holes' own pixels (none lies on the frame's border, so every side is inside)
    px = flat_where(holes)
    hole = parts.ravel()[px].astype(np.int64)
    m = int(lab.max()) + 1
    keys = []
    for step in (1, -1, mask.shape[1], -mask.shape[1]):
        side = px + step
        where = np.minimum(np.searchsorted(at, side), at.size - 1)
        on = at[where] == side
        keys.append(hole[on] * m + lab[where[on]])
    pairs = np.unique(np.concatenate(keys))
    one = np.bincount((pairs // m).astype(np.intp), minlength=n) == 1
    one[0] = False
    out = mask.copy()
    out.ravel()[px[one[hole]]] = 1
    return out


def _rejoined(
    mask: np.ndarray,
    labels: np.ndarray,
    height: np.ndarray,
    r: int,
    pieces: np.ndarray,
    owner: np.ndarray,
) -> np.ndarray:
    """``mask`` with the lobes of one contact (``labels``) that the rim cut parted joined
    again across a neck narrower than ``2 r`` pixels (what a morphological closing of
    those lobes adds of their contact's own pixels, where it touches two lobes of it; a
    gap is carved again wherever two contacts would touch): the valleys between them
    decided they are one contact, and the rim alone does not part it in two.
    ``pieces`` and ``owner``: the mask's pieces and their contacts (:func:`_drop_crumbs`)."""
    multi = np.bincount(owner[1:], minlength=int(labels.max()) + 1) > 1
    multi[0] = False
    if not multi.any():
        return mask
    multi_px = np.take(multi, labels)
    lobes = mask & multi_px
    closed = cv2.morphologyEx(lobes.view(np.uint8), cv2.MORPH_CLOSE, disc(r)).view(bool)
    added = closed & multi_px & ~mask
    # only the necks: an added piece that touches two lobes or more of its own contact
    # (not a bay filled, nor two contacts grown toward each other)
    m, bits = cv2.connectedComponents(added.view(np.uint8), connectivity=8, ltype=cv2.CV_32S)
    if m <= 1:
        return mask
    at = flat_where(bits > 0)
    here, lab_here = bits.ravel()[at], labels.ravel()[at]
    pairs = []
    for nb_at, inside in _neighbours(at, mask.shape, _EIGHT):
        nb = np.where(inside, pieces.ravel()[nb_at], 0)
        same = (nb > 0) & (owner[nb] == lab_here)
        pairs.append(np.stack([here[same], nb[same]]))
    touch = np.unique(np.concatenate(pairs, axis=1), axis=1)
    necks = np.bincount(touch[0], minlength=m) >= 2
    necks[0] = False
    joined = mask | np.take(necks, bits)
    kept = np.where(joined, labels, 0)
    idx = flat_where(joined)
    out = np.zeros(mask.shape, bool)
    out.ravel()[idx[~_carved(kept, idx, height)]] = True
    return out


def _mass_px(lab: np.ndarray, score: np.ndarray, level: np.ndarray, n: int) -> np.ndarray:
    """Each label's evidence in all (above zero) over ``level`` where it lies, in pixels
    (the compound's level varies slowly: any one pixel of the label gives it); ``lab``,
    ``score`` and ``level`` are the contact pixels' labels and values."""
    mass = np.bincount(lab, weights=np.maximum(score, 0.0), minlength=n)
    at = np.zeros(n, np.float64)
    at[lab] = level
    return np.asarray(mass / np.maximum(at, 1e-6))


#: A piece the rim cut parts from the rest of its contact is a lobe, not a crumb of its
#: halo, when it holds a seed and at least this many smallest spots' area ...
_LOBE_SPOTS = 10.0
#: ... and this share of the contact's area.
_LOBE_SHARE = 0.25


def _drop_crumbs(
    idx: np.ndarray,
    labels: np.ndarray,
    height: np.ndarray,
    *,
    seeds: np.ndarray | None = None,
    lobe_px: float = 0.0,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The mask of the contact pixels ``idx`` (flat) of ``labels``: cutting a contact's
    rim may leave crumbs of its halo apart from it: the piece holding the contact's
    highest point is the contact.  A large piece with a seed (``lobe_px`` pixels and
    :data:`_LOBE_SHARE` of the contact) is a lobe whose neck thins below the rim's
    share: it is contact too (the rim says where contact ends), not a crumb to drop.

    Also the mask's 8-connected pieces (label image) and each piece's contact (0 for a
    crumb dropped): the pieces left are those of the mask, whole pieces being dropped."""
    mask = np.zeros(labels.shape, bool)
    mask.ravel()[idx] = True
    n, pieces, piece, owner, split = _pieces_of(mask, idx, labels)
    if not split.any():
        return mask, pieces, owner
    lab = labels.ravel()[idx].astype(np.intp)  # a table lookup by intp is the fastest
    sel = split[lab]
    flat = idx[sel]
    lab_f = lab[sel]
    keep = np.ones(n, bool)
    keep[np.unique(piece[sel])] = False
    keep[pieces.ravel()[_highest(flat, lab_f, height.ravel()[flat])]] = True
    if seeds is not None and lobe_px > 0:
        seeded = np.zeros(n, bool)
        seeded[piece[seeds.ravel()[idx]]] = True
        size = np.bincount(piece, minlength=n)
        whole = np.bincount(lab, minlength=int(labels.max()) + 1)[owner]
        keep |= seeded & (size >= np.maximum(lobe_px, _LOBE_SHARE * whole))
    mask.ravel()[idx[~keep[piece]]] = False
    owner[~keep] = 0
    return mask, pieces, owner


def _highest(flat: np.ndarray, lab: np.ndarray, values: np.ndarray) -> np.ndarray:
    """Of the pixels ``flat`` (ascending) labelled ``lab``, each label's highest by
    ``values``, the last of them where several are as high (a NaN above any number): the
    last of each label in ``np.lexsort((values, lab))``, found by two maxima per label
    in place of the sort."""
    if np.isnan(values).any():
        order = np.lexsort((values, lab))
        return np.asarray(flat[order][np.r_[lab[order][1:] != lab[order][:-1], True]])
    n = int(lab.max()) + 1
    peak = np.full(n, -np.inf, values.dtype)
    np.maximum.at(peak, lab, values)
    top = np.flatnonzero(values == peak[lab])
    last = np.full(n, -1, np.intp)
    np.maximum.at(last, lab[top], top)
    return np.asarray(flat[last[last >= 0]])


def _pieces_of(
    mask: np.ndarray, idx: np.ndarray, labels: np.ndarray
) -> tuple[int, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """The 8-connected pieces of ``mask`` (its pixels ``idx``, flat) and the contacts of
    ``labels`` they belong to: (number of pieces with the background, the pieces' label
    image, each pixel's piece, each piece's contact, which contacts are in more than one
    piece)."""
    n, pieces = cv2.connectedComponents(mask.view(np.uint8), connectivity=8, ltype=cv2.CV_32S)
    piece = pieces.ravel()[idx]
    owner = np.zeros(n, np.int64)
    owner[piece] = labels.ravel()[idx]
    split = np.bincount(owner[1:], minlength=int(labels.max()) + 1) > 1
    split[0] = False
    return n, pieces, piece, owner, split


def _label_max(lab: np.ndarray, values: np.ndarray, n: int) -> np.ndarray:
    """Each of ``n`` labels' highest value (float32) over pixels labelled ``lab`` with
    ``values``; +inf for the background, label 0 (so nothing is ever above it)."""
    peak = np.full(n, -np.inf, np.float32)
    np.maximum.at(peak, lab, values)
    peak[0] = np.inf
    return peak


def _watershed(
    region: np.ndarray, height: np.ndarray, px_per_mm: float, seeds: np.ndarray | None = None
) -> tuple[np.ndarray, int]:
    """Watershed regions of ``-height`` in ``region``, one per local peak (0.15 mm apart;
    with ``seeds``, only peaks on a seed: a contact cannot start anywhere else).

    Only the parts of ``region`` that hold two peaks or more are cut; the rest stay
    whole.  Returns the labels and the largest label.
    """
    from skimage.segmentation import watershed

    k = max(1, int(round(0.15 * px_per_mm)))
    peaks = (height >= cv2.dilate(height, disc(k))) & region
    if seeds is not None:
        peaks &= seeds
    n, comp = cv2.connectedComponents(region.view(np.uint8), connectivity=8, ltype=cv2.CV_32S)
    pn, markers = cv2.connectedComponents(peaks.view(np.uint8), connectivity=8, ltype=cv2.CV_32S)
    comp_of_peak = np.zeros(pn, np.int64)
    comp_of_peak[markers[peaks]] = comp[peaks]
    multi = np.bincount(comp_of_peak[1:], minlength=n) >= 2
    multi[0] = False
    if not multi.any():
        return comp, n - 1
    # a watershed over the parts that hold two peaks or more; markers numbered after the
    # components so that the labels stay apart
    cut = np.take(multi, comp)
    labels = comp.copy()
    # water rising in one part never reaches another, and within a part the order it
    # floods in does not depend on the others: where a spare core helps, the parts are
    # flooded in two bands of rows at once (skimage's flooding releases the GIL), those
    # reaching above the row that halves the work and the rest
    bands = [cut]
    if spare_core_helps(region.size):
        half = int(np.searchsorted(np.cumsum(np.count_nonzero(cut, axis=1)), cut.sum() // 2))
        upper = np.zeros(n, bool)
        upper[comp[:half][cut[:half]]] = True
        bands = [np.take(part, comp) for part in (multi & upper, multi & ~upper) if part.any()]

    def flood(mask: np.ndarray) -> tuple[slice, np.ndarray, np.ndarray]:
        used = np.flatnonzero(mask.any(axis=1))
        rows = slice(int(used[0]), int(used[-1]) + 1)
        mask, seeds_in = mask[rows], markers[rows]
        ws = watershed(  # type: ignore[no-untyped-call]
            -height[rows],
            markers=np.where(mask & (seeds_in > 0), seeds_in + n, 0),
            mask=mask,
            connectivity=2,
        )
        return rows, mask, ws

    later = [on_spare_core(region.size, flood, band) for band in bands[1:]]
    for rows, mask, ws in [flood(bands[0])] + [f.result() for f in later]:
        labels[rows][mask] = ws[mask]
    return labels, int(labels.max())


def merge_regions(
    regions: np.ndarray,
    n: int,
    height: np.ndarray,
    *,
    split_share: float,
    min_dip: float,
    px_per_mm: float,
    large_lobes_deeper: bool = True,
    min_low: float = -math.inf,
    shared: Boundary | None = None,
) -> np.ndarray:
    """Join neighbouring watershed regions unless the valley between them is deep.

    Regions are merged in order of their highest shared boundary point (the saddle), as
    water rising from the peaks would join them; two stay apart when the saddle is below
    ``split_share`` of the lower peak and at least ``min_dip`` below it (and, with
    ``min_low``, the lower peak reaches that).

    ``shared``: the :class:`Boundary` on ``height`` of a label image of which
    ``regions`` is part (the same labels, or 0), where several decisions cut the same
    watershed: read, not found again.
    """
    if n <= 1:
        return regions
    # on the regions' pixels alone, by their flat indices
    idx = flat_where(regions > 0)
    lab = regions.ravel()[idx].astype(np.intp)
    peak = _label_max(lab, height.ravel()[idx], n + 1).astype(np.float64)
    area = np.bincount(lab, minlength=n + 1).astype(np.float64)
    touching = boundary(regions, n, height) if shared is None else shared.within(regions)
    keys, saddles = touching.saddles()
    # the merging goes pair by pair, each decision on the merges before it: on Python
    # lists and floats, many times faster one at a time than numpy's scalars
    parent = list(range(n + 1))

    def find(i: int) -> int:
        root = i
        while parent[root] != root:
            root = parent[root]
        while parent[i] != root:
            parent[i], i = root, parent[i]
        return root

    top = peak.tolist()
    size = area.tolist()
    small_px = (0.75 * px_per_mm) ** 2 * math.pi  # a lobe 1.5 mm across
    order = np.argsort(-saddles, kind="stable")
    pairs = zip(
        (keys[order] // (n + 1)).tolist(),
        (keys[order] % (n + 1)).tolist(),
        saddles[order].tolist(),
        strict=True,
    )
    for first, second, saddle in pairs:
        a, b = find(first), find(second)
        if a == b:
            continue
        low = min(top[a], top[b])
        # lobes up to 1.5 mm across: a shallow valley may be a gap the blur filled in;
        # between lobes twice that, a gap would show deep, so a shallow valley is the
        # film thinning within one contact
        share = split_share
        if large_lobes_deeper:
            across = math.sqrt(min(size[a], size[b]) / small_px)
            share *= min(max(2.0 - across, 0.4), 1.0)
        if saddle < share * low and low - saddle >= min_dip and low >= min_low:
            continue
        parent[b] = a
        top[a] = max(top[a], top[b])
        size[a] += size[b]
    # every region's root, by pointer jumping
    roots = np.asarray(parent, dtype=np.int32)
    while not np.array_equal(jumped := roots[roots], roots):
        roots = jumped
    out = np.zeros(regions.size, np.int32)
    out[idx] = roots[lab]
    return out.reshape(regions.shape)


@dataclass(frozen=True, eq=False)
class Boundary:
    """Every pair of 8-neighbour pixels of a label image that lie in two regions: their
    flat indices ``p`` and ``q``, their regions' key ``a * (n + 1) + b`` (a < b) and the
    lower of their heights (float64), sorted by key (stably)."""

    key: np.ndarray
    p: np.ndarray
    q: np.ndarray
    low: np.ndarray

    def within(self, regions: np.ndarray) -> Boundary:
        """The pairs of which both pixels lie in a region of ``regions``: the same label
        image with any of its pixels set to 0 (a decision's growth within the watershed)."""
        flat = regions.ravel()
        sel = (flat[self.p] != 0) & (flat[self.q] != 0)
        return Boundary(self.key[sel], self.p[sel], self.q[sel], self.low[sel])

    def saddles(self) -> tuple[np.ndarray, np.ndarray]:
        """Each pair of touching regions (its key) and its saddle: the highest of the
        lower heights along their shared boundary."""
        if not self.key.size:
            return np.zeros(0, np.int64), np.zeros(0)
        starts = np.flatnonzero(np.r_[True, self.key[1:] != self.key[:-1]])
        return self.key[starts], np.maximum.reduceat(self.low, starts)


def boundary(regions: np.ndarray, n: int, height: np.ndarray) -> Boundary:
    """The :class:`Boundary` of ``regions`` (labels 1..``n``, 0 none) on ``height``,
    found from the pixels where two regions touch (each pair of neighbours met once,
    from the first in row-major order)."""
    lab = regions.ravel()
    hf = height.ravel()  # in its own type: the lower heights are its values
    at = _touching(regions)
    here = lab[at]
    keys_l, p_l, q_l, low_l = [], [], [], []
    for nb_at, inside in _neighbours(at, regions.shape, _FORWARD):
        nb = np.where(inside, lab[nb_at], 0)
        sel = (nb != 0) & (nb != here)
        if sel.any():
            a, b = here[sel].astype(np.int64), nb[sel].astype(np.int64)
            keys_l.append(np.minimum(a, b) * (n + 1) + np.maximum(a, b))
            p_l.append(at[sel])
            q_l.append(nb_at[sel])
            low_l.append(np.minimum(hf[at[sel]], hf[nb_at[sel]]))
    if not keys_l:
        none = np.zeros(0, np.intp)
        return Boundary(none.astype(np.int64), none, none, np.zeros(0))
    keys = np.concatenate(keys_l)
    order = np.argsort(keys, kind="stable")
    return Boundary(
        keys[order],
        np.concatenate(p_l)[order],
        np.concatenate(q_l)[order],
        np.concatenate(low_l).astype(np.float64)[order],
    )


def _carved(labels: np.ndarray, idx: np.ndarray, height: np.ndarray) -> np.ndarray:
    """Of the contact pixels ``idx`` (flat indices of ``labels``, all its labelled
    pixels), those removed to leave a gap where two contacts touch (the lower side)."""
    # only the pixels where two contacts touch can be removed: a few in a hundred
    lab = labels.ravel()
    hf = height.ravel()
    at = _touching(labels)
    here, h = lab[at], hf[at]
    drop = np.zeros(at.size, bool)
    for nb_at, inside in _neighbours(at, labels.shape, _EIGHT):
        nb = np.where(inside, lab[nb_at], 0)
        nh = hf[nb_at]
        drop |= (nb > 0) & (nb != here) & ((h < nh) | ((h == nh) & (here < nb)))
    out = np.zeros(labels.size, bool)
    out[at[drop]] = True
    return out[idx]


#: The 8-neighbours of a pixel (row, column steps), and the four of them that follow it
#: in row-major order (each pair of neighbours is met once from the first of them).
_EIGHT = ((-1, -1), (-1, 0), (-1, 1), (0, -1), (0, 1), (1, -1), (1, 0), (1, 1))
_FORWARD = ((0, 1), (1, -1), (1, 0), (1, 1))
_SQUARE = np.ones((3, 3), np.uint8)


def near_another(labels: np.ndarray, reach: int = 1) -> np.ndarray:
    """The labelled pixels of ``labels`` ((M, N) int, 0 unlabelled) with a pixel of
    another label, not 0, within ``reach`` pixels along rows and columns (a square of
    side 2 ``reach`` + 1; beyond the frame, no label), (M, N) bool: the highest label in
    the square (a dilation) or the lowest one (an erosion of the labels less one, in
    which the unlabelled pixels stand above every label: 16-bit labels wrap round to the
    highest value, wider ones are set to infinity) differs from the pixel's own."""
    kind = np.uint16 if int(labels.max(initial=0)) < np.iinfo(np.uint16).max else np.float64
    square = _SQUARE if reach == 1 else np.ones((2 * reach + 1, 2 * reach + 1), np.uint8)
    u = labels.astype(kind)
    high = cv2.dilate(u, square)  # beyond the frame: below any label (OpenCV's default)
    if kind is np.uint16:
        less = u - np.uint16(1)
    else:
        less = np.where(labels > 0, u - 1.0, np.inf)
    low = cv2.erode(less, square)  # beyond the frame: above any label
    return np.asarray((u > 0) & ((high != u) | (low != less)))


def _touching(labels: np.ndarray) -> np.ndarray:
    """Flat indices (ascending) of the labelled pixels of ``labels`` that have an
    8-neighbour of another label, not 0 (:func:`near_another`)."""
    return flat_where(near_another(labels))


def _neighbours(
    at: np.ndarray, shape: tuple[int, int], steps: tuple[tuple[int, int], ...]
) -> list[tuple[np.ndarray, np.ndarray]]:
    """For each (row, column) step, the flat indices of the pixels ``at``'s neighbours
    that way, and whether each is inside the frame (else the index is the pixel's own)."""
    h, w = shape
    r, c = np.divmod(at, w)
    out = []
    for dr, dc in steps:
        inside = np.ones(at.size, bool)
        if dr:
            inside &= (r + dr >= 0) & (r + dr < h)
        if dc:
            inside &= (c + dc >= 0) & (c + dc < w)
        out.append((np.where(inside, at + dr * w + dc, at), inside))
    return out


def _enclosed(free: np.ndarray) -> np.ndarray:
    """The pixels of ``free`` ((M, N) bool) that do not reach the frame's border through
    ``free`` (4-connected): the holes that the rest of the frame encloses.  Found by
    flooding from a one-pixel frame of ``free`` round the image."""
    framed = np.pad(free, 1, constant_values=True).view(np.uint8) * np.uint8(255)
    cv2.floodFill(framed, None, (0, 0), 0, flags=4)
    return framed[1:-1, 1:-1] > 0


def fill_small_holes(mask: np.ndarray, max_px: float, glare: np.ndarray | None) -> np.ndarray:
    """Fill holes of ``mask`` up to ``max_px`` pixels (20 times that when mostly glare)."""
    holes = _enclosed(~mask)
    if not holes.any():
        return mask
    n, lab = cv2.connectedComponents(holes.view(np.uint8), connectivity=4, ltype=cv2.CV_32S)
    at = flat_where(holes)
    hole = lab.ravel()[at]
    area = np.bincount(hole, minlength=n)
    fill = area <= max_px
    if glare is not None and glare.any():
        glare_px = np.bincount(hole[glare.ravel()[at]], minlength=n)
        fill |= (area <= 20 * max_px) & (glare_px >= 0.5 * area)
    fill[0] = False
    if not fill.any():
        return mask
    out = mask.copy()
    out.ravel()[at[fill[hole]]] = True
    return out


def spot_scale_px(px_per_mm: float, mm: float) -> float:
    """A length in mm as pixels (for filters), never below a third of a pixel."""
    return max(mm * px_per_mm, 1.0 / 3.0) if math.isfinite(px_per_mm) else 1.0


def drop_edge_slivers(mask: np.ndarray, visible: np.ndarray, px_per_mm: float) -> np.ndarray:
    """Drop marks lying mostly in a thin band along the edge of ``visible``.

    Such a mark is the edge of a card's cut-out (white paper) or its shadow, shown
    through a registration error of a fraction of a millimetre: a strip at least 2 mm
    long and nowhere 0.4 mm wide; a real spot cut by the edge is shorter, wider, or keeps
    most of its area inside.  The band is ``max(1, 0.1 * px_per_mm)`` pixels
    wide.
    """
    w = max(1, int(round(0.1 * px_per_mm)))
    inner = cv2.erode(
        visible.view(np.uint8),
        np.ones((2 * w + 1, 2 * w + 1), np.uint8),
        borderType=cv2.BORDER_CONSTANT,
        borderValue=0,
    ).view(bool)
    band = mask & ~inner
    if not band.any():
        return mask
    n, lab, stats, _ = cv2.connectedComponentsWithStats(
        mask.view(np.uint8), connectivity=8, ltype=cv2.CV_32S
    )
    area = stats[:, cv2.CC_STAT_AREA]
    in_band = np.bincount(lab[band], minlength=n)
    long_side = np.maximum(stats[:, cv2.CC_STAT_WIDTH], stats[:, cv2.CC_STAT_HEIGHT])
    # a strip of paper runs along the edge: long, and nowhere 0.4 mm wide; a spot cut by
    # the edge is shorter, or wider somewhere
    r = max(1, int(round(0.2 * px_per_mm)))
    core = cv2.erode(
        mask.view(np.uint8), cv2.getStructuringElement(cv2.MORPH_ELLIPSE, (2 * r + 1, 2 * r + 1))
    ).view(bool)
    wide = np.bincount(lab[core], minlength=n) > 0
    strip = (long_side >= 2.0 * px_per_mm) & ~wide
    drop = (in_band > 0.5 * area) & strip
    drop[0] = False
    if not drop.any():
        return mask
    return np.asarray(mask & ~np.take(drop, lab), dtype=bool)
