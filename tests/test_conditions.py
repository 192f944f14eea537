"""Shop conditions that fooled earlier methods, each rendered with its exact truth.

Every photo here is rendered by printcheck.synth from a surface whose contact is known
exactly (a height field printed through a compound film; the truth is counted with plain
scipy labelling by the rules of docs/formats.md, independently of printcheck.measure).
Each condition is one that a photo from a shop shows and a method can be fooled by:

- pieces of spots cut by a card's window edge, with a layout that states a margin;
- a thin smear of compound wiped over areas wider than any local level is read over;
- broad bright facets of scraped metal (not glare);
- light so bright that the compound's own channel burns out over much of the window;
- compound on the work, seen through a card, with a ring of compound pushed up round
  each contact;
- red compound with the default (automatic) colour;
- a white balance so far off that bare metal looks as coloured as a coat of compound;
- a film that thins to nothing at the rim of each contact (pale rims);
- patches of thin, pale film photographed in dim, noisy light;
- a phone's colour smoothing, which blurs the gaps of a fine print shut in colour alone;
- a fine print: 40-60 points per square inch of sub-millimetre contacts, many in chains
  0.2-0.35 mm apart, under a thin, pale film, at phone resolutions;
- a photo taken too far away for its contacts.

The bounds are the accuracy targets' 90th-percentile figures for one photo: count within
8 % (or 2 spots), bearing within 3 percentage points.
"""

from __future__ import annotations

import re
from dataclasses import replace
from typing import Any

import numpy as np
import pytest

from printcheck.layout import card_layout
from printcheck.locate import locate
from printcheck.measure import MeasureConfig
from printcheck.pipeline import frame_blur_px, measure_segmented
from printcheck.segment import SegmentConfig, segment
from printcheck.synth import Camera, Lighting, Scene, render_photo
from printcheck.synth.fine import fine_surface

CAMERA = Camera(tilt_deg=12.0, rotation_deg=20.0, window_fraction=0.45)


def _scene(density: float, light: dict[str, float] | None = None, **scene: Any) -> Scene:
    """A print of ``density`` through the 2 in card, photographed hand-held (CAMERA) at
    1400 x 1050, under ``Lighting(**light)``."""
    return Scene(
        density=density,
        camera=CAMERA,
        image_size=(1400, 1050),
        lighting=Lighting(**(light or {})),
        **scene,
    )


def _measure(scene: Scene, seed: int, **segment_options):  # type: ignore[no-untyped-def]
    shot = render_photo(scene, seed=seed)
    rect = locate(shot.image, layout=scene.layout)
    options = {
        "compound_on": scene.compound_on,
        "paper_bgr": rect.paper_bgr,
        "blur_px": frame_blur_px(rect),  # as inspect passes them
        **segment_options,
    }
    seg = segment(
        rect.image,
        visible=rect.visible,
        analysed=rect.analysed,
        config=SegmentConfig(px_per_mm=rect.frame.px_per_mm, **options),
    )
    meas = measure_segmented(
        seg,
        frame=rect.frame,
        analysed=rect.analysed,
        config=MeasureConfig(cell_mm=25.4),
        photo_px_per_mm=rect.calibration.photo_px_per_mm,
        photo_blur_px=rect.calibration.photo_blur_px,
    )
    return shot.truth, meas, seg


def _within(truth, meas) -> None:  # type: ignore[no-untyped-def]
    assert truth.spot_count > 10  # the photo really holds a print
    assert abs(meas.spot_count - truth.spot_count) <= max(2, 0.08 * truth.spot_count), (
        meas.spot_count,
        truth.spot_count,
    )
    assert abs(meas.bearing_percent - truth.bearing_percent) <= 3.0, (
        meas.bearing_percent,
        truth.bearing_percent,
    )


def test_pieces_at_the_card_edge_are_counted_with_a_layout_that_states_a_margin() -> None:
    # the printed card, measured with a layout of its own that states a 5 mm margin: the
    # card's edge is found and what it hides is not surface; the spots it cuts count by
    # their visible pieces (docs/formats.md, grid and counting)
    layout = replace(card_layout(), margin_mm=5.0)
    scene = _scene(18, layout=layout, card=True)
    truth, meas, _ = _measure(scene, seed=31)
    _within(truth, meas)
    edge = meas.spots.in_window & (
        (meas.spots.x_mm < 1.0)
        | (meas.spots.x_mm > 49.8)
        | (meas.spots.y_mm < 1.0)
        | (meas.spots.y_mm > 49.8)
    )
    assert edge.sum() >= 2  # pieces at the edge were found and counted


def test_a_wide_smear_of_compound_is_not_contact() -> None:
    scene = _scene(14, dict(haze=0.5, haze_wide=1.0))
    truth, meas, _ = _measure(scene, seed=32)
    _within(truth, meas)


def test_broad_bright_facets_are_metal_not_glare() -> None:
    scene = _scene(16, dict(facet_gloss=0.6))
    truth, meas, seg = _measure(scene, seed=33)
    _within(truth, meas)
    assert seg.glare_fraction < 0.05


@pytest.mark.parametrize(("depth", "deg"), [(0.55, 30.0), (0.7, 120.0)])
def test_a_shadow_across_the_window_is_not_contact(depth: float, deg: float) -> None:
    # the photographer's arm between the light and the surface (common practice: the
    # light is behind the phone): a hard-edged shadow across the window and the card,
    # the light down to 0.45 or 0.3 beyond it; the bare level follows it on both sides
    # and its edge raises no contacts
    scene = _scene(16, dict(shadow=depth, shadow_deg=deg))
    truth, meas, _ = _measure(scene, seed=47)
    _within(truth, meas)
    c = meas.confidence
    assert c.count_low <= truth.spot_count <= c.count_high


_DIM_PALE = pytest.mark.xfail(
    strict=True,
    reason="in dim, noisy light a third of the thin patches' contacts sink into the "
    "noise and the rest are outlined tight in it: the bearing reads 6.5 against 10.5 "
    "and its range does not reach it (the count's does); not solved yet",
)

DIM_PALE = dict(pale_patches=0.6, compound_strength=0.5, exposure=0.5, noise_sigma=10.0)


@pytest.mark.parametrize(
    "light",
    [
        dict(pale_patches=0.6),
        pytest.param(DIM_PALE, marks=_DIM_PALE, id="dim-noisy"),
    ],
)
def test_pale_and_dark_compound_side_by_side_are_both_counted(light: dict[str, float]) -> None:
    # compound wiped on thin over part of the reference (common practice: a film that is
    # hard to spread evenly): pale contacts beside dark ones, every shade between; the
    # compound's level is read locally, so the pale ones are measured against their own
    truth, meas, _ = _measure(_scene(20, light), seed=37)
    c = meas.confidence
    assert c.bearing_low <= truth.bearing_percent <= c.bearing_high
    assert c.count_low <= truth.spot_count <= c.count_high
    _within(truth, meas)


def test_contacts_lost_in_dim_noisy_light_are_said_and_the_count_range_reaches_them() -> None:
    # the thin patches in dim, noisy light (the strict-xfail case above): many of the
    # contacts found barely stand out from the noise, so more lie below it unseen; the
    # photo is doubtful and says so, and its count's range reaches the truth by the faint
    # ones alone (the photo is also too coarse for its smallest contacts, which widens
    # the range further).  Its bearing reads low and its range does not reach it: the
    # strict xfail above
    truth, meas, _ = _measure(_scene(20, DIM_PALE), seed=37)
    c = meas.confidence
    assert c.doubtful and "barely stand out from the noise" in c.reason
    said = re.search(r"(\d+) of (\d+) contacts barely stand out", c.reason)
    assert said is not None and int(said[2]) == meas.spot_count
    assert truth.spot_count <= meas.spot_count + int(said[1])
    assert c.count_low <= truth.spot_count <= c.count_high


_CRUMBS = pytest.mark.xfail(
    strict=True,
    reason="some pale contacts still fall apart in this noise: 75 against 60 (80 when "
    "read pixel by pixel); not solved yet",
)


@pytest.mark.parametrize("seed", [61, 62, 65, pytest.param(58, marks=_CRUMBS)])
def test_a_pale_film_in_dim_noisy_light_is_not_broken_into_crumbs(seed: int) -> None:
    # thin patches of compound photographed dim and noisy (exposure 0.6, noise 8): a pale
    # contact's pixels scatter round a level a few noise levels high, and read pixel by
    # pixel one contact falls apart into several (seed 61 read 62 against 54 when they
    # did, seed 65 65 against 60); read at spot scale it is whole.  The bearing's outline
    # is still drawn tight in such noise (about a point low here), within the photo
    # tolerance
    light = dict(pale_patches=0.6, compound_strength=0.6, exposure=0.6, noise_sigma=8.0)
    truth, meas, _ = _measure(_scene(16, light), seed=seed)
    _within(truth, meas)
    c = meas.confidence
    assert c.count_low <= truth.spot_count <= c.count_high


@pytest.mark.parametrize(
    ("density", "light", "scene"),
    [
        (16, {}, {}),
        (20, {}, dict(compound="red")),
        (20, dict(exposure=0.5, noise_sigma=4.0), {}),
    ],
    ids=["plain", "red", "dim"],
)
def test_a_photo_stored_through_the_srgb_curve_is_measured_alike(
    density: float, light: dict[str, float], scene: dict[str, str]
) -> None:
    # a phone stores its photos through the sRGB transfer curve (IEC 61966-2-1), not in
    # proportion to the light: the darks are lifted, and a blurred edge's half-way point
    # in the stored values lies nearer the darker side than in the light.  The outlines
    # are drawn at shares of each contact's own film, so the curve moves neither the
    # count nor the bearing out of the photo tolerance, and the ranges hold the truth
    truth, meas, _ = _measure(_scene(density, dict(light, tone="srgb"), **scene), seed=2)
    _within(truth, meas)
    c = meas.confidence
    assert c.count_low <= truth.spot_count <= c.count_high
    assert c.bearing_low <= truth.bearing_percent <= c.bearing_high


def test_light_so_bright_that_the_compound_channel_burns_out_widens_the_range() -> None:
    # a lamp close to the part: the light rises across the window until the red channel
    # of red compound reaches its ceiling over much of it (green and blue do not): the
    # colour read there is only a lower bound, so the photo says so, and the range
    # allows for pale spots missed there
    scene = _scene(
        20, dict(gradient=1.4, exposure=1.6, white_balance=(0.9, 1.0, 1.1)), compound="red"
    )
    truth, meas, seg = _measure(scene, seed=52)
    # the condition is there: the photo says so (over 5 % of the window)
    assert any("at its brightest" in w for w in seg.warnings)
    assert seg.washed is not None and seg.washed.any()  # traces of compound there
    _within(truth, meas)
    c = meas.confidence
    assert c is not None and c.count_low <= truth.spot_count <= c.count_high, (c, truth)
    assert c.bearing_low <= truth.bearing_percent <= c.bearing_high, (c, truth)


@pytest.mark.xfail(
    strict=True,
    reason="compound on the work: this renderer's small contacts "
    "wear only part of the coat through and are missed (about 15 % under)",
)
def test_compound_on_the_work_through_a_card_with_a_pushed_up_ring() -> None:
    scene = _scene(12, dict(ring=0.8), compound_on="work")
    truth, meas, seg = _measure(scene, seed=34)
    _within(truth, meas)
    assert seg.compound == "blue"


def test_contacts_under_burnt_out_glare_are_in_the_range() -> None:
    # a broad patch of burnt-out glare over the window hides the contacts under it: they
    # cannot be counted, but the range must reach up to them (at the density and bearing
    # seen elsewhere), and the photo carries the glare warning
    scene = _scene(24, dict(glare=3.0, glare_radius=0.12))
    truth, meas, seg = _measure(scene, seed=40)
    assert seg.glare_fraction > 0.05
    assert any("burnt out" in w for w in seg.warnings)
    c = meas.confidence
    assert meas.spot_count < truth.spot_count  # the glare did hide contacts
    assert c is not None and c.count_low <= truth.spot_count <= c.count_high, (c, truth)
    assert c.bearing_low <= truth.bearing_percent <= c.bearing_high + 0.5, (c, truth)


def test_red_compound_is_found_by_default() -> None:
    scene = _scene(20, compound="red")
    truth, meas, seg = _measure(scene, seed=35)  # compound left to its default, auto
    assert seg.compound == "red"
    _within(truth, meas)


@pytest.mark.parametrize(
    ("compound", "balance"), [("blue", (1.3, 1.0, 0.75)), ("red", (0.75, 1.0, 1.3))]
)
def test_a_strong_colour_cast_is_not_compound_all_over(
    compound: str, balance: tuple[float, float, float]
) -> None:
    # a white balance far off toward the compound's own colour (blue up 30 % and red down
    # 25 %, or the reverse; twice the cast of the test below) tints the bare metal as
    # much as a coat of compound would; read against grey the window looked covered all
    # over (1 spot, bearing 100 %).  The markers' white paper shows the same cast:
    # judged against it, the print is measured as under a neutral light.
    counts = []
    for light in ((1.0, 1.0, 1.0), balance):
        scene = _scene(20, dict(white_balance=light), compound=compound)
        truth, meas, seg = _measure(scene, seed=2)
        assert not any("covers nearly the whole" in w for w in seg.warnings)
        assert seg.compound == compound
        assert abs(meas.bearing_percent - truth.bearing_percent) <= 3.0
        counts.append(meas.spot_count)
    neutral, cast = counts
    assert abs(cast - neutral) <= max(2, 0.08 * truth.spot_count), (neutral, cast)
    _within(truth, meas)


@pytest.mark.parametrize(
    ("rim_film", "density", "blur", "seeds", "bound"),
    [
        (0.0, 25, 0.7, (1, 2, 3), 0.25),
        (1.2, 20, 0.7, (1, 2, 3), 0.10),
        (0.0, 25, 2.5, (1, 2), 0.12),
        (1.2, 20, 2.5, (1, 2), 0.20),
    ],
    ids=["dark-middles-pale-rims", "even-film", "dark-middles-blurred", "even-film-blurred"],
)
def test_outlines_follow_the_film_whether_its_middle_is_dark_or_not(
    rim_film: float, density: float, blur: float, seeds: tuple[int, ...], bound: float
) -> None:
    # a pale compound (thin enough that its colour grows with its thickness), once on
    # contacts whose film thins to nothing at the rim, their middles several times
    # darker than their rims, once on contacts evenly filmed to a distinct edge: an
    # outline drawn at a fixed share of each contact's peak lay too far in on the first
    # (its range short of the truth on seeds 1-4) and too far out on the second (its
    # range above the truth on the seed first tested); the outline is drawn at a share
    # of the film's level just inside the contact's edge, and the range holds the
    # rendered bearing on each seed.
    # The film's thinning to its rim still reads low (the outline sits where the blurred
    # film has fallen to a share of its level, inside the truth's thin rim): up to a
    # quarter low on the first print.  In a blurred photo (2.5 px) the film is read two
    # blur sigmas in; read at a fixed depth, inside the blur, the outlines came out 15-20 %
    # too wide on the first print and 25-43 % on the second.  The renderer's truth is the
    # contact itself
    for seed in seeds:
        scene = _scene(density, dict(compound_strength=0.3, rim_film=rim_film, blur_sigma_px=blur))
        truth, meas, _ = _measure(scene, seed=seed)
        assert truth.spot_count > 10
        err = meas.bearing_percent - truth.bearing_percent
        assert abs(err) <= bound * truth.bearing_percent, (seed, meas.bearing_percent, truth)
        c = meas.confidence
        assert c is not None and c.bearing_low <= truth.bearing_percent <= c.bearing_high, (
            seed,
            c.bearing_low,
            c.bearing_high,
            truth.bearing_percent,
        )


def test_outlines_hold_where_the_phone_smoothed_the_colour_more_than_the_brightness() -> None:
    # a phone's colour noise reduction over 3 px (the renderer's colour_blur_px; phones
    # smooth colour over 1-3 px, from memory): the colour of each contact spreads
    # past its edge further than the card's edges (brightness) say.  Read two blur
    # sigmas of the brightness in, the film's level lay on the colour's ramp and the
    # outlines came out wide: +1.26, +1.03 and +0.96 points on these seeds (bearing
    # 7.2-8.4 %), the range's top 3.7-4.3 points above the truth (now 1.9-2.4).  Its own
    # spread is read at the contacts' edges against the brightness's.  The renderer's
    # truth is the contact itself
    for seed in (1, 2, 3):
        truth, meas, _ = _measure(_scene(16, dict(colour_blur_px=3.0)), seed=seed)
        _within(truth, meas)
        assert abs(meas.bearing_percent - truth.bearing_percent) <= 0.5, (
            seed,
            meas.bearing_percent,
            truth,
        )
        c = meas.confidence
        assert c is not None and c.bearing_low <= truth.bearing_percent <= c.bearing_high
        assert c.bearing_high - truth.bearing_percent <= 3.0, (seed, c.bearing_high)


@pytest.mark.xfail(
    strict=True,
    reason="a contact whose lobes join through a neck of thin "
    "film is counted as two (about 13 % over): the evidence cannot tell such "
    "a neck from a gap the blur has filled in",
)
def test_pale_rims_are_kept() -> None:
    scene = _scene(20, dict(rim_film=0.15))
    truth, meas, _ = _measure(scene, seed=36)
    _within(truth, meas)


@pytest.mark.xfail(
    strict=True,
    reason="the phone smooths colour as differences (4:2:0 JPEG, colour noise "
    "reduction): under a cool cast the white card's blue runs a few pixels into the "
    "darker metal, and read as a ratio it is bluer there than on the paper itself; "
    "against a thin film it adds false contacts along the window's edge (about 30 %)",
)
def test_a_cool_cast_adds_no_contacts_along_the_card_edge() -> None:
    # the same print in the same dim, noisy, smoothed photo, once under a neutral light
    # and once with blue up 15 % and red down 15 % (white balance some 1500 K off)
    dim = dict(
        compound_strength=0.3, exposure=0.6, noise_sigma=6.0, jpeg_quality=55, colour_blur_px=2.5
    )
    counts = []
    for balance in ((1.0, 1.0, 1.0), (1.15, 1.0, 0.85)):
        scene = _scene(20, dict(dim, white_balance=balance))
        truth, meas, _ = _measure(scene, seed=1)
        counts.append(meas.spot_count)
    neutral, cool = counts
    assert truth.spot_count > 10
    assert abs(cool - neutral) <= max(2, 0.08 * truth.spot_count), (neutral, cool)


@pytest.fixture(scope="module")
def fine_field():  # type: ignore[no-untyped-def]
    return fine_surface(card_layout(), 50, seed=7)


def _square_on(field, px_per_mm: float, seed: int, **lighting):  # type: ignore[no-untyped-def]
    """A print photographed square-on (a rig) at ``px_per_mm``, measured as inspect does
    with an explicit scale: (truth, measurement, rectified)."""
    from printcheck.locate import rectify_scale

    scene = Scene(field=field, camera=None, px_per_mm=px_per_mm, lighting=Lighting(**lighting))
    shot = render_photo(scene, seed=seed)
    rect = rectify_scale(shot.image, px_per_mm=px_per_mm)
    seg = segment(
        rect.image,
        visible=rect.visible,
        analysed=rect.analysed,
        config=SegmentConfig(px_per_mm=rect.frame.px_per_mm),
    )
    meas = measure_segmented(
        seg,
        frame=rect.frame,
        analysed=rect.analysed,
        config=MeasureConfig(cell_mm=25.4),
        photo_px_per_mm=px_per_mm,
    )
    return shot.truth, meas, rect


PALE_THIN = {"compound_strength": 0.5, "rim_film": 0.1}  # a fine print's thin, pale film


@pytest.mark.parametrize("px_per_mm", [12.0, 18.0])
def test_a_fine_print_at_phone_resolution(fine_field, px_per_mm: float) -> None:  # type: ignore[no-untyped-def]
    truth, meas, rect = _square_on(
        fine_field, px_per_mm, 37, blur_sigma_px=0.8, jpeg_quality=85, **PALE_THIN
    )
    assert 40 <= truth.density <= 60
    assert rect.frame.window.width_mm == pytest.approx(card_layout().window.width_mm, abs=0.1)
    _within(truth, meas)


def test_a_fine_print_whose_colour_the_phone_smoothed_is_parted_by_its_brightness(
    fine_field,
) -> None:  # type: ignore[no-untyped-def]
    # a phone smooths colour over a couple of pixels to hide its noise (and JPEG keeps it
    # at half resolution): at 12 px/mm the 0.2-0.35 mm gaps of a fine print are blurred
    # shut in the colour, while the brightness keeps them.  An earlier method that cut
    # contacts apart on the colour alone counted 203 of 215.  Bounds: the fine-print
    # targets (count within 4 %, bearing within 1.5 points)
    truth, meas, _ = _square_on(
        fine_field, 12.0, 37, blur_sigma_px=0.8, colour_blur_px=2.0, jpeg_quality=80, **PALE_THIN
    )
    assert 40 <= truth.density <= 60
    assert abs(meas.spot_count - truth.spot_count) <= 0.04 * truth.spot_count, (
        meas.spot_count,
        truth.spot_count,
    )
    assert abs(meas.bearing_percent - truth.bearing_percent) <= 1.5


@pytest.mark.parametrize(("density", "seed", "blur"), [(55, 11, 1.0), (50, 7, 1.2)])
def test_small_domed_contacts_of_a_fine_print_are_counted(
    density: float, seed: int, blur: float
) -> None:
    # the smallest contacts of a fine print (0.5 mm) carry a film that thins to nothing at
    # their rim: a dome whose part above half its peak is under 0.1 mm2, though the
    # contact itself is twice that; a 20 px/mm photo, rectified at 16 px/mm.  Bounds:
    # the fine-print targets (count within 4 %, bearing within 1.5 points)
    field = fine_surface(card_layout(), density, seed=seed)
    truth, meas, _ = _square_on(field, 20.0, 41, blur_sigma_px=blur, jpeg_quality=80, **PALE_THIN)
    assert 45 <= truth.density <= 60
    assert abs(meas.spot_count - truth.spot_count) <= 0.04 * truth.spot_count, (
        meas.spot_count,
        truth.spot_count,
    )
    assert abs(meas.bearing_percent - truth.bearing_percent) <= 1.5


def test_a_photo_too_far_away_for_its_contacts_is_flagged(fine_field) -> None:  # type: ignore[no-untyped-def]
    truth, meas, _ = _square_on(
        fine_field, 5.0, 38, compound_strength=0.5, blur_sigma_px=0.6, jpeg_quality=85
    )
    c = meas.confidence
    assert c is not None and c.doubtful
    assert "px/mm; this photo has 5: move closer" in c.reason
    assert c.count_low <= truth.spot_count <= c.count_high, (c, truth.spot_count)
    assert np.isfinite(meas.bearing_percent)
    # the colour's blur spreads each contact a photo pixel past its edge: here the bearing
    # comes out near twice the truth (12.4 % against 6.6 %), and the range must say so
    # (before: 8.0-15.7)
    assert meas.bearing_percent > truth.bearing_percent + 3.0  # the over-read is real
    assert c.bearing_low <= truth.bearing_percent <= c.bearing_high, (c, truth.bearing_percent)


def test_contacts_closer_than_the_photo_can_part_widen_the_range(fine_field) -> None:  # type: ignore[no-untyped-def]
    # the fine print from too far (6 px/mm): its 0.2-0.35 mm gaps are 1-2 photo pixels,
    # under the 2 that even the brightness needs; neighbours merge and the count falls
    # short, so the range must reach up to the truth and the photo be doubtful
    truth, meas, _ = _square_on(
        fine_field, 6.0, 39, blur_sigma_px=1.0, jpeg_quality=80, **PALE_THIN
    )
    c = meas.confidence
    n = truth.spot_count
    assert meas.spot_count < 0.95 * n  # the merges this test is about do happen
    assert c is not None and c.doubtful
    assert "closer than this photo can part (2 px at 6 px/mm): move closer" in c.reason
    assert c.count_low <= n <= c.count_high, (c, n)
    assert c.bearing_low <= truth.bearing_percent <= c.bearing_high, (c, truth.bearing_percent)


@pytest.mark.parametrize(
    ("px_per_mm", "seed", "lighting"),
    [
        (8.0, 40, {"blur_sigma_px": 1.0, "jpeg_quality": 80}),
        (10.0, 41, {"blur_sigma_px": 1.2, "jpeg_quality": 75, "colour_blur_px": 1.5}),
    ],
)
def test_a_fine_print_crowded_closer_than_the_photo_parts_reads_its_bearing(
    fine_field, px_per_mm: float, seed: int, lighting: dict
) -> None:  # type: ignore[no-untyped-def]
    # the fine print at 8 and 10 px/mm: its 0.2-0.35 mm gaps are 2-3 photo pixels, and
    # more than half its contacts lie closer to a neighbour than the photo parts.  The
    # contacts themselves (0.5-1.5 mm) are large enough to be seen; the blur of both
    # neighbours fills the gaps and the outlines lie out.  The mask's own bearing reads
    # 8.9 % and 8.6 % against 6.6 %; the bearing is within the fine-print target (1.5
    # points), the photo is doubtful, and both ranges hold the truth.  (The colour's blur
    # of half a resolved pixel was read from these two photos among others; the one above
    # whose colour the phone smoothed, crowded too, was not: 7.17 % -> 5.95 % there)
    truth, meas, _ = _square_on(fine_field, px_per_mm, seed, **lighting, **PALE_THIN)
    c = meas.confidence
    assert c is not None and c.doubtful and "closer than this photo can part" in c.reason
    assert abs(meas.bearing_percent - truth.bearing_percent) <= 1.5, (
        meas.bearing_percent,
        truth.bearing_percent,
    )
    assert c.bearing_low <= truth.bearing_percent <= c.bearing_high, (c, truth.bearing_percent)
    assert c.count_low <= truth.spot_count <= c.count_high, (c, truth.spot_count)


def test_a_photo_without_compound_is_refused_and_nothing_of_it_is_recorded(tmp_path) -> None:  # type: ignore[no-untyped-def]
    """docs/formats.md, command line: a photo in which no marking compound can be found is
    not usable (exit 2), not a measurement of zero; in a batch it is reported and skipped,
    and nothing of it is recorded."""
    import json
    import subprocess
    import sys

    folder = tmp_path / "photos"
    folder.mkdir()
    cam = Camera(tilt_deg=8.0, window_fraction=0.35)
    good = render_photo(Scene(density=12, camera=cam, image_size=(1200, 900)), seed=40)
    bare = render_photo(
        Scene(
            density=12,
            camera=cam,
            image_size=(1200, 900),
            lighting=Lighting(compound_strength=0.0, haze=0.0),
        ),
        seed=41,
    )
    assert good.jpeg is not None and bare.jpeg is not None
    (folder / "a-good.jpg").write_bytes(good.jpeg)
    (folder / "b-bare.jpg").write_bytes(bare.jpeg)
    cmd = [sys.executable, "-m", "printcheck"]
    one = subprocess.run(
        cmd + ["inspect", str(folder / "b-bare.jpg"), "--json"],
        capture_output=True,
        text=True,
        check=False,
    )
    assert one.returncode == 2 and one.stdout == ""
    assert "marking compound found in the window" in one.stderr
    assert len(one.stderr.strip().splitlines()) == 1
    db = tmp_path / "history.sqlite"
    run = subprocess.run(
        cmd
        + [
            "batch",
            str(folder),
            "--db",
            str(db),
            "--surface",
            "way",
            "--out",
            str(tmp_path / "out"),
        ],
        capture_output=True,
        text=True,
        check=False,
    )
    assert run.returncode in (0, 1), run.stderr  # the good photo is a measurement
    assert "b-bare.jpg" in run.stderr and "Traceback" not in run.stderr
    prog = subprocess.run(
        cmd + ["progress", "way", "--db", str(db), "--json"],
        capture_output=True,
        text=True,
        check=True,
    )
    passes = json.loads(prog.stdout)["passes"]
    assert [p["photo"] for p in passes] == ["a-good.jpg"]


def test_an_out_of_focus_photo_is_flagged_and_its_range_holds_the_truth() -> None:
    # a phone that missed focus (or shook): the markers' sharp printed edges spread 2.5 px,
    # so the photo parts no finer detail than a sharp one with 2.5 times fewer pixels;
    # neighbours merge and the count comes out low.  The photo is called doubtful for
    # its blur, and the range reaches up to the truth
    scene = _scene(20, dict(blur_sigma_px=2.5))
    truth, meas, _ = _measure(scene, seed=41)
    conf = meas.confidence
    assert conf is not None and conf.doubtful
    assert "blurred" in conf.reason and "let it focus" in conf.reason
    assert conf.count_low <= truth.spot_count <= conf.count_high


def test_a_sharp_photo_is_not_called_blurred() -> None:
    scene = _scene(20)
    truth, meas, _ = _measure(scene, seed=42)
    _within(truth, meas)
    assert meas.confidence is not None and "blurred" not in meas.confidence.reason


def test_a_dim_noisy_photo_is_not_called_blurred() -> None:
    # the same sharp print, underexposed (0.4) with the sensor noise of a phone pushed to
    # a high gain: on the markers' black side a sample passes a tenth of the step by
    # noise alone, before the edge.  The markers' edge spread is still that of the same
    # photo without the noise (within 0.1 px), and the photo is not called blurred (an
    # earlier reading gave 1.02 and 1.19 px against 0.88, and said "blurred")
    readings = []
    for noise in (2.0, 40.0):
        scene = _scene(20, dict(exposure=0.4, noise_sigma=noise, jpeg_quality=90))
        shot = render_photo(scene, seed=45)
        readings.append(locate(shot.image, layout=scene.layout).calibration.photo_blur_px)
    quiet, noisy = readings
    assert quiet is not None and noisy is not None
    assert noisy == pytest.approx(quiet, abs=0.1)
    _, meas, _ = _measure(scene, seed=45)
    assert meas.confidence is not None and "blurred" not in meas.confidence.reason
