"""Every field of every stage config does something: changing it changes the result.

A field a stage ignores is a promise the code does not keep (a caller sets it and
nothing happens).  For each stage config, each field is changed on a case built so that
the field must matter, and the stage's result must differ from the default's.  No field
is inert today; one that became so would have to be documented as such here.
"""

from __future__ import annotations

import dataclasses

import cv2
import numpy as np
import pytest
from scipy import ndimage

from printcheck.frame import Frame
from printcheck.layout import Window
from printcheck.locate import LocateConfig, locate
from printcheck.measure import MeasureConfig, measure
from printcheck.segment import SegmentConfig, segment
from printcheck.synth import Camera, Scene, render_photo

S = 8.0


def _photo(on: str, seed: int = 3) -> np.ndarray:
    """Blue spots of 0.6-2 mm, some touching, on grey metal with a little noise (BGR)."""
    rng = np.random.default_rng(seed)
    shape = (320, 320)
    yy, xx = np.mgrid[: shape[0], : shape[1]]
    mask = np.zeros(shape, bool)
    for _ in range(70):
        cy, cx, r = rng.uniform(10, 310), rng.uniform(10, 310), rng.uniform(0.3, 1.0) * S
        mask |= np.hypot(yy - cy, xx - cx) < r
    edt = ndimage.distance_transform_edt(mask) / (0.4 * S)
    film = np.where(mask, 0.25 + 0.75 * np.clip(edt, 0, 1), 0.0)
    if on == "work":
        film = np.where(mask, 0.05, 0.9)
    metal = 0.55 * (1 + 0.05 * rng.standard_normal(shape))
    blue = np.array([0.75, 0.35, 0.12])
    img = metal[..., None] * (1 - film[..., None]) + blue * film[..., None]
    img = cv2.GaussianBlur((np.clip(img, 0, 1) ** (1 / 2.2) * 255).astype(np.float32), (0, 0), 0.7)
    return np.clip(img + rng.normal(0, 2, img.shape), 0, 255).astype(np.uint8)


def _segment_result(image: np.ndarray, config: SegmentConfig) -> tuple[bytes, ...]:
    seg = segment(image, visible=np.ones(image.shape[:2], bool), config=config)
    return (seg.mask.tobytes(),) + tuple(a.tobytes() for a in seg.alternates)


SEGMENT_CHANGES = {
    "compound": ("red", "reference"),
    "compound_on": ("work", "reference"),
    "px_per_mm": (4.0, "reference"),
    "background_mm": (8.0, "reference"),
    "spot_mm": (0.5, "reference"),
    "seed_sigma": (400.0, "reference"),
    "seed_share": (0.8, "reference"),
    "grow_sigma": (12.0, "reference"),
    "rim_share": (0.6, "reference"),
    "rim_of_film": (0.8, "reference"),
    # the film's level is read deeper inside a contact's first outline
    "blur_px": (4.0, "reference"),
    "min_spot_mm2": (3.0, "reference"),
    "split_share": (0.95, "reference"),
    "local_mm": (0.5, "reference"),
    "coat_share": (0.9, "work"),
    "coat_seed": (0.95, "work"),
    "nudge": (4.0, "reference"),
    # a bluish paper: the coat that covers the "work" photo is then no bluer than the
    # light, and the window is no longer taken as covered in compound all over
    "paper_bgr": ((240.0, 200.0, 150.0), "reference"),
}


def test_every_segment_field_is_covered() -> None:
    fields = {f.name for f in dataclasses.fields(SegmentConfig)}
    assert fields == set(SEGMENT_CHANGES)


@pytest.mark.parametrize("name", sorted(SEGMENT_CHANGES))
def test_segment_field_changes_the_result(name: str) -> None:
    value, on = SEGMENT_CHANGES[name]
    image = _photo("work" if name == "paper_bgr" else on)  # paper: a window coloured all over
    base = SegmentConfig(compound="blue", compound_on=on, px_per_mm=S)  # type: ignore[arg-type]
    if name == "local_mm":  # the local level gates the seeds by their share of it
        base = dataclasses.replace(base, seed_share=0.6)
    changed = dataclasses.replace(base, **{name: value})
    assert _segment_result(image, changed) != _segment_result(image, base), name


def _discs(shape: tuple[int, int], discs: list[tuple[float, float, float]]) -> np.ndarray:
    yy, xx = np.mgrid[: shape[0], : shape[1]]
    mask = np.zeros(shape, bool)
    for cy, cx, r in discs:
        mask |= np.hypot(yy - cy, xx - cx) < r
    return mask


def _measure_result(config: MeasureConfig, *, coarse: bool = False) -> tuple[object, ...]:
    shape = (300, 300)
    frame = Frame(10.0, (0.0, 0.0), shape, Window(0.0, 0.0, 30.0, 30.0))
    rng = np.random.default_rng(5)
    discs = [(rng.uniform(10, 140), rng.uniform(10, 290), rng.uniform(3, 6)) for _ in range(30)]
    discs += [(200.0, 150.0, 30.0)]  # one large mark: a high area
    discs += [(280.0, 200.0, 4.0), (280.0, 208.0, 4.0)]  # a pixel apart: crowded
    discs += [(250.0, 40.0, 1.5), (250.0, 60.0, 2.0)]  # specks near a minimum area
    mask = _discs(shape, discs)
    fewer = mask & ~_discs(shape, discs[:6])
    m = measure(
        mask,
        frame=frame,
        analysed=np.ones(shape, bool),
        config=config,
        alternates=(fewer, mask),
        photo_px_per_mm=3.0 if coarse else 30.0,
    )
    g = m.guidance
    return (
        m.spot_count,
        m.bearing_percent,
        tuple(c.spot_count for c in m.cells),
        m.confidence,
        len(g.high),
        len(g.bare),
        tuple(h.reason for h in g.high),
    )


MEASURE_CHANGES = {
    "cell_mm": 15.0,
    "min_spot_mm2": 0.2,
    "max_bare_mm": 5.0,
    "count_spread": 0.5,
    "doubtful_change": 0.01,
    "doubtful_bearing": 0.1,
    "resolution_px": 1.0,
    "part_px": 300.0,
    "crowded_share": 0.1,
    "outline_share": 0.5,
    "oversize_factor": 100.0,
    "heavy_bearing_factor": 30.0,
}


def test_every_measure_field_is_covered() -> None:
    assert {f.name for f in dataclasses.fields(MeasureConfig)} == set(MEASURE_CHANGES)


@pytest.mark.parametrize("name", sorted(MEASURE_CHANGES))
def test_measure_field_changes_the_result(name: str) -> None:
    coarse = name == "resolution_px"  # the check needs a photo coarser than its contacts
    # the base photo's contacts are crowded, but not so many as to make it doubtful (but
    # for where its outlines lie, which counts only in a photo that is)
    crowded_share = 0.05 if name == "outline_share" else 0.9
    base = MeasureConfig(cell_mm=10.0, crowded_share=crowded_share)
    changed = dataclasses.replace(base, **{name: MEASURE_CHANGES[name]})
    assert _measure_result(changed, coarse=coarse) != _measure_result(base, coarse=coarse)


@pytest.fixture(scope="module")
def card_photo() -> np.ndarray:
    # the card a little out of the frame on the right: allow_partial matters
    cam = Camera(tilt_deg=10.0, window_fraction=0.5, offset=(0.3, 0.0))
    return render_photo(Scene(density=8, camera=cam, image_size=(900, 675)), seed=4).image


@pytest.fixture(scope="module")
def full_photo() -> np.ndarray:
    # the whole card in view: four markers, so the fit has a residual to judge
    cam = Camera(tilt_deg=10.0, window_fraction=0.4)
    return render_photo(Scene(density=8, camera=cam, image_size=(900, 675)), seed=4).image


LOCATE_CHANGES = {
    "px_per_mm": 5.0,
    "max_residual_mm": 1e-4,
    "allow_partial": True,
    "max_px_per_mm": 6.0,
    "min_px_per_mm": 30.0,
    "max_pixels": 50_000,
}


def test_every_locate_field_is_covered() -> None:
    assert {f.name for f in dataclasses.fields(LocateConfig)} == set(LOCATE_CHANGES)


def _locate_result(image: np.ndarray, config: LocateConfig) -> tuple[object, ...]:
    from printcheck.errors import LocateError
    from printcheck.layout import card_layout

    try:
        r = locate(image, layout=card_layout(), config=config)
    except LocateError as exc:
        return ("refused", str(exc).split(":")[0])
    return (r.frame.px_per_mm, r.frame.shape, int(r.analysed.sum()), r.warnings)


@pytest.mark.parametrize("name", sorted(LOCATE_CHANGES))
def test_locate_field_changes_the_result(
    name: str, card_photo: np.ndarray, full_photo: np.ndarray
) -> None:
    # the card runs a little out of the photo: measured only with allow_partial; the
    # residual needs two markers or more, so it is judged on the whole card
    photo = full_photo if name == "max_residual_mm" else card_photo
    base = LocateConfig(allow_partial=name != "allow_partial")
    changed = dataclasses.replace(base, **{name: LOCATE_CHANGES[name]})
    assert _locate_result(photo, changed) != _locate_result(photo, base), name
