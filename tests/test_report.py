"""Tests of printcheck.report: overlay, atomic writers, CSV, HTML report, trend plot.

Outlines are checked against skimage.segmentation.find_boundaries (reference library);
files are read back with the standard json/csv modules, images with cv2.imdecode, and the
HTML with the standard html.parser.
"""

from __future__ import annotations

import base64
import csv
import io
import json
import multiprocessing as mp
import os
import resource
import signal
import tempfile
import time
from datetime import datetime
from html.parser import HTMLParser
from pathlib import Path
from urllib.parse import unquote

import cv2
import numpy as np
import pytest
from _hand_results import a_verdict, make_result
from skimage.segmentation import find_boundaries

from printcheck.errors import ReportError
from printcheck.measure import BarePatch
from printcheck.progress import build_progress
from printcheck.records import Progress, Targets
from printcheck.report.files import (
    CSV_COLUMNS,
    CSV_NAME,
    OVERLAY_SUFFIX,
    encode_image,
    is_output_name,
    output_name,
    result_row,
    write_bytes,
    write_csv,
    write_image,
    write_json,
    write_photo_outputs,
)
from printcheck.report.html import write_report
from printcheck.report.overlay import COLOURS, OverlayStyle, draw_overlay, spot_boundaries
from printcheck.report.plots import trend_png
from printcheck.serde import result_to_dict, summarize, summary_from_dict
from printcheck.spec import Spec

FORK = mp.get_context("fork")
SPEC = Spec(
    "slideway",
    "machine slideway (test)",
    25.4,
    min_density=10.0,
    min_cell_density=8.0,
    bearing_min=20.0,
    bearing_max=60.0,
    max_bare_mm=10.0,
)
EVIL = "<script>alert(1)</script>.jpg"

DISCS = (
    (10.0, 10.0, 2.0),
    (35.0, 12.0, 3.0),
    (40.0, 40.0, 1.5),
    (5.0, 45.0, 1.0),
    (20.0, 32.0, 2.5),
)


@pytest.fixture(scope="session")
def result():
    return make_result(
        discs_mm=DISCS, verdict=a_verdict(False), warnings=("glare on 3 % of the window",)
    )


# ------------------------------------------------------------------ overlay


def test_spot_boundaries_by_hand() -> None:
    # a spot's pixels with a 4-neighbour outside it (another spot, the background or
    # past the image border) are its edge; worked by hand
    labels = np.array(
        [
            [1, 1, 1, 0, 0, 0],
            [1, 1, 1, 0, 2, 2],
            [1, 1, 1, 2, 2, 2],
            [0, 0, 0, 2, 2, 2],
            [0, 0, 0, 2, 2, 2],
        ],
        np.int32,
    )
    # every spot pixel is edge but three: (1, 1) inside spot 1, (2, 4) and (3, 4) inside
    # spot 2 (spot 2's right column and bottom row lie on the image border)
    expected = labels > 0
    for row, col in ((1, 1), (2, 4), (3, 4)):
        expected[row, col] = False
    assert np.array_equal(spot_boundaries(labels), expected)
    assert not spot_boundaries(np.zeros((3, 3), np.int32)).any()
    assert spot_boundaries(np.ones((1, 1), np.int32)).all()  # one pixel: all border


def test_spot_boundaries_match_skimage_away_from_the_border(result) -> None:
    labels = result.measurement.labels  # discs well inside the image
    ref = find_boundaries(labels, connectivity=1, mode="inner")  # reference: skimage
    assert np.array_equal(spot_boundaries(labels), ref)


def test_overlay_draws_outlines_where_the_spots_are(result) -> None:
    img = result.rectified.image
    style = OverlayStyle(min_side=1, max_side=10_000)  # scale 1: pixel for pixel
    out = draw_overlay(result, style=style)
    h, w = img.shape[:2]
    # the key is in the report beside the image, not burnt into it
    assert out.shape[:2] == (h, w) and out.dtype == np.uint8
    drawn = np.all(out[:h] == COLOURS["spot"], axis=2)
    truth = find_boundaries(result.measurement.labels, connectivity=1, mode="inner")
    # every outline pixel is on a spot's edge, and most of each edge is drawn (the grid
    # and figures may cover a little)
    assert drawn.sum() > 0
    assert np.all(truth[drawn])
    assert drawn.sum() / truth.sum() > 0.9
    for k in range(1, len(DISCS) + 1):
        edge_k = truth & (result.measurement.labels == k)
        assert (drawn & edge_k).sum() / edge_k.sum() > 0.8, f"spot {k} outline missing"


def test_overlay_scales_to_legible_size_and_draws_guidance() -> None:
    r = make_result(
        discs_mm=DISCS, high=((35.0, 12.0, 8.0, "oversized"),), bare=(BarePatch(15.0, 25.0, 40.0),)
    )
    out = draw_overlay(r, style=OverlayStyle(min_side=720))
    s = 720 / r.rectified.image.shape[0]
    assert out.shape[1] == 720
    body = out[:720]
    # orange ring of radius 4 mm * 4 px/mm * s around (35, 12) mm
    ys, xs = np.nonzero(np.all(body == COLOURS["high"], axis=2))
    assert ys.size > 50
    cx, cy = (35.0 * 4 - 0.0) * s, 12.0 * 4 * s
    rad = np.hypot(xs - cx, ys - cy)
    assert np.median(rad) == pytest.approx(4.0 * 4 * s, rel=0.12)
    # cyan dashes on a circle of radius 7.5 mm about (25, 40) mm
    ys, xs = np.nonzero(np.all(body == COLOURS["bare"], axis=2))
    assert ys.size > 50
    rad = np.hypot(xs - 25.0 * 4 * s, ys - 40.0 * 4 * s)
    assert np.median(rad) == pytest.approx(7.5 * 4 * s, rel=0.08)


def test_overlay_never_modifies_its_inputs(result) -> None:
    rect, m = result.rectified, result.measurement
    arrays = [rect.image, rect.visible, rect.analysed, m.labels]
    before = [a.copy() for a in arrays]
    for a in arrays:
        a.flags.writeable = False  # any in-place write would raise
    try:
        draw_overlay(result)
        draw_overlay(result, style=OverlayStyle(min_side=1, max_side=10_000))
    finally:
        for a in arrays:
            a.flags.writeable = True
    assert all(np.array_equal(a, b) for a, b in zip(arrays, before, strict=True))


def test_overlay_is_fast_on_a_large_window() -> None:
    big = make_result(discs_mm=DISCS * 20, window_mm=101.6, px_per_mm=14.0)  # 1422 px
    t0 = time.perf_counter()
    out = draw_overlay(big)
    elapsed = time.perf_counter() - t0
    assert max(out.shape[:2]) <= 1800 + 200
    assert elapsed < 1.5, f"overlay took {elapsed:.2f} s"


def test_overlay_of_an_empty_print() -> None:
    r = make_result(discs_mm=())
    out = draw_overlay(r)
    assert out.ndim == 3 and not np.all(out[:720] == COLOURS["spot"], axis=2).any()


# ------------------------------------------------------------------ writers


def test_write_json_round_trip_and_no_temp_left(tmp_path: Path, result) -> None:
    data = result_to_dict(result)
    path = write_json(tmp_path / "out", output_name(data["photo"], ".json"), data)
    assert path == tmp_path / "out" / "IMG_0001.json"
    assert json.loads(path.read_text(encoding="utf-8")) == data
    assert path.read_text(encoding="utf-8").startswith('{\n  "format"')  # indent 2
    assert sorted(os.listdir(tmp_path / "out")) == ["IMG_0001.json"]
    with pytest.raises(ReportError, match="not plain JSON"):
        write_json(tmp_path, "x.json", {"a": float("nan")})


def test_names_never_leave_the_output_folder(tmp_path: Path) -> None:
    for bad in ("../x.json", "/etc/x.json", "a/b.json", "..", ""):
        with pytest.raises(ReportError, match="plain file name"):
            write_bytes(tmp_path, bad, b"x")
    for photo in ("../../etc/passwd", EVIL, "a\\b.jpg", "..", "x\x00y.jpg"):
        name = output_name(photo, ".json")
        path = write_bytes(tmp_path / "o", name, b"{}")
        assert path.parent == tmp_path / "o"
    assert output_name("IMG_0042.jpg", ".overlay.png") == "IMG_0042.overlay.png"


def test_csv_round_trip(tmp_path: Path) -> None:
    a = result_to_dict(
        make_result(
            photo='a, "quoted".jpg', verdict=a_verdict(True), warnings=("one; two", "line\nbreak")
        )
    )
    b = result_to_dict(make_result(photo="b.jpg", verdict=None, taken=None))
    path = write_csv(tmp_path, CSV_NAME, [summary_from_dict(a), summary_from_dict(b)])
    with open(path, newline="", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    assert list(rows[0].keys()) == list(CSV_COLUMNS)
    assert rows[0]["photo"] == 'a, "quoted".jpg' and rows[0]["meets"] == "true"
    assert float(rows[0]["density"]) == a["density"]
    assert int(rows[0]["spot_count"]) == a["spot_count"]
    assert float(rows[0]["bearing_percent"]) == a["bearing_percent"]
    assert int(rows[0]["spot_count_low"]) == a["confidence"]["spot_count_low"]
    assert rows[0]["warnings"] == "one; two; line\nbreak"
    assert rows[1]["meets"] == "" and rows[1]["spec"] == "" and rows[1]["taken"] == ""
    assert rows[1] == {k: str(v) for k, v in result_row(summary_from_dict(b)).items()}


def test_images_written_atomically_decode_back(tmp_path: Path) -> None:
    img = np.random.default_rng(3).integers(0, 256, (40, 60, 3), dtype=np.uint8)
    png = write_image(tmp_path, "x.png", img)
    assert np.array_equal(cv2.imread(str(png)), img)  # PNG is lossless
    jpg = write_image(tmp_path, "x.jpg", img)
    assert cv2.imread(str(jpg)).shape == img.shape
    with pytest.raises(ReportError, match="not supported"):
        encode_image(img, ".gif")
    with pytest.raises(ReportError, match="uint8"):
        encode_image(img.astype(float), ".png")


def test_write_photo_outputs(tmp_path: Path, result) -> None:
    data = result_to_dict(result)
    j, p = write_photo_outputs(result, tmp_path)
    assert j.name == "IMG_0001.json" and p.name == "IMG_0001.overlay.png"
    assert json.loads(j.read_text()) == data and cv2.imread(str(p)) is not None


def _as_nobody_write(folder: str, q) -> None:
    if os.geteuid() == 0:
        os.setgid(65534)
        os.setuid(65534)
    try:
        write_bytes(folder, "x.json", b"{}")
        q.put("no error")
    except ReportError as exc:
        q.put(f"ReportError: {exc}")


def test_readonly_folder_gives_report_error() -> None:
    folder = Path(tempfile.mkdtemp(prefix="printcheck-ro-", dir="/tmp"))
    folder.chmod(0o555)
    try:
        q = FORK.Queue()
        p = FORK.Process(target=_as_nobody_write, args=(str(folder), q))
        p.start()
        p.join(30)
        msg = q.get(timeout=5)
    finally:
        folder.chmod(0o755)
        folder.rmdir()
    assert msg.startswith("ReportError: cannot write") and "read-only" in msg and "\n" not in msg


def _full_write(folder: str, q) -> None:
    signal.signal(signal.SIGXFSZ, signal.SIG_IGN)
    resource.setrlimit(resource.RLIMIT_FSIZE, (100_000, 100_000))
    try:
        write_bytes(folder, "big.png", b"z" * 1_000_000)
        q.put("no error")
    except ReportError as exc:
        q.put(f"ReportError: {exc}")


def test_full_disk_gives_report_error_and_leaves_no_partial_file(tmp_path: Path) -> None:
    write_bytes(tmp_path, "big.png", b"old")
    q = FORK.Queue()
    p = FORK.Process(target=_full_write, args=(str(tmp_path), q))
    p.start()
    p.join(30)
    msg = q.get(timeout=5)
    assert msg.startswith("ReportError: cannot write") and "full" in msg
    assert os.listdir(tmp_path) == ["big.png"] and (tmp_path / "big.png").read_bytes() == b"old"


# ------------------------------------------------------------------ HTML


class _Collect(HTMLParser):
    def __init__(self) -> None:
        super().__init__()
        self.tags: list[tuple[str, dict[str, str | None]]] = []
        self.text: list[str] = []

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))

    def handle_data(self, data):
        self.text.append(data)


@pytest.fixture(scope="session")
def report(tmp_path_factory):
    out = tmp_path_factory.mktemp("report")
    rng = np.random.default_rng(5)
    passes = []
    for i in range(4):
        discs = tuple(
            (float(rng.uniform(2, 49)), float(rng.uniform(2, 49)), float(rng.uniform(0.8, 2.0)))
            for _ in range(6 + 8 * i)
        )
        r = make_result(
            photo=EVIL if i == 1 else f"IMG_{i:04d}.jpg",
            taken=datetime(2026, 11, 30, 10 + i),
            discs_mm=discs,
            high=((35.0, 12.0, 8.0, "oversized"),),
            bare=(BarePatch(15.0, 25.0, 40.0),),
            verdict=a_verdict(i == 3),
            warnings=("<b>glare</b> & reflections",) if i == 2 else (),
            seed=i,
        )
        write_json(out, output_name(r.photo, ".json"), result_to_dict(r))
        passes.append((summarize(r), encode_image(draw_overlay(r), ".jpg")))
    write_csv(out, CSV_NAME, [s for s, _ in passes])
    progress = build_progress("bed <front> & way", [s for s, _ in passes], spec=SPEC)
    t0 = time.perf_counter()
    path = write_report(
        out / "report.html",
        surface="bed <front> & way",
        spec=SPEC,
        passes=passes,
        progress=progress,
    )
    elapsed = time.perf_counter() - t0
    return path, passes, progress, elapsed


def test_report_is_self_contained(report) -> None:
    path, passes, _, elapsed = report
    text = path.read_text(encoding="utf-8")
    parser = _Collect()
    parser.feed(text)
    imgs = [a for t, a in parser.tags if t == "img"]
    assert len(imgs) == len(passes) + 1  # every overlay plus the trend plot
    for attrs in imgs:
        src = attrs["src"] or ""
        assert src.startswith(("data:image/png;base64,", "data:image/jpeg;base64,"))
        raw = base64.b64decode(src.split(",", 1)[1])
        assert cv2.imdecode(np.frombuffer(raw, np.uint8), cv2.IMREAD_COLOR) is not None
    assert not [t for t, _ in parser.tags if t in ("script", "iframe", "object", "embed", "link")]
    for _tag, attrs in parser.tags:
        for key in ("href", "src"):
            v = attrs.get(key)
            if v and not v.startswith("data:"):
                assert "://" not in v and not v.startswith(("/", "..")) and "/" not in v
                assert (path.parent / unquote(v)).is_file(), f"dangling link {v}"
    assert "http://" not in text and "https://" not in text
    assert "@media print" in text
    assert elapsed < 5.0


def test_report_escapes_outside_strings(report) -> None:
    path, _, _, _ = report
    text = path.read_text(encoding="utf-8")
    assert "<script>" not in text and "&lt;script&gt;alert(1)&lt;/script&gt;.jpg" in text
    assert "bed &lt;front&gt; &amp; way" in text
    assert "&lt;b&gt;glare&lt;/b&gt; &amp; reflections" in text
    parser = _Collect()
    parser.feed(text)
    assert EVIL in "".join(parser.text)  # shown as text, not run


def test_report_shows_every_pass_and_the_figures(report) -> None:
    path, passes, progress, _ = report
    parser = _Collect()
    parser.feed(path.read_text(encoding="utf-8"))
    text = " ".join(parser.text)
    for n, (s, _) in enumerate(passes, start=1):
        assert f"Pass {n}" in text
        assert f"{s.density:.1f}" in text
    heat = [t for t, a in parser.tags if t == "table" and a.get("class") == "heat"]
    assert len(heat) == 2 * len(passes)
    assert "2 of 4 cells below 20 points" in text  # a check's reason
    assert "does not meet spec" in text and "meets spec" in text
    proj = progress.projection
    if proj and proj.passes_to_spec:
        assert f"{proj.passes_to_spec} more pass" in text


def test_trend_png_is_a_png_of_the_stated_size(report) -> None:
    _, _, progress, _ = report
    png = trend_png(progress, dpi=100)
    img = cv2.imdecode(np.frombuffer(png, np.uint8), cv2.IMREAD_COLOR)
    assert png[:8] == b"\x89PNG\r\n\x1a\n" and img.shape[:2] == (460, 720)
    empty = trend_png(Progress("s", None, None, None, Targets(None, None, None, None), (), None))
    assert empty[:8] == b"\x89PNG\r\n\x1a\n"


def test_report_without_spec_or_progress(tmp_path: Path) -> None:
    d = summarize(make_result(verdict=None))
    path = write_report(tmp_path / "r.html", surface="s", spec=None, passes=[(d, None)])
    text = path.read_text(encoding="utf-8")
    assert "no spec" in text and "<img" not in text
    buf = io.StringIO(text)
    assert buf.read(15) == "<!DOCTYPE html>"


def test_report_lists_the_photos_not_measured(tmp_path: Path) -> None:
    d = summarize(make_result(verdict=None))
    skipped = [("IMG_0002 <i>.jpg", "file is empty"), ("IMG_0003.jpg", "is a named pipe")]
    path = write_report(
        tmp_path / "r.html", surface="s", spec=None, passes=[(d, None)], skipped=skipped
    )
    text = path.read_text(encoding="utf-8")
    assert "<i>.jpg" not in text  # outside text is escaped
    parser = _Collect()
    parser.feed(text)
    joined = "".join(parser.text)
    assert "Not measured: 2 photos" in joined
    for name, reason in skipped:
        assert f"{name}: {reason}" in joined
    alone = write_report(tmp_path / "a.html", surface="s", spec=None, passes=[(d, None)])
    assert "Not measured" not in alone.read_text(encoding="utf-8")


def test_overlays_are_known_by_name() -> None:
    name = output_name("IMG_0042.JPG", OVERLAY_SUFFIX)
    assert name == "IMG_0042.overlay.png" and is_output_name(name)
    assert not is_output_name("IMG_0042.png") and not is_output_name("overlay.jpg")


@pytest.mark.parametrize(
    "name", ["=HYPERLINK(1).jpg", "+1.jpg", "-2.jpg", "@SUM(A1).jpg", "\tx.jpg"]
)
def test_csv_text_a_spreadsheet_would_run_is_inert(tmp_path: Path, name: str) -> None:
    # OWASP, "CSV Injection": cells starting = + - @ tab or CR are formulas to spreadsheet
    # programs; a leading ' makes them text.  Numbers stay numbers; the JSON keeps the name.
    data = summarize(make_result(photo=name, verdict=a_verdict(True)))
    with open(write_csv(tmp_path, CSV_NAME, [data]), newline="", encoding="utf-8") as fh:
        row = next(csv.DictReader(fh))
    assert row["photo"] == "'" + name and data.photo == name
    assert float(row["density"]) == data.density


def test_cell_maps_leave_out_edge_strips_under_a_quarter_cell() -> None:
    # The grid contract (DESIGN.md, "grid and counting"): cells of side `cell` from the
    # window's top-left corner.  The 2 in card (50.8 mm) in 25 mm cells leaves a 0.8 mm
    # strip on the right and at the bottom; it stays in the result (incomplete cells),
    # the maps leave it out and say so.
    import dataclasses

    from _hand_results import make_summary

    from printcheck.records import CellSummary, WindowSummary
    from printcheck.report.html import render_report

    side = [25.0, 25.0, 0.8]
    cells = tuple(
        CellSummary(
            r,
            c,
            side[r] == 25.0 and side[c] == 25.0,
            3 if max(r, c) < 2 else 1,
            # strips: a density no full cell has, to find it on the page if drawn
            12.5 + r + 2 * c if max(r, c) < 2 else 77.7,
            30.0,
            side[r] * side[c],
        )
        for r in range(3)
        for c in range(3)
    )
    window = WindowSummary(50.8, 50.8, 50.8**2)
    mm = [
        dataclasses.replace(make_summary(i, unit="mm", cell=25.0, cells=cells), window=window)
        for i in (1, 2)
    ]
    page = render_report(surface="plate", spec=None, passes=[(s, None) for s in mm])
    parser = _Collect()
    parser.feed(page)
    maps = page.split('<table class="heat')[1:]
    assert len(maps) == 2 * 2 + 1  # two maps a pass and one change table
    for table in maps:
        table = table[: table.index("</table>")]
        assert table.count("<tr>") == 2 and table.count("<td") == 4
        assert "77.7" not in table
    assert len(mm[-1].cells) == 9  # the record keeps the strips
    text = " ".join(parser.text)
    assert text.count("Edge strips under a quarter cell (0.8 mm) are not shown") == 2
    assert "their spots count in the window's figures" in text
    # a grid with no strip (the card in 1 in cells) draws every cell and says nothing
    inch = make_summary(
        3, cells=tuple(CellSummary(r, c, True, 2, 2.0, 30.0, 1.0) for r in (0, 1) for c in (0, 1))
    )
    page = render_report(surface="plate", spec=None, passes=[(inch, None)])
    assert "Edge strips" not in page and page.count("<td") == 8
