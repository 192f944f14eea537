"""Segment: the contact mask of a rectified photo of a print.

One entry, :func:`segment`: the rectified photo and what it shows in, the contact mask
out, with two alternates from the same decision nudged toward fewer and toward more
contact (the measure stage turns them into the count's and the bearing's range).

The steps (see :mod:`printcheck.evidence`, :mod:`printcheck.field` and
:mod:`printcheck.contacts`):

1. the compound's colour, from ``config.compound`` or, with "auto", from the photo;
2. the colour evidence of every pixel, lightly smoothed; burnt-out highlights carry no
   colour and are left out, and a divisor channel clipped alone is rebuilt from its
   neighbour (:func:`printcheck.evidence.rebuilt_highlights`), a guess no contact may
   start from;
3. the local bare level and noise of the evidence, over the pixels that are not contact
   (what stands clearly above a coarse first estimate is left out of the fine one);
4. the local level of the compound, from the strongest marks nearby; and, where the
   compound darkens the metal, the brightness's relief (:func:`printcheck.field.relief_of`),
   kept at the photo's full resolution where the colour is not;
5. contacts: seeds (at half the share along the edge of what the photo shows, where a
   card cuts spots), growth, separation (on the relief where there is one), outlines (at
   a share of each contact's film just inside its edge, beyond the blur's reach),
   clean-up.

A surface covered in compound nearly everywhere has no bare level to judge against; it
is thresholded on the evidence itself, with a warning.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from concurrent.futures import Future
from dataclasses import dataclass, replace
from typing import Literal

import cv2
import numpy as np

from printcheck.contacts import (
    Boundary,
    boundary,
    disc,
    drop_edge_slivers,
    fill_small_holes,
    finish,
    flat_where,
    merge_regions,
    seeds_and_growth,
    separate,
    watershed_regions,
)
from printcheck.errors import OptionError, PhotoError
from printcheck.evidence import (
    CLIPPED,
    EVIDENCE_FLOOR,
    OWN_CHANNEL,
    choose_compound,
    compound_evidence,
    divisor_clipped,
    neutral_evidence,
    rebuilt_highlights,
)
from printcheck.field import Field, colour_spread_px, contact_field, map_median, relief_of
from printcheck.ranks import median, quantile, quantiles
from printcheck.sparecore import Later, on_spare_core

__all__ = ["SegmentConfig", "Segmentation", "segment", "compound_evidence"]

Compound = Literal["blue", "red", "auto"]
CompoundOn = Literal["reference", "work"]

# Evidence of a surface that is compound nearly everywhere, against a neutral: bare metal
# reads near 0 (about +-0.2 under a white-balance error the paper does not tell), a
# compound mark 0.7-1.8.
_COVERED_EVIDENCE = 0.4
# The compound's typical level in noise units below which no compound is there at all:
# bare scraped metal photographed without compound gives 2-3, the palest prints in the
# development photos 11 and more.
_NO_COMPOUND_CONTRAST = 5.0


@dataclass(frozen=True)
class SegmentConfig:
    """Options of the segment stage.

    Attributes
    ----------
    compound : {"auto", "blue", "red"}
        Colour of the marking compound; "auto" chooses it from the photo.
    compound_on : {"reference", "work"}
        "reference": the spots carry compound.  "work": the work was coated and the
        spots are where the reference rubbed it through.
    px_per_mm : float
        Resolution of the rectified image.
    background_mm : float
        Side of the blocks the local bare level and noise are measured in, mm.
    spot_mm : float
        Smoothing (Gaussian sigma, mm) matched to the smallest spot, for the seeds.
    seed_sigma : float
        A seed stands at least this many noise levels above the bare metal ...
    seed_share : float
        ... and at least this share of the compound's local level.
    grow_sigma : float
        A contact grows over connected pixels at least this many noise levels up, and
        over those inside it at spot scale (as far up as a seed, see :func:`with_body`).
    rim_share : float
        A contact's outline is first drawn at this share of its own peak (where its film
        thins to nothing at the rim); a contact too small for the film's level inside
        its edge to be read keeps that outline ...
    rim_of_film : float
        ... the others are drawn again at this share of the film's level just inside
        their first outline, beyond the reach of the photo's blur (see
        :func:`printcheck.contacts.finish`): how far a film thins towards its rim
        differs from print to print, and a share of the peak puts the outline too far
        in where the middle of a contact is much darker than its rim.  The second
        outline's share of the peak is held to half the peak (where a blurred step's
        edge lies), or to ``rim_share`` where that is higher.
    blur_px : float or None
        The photo's blur (Gaussian sigma) in the rectified image's pixels, where known
        (the card's edges say it): a contact's film is read two of it inside its first
        outline, clear of the blur.  None, or under a pixel: a pixel.
    min_spot_mm2 : float
        A mark is a contact when the part of it above half its peak covers at least this
        area: a speck smaller than the blur of the photo looks wider than it is, but its
        half-height footprint does not grow past the blur's.
    split_share : float
        Two touching contacts are counted apart when the evidence between them dips
        below this share of the weaker one's peak.
    local_mm : float
        Side of the blocks the compound's local level is read in, mm.
    coat_share : float
        Compound on the work: a contact is where more than this share of the way from
        the coat to bare metal is worn through ...
    coat_seed : float
        ... and it holds a point worn through at least this share.
    nudge : float
        How far the alternates move every threshold (1: the seed by 1.5 noise levels up
        toward fewer contacts, the seed share by half again either way, the rim shares
        by 0.4 times again (that of the film by 0.25 times toward more), the split share
        and the coat shares by 0.1; the default 1.5 times that); they bound the range
        the measure stage reports.  Toward more, the
        seed keeps its significance over the noise (see :func:`_nudged`).
    paper_bgr : (float, float, float) or None
        The white paper of the markers as this photo shows it (B, G, R, 8-bit), a
        neutral under its light: whether the window is coloured all over is judged
        against it, so that a strong colour cast is not taken for compound everywhere.
        None: judged against grey.
    """

    compound: Compound = "auto"
    compound_on: CompoundOn = "reference"
    px_per_mm: float = 10.0
    background_mm: float = 1.5
    spot_mm: float = 0.12
    seed_sigma: float = 5.0
    seed_share: float = 0.2
    grow_sigma: float = 3.0
    rim_share: float = 0.175
    rim_of_film: float = 0.3
    min_spot_mm2: float = 0.1
    split_share: float = 0.5
    local_mm: float = 8.0
    coat_share: float = 0.5
    coat_seed: float = 0.6
    nudge: float = 1.5
    paper_bgr: tuple[float, float, float] | None = None
    blur_px: float | None = None

    def __post_init__(self) -> None:
        if self.compound not in ("auto", "blue", "red"):
            raise OptionError(f"compound must be auto, blue or red, got {self.compound!r}")
        if self.compound_on not in ("reference", "work"):
            raise OptionError(f"compound_on must be reference or work, got {self.compound_on!r}")
        for name in (
            "px_per_mm",
            "background_mm",
            "spot_mm",
            "seed_sigma",
            "grow_sigma",
            "local_mm",
            "nudge",
        ):
            value = getattr(self, name)
            if not (isinstance(value, int | float) and math.isfinite(value) and value > 0):
                raise OptionError(f"{name} must be a number greater than zero, got {value!r}")
        if not (isinstance(self.min_spot_mm2, int | float) and self.min_spot_mm2 >= 0):
            raise OptionError(f"min_spot_mm2 must be zero or more, got {self.min_spot_mm2!r}")
        paper = self.paper_bgr
        if paper is not None and not (
            len(paper) == 3 and all(isinstance(v, int | float) and 0 <= v <= 255 for v in paper)
        ):
            raise OptionError(f"paper_bgr must be three levels from 0 to 255, got {paper!r}")
        blur = self.blur_px
        if blur is not None and not (
            isinstance(blur, int | float) and math.isfinite(blur) and blur >= 0
        ):
            raise OptionError(f"blur_px must be a number from 0 up, or None, got {blur!r}")
        for name in (
            "seed_share",
            "rim_share",
            "rim_of_film",
            "split_share",
            "coat_share",
            "coat_seed",
        ):
            value = getattr(self, name)
            if not (isinstance(value, int | float) and 0 <= value < 1):
                raise OptionError(f"{name} must be from 0 to below 1, got {value!r}")


@dataclass(frozen=True, eq=False)
class Segmentation:
    """Result of the segment stage.

    Attributes
    ----------
    mask : (M, N) bool ndarray
        The contacts, only where ``visible``; touching contacts are separated by a gap
        of at least one pixel (8-connected components are contacts).
    alternates : sequence of (M, N) bool ndarray
        The contacts decided with every threshold nudged toward less contact, and toward
        more (the measure stage's range).  They may still be in the making on a spare
        core when :func:`segment` returns (:class:`printcheck.sparecore.Later`): reading
        one waits for it.
    visible : (M, N) bool ndarray
        Where contact may be found.
    compound : {"blue", "red"}
    compound_on : {"reference", "work"}
    px_per_mm : float
    compound_level : float
        Typical evidence of the compound over bare metal (log-ratio units).
    noise : float
        Typical noise of the evidence over bare metal, at spot scale.
    glare_fraction : float
        Share of the visible surface burnt out (no colour).
    warnings : tuple of str
    glare : (M, N) bool ndarray or None
        The burnt-out pixels (no colour: what they hide cannot be seen).
    washed : (M, N) bool ndarray or None
        Pixels, not burnt out, whose compound's own channel is at its ceiling (blue of
        blue compound, red of red) and whose colour still reads above the bare metal's:
        the colour read there is only a lower bound, so more of a pale contact may lie
        there than was found.  Outside the contacts, the measure stage counts them,
        with the glare, as surface it could not see (its range).
    part_px : float
        Photo pixels of bare metal two neighbouring contacts needed between them for
        this segmentation to part them (the measure stage's ``part_px``):
        :data:`PART_ON_BRIGHTNESS_PX` where they were cut apart on the brightness,
        :data:`PART_ON_COLOUR_PX` where on the colour.
    outline_share : float
        Where on a contact's edge its outline is drawn, as a share of the way from the
        background (bare metal; the coat, with compound on the work) to the contact (the
        measure stage's ``outline_share``): the rim share of its peak on the reference,
        low on the blurred edge; the coat share on the work; half the compound's level
        where the compound covers nearly everything.
    clear : (M, N) bool ndarray or None
        Pixels whose colour stands clear of the noise: at least :data:`CLEAR_STEP` times
        the significance a seed needs (compound on the reference).  A contact with no
        such pixel barely stands out: the measure stage counts those, and where many of
        a print's contacts are that faint, as many again may lie below the noise, unseen
        (its range).  None on the work, where a contact is judged by how much of the
        coat is worn through rather than by its significance alone, and where the
        compound covers nearly everything.
    """

    mask: np.ndarray
    alternates: Sequence[np.ndarray]
    visible: np.ndarray
    compound: str
    compound_on: str
    px_per_mm: float
    compound_level: float
    noise: float
    glare_fraction: float
    warnings: tuple[str, ...] = ()
    glare: np.ndarray | None = None
    washed: np.ndarray | None = None
    part_px: float = 3.0
    outline_share: float = 0.5
    clear: np.ndarray | None = None

    @property
    def unseen(self) -> np.ndarray | None:
        """Where contact could not be seen, or only partly: the glare and the washed."""
        if self.glare is None or self.washed is None:
            return self.glare
        return self.glare | self.washed


def segment(
    image: np.ndarray,
    *,
    visible: np.ndarray,
    analysed: np.ndarray | None = None,
    config: SegmentConfig = SegmentConfig(),
) -> Segmentation:
    """Find the contact marks of a rectified photo.

    Parameters
    ----------
    image : (M, N, 3) uint8 ndarray, BGR
        The rectified photo (not modified).
    visible : (M, N) bool ndarray
        Where the photo shows surface that may hold contact; nothing outside is contact.
    analysed : (M, N) bool ndarray, optional
        The analysed window; the photo's statistics are read there (default: visible).
    config : SegmentConfig

    Returns
    -------
    Segmentation
    """
    image, visible, analysed = _checked(image, visible, analysed)
    s = float(config.px_per_mm)
    warnings: list[str] = []
    compound = _colour(image, analysed, config, warnings)
    glare = _burnt_out(image) & visible
    valid = visible & ~glare
    stat = analysed & valid
    glare_fraction = _share(glare, analysed)
    if glare_fraction > 0.05:
        warnings.append(
            f"highlights are burnt out over {100 * glare_fraction:.0f}% of the window; spots "
            "there cannot be seen: shade the light or move it and retake the photo"
        )
    evidence = compound_evidence(image, compound)
    washed = None
    if config.compound_on == "reference":
        evidence = rebuilt_highlights(evidence, image, compound, stat)
        own = image[..., OWN_CHANNEL[compound]] >= CLIPPED
        washed = own & visible & ~glare
        washed_fraction = _share(washed, analysed)
        if washed_fraction > 0.05:
            warnings.append(
                f"the {compound} of the compound is at its brightest over "
                f"{100 * washed_fraction:.0f}% of the window, where pale spots may be "
                "missed (the range allows for them): lower the exposure or the light"
            )
    else:
        evidence = -evidence
    evidence = cv2.GaussianBlur(evidence, (0, 0), 0.4)  # pixel noise; an edge moves < 0.4 px

    def result(
        mask: np.ndarray,
        alternates: Sequence[np.ndarray],
        level: float,
        noise: float,
        part_px: float = PART_ON_COLOUR_PX,
        outline_share: float = (
            config.rim_share if config.compound_on == "reference" else config.coat_share
        ),
        clear: np.ndarray | None = None,
    ) -> Segmentation:
        return Segmentation(
            mask=mask,
            alternates=alternates,
            visible=visible,
            compound=compound,
            compound_on=config.compound_on,
            px_per_mm=s,
            compound_level=level,
            noise=noise,
            glare_fraction=glare_fraction,
            warnings=tuple(warnings),
            glare=glare,
            washed=washed,
            part_px=part_px,
            outline_share=outline_share,
            clear=clear,
        )

    if np.count_nonzero(stat) < 64:
        empty = np.zeros(visible.shape, bool)
        return result(empty, (empty, empty), 0.0, EVIDENCE_FLOOR)
    if config.compound_on == "reference":
        covered = _covered(evidence, stat, neutral_evidence(config.paper_bgr, compound))
        if covered is not None:
            warnings.append(
                f"{compound} compound covers nearly the whole surface: a film too thick, "
                "or the work was coated (compound on the work)"
            )
            t, t_fewer, t_more = covered
            return result(
                (evidence > t) & visible,
                ((evidence > t_fewer) & visible, (evidence > t_more) & visible),
                level=2.0 * t,
                noise=EVIDENCE_FLOOR,
                outline_share=0.5,  # drawn at t, half the level
            )
    field = contact_field(
        evidence,
        valid,
        stat,
        glare,
        px_per_mm=s,
        spot_mm=config.spot_mm,
        background_mm=config.background_mm,
        seed_sigma=config.seed_sigma,
        local_mm=config.local_mm,
        compound_on=config.compound_on,
    )
    if config.compound_on == "reference":
        field = _unsure_where_divisor_clipped(field, image, compound)
    if washed is not None:
        # of the washed pixels, those whose colour reads above the bare metal's: a trace
        # of compound, of which the ceiling may hide more
        washed = washed & (field.z >= 2.0)
    pixels = field.score.size
    if config.compound_on == "reference":
        # the brightness, for the relief and the colour's spread
        grey = cv2.cvtColor(image, cv2.COLOR_BGR2GRAY)
        # the relief reads neither the edge band nor the body: on a spare core meanwhile
        relieved = on_spare_core(
            pixels,
            relief_of,
            field,
            grey,
            stat,
            px_per_mm=s,
            spot_mm=config.spot_mm,
            background_mm=config.background_mm,
        )
        field = with_body(with_edge(field, s), config)
        relief, relief_noise = relieved.result()
        field = replace(field, relief=relief, relief_noise=relief_noise)
    level = map_median(field.local, stat)
    if level / field.noise < _NO_COMPOUND_CONTRAST:
        # the strongest marks are no stronger than the metal's own colour noise: there is
        # no compound to find (a print that was not spotted, or a photo without colour)
        empty = np.zeros(visible.shape, bool)
        return result(empty, (empty, empty), level, field.noise)
    if level / field.noise < 10.0:
        warnings.append(
            f"the compound barely stands out from the bare metal (contrast "
            f"{level / field.noise:.1f}); retake the photo in even, brighter light"
        )
    rim = (config.rim_share, config.rim_of_film)
    fewer, more = _nudged(config)
    loose = cut = None
    if config.compound_on == "reference":
        # the loosest decision's seeds and growth, and its watershed, serve all three
        loose = _seeds_and_growth(field, more)
        spread = on_spare_core(pixels, colour_spread_px, grey, field, loose[1])
        height = _cut_on(field).height
        regions, n = watershed_regions(loose[1], height, px_per_mm=s, seeds=loose[0])
        # where its regions touch, read once for the three decisions (on a spare core
        # while they find their seeds).  Handed over before the decisions are: those on
        # the spare core wait for it, and work waits only for work handed over before it
        # (the pool takes it in order), never for work queued behind it
        cut = (regions, n, on_spare_core(pixels, boundary, regions, n, height))
        field = replace(field, colour_spread=spread.result())
    # the rim shares decide the bearing: their steps set how wide the bearing's range
    # is.  On both renderers' prints a contact's edge lies at 0.22-0.5 of its film (0.1-
    # 0.3 of its peak): toward fewer pixels the film's share moves as far as the peak's,
    # up to half the film (where a blurred step's edge lies), toward more by less
    step = 1.0 + 0.4 * config.nudge
    steps = ((step, step), (1.0 / step, 1.0 / (1.0 + 0.25 * config.nudge)))
    # the alternates are decided on a spare core where one helps (they only read the
    # shared field), and the measure stage goes on with the mask meanwhile
    alternates = [
        on_spare_core(pixels, _decide, field, fewer, s, _rims(rim, steps[0]), cut, None),
        on_spare_core(pixels, _decide, field, more, s, _rims(rim, steps[1]), cut, loose),
    ]
    mask = _decide(field, config, s, rim, cut, None)
    clear = (
        field.zs >= CLEAR_STEP * config.seed_sigma if config.compound_on == "reference" else None
    )
    return result(mask, Later(alternates), level, field.noise, _cut_on(field).part_px, clear=clear)


#: How far (px) the colour of a pixel reaches its neighbours: JPEG keeps the colour of
#: 2 x 2 pixels as one and spreads it again over a pixel more when it decodes; the
#: rectified frame is never finer than the photo.
_COLOUR_REACH_PX = 2


def _unsure_where_divisor_clipped(field: Field, image: np.ndarray, compound: str) -> Field:
    """``field`` with no significance left where its colour is only a bound: at pixels
    whose divisor channel is clipped, and those that share their colour
    (:func:`printcheck.evidence.divisor_clipped`; glare is not valid anyway).  No seed
    starts there; a contact seeded beside them may still grow into them."""
    bound = divisor_clipped(image, compound) & field.valid
    if not bound.any():
        return field
    side = 2 * _COLOUR_REACH_PX + 1
    bound = cv2.dilate(bound.view(np.uint8), np.ones((side, side), np.uint8)).view(bool)
    return replace(field, zs=np.where(bound, np.minimum(field.zs, 0.0), field.zs))


def _share(pixels: np.ndarray, of: np.ndarray) -> float:
    """The share of the ``of`` pixels that ``pixels`` holds."""
    return float(np.count_nonzero(pixels & of)) / max(int(np.count_nonzero(of)), 1)


def _burnt_out(image: np.ndarray) -> np.ndarray:
    """Pixels with at least two of their three channels at their ceiling (burnt out)."""
    b, g, r = (c >= CLIPPED for c in cv2.split(image))
    return np.asarray((b & (g | r)) | (g & r), dtype=bool)


def _checked(
    image: np.ndarray, visible: np.ndarray, analysed: np.ndarray | None
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The inputs as arrays of the right kinds, or a one-line error."""
    image = np.asarray(image)
    if image.ndim != 3 or image.shape[2] != 3 or image.dtype != np.uint8:
        raise PhotoError(
            f"segment needs an (M, N, 3) uint8 BGR image, got shape {image.shape} "
            f"dtype {image.dtype}; decode the photo with printcheck.load first"
        )
    visible = np.asarray(visible, dtype=bool)
    if visible.shape != image.shape[:2]:
        raise OptionError(f"visible mask {visible.shape} must match the image {image.shape[:2]}")
    analysed = visible if analysed is None else np.asarray(analysed, dtype=bool) & visible
    return image, visible, analysed


def _colour(
    image: np.ndarray, analysed: np.ndarray, config: SegmentConfig, warnings: list[str]
) -> str:
    """The compound's colour: as configured, or read from the photo ("auto")."""
    if config.compound != "auto":
        return config.compound
    compound, clarity = choose_compound(
        image, analysed, config.compound_on, paper_bgr=config.paper_bgr
    )
    if clarity < 1.5:
        warnings.append(
            f"the compound's colour is uncertain (chose {compound}); name it: blue or red"
        )
    return compound


def _covered(
    evidence: np.ndarray, stat: np.ndarray, neutral: float
) -> tuple[float, float, float] | None:
    """Thresholds (main, fewer, more) when compound covers the window, else None;
    ``neutral``: the evidence of a neutral under the photo's light."""
    v = evidence[stat]
    if not quantile(v[::7], 0.2) - neutral > _COVERED_EVIDENCE:
        return None
    q20, q50 = quantiles(v, (0.2, 0.5))
    if not q20 - neutral > _COVERED_EVIDENCE:
        return None
    half = 0.5 * (float(q50) - neutral)  # halfway from a neutral to the coat
    return neutral + half, neutral + 1.15 * half, neutral + 0.85 * half


def _decide(
    field: Field,
    config: SegmentConfig,
    s: float,
    rim: tuple[float, float],
    cut: tuple[np.ndarray, int, Future[Boundary]] | None,
    grown: tuple[np.ndarray, np.ndarray] | None = None,
) -> np.ndarray:
    """The contact mask from the field, by ``config``'s thresholds and the rim shares
    (of a contact's peak, and of its film's level inside its edge: see
    :func:`printcheck.contacts.finish`).

    ``cut`` is the watershed of the loosest decision (compound on the reference), shared
    by the three decisions, with its regions' boundary; ``grown``, its seeds and growth
    when ``config`` is that one.
    """
    if config.compound_on == "reference":
        assert cut is not None
        seeds, grown_px = grown if grown is not None else _seeds_and_growth(field, config)
        regions, n, shared = cut
        on = _cut_on(field)
        labels = merge_regions(
            np.where(grown_px, regions, 0),
            n,
            on.height,
            split_share=config.split_share,
            min_dip=3.0 * on.noise,
            px_per_mm=s,
            min_low=on.min_low,
            shared=shared.result(),
        )
        mask = finish(
            labels,
            seeds,
            field.smooth,
            rim_share=rim[0],
            rim_of_film=rim[1],
            # two sigmas of the colour's blur in, never under a pixel's
            film_depth_px=2.0 * max(math.hypot(config.blur_px or 1.0, field.colour_spread), 1.0),
            hidden=~field.visible,
            score=field.score,
            min_core_px=config.min_spot_mm2 * s * s,
            level=field.local,
            rejoin_px=max(1, int(round(_REJOIN_MM * s))),
        )
    else:
        worn = field.score / field.local
        worn_s = (field.smooth / field.local).astype(np.float32)
        seeds = (worn_s >= config.coat_seed) & (field.zs >= config.seed_sigma - 1.0)
        grown_px = seeds_and_growth(seeds & field.valid, (worn >= config.coat_share) & field.valid)
        mask = separate(
            grown_px,
            seeds,
            worn_s,
            px_per_mm=s,
            split_share=config.split_share,
            min_dip=3.0 * median(field.noise / field.local[field.valid]),
            rim_share=None,
            large_lobes_deeper=False,
        )
    mask = fill_small_holes(mask, 0.05 * s * s, field.glare)
    if config.compound_on == "work":
        # paper shown by a card registered a fraction of a mm off looks like bare metal
        mask = drop_edge_slivers(mask & field.visible, field.visible, s)
    return mask & field.visible  # field.visible: the segment's visible (valid or glare)


#: How many times the seed's significance over the noise a contact's colour must reach
#: somewhere to stand clear of it (:attr:`Segmentation.clear`): half again.  A contact
#: between the seed's significance and this barely stands out; one as much fainter again
#: is not seen at all.
CLEAR_STEP = 1.5


#: Photo pixels of bare metal two contacts need between them to be cut apart on the
#: colour: a photo keeps colour at half the resolution of brightness (JPEG and HEIC
#: 4:2:0), so three pixels are one and a half colour samples, the least in which the
#: colour comes back to bare metal between them ...
PART_ON_COLOUR_PX = 3.0
#: ... and on the brightness, kept at full resolution: a pixel between two blurred edges
#: and one for the blur.
PART_ON_BRIGHTNESS_PX = 2.0


#: How near the edge of the visible surface (a card's cut-out) a piece's seed may lie to be
#: judged as a piece of a spot the card cuts (see :func:`_seeds_and_growth`).
EDGE_MM = 0.4


def with_edge(field: Field, px_per_mm: float) -> Field:
    """``field`` with its :attr:`Field.edge` band: visible pixels within :data:`EDGE_MM`
    of surface that is not visible (a card's edge, an exclusion's, glare's; the frame's
    own border is not an edge)."""
    r = max(1, int(round(EDGE_MM * px_per_mm)))
    inner = cv2.erode(field.visible.view(np.uint8), disc(r), borderType=cv2.BORDER_REPLICATE)
    return replace(field, edge=field.visible & ~inner.view(bool))


#: Lobes of one contact that its rim cut parts are joined again across a neck of film up
#: to twice this wide (mm): a neck thinner than the rim's share, not a gap of bare metal.
_REJOIN_MM = 0.25


@dataclass(frozen=True)
class _CutOn:
    """What touching contacts are cut apart on: a height, its noise, and how high the
    lower of two lobes must itself stand (-inf: no bound)."""

    height: np.ndarray
    noise: float
    min_low: float
    part_px: float


def _cut_on(field: Field) -> _CutOn:
    """The brightness's relief where the compound darkens the metal (it keeps the
    detail the colour lost; each lobe must itself be dark there, not a fringe of
    colour), else the colour evidence smoothed at spot scale."""
    if field.relief is None:
        return _CutOn(field.smooth, field.noise, -math.inf, PART_ON_COLOUR_PX)
    return _CutOn(field.relief, field.relief_noise, 5.0 * field.relief_noise, PART_ON_BRIGHTNESS_PX)


def _seeds_and_growth(field: Field, config: SegmentConfig) -> tuple[np.ndarray, np.ndarray]:
    """Seeds, and the region grown from them (compound on the reference).

    A seed stands ``seed_sigma`` noise levels above the bare metal at spot scale and
    reaches ``seed_share`` of the compound's local level.  At the edge of what the photo
    shows (a card's cut-out), a spot the card cuts shows a piece that is often only its
    pale rim, its dark middle under the card, and the paper's blur dilutes its colour
    further: there the share asked is half (the significance over the noise, which
    keeps noise out, is asked in full).

    A contact grows over the pixels ``grow_sigma`` noise levels up, and over those inside
    a contact at spot scale: a pale contact in a noisy photo scatters round a level only a
    few noise levels high, so that many of its own pixels fall under the growth's
    threshold and it would break into crumbs, each counted; at spot scale the noise is
    averaged down and the contact is whole.  Inside means as far above the noise as a
    seed, and in its body (:func:`with_body`).
    """
    strong = field.zs >= config.seed_sigma
    seeds = strong & (field.smooth >= config.seed_share * field.local)
    if field.edge is not None:
        # on the edge band's pixels alone (a thin strip of the frame)
        at = flat_where(field.edge & strong & ~seeds)
        half = np.float32(0.5 * config.seed_share)
        np.put(seeds, at[field.smooth.ravel()[at] >= half * field.local.ravel()[at]], True)
    # a field not made by segment() (the stage's own tests) has no body yet
    body = _body(field, config) if field.body is None else field.body
    grow = (field.z >= config.grow_sigma) | (strong & body)
    grown = seeds_and_growth(seeds & field.valid, grow & field.valid)
    return seeds, grown


#: A pixel lies in a valley between two contacts when it is this many noise levels (at
#: spot scale) below both sides of it along some line (:func:`with_body`).
_VALLEY_SIGMA = 3.0


def with_body(field: Field, config: SegmentConfig) -> Field:
    """``field`` with its :attr:`Field.body`: the pixels that lie inside a contact at spot
    scale, which a contact may grow over however noisy its own pixels
    (:func:`_seeds_and_growth`).

    Inside means at least half the strongest evidence within two spot radii (a blurred
    edge is at half its contact's level: the smoothing's spread past an edge is not
    inside), and not in a valley: not :data:`_VALLEY_SIGMA` noise levels below both
    pixels about two spot radii away on either side along a row, a column or a
    diagonal.  In the gap between two contacts a fraction of a millimetre apart the
    smoothing's tails of both add up to over half their level, but the gap stands below
    both; at an edge one side is bare, and in a contact's body neither side stands clear
    above it.  Grown over, such a gap would join the two contacts into one.  Surface the
    photo does not show (a card, an exclusion) is no side: a contact goes on under it.

    At the coarsest scales (two spot radii under a pixel and a half) the reach is a
    pixel, where the spot-scale smoothing averages almost nothing and the rule adds
    next to nothing to the pixels' own growth."""
    return replace(field, body=_body(field, config))


def _body(field: Field, config: SegmentConfig) -> np.ndarray:
    """The body map of :func:`with_body`."""
    reach = 2.0 * config.spot_mm * config.px_per_mm
    r = max(1, int(round(reach)))
    body = field.smooth >= 0.5 * cv2.dilate(field.smooth, disc(r))
    # beyond the frame's border, or where the surface is hidden, a side is no bound
    low = np.float32(-1e30)
    zs = np.where(field.visible, field.zs, low)
    for a, b in _SIDES:
        k = r if a == 0 or b == 0 else max(1, int(round(reach / math.sqrt(2.0))))
        kernel = np.zeros((2 * k + 1, 2 * k + 1), np.uint8)
        kernel[k + a * k, k + b * k] = kernel[k - a * k, k - b * k] = 1
        lower = cv2.erode(zs, kernel, borderType=cv2.BORDER_CONSTANT, borderValue=float(low))
        body &= zs >= lower - _VALLEY_SIGMA
    return body


#: The lines a valley is looked for along: a row, a column and both diagonals.
_SIDES = ((0, 1), (1, 0), (1, 1), (1, -1))


def _rims(rim: tuple[float, float], steps: tuple[float, float]) -> tuple[float, float]:
    """The rim shares (of the peak, of the film) moved by their ``steps`` (toward fewer
    pixels above 1), kept below 0.9."""
    return min(steps[0] * rim[0], 0.9), min(steps[1] * rim[1], 0.9)


def _nudged(config: SegmentConfig) -> tuple[SegmentConfig, SegmentConfig]:
    """The same decision with every threshold moved toward less, and toward more contact.

    By ``config.nudge`` (1: the seed by 1.5 noise levels up and its share by half again
    either way, the split share by 0.1, the coat shares by 0.1).

    Toward more contact the seed is asked the same significance over the noise: what is
    uncertain about a pale contact is how pale a contact may be (its share of the
    compound's level), not whether a bump a few noise levels high is one.  Below five
    noise levels a noisy photo holds bumps of noise by the dozen (on a 2 in window of a
    dim or low-quality JPEG, 10 to 30 more "contacts", each at the smallest spot's
    size), and a range up to them says nothing of the print; on a clean photo the share
    decides alone.  What lies below the seed's significance is reckoned instead from the
    contacts found just above it (:attr:`Segmentation.clear`, the measure stage's range).
    Toward fewer, the seed asks more: a contact barely over the noise may be noise.
    """
    k = config.nudge
    grow = 1.0 + 0.5 * k
    fewer = replace(
        config,
        seed_sigma=config.seed_sigma + 1.5 * k,
        seed_share=min(grow * config.seed_share, 0.95),
        split_share=max(config.split_share - 0.1 * k, 0.0),
        coat_share=min(config.coat_share + 0.1 * k, 0.95),
        coat_seed=min(config.coat_seed + 0.1 * k, 0.95),
    )
    more = replace(
        config,
        seed_share=config.seed_share / grow,
        split_share=min(config.split_share + 0.1 * k, 0.95),
        coat_share=max(config.coat_share - 0.1 * k, 0.05),
        coat_seed=max(config.coat_seed - 0.1 * k, 0.05),
    )
    return fewer, more
