"""Where contacts appeared and disappeared between two passes (printcheck.compare).

The backbone is two renders of one surface from printcheck.synth, the second with twelve
contacts added in a known region (cell B2 of the 2 in card, x and y 30-46 mm, as in
tests/test_report_change.py): the truth is how the surface was made.  The figures are
cross-checked against scipy.ndimage and skimage.measure on the same masks.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from _hand_results import make_summary, with_added_contacts
from scipy import ndimage

from printcheck.compare import (
    APPEARED_RGB,
    CONTACTS_FOLDER,
    DISAPPEARED_RGB,
    KEPT_RGB,
    ContactMap,
    change_view,
    change_words,
    compare_contacts,
    contact_map,
    contacts_name,
    decode_contacts,
    draw_change,
    encode_contacts,
    same_place,
)
from printcheck.errors import ReportError
from printcheck.frame import Frame
from printcheck.layout import Window, card_layout
from printcheck.report.html import render_report

# the region the contacts were added in (mm, layout frame), and its centre
_REGION = (30.0, 46.0)
_ADDED_CENTRE = (37.0, 37.0)  # mean of the added discs' centres x 31-43, y 32-42


def _map_of(field, px_per_mm: float = 10.0) -> ContactMap:  # type: ignore[no-untyped-def]
    from printcheck.measure import MeasureConfig, measure
    from printcheck.segment import SegmentConfig, segment
    from printcheck.synth import Scene, render_photo
    from printcheck.synth.truth import layout_masks

    layout = card_layout()
    shot = render_photo(Scene(layout=layout, field=field, camera=None, px_per_mm=px_per_mm), seed=1)
    w = layout.window
    frame = Frame(
        px_per_mm=px_per_mm, origin_mm=(w.x_mm, w.y_mm), shape=shot.image.shape[:2], window=w
    )
    visible, analysed = layout_masks(layout, frame)
    seg = segment(
        shot.image, visible=visible, analysed=analysed, config=SegmentConfig(px_per_mm=px_per_mm)
    )
    meas = measure(seg.mask, frame=frame, analysed=analysed, config=MeasureConfig(cell_mm=25.4))
    return contact_map(meas.labels > 0, analysed, frame, cell_mm=25.4)


@pytest.fixture(scope="module")
def field():  # type: ignore[no-untyped-def]
    from printcheck.synth.job import surface_at_density

    return surface_at_density(card_layout(), 10, seed=5, px_per_mm=14.0, film_um=1.5)


@pytest.fixture(scope="module")
def two_maps(field):  # type: ignore[no-untyped-def]
    return _map_of(field), _map_of(with_added_contacts(field))


def _in_region(frame: Frame, shape: tuple[int, int]) -> np.ndarray:
    x, y = frame.to_mm(np.arange(shape[0]), np.arange(shape[1]))
    lo, hi = _REGION
    return ((y[:, None] >= lo) & (y[:, None] < hi)) & ((x[None, :] >= lo) & (x[None, :] < hi))


# --------------------------------------------------------------------------- renders


def test_appeared_contacts_lie_where_they_were_added(two_maps) -> None:  # type: ignore[no-untyped-def]
    before, after = two_maps
    change = compare_contacts(before, after)
    # twelve discs of 0.6 mm radius: 13.6 mm² added (some on contacts already there)
    added_mm2 = 12 * np.pi * 0.6**2
    assert 0.4 * added_mm2 <= change.appeared_mm2 <= 2.0 * added_mm2
    cx, cy = change.appeared_centroid_mm  # type: ignore[misc]
    # within 3 mm of the added discs' centroid (discs that fall on contacts already
    # there add less; measured 0.5 mm)
    assert np.hypot(cx - _ADDED_CENTRE[0], cy - _ADDED_CENTRE[1]) <= 3.0
    inside = _in_region(change.frame, change.appeared.shape)
    assert change.appeared[inside].sum() >= 0.8 * change.appeared.sum()
    # little change elsewhere: the same surface rendered twice with the same seed
    outside = ~inside & change.compared
    assert change.appeared[outside].sum() / outside.sum() < 0.005
    assert change.disappeared_mm2 < 0.2 * change.appeared_mm2
    # cell B2 (row 1, col 1) holds the gain
    b2 = next(c for c in change.cells if (c.row, c.col) == (1, 1))
    assert b2.label == "B2"
    assert b2.appeared_mm2 >= 0.8 * change.appeared_mm2
    assert b2.appeared_percent > 1.5
    assert change.kept_mm2 > 10 * change.appeared_mm2  # the print before is still there


def test_figures_match_scipy(two_maps) -> None:  # type: ignore[no-untyped-def]
    before, after = two_maps
    change = compare_contacts(before, after)
    s = change.frame.px_per_mm
    # reference: scipy.ndimage labelled sums over a cell label image built independently
    rows, cols = change.appeared.shape
    x, y = change.frame.to_mm(np.arange(rows), np.arange(cols))
    cell_r = np.minimum((y // 25.4).astype(int), 1)
    cell_c = np.minimum((x // 25.4).astype(int), 1)
    cell_id = cell_r[:, None] * 2 + cell_c[None, :] + 1
    for name in ("appeared", "disappeared", "kept", "compared"):
        mask = getattr(change, name)
        per_cell = ndimage.sum_labels(mask, cell_id, index=[1, 2, 3, 4]) / s**2
        got = [getattr(c, f"{name}_mm2") for c in change.cells]
        np.testing.assert_allclose(got, per_cell, rtol=1e-12)
        assert getattr(change, f"{name}_mm2") == pytest.approx(mask.sum() / s**2)
    # scipy.ndimage: the centroid of the appeared region as one region
    cy_px, cx_px = ndimage.center_of_mass(change.appeared)
    x_ref, y_ref = change.frame.to_mm(np.array(cy_px), np.array(cx_px))
    assert change.appeared_centroid_mm == pytest.approx((float(x_ref), float(y_ref)))
    # the masks partition what was compared: kept/appeared/disappeared never overlap
    assert not (change.appeared & change.disappeared).any()
    assert not (change.appeared & change.kept).any()


def test_a_coarser_photo_of_the_same_print_compares_at_its_resolution(field, two_maps) -> None:  # type: ignore[no-untyped-def]
    before, after = two_maps
    coarse_after = _map_of(with_added_contacts(field), px_per_mm=7.0)
    change = compare_contacts(before, coarse_after)
    assert change.frame.px_per_mm == 7.0
    fine = compare_contacts(before, after)
    cx, cy = change.appeared_centroid_mm  # type: ignore[misc]
    assert np.hypot(cx - _ADDED_CENTRE[0], cy - _ADDED_CENTRE[1]) <= 3.0
    # resampling blurs the edges of every contact: the change grows, but stays in B2
    b2 = next(c for c in change.cells if c.label == "B2")
    assert b2.appeared_mm2 >= 0.5 * change.appeared_mm2
    assert change.kept_mm2 == pytest.approx(fine.kept_mm2, rel=0.25)


def test_photos_from_other_camera_poses_register_through_the_card(field) -> None:  # type: ignore[no-untyped-def]
    # the whole pipeline: each photo's markers rectify it to the layout frame, so two
    # photos of the same print taken from different poses lie one on the other
    from printcheck.compare import contact_map_of
    from printcheck.options import InspectOptions
    from printcheck.pipeline import inspect_image
    from printcheck.synth import Scene, render_photo
    from printcheck.synth.render import Camera

    def photographed(surface, camera: Camera, seed: int) -> ContactMap:  # type: ignore[no-untyped-def]
        scene = Scene(layout=card_layout(), field=surface, camera=camera, image_size=(1600, 1200))
        result = inspect_image(render_photo(scene, seed=seed).image, options=InspectOptions())
        return contact_map_of(result)

    first = Camera(tilt_deg=12.0, rotation_deg=8.0, window_fraction=0.36, tilt_axis_deg=30.0)
    second = Camera(tilt_deg=25.0, rotation_deg=-15.0, window_fraction=0.34, tilt_axis_deg=200.0)
    before = photographed(field, first, 1)
    unchanged = compare_contacts(before, photographed(field, second, 2))
    # the same print: under 1 % of its contact area appears or disappears (measured 0.3 %)
    contact_mm2 = unchanged.kept_mm2
    assert unchanged.appeared_mm2 < 0.01 * contact_mm2
    assert unchanged.disappeared_mm2 < 0.01 * contact_mm2
    change = compare_contacts(before, photographed(with_added_contacts(field), second, 2))
    cx, cy = change.appeared_centroid_mm  # type: ignore[misc]
    assert np.hypot(cx - _ADDED_CENTRE[0], cy - _ADDED_CENTRE[1]) <= 3.0
    inside = _in_region(change.frame, change.appeared.shape)
    assert change.appeared[inside].sum() >= 0.8 * change.appeared.sum()


# --------------------------------------------------------------------------- hand-built


def _tiny(state: np.ndarray, s: float = 1.0, cell: float = 4.0) -> ContactMap:
    rows, cols = state.shape
    return ContactMap(state.astype(np.uint8), s, (0.0, 0.0), Window(0, 0, cols / s, rows / s), cell)


def test_exact_answer_on_a_hand_built_pair() -> None:
    before = np.ones((8, 8), np.uint8)
    after = np.ones((8, 8), np.uint8)
    before[0:2, 0:2] = 2  # lost in A1
    after[5:7, 5:8] = 2  # gained in B2
    before[1, 6] = after[1, 6] = 2  # kept in B1
    before[4, 2] = after[4, 3] = 2  # one contact seen a pixel apart (1.5 px tolerance): kept
    after[7, 0] = 0  # not seen in the later photo
    change = compare_contacts(_tiny(before), _tiny(after))
    assert (change.appeared_mm2, change.disappeared_mm2, change.kept_mm2) == (6.0, 4.0, 3.0)
    assert change.compared_mm2 == 63.0
    # pixel (row, col) centres at (col + 0.5, row + 0.5) mm
    assert change.appeared_centroid_mm == pytest.approx((6.5, 6.0))
    assert change.disappeared_centroid_mm == pytest.approx((1.0, 1.0))
    by = {c.label: c for c in change.cells}
    assert by["A1"].disappeared_mm2 == 4.0 and by["B2"].appeared_mm2 == 6.0
    assert by["B1"].kept_mm2 == 1.0 and by["A2"].kept_mm2 == 2.0
    assert by["A2"].compared_mm2 == 15.0
    assert by["B2"].appeared_percent == pytest.approx(100 * 6 / 16)


def test_the_map_is_cropped_to_the_window_and_round_trips() -> None:
    w = Window(2.0, 1.0, 4.0, 3.0)
    frame = Frame(2.0, (0.0, 0.0), (10, 14), w)
    contact = np.zeros((10, 14), bool)
    contact[3, 5] = contact[0, 0] = True  # the second lies outside the window
    analysed = np.ones((10, 14), bool)
    analysed[4, 6] = False
    cmap = contact_map(contact, analysed, frame, cell_mm=2.0)
    assert cmap.state.shape == (6, 8)
    assert cmap.origin_mm == (2.0, 1.0)
    assert cmap.state[1, 1] == 2 and cmap.state[2, 2] == 0 and (cmap.state == 2).sum() == 1
    data = encode_contacts(cmap, photo="IMG_1.jpg", sha256="ab" * 32)
    back = decode_contacts(data)
    np.testing.assert_array_equal(back.state, cmap.state)
    assert (back.px_per_mm, back.origin_mm, back.window, back.cell_mm) == (
        2.0,
        (2.0, 1.0),
        w,
        2.0,
    )
    assert len(data) < 1000  # a 2-bit PNG
    assert contacts_name("AB" * 32) == "ab" * 32 + ".png"


def test_maps_that_are_not_maps_are_refused() -> None:
    with pytest.raises(ReportError, match="not a PNG"):
        decode_contacts(b"not a png", name="x.png")
    import io

    from PIL import Image

    buf = io.BytesIO()
    Image.new("P", (4, 4)).save(buf, format="PNG")
    with pytest.raises(ReportError, match="not a printcheck contact map"):
        decode_contacts(buf.getvalue())
    a = _tiny(np.ones((8, 8)))
    b = dataclasses.replace(a, window=Window(0, 0, 10, 10))
    with pytest.raises(ValueError, match="different windows"):
        compare_contacts(a, b)


def test_colours_tell_apart_in_grey() -> None:
    # ITU-R BT.601 luma: the three states and white stay at least 40 levels apart printed
    # in grey; blue against vermillion is a pair of Okabe and Ito's colour-universal-design
    # palette (Okabe & Ito, "Color Universal Design", 2008; cited from memory; blue darkened)
    def luma(rgb: tuple[int, int, int]) -> float:
        return 0.299 * rgb[0] + 0.587 * rgb[1] + 0.114 * rgb[2]

    levels = sorted(luma(c) for c in (APPEARED_RGB, DISAPPEARED_RGB, KEPT_RGB, (255, 255, 255)))
    assert min(np.diff(levels)) >= 40
    change = compare_contacts(
        _tiny(np.pad(np.full((2, 2), 2), 3, constant_values=1)), _tiny(np.ones((8, 8)))
    )
    image = draw_change(change)
    assert image.shape == (8, 8, 3)
    assert tuple(image[3, 3]) == DISAPPEARED_RGB  # row and column 4 are a cell edge


def test_the_report_shows_the_change_from_the_kept_maps(tmp_path, two_maps) -> None:  # type: ignore[no-untyped-def]
    before, after = two_maps
    folder = tmp_path / CONTACTS_FOLDER
    folder.mkdir()
    s0 = make_summary(1, sha256="a" * 64)
    s1 = make_summary(2, sha256="b" * 64)
    (folder / contacts_name("a" * 64)).write_bytes(encode_contacts(before))
    (folder / contacts_name("b" * 64)).write_bytes(encode_contacts(after))
    view = change_view(tmp_path, s1, s0)
    assert view is not None and view.png.startswith(b"\x89PNG")
    assert "cell B2" in change_words(view.change, s1, s0)[0]
    page = render_report(surface="bed", spec=None, passes=[(s0, None), (s1, None)], folder=tmp_path)
    section = page[page.index('id="pass-2"') : page.index('id="pass-1"')]
    assert 'class="overlay change"' in section and "most appeared in cell B2" in section
    # no maps (a pass measured before they were kept): no view, and the page still renders
    assert change_view(tmp_path, s1, make_summary(3, sha256="c" * 64)) is None
    assert change_view(None, s1, s0) is None


def test_batch_keeps_a_map_per_photo_and_reports_the_change(small_job, tmp_path, capsys) -> None:  # type: ignore[no-untyped-def]
    import hashlib

    from printcheck.cli import main

    folder, photos = small_job
    out = tmp_path / "out"
    before = {p: hashlib.sha256(p.read_bytes()).hexdigest() for p in folder.iterdir()}
    code = main(
        ["batch", str(folder), "--layout", str(folder / "layout.toml"), "--surface", "w"]
        + ["--out", str(out), "--db", str(tmp_path / "h.sqlite")]
    )
    capsys.readouterr()
    assert code == 0
    maps = sorted((out / CONTACTS_FOLDER).glob("*.png"))
    shas = {hashlib.sha256((folder / p.file).read_bytes()).hexdigest() for p in photos}
    assert {m.stem for m in maps} == shas
    assert all(m.stat().st_size < 40_000 for m in maps)  # a 2-bit PNG of the window
    page = (out / "report.html").read_text(encoding="utf-8")
    assert page.count('class="overlay change"') == len(photos) - 1
    # the photo folder is untouched: no file added, none changed
    assert {p: hashlib.sha256(p.read_bytes()).hexdigest() for p in folder.iterdir()} == before


def test_same_place_needs_one_station_in_two_passes() -> None:
    a = _tiny(np.ones((4, 4)))

    def at(station: str | None, pass_key: str | None) -> ContactMap:
        return dataclasses.replace(a, station=station, pass_key=pass_key)

    assert same_place(a, a)  # passes of one photo each: the surface's one place
    assert same_place(at("1", "p1"), at("1", "p2"))
    assert not same_place(at("1", "p1"), at("2", "p2"))  # another station
    assert not same_place(at("1", "p1"), at("2", "p1"))  # two stations of one pass
    data = encode_contacts(at("tailstock", "pass3"))
    back = decode_contacts(data)
    assert (back.station, back.pass_key) == ("tailstock", "pass3")


def test_a_batch_of_stations_compares_only_a_station_with_itself(
    small_job, tmp_path, capsys
) -> None:  # type: ignore[no-untyped-def]
    import shutil

    from printcheck.cli import main

    folder, photos = small_job
    job = tmp_path / "job"
    job.mkdir()
    shutil.copy(folder / "layout.toml", job / "layout.toml")
    # taken in this order: pass 1 station 1, pass 1 station 2, pass 2 station 1
    for photo, name in zip(photos, ("p1-st1.jpg", "p1-st2.jpg", "p2-st1.jpg"), strict=True):
        shutil.copy2(folder / photo.file, job / name)
    out = tmp_path / "out"
    code = main(
        ["batch", str(job), "--layout", str(job / "layout.toml"), "--surface", "w"]
        + ["--group", "name", "--out", str(out), "--db", str(tmp_path / "h.sqlite")]
    )
    capsys.readouterr()
    assert code == 0
    maps = {m.stem: decode_contacts(m.read_bytes()) for m in (out / CONTACTS_FOLDER).iterdir()}
    assert sorted((m.station, m.pass_key) for m in maps.values()) == [
        ("1", "pass 1"),
        ("1", "pass 2"),
        ("2", "pass 1"),
    ]
    # each photo is laid on its own station's pass before: only pass 2's station 1 has
    # one (station 2 was photographed once), and it is laid on pass 1's station 1
    page = (out / "report.html").read_text(encoding="utf-8")
    assert page.count('class="overlay change"') == 1
    assert "contacts of p2-st1.jpg laid on those of p1-st1.jpg" in page
