"""Tests of the synthetic print renderer and job simulator (printcheck.synth).

Every check compares the renderer with something outside it: surfalize's areal material
ratio (ISO 25178-2), skimage / scipy labelling, OpenCV's ArUco detector, Pillow's EXIF
reader, and counts worked out by hand.
"""

from __future__ import annotations

from datetime import datetime, timedelta

import cv2
import numpy as np
import pytest
from PIL import Image
from scipy import ndimage
from skimage import measure as skmeasure

from printcheck.errors import OptionError
from printcheck.frame import Frame
from printcheck.layout import Window, card_layout, parse_layout, read_layout
from printcheck.synth import (
    Camera,
    Lighting,
    Scene,
    add_exif_time,
    contact_mask,
    field_for_layout,
    make_surface,
    render_photo,
    simulate_job,
    truth_stats,
    write_job,
)

MM2_PER_IN2 = 25.4**2  # international inch, exactly 25.4 mm (1959 agreement)


# --------------------------------------------------------------------------- fixtures


@pytest.fixture(scope="session")
def job():
    return simulate_job(seed=11, passes=6)


@pytest.fixture(scope="session")
def small_surface():
    return make_surface(size_mm=(30.0, 24.0), px_per_mm=20.0, seed=5, form="twist", form_um=3.0)


@pytest.fixture(scope="session")
def aruco_detector():
    dictionary = cv2.aruco.getPredefinedDictionary(cv2.aruco.DICT_4X4_50)
    params = cv2.aruco.DetectorParameters()
    params.cornerRefinementMethod = cv2.aruco.CORNER_REFINE_SUBPIX
    # Refine to convergence (the default stops once a step is under 0.1 px).
    params.cornerRefinementMinAccuracy = 0.001
    params.cornerRefinementMaxIterations = 200
    return cv2.aruco.ArucoDetector(dictionary, params)


# --------------------------------------------------------------------------- surface


@pytest.mark.parametrize("film_um", [0.5, 1.5, 3.0, 6.0])
def test_contact_fraction_is_areal_material_ratio(small_surface, film_um):
    # ISO 25178-2 Smr(c): the share of the area where the surface stands at or above the
    # height c.  surfalize measures heights from the mean plane, so the film depth below
    # the highest point is c = (max - film) - mean of the data handed to it.
    from surfalize import Surface

    h = small_surface.height_um
    step_um = 1000.0 / small_surface.px_per_mm
    centred = h - h.mean()
    surf = Surface(centred, step_um, step_um)
    c = float(centred.max()) - film_um
    smr = surf.Smr(c)
    ours = 100.0 * contact_mask(small_surface, film_um).mean()
    # surfalize samples the material ratio curve at 10 000 classes: 0.01 % resolution.
    assert ours == pytest.approx(smr, abs=0.01)
    assert 0.0 < ours < 100.0


def test_job_contact_is_areal_material_ratio(job):
    # The same ISO 25178-2 check on scraped surfaces of the job (first and last print).
    from surfalize import Surface

    for p in (job.passes[0], job.passes[-1]):
        h = p.field.height_um
        step_um = 1000.0 / p.field.px_per_mm
        centred = h - h.mean()
        smr = Surface(centred, step_um, step_um).Smr(float(centred.max()) - p.film_um)
        assert 100.0 * contact_mask(p.field, p.film_um).mean() == pytest.approx(smr, abs=0.01)


def test_forms_shape_the_surface():
    # A crown is high in the middle, a hollow low in the middle, a twist a saddle
    # (definitions of the form errors, common practice).
    kw = dict(size_mm=(20.0, 20.0), px_per_mm=5.0, seed=1, layers=0, roughness_um=0.0, form_um=4.0)
    crown = make_surface(form="crown", **kw).height_um
    hollow = make_surface(form="hollow", **kw).height_um
    twist = make_surface(form="twist", **kw).height_um
    mid = (50, 50)
    assert crown[mid] > crown[0, 0] + 3.9
    assert hollow[mid] < hollow[0, 0] - 3.9
    assert twist[0, 0] > 0 and twist[-1, -1] > 0 and twist[0, -1] < 0 and twist[-1, 0] < 0
    with pytest.raises(OptionError, match="form must be"):
        make_surface(form="wavy", **kw)  # type: ignore[arg-type]


def test_make_surface_is_seeded_and_crosshatched(small_surface):
    again = make_surface(size_mm=(30.0, 24.0), px_per_mm=20.0, seed=5, form="twist", form_um=3.0)
    assert np.array_equal(again.height_um, small_surface.height_um)
    lay = small_surface.lay_rad[np.isfinite(small_surface.lay_rad)]
    # Two crossing stroke directions near +45 and -45 degrees.
    deg = np.degrees(lay)
    assert ((deg > 25) & (deg < 65)).mean() > 0.15
    assert ((deg < -25) & (deg > -65)).mean() > 0.15


# --------------------------------------------------------------------------- truth


def test_truth_counts_agree_with_skimage_labelling(job):
    # Independent recount with skimage.measure.label/regionprops (8-connected) by the
    # docs/formats.md rules: specks under 0.1 mm^2 dropped, a spot counts in the window that
    # holds its centroid, bearing on the window area.
    layout = job.layout
    w = layout.window
    for p in job.passes:
        t = p.truth
        s = t.frame.px_per_mm
        raw = contact_mask(p.field, p.film_um) & t.visible
        labels = skmeasure.label(raw, connectivity=2)
        count = 0
        kept = np.zeros_like(raw)
        for region in skmeasure.regionprops(labels):
            if region.area / s**2 < 0.1:
                continue
            kept[labels == region.label] = True
            r, c = region.centroid
            x, y = t.frame.to_mm(r, c)
            if w.x_mm <= x < w.x_mm + w.width_mm and w.y_mm <= y < w.y_mm + w.height_mm:
                count += 1
        assert t.spot_count == count
        area_mm2 = t.analysed.sum() / s**2
        assert area_mm2 == pytest.approx(w.area_mm2, rel=1e-9)
        assert t.density == pytest.approx(count * MM2_PER_IN2 / area_mm2)
        assert t.bearing_percent == pytest.approx(
            100.0 * (kept & t.analysed).sum() / t.analysed.sum()
        )
        assert np.array_equal(t.mask, kept)
        assert sum(cell.spot_count for cell in t.cells) == t.spot_count
        # scipy.ndimage.label (8-connected) finds one component per listed spot.
        _, n = ndimage.label(t.mask, structure=np.ones((3, 3), dtype=bool))
        assert n == t.spot_area_mm2.size


def test_truth_on_hand_built_mask():
    # A 4 x 4 mm window at 2 px/mm (one pixel = 0.25 mm^2), cells of 2 mm.
    window = Window(0.0, 0.0, 4.0, 4.0)
    frame = Frame(px_per_mm=2.0, origin_mm=(0.0, 0.0), shape=(8, 8), window=window)
    mask = np.zeros((8, 8), dtype=bool)
    mask[0:2, 0:2] = True  # 1.00 mm^2, centroid (0.5, 0.5) mm: cell (0, 0)
    mask[0, 6] = True  # 0.25 mm^2 at (3.25, 0.25): cell (0, 1)
    mask[5:7, 5] = True  # 0.50 mm^2 ...
    mask[7, 6] = True  # ... diagonal to it, 8-connected: one spot of 0.75 mm^2, centroid
    #                    rows 6, cols 5.33 -> (2.92, 3.25) mm: cell (1, 1)
    mask[6, 1] = True  # a speck when the minimum is 0.3 mm^2; else cell (1, 0)
    analysed = np.ones((8, 8), dtype=bool)
    t = truth_stats(mask, frame=frame, analysed=analysed, cell_mm=2.0, min_spot_mm2=0.3)
    # By hand: spots of 1.00 and 0.75 mm^2 (the 3-pixel L joined diagonally) remain;
    # the two single pixels are specks.  Window 16 mm^2, cell 4 mm^2.
    assert t.spot_count == 2
    assert t.density == pytest.approx(2 * 4.0 / 16.0)
    assert t.bearing_percent == pytest.approx(100.0 * 7 / 64)
    assert sorted(np.round(t.spot_area_mm2, 6)) == [0.75, 1.0]
    counts = {(c.row, c.col): c.spot_count for c in t.cells}
    assert counts == {(0, 0): 1, (0, 1): 0, (1, 0): 0, (1, 1): 1}
    bearing = {(c.row, c.col): c.bearing_percent for c in t.cells}
    assert bearing[(0, 0)] == pytest.approx(100 * 4 / 16)
    assert bearing[(1, 1)] == pytest.approx(100 * 3 / 16)
    assert all(c.complete and c.area_mm2 == pytest.approx(4.0) for c in t.cells)
    # With the default 0.1 mm^2 minimum the two single pixels count as well.
    t2 = truth_stats(mask, frame=frame, analysed=analysed, cell_mm=2.0)
    assert t2.spot_count == 4
    # Centroid rule: the spot at (2.92, 3.25) mm leaves the count when the window stops at x = 2.5.
    frame3 = Frame(
        px_per_mm=2.0, origin_mm=(0.0, 0.0), shape=(8, 8), window=Window(0.0, 0.0, 2.5, 4.0)
    )
    analysed3 = np.zeros((8, 8), dtype=bool)
    analysed3[:, :5] = True
    t3 = truth_stats(mask, frame=frame3, analysed=analysed3, cell_mm=2.0, min_spot_mm2=0.3)
    assert t3.spot_count == 1
    assert t3.area_mm2 == pytest.approx(10.0)
    assert [c.complete for c in t3.cells] == [True, False, True, False]


def test_exclusion_is_a_groove_without_contact():
    layout = parse_layout(
        {
            "name": "grooved",
            "dictionary": "DICT_4X4_50",
            "window": {"x": 0, "y": 0, "width": 30, "height": 20, "margin": 2},
            "marker": [{"id": 4, "corners": [[-14, 2], [-4, 2], [-4, 12], [-14, 12]]}],
            "exclude": [{"points": [[12, -2], [16, -2], [16, 22], [12, 22]]}],
        }
    )
    fld = field_for_layout(layout, px_per_mm=10.0, seed=3, pad_mm=3.0)
    assert fld.excluded is not None
    # The groove is 4 mm x (window height + pad) wide, by pixel centres.
    cols = np.nonzero(fld.excluded.any(axis=0))[0]
    assert (cols.max() - cols.min() + 1) / fld.px_per_mm == pytest.approx(4.0, abs=0.11)
    assert not (contact_mask(fld, 20.0) & fld.excluded).any()


# --------------------------------------------------------------------------- job


def test_job_density_rises_pass_after_pass(job):
    # In the shop each spotting pass raises the count: a few points per square inch on a
    # roughed surface, past 20 when finished (common practice).
    d = job.densities
    assert len(d) == 6
    assert all(b > a for a, b in zip(d, d[1:], strict=False)), d
    assert d[0] < 8.0
    assert d[-1] > 20.0
    bearing = [p.truth.bearing_percent for p in job.passes]
    assert bearing[-1] > bearing[0]


# --------------------------------------------------------------------------- photos


@pytest.mark.parametrize(
    "tilt,rotation,axis",
    [(0.0, 0.0, 0.0), (15.0, 30.0, 60.0), (30.0, -110.0, 10.0), (40.0, 200.0, 135.0)],
)
def test_markers_reproject_within_half_a_pixel(job, aruco_detector, tilt, rotation, axis):
    # OpenCV's ArUco detector (sub-pixel corner refinement) on the decoded JPEG must find
    # each marker where the homography puts the layout's corners, within 0.5 px.
    layout = job.layout
    scene = Scene(
        field=job.passes[3].field,
        film_um=job.passes[3].film_um,
        image_size=(1200, 900),
        camera=Camera(
            tilt_deg=tilt, rotation_deg=rotation, window_fraction=0.3, tilt_axis_deg=axis
        ),
        lighting=Lighting(glare=0.25, jpeg_quality=88, noise_sigma=2.0, blur_sigma_px=0.8),
    )
    shot = render_photo(scene, seed=4)
    assert shot.jpeg is not None and shot.jpeg[:2] == b"\xff\xd8"
    corners, ids, _ = aruco_detector.detectMarkers(shot.image)
    assert ids is not None
    found = sorted(int(i) for i in ids.ravel())
    assert found == [0, 1, 2, 3]
    hom = shot.homography
    for c, i in zip(corners, ids.ravel(), strict=True):
        layout_pts = np.array(layout.marker(int(i)).corners_mm, dtype=np.float64).reshape(-1, 1, 2)
        expected = cv2.perspectiveTransform(layout_pts, hom).reshape(4, 2)
        err = np.linalg.norm(c.reshape(4, 2) - expected, axis=1)
        assert err.max() < 0.5, (int(i), err)


def test_marker_edges_are_where_the_homography_puts_them(job):
    # Independent of any detector: square-on, no blur, no noise, the ink coverage of the
    # pixel row that holds a marker's top edge equals the exact area fraction
    # (pixel centres at integer coordinates, OpenCV convention) within 1/16.
    scene = Scene(
        field=job.passes[0].field,
        film_um=job.passes[0].film_um,
        camera=Camera(window_fraction=0.3),
        lighting=Lighting(
            jpeg_quality=None,
            noise_sigma=0.0,
            blur_sigma_px=0.0,
            vignetting=0.0,
            gradient=0.0,
            haze=0.0,
        ),
    )
    shot = render_photo(scene, seed=0)
    g = shot.image[..., 1].astype(float)
    tl, tr, _, bl = shot.marker_corners_px[0]
    paper = np.median(g[int(tl[1]) - 6, int(tl[0]) + 5 : int(tr[0]) - 5])
    ink = np.median(g[int(tl[1]) + 4, int(tl[0]) + 5 : int(tr[0]) - 5])
    row = int(np.floor(tl[1] + 0.5))
    expected = row + 0.5 - tl[1]  # share of pixel row `row` below the edge
    measured = (paper - np.median(g[row, int(tl[0]) + 5 : int(tr[0]) - 5])) / (paper - ink)
    assert measured == pytest.approx(expected, abs=1 / 16 + 0.02)
    col = int(np.floor(tl[0] + 0.5))
    expected = col + 0.5 - tl[0]
    measured = (paper - np.median(g[int(tl[1]) + 5 : int(bl[1]) - 5, col])) / (paper - ink)
    assert measured == pytest.approx(expected, abs=1 / 16 + 0.02)


def test_square_on_photo_shows_the_truth():
    # A square-on photo (camera=None) is the layout frame at px_per_mm; a plain colour
    # rule (blue well above red) recovers the truth's spots: intersection over union.
    scene = Scene(
        density=14.0,
        camera=None,
        px_per_mm=10.0,
        lighting=Lighting(jpeg_quality=None, glare=0.0, noise_sigma=1.0),
    )
    shot = render_photo(scene, seed=2)
    assert shot.jpeg is None
    h, w = shot.image.shape[:2]
    assert (w, h) == (508, 508)
    # The truth mask resampled to the photo's pixels (truth grid is 20 px/mm).
    t = shot.truth
    rs, cs = t.frame.window_slices()
    truth = cv2.resize(t.mask[rs, cs].astype(np.uint8), (w, h), interpolation=cv2.INTER_AREA) > 0
    img = shot.image.astype(int)
    spots = (img[..., 0] - img[..., 2]) > 60
    iou = (spots & truth).sum() / (spots | truth).sum()
    assert iou > 0.75, iou
    assert 8.0 < t.density < 25.0


def test_work_coated_red_print_is_bright_on_red(job):
    p = job.passes[4]
    shot = render_photo(
        Scene(
            field=p.field,
            film_um=p.film_um,
            compound="red",
            compound_on="work",
            camera=None,
            px_per_mm=8.0,
            lighting=Lighting(jpeg_quality=None),
        ),
        seed=1,
    )
    t = p.truth
    rs, cs = t.frame.window_slices()
    h, w = shot.image.shape[:2]
    truth = (
        cv2.resize(t.mask[rs, cs].astype(np.uint8) * 255, (w, h), interpolation=cv2.INTER_AREA)
        > 250
    )
    coat = (
        cv2.resize((~t.mask[rs, cs]).astype(np.uint8) * 255, (w, h), interpolation=cv2.INTER_AREA)
        > 250
    )
    img = shot.image.astype(float)
    redness = img[..., 2] - img[..., 0]
    # Spots are rubbed-through metal (grey, bright), the rest red paste.
    assert redness[coat].mean() > redness[truth].mean() + 60
    assert img[truth].mean() > img[coat].mean()


def test_scene_errors():
    with pytest.raises(OptionError, match="compound must be"):
        render_photo(Scene(compound="green", density=3.0), seed=0)  # type: ignore[arg-type]


def test_add_exif_time_is_readable_by_pillow():
    img = np.full((16, 16, 3), 128, dtype=np.uint8)
    ok, buf = cv2.imencode(".jpg", img)
    assert ok
    when = datetime(2026, 5, 4, 13, 2, 9)
    data = add_exif_time(buf.tobytes(), when)
    import io

    with Image.open(io.BytesIO(data)) as im:
        exif = im.getexif()
        assert exif[306] == "2026:05:04 13:02:09"
        assert exif.get_ifd(0x8769)[36867] == "2026:05:04 13:02:09"
        assert np.array_equal(np.asarray(im), cv2.imdecode(buf, cv2.IMREAD_COLOR)[..., ::-1])


def test_write_job_writes_dated_photos_and_layout(job, tmp_path):
    start = datetime(2026, 11, 30, 9, 0, 0)
    photos = write_job(
        tmp_path,
        job=job,
        start=start,
        interval=timedelta(minutes=40),
        image_size=(640, 480),
        shuffle_names=True,
        surface_name="bed-front-way",
    )
    assert len(photos) == 6
    layout = read_layout(tmp_path / "layout.toml")
    assert layout.marker_ids == card_layout().marker_ids
    names = [p.file for p in photos]
    assert len(set(names)) == 6 and all(n.startswith("IMG_") for n in names)
    times = []
    for p in photos:
        with Image.open(tmp_path / p.file) as im:
            stamp = im.getexif().get_ifd(0x8769)[36867]
            assert im.size == (640, 480)
        taken = datetime.strptime(stamp, "%Y:%m:%d %H:%M:%S")
        assert taken == p.taken
        times.append(taken)
    assert times == sorted(times)
    assert [p.density for p in photos] == pytest.approx(list(job.densities))
    total = sum((tmp_path / n).stat().st_size for n in names)
    assert total < 3_000_000


def test_colour_smoothing_blurs_the_chroma_and_keeps_the_brightness():
    # a phone's colour noise reduction: the chroma of YCrCb (cv2's conversion, ITU-R
    # BT.601) is smoothed, the luma is not; rendered without JPEG, with the same seed
    def shot(colour_blur_px: float) -> np.ndarray:
        light = Lighting(colour_blur_px=colour_blur_px, jpeg_quality=None)
        scene = Scene(density=20, camera=None, px_per_mm=10.0, lighting=light)
        ycc = cv2.cvtColor(render_photo(scene, seed=3).image, cv2.COLOR_BGR2YCrCb)
        return ycc.astype(np.float64)

    sharp, smoothed = shot(0.0), shot(2.0)
    # luma: the same to the 8-bit rounding of the round trip through YCrCb
    assert np.abs(smoothed[..., 0] - sharp[..., 0]).mean() < 1.0
    # chroma: its pixel-to-pixel changes (a Laplacian's energy) fall several-fold
    for k in (1, 2):
        before = ndimage.laplace(sharp[..., k]).std()
        after = ndimage.laplace(smoothed[..., k]).std()
        assert after < 0.3 * before, (k, before, after)


def test_the_srgb_tone_curve_is_the_standards() -> None:
    # a neutral grey stored through the sRGB curve (IEC 61966-2-1) decodes back to its
    # light: scikit-image's rgb2xyz undoes the curve, and a grey's Y is its linear level
    # (the luminance row of the sRGB matrix sums to 1)
    from skimage.color import rgb2xyz

    from printcheck.synth.render import srgb_encoded

    light = np.linspace(0.0, 255.0, 256, dtype=np.float32)
    stored = srgb_encoded(light)
    grey = np.repeat((stored / 255.0)[:, None], 3, axis=1)[None]
    assert np.allclose(rgb2xyz(grey)[0, :, 1], light / 255.0, atol=1e-5)
    # an 18 % grey card is stored at about 46 % (118 of 255): common practice
    assert abs(srgb_encoded(np.float32([0.18 * 255]))[0] - 118.0) < 1.0


def test_an_unknown_tone_curve_is_refused() -> None:
    with pytest.raises(OptionError, match="tone"):
        render_photo(Scene(density=8, camera=None, lighting=Lighting(tone="log")), seed=3)  # type: ignore[arg-type]
