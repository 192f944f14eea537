"""Bad input through the command line: exit 2, one line that says what is wrong, nothing lost.

Every case runs ``printcheck.cli.main([...])`` in-process (stderr captured) and a few run
``python -m printcheck`` in a child process, to prove no traceback or library chatter
reaches the terminal.  Good photos are drawn here: the built-in card's ArUco markers
(cv2.aruco.generateImageMarker, the reference library) at their layout positions on white
paper, a grey window, and blue discs whose number and place are known from the drawing.
The history is compared row by row (and byte by byte) before and after each failing command.
"""

from __future__ import annotations

import hashlib
import json
import multiprocessing as mp
import os
import shutil
import signal
import sqlite3
import stat
import struct
import subprocess
import sys
import tempfile
import zlib
from pathlib import Path
from typing import Any

import cv2
import numpy as np
import pytest
from PIL import Image

from printcheck.cli import main
from printcheck.layout import card_layout, layout_to_toml

PX_PER_MM = 6.0  # drawn photos: comfortably above the 4 px/mm the locate stage asks for
BORDER_MM = 24.0  # paper around the window, enough for the 12 mm markers 4 mm off it
DISC_R_MM = 1.0
GRID = (6.35, 19.05, 31.75, 44.45)  # centres of a 4 x 4 grid of discs, 2 per 1 in cell
SIXTEEN = [(x, y) for x in GRID for y in GRID]
BLUE_BGR = (120, 45, 20)  # a Prussian-blue compound mark on steel (common practice: dark blue)
STEEL_BGR = (150, 150, 150)


def _card_photo(
    spots: list[tuple[float, float]] = SIXTEEN,
    *,
    window_bgr: tuple[int, int, int] = STEEL_BGR,
    seed: int = 0,
) -> np.ndarray:
    """A square-on photo of the built-in 2 in card: (M, N, 3) uint8 BGR."""
    card = card_layout()
    side = card.window.width_mm
    n = round((side + 2 * BORDER_MM) * PX_PER_MM)
    img = np.full((n, n, 3), 235.0, np.float32)

    def px(v: float) -> int:
        return round((v + BORDER_MM) * PX_PER_MM)

    img[px(0) : px(side), px(0) : px(side)] = window_bgr
    shift = 4  # cv2 sub-pixel drawing: coordinates in 1/16 px
    for x, y in spots:
        centre = (round((x + BORDER_MM) * PX_PER_MM * 16), round((y + BORDER_MM) * PX_PER_MM * 16))
        cv2.circle(img, centre, round(DISC_R_MM * PX_PER_MM * 16), BLUE_BGR, -1, cv2.LINE_AA, shift)
    dictionary = cv2.aruco.getPredefinedDictionary(cv2.aruco.DICT_4X4_50)
    m_px = round(12.0 * PX_PER_MM)
    for marker in card.markers:
        x0, y0 = marker.corners_mm[0]
        img[px(y0) : px(y0) + m_px, px(x0) : px(x0) + m_px] = cv2.aruco.generateImageMarker(
            dictionary, marker.id, m_px
        )[..., None]
    noise = np.random.default_rng(seed).normal(0.0, 2.0, img.shape)
    return np.clip(img + noise, 0, 255).astype(np.uint8)


def _save(path: Path, bgr: np.ndarray, **kwargs: Any) -> Path:
    """Write ``bgr`` with Pillow (format from the suffix); keyword arguments go to save."""
    Image.fromarray(np.ascontiguousarray(bgr[..., ::-1])).save(path, **kwargs)
    return path


def _bomb_png(path: Path, width: int, height: int) -> Path:
    """A PNG whose IHDR claims width x height (ISO/IEC 15948) with almost no data."""

    def chunk(kind: bytes, data: bytes) -> bytes:
        return (
            struct.pack(">I", len(data)) + kind + data + struct.pack(">I", zlib.crc32(kind + data))
        )

    ihdr = struct.pack(">IIBBBBB", width, height, 8, 2, 0, 0, 0)
    body = b"\x89PNG\r\n\x1a\n" + chunk(b"IHDR", ihdr) + chunk(b"IDAT", zlib.compress(b"\0" * 64))
    path.write_bytes(body + chunk(b"IEND", b""))
    return path


def _without_camera_time_line(err: str, good: list[str]) -> list[str]:
    """The stderr lines less the one naming the photos without a camera time: the good
    photos of these tests carry none, and the batch says so (issue 16), once, naming
    each of them and not the bad ones."""
    lines = err.splitlines()
    said = [line for line in lines if "without a camera time (EXIF)" in line]
    assert len(said) == 1 and all(name in said[0] for name in good), err
    return [line for line in lines if line not in said]


@pytest.fixture(scope="session")
def photos(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    """Good and bad photo files, made once; tests copy what they change."""
    d = tmp_path_factory.mktemp("photos")
    good = _card_photo()
    jpeg = cv2.imencode(".jpg", good, [cv2.IMWRITE_JPEG_QUALITY, 92])[1].tobytes()
    files: dict[str, Path] = {}
    files["good"] = d / "good.jpg"
    files["good"].write_bytes(jpeg)
    files["bare"] = _save(d / "bare.png", _card_photo([]))
    files["all_compound"] = _save(d / "all-blue.png", _card_photo([], window_bgr=BLUE_BGR))
    files["grey_rgb"] = _save(
        d / "greyscale.png", cv2.cvtColor(good, cv2.COLOR_BGR2GRAY)[..., None].repeat(3, 2)
    )
    Image.fromarray(cv2.cvtColor(good, cv2.COLOR_BGR2GRAY)).save(d / "grey-L.png")
    files["grey"] = d / "grey-L.png"
    files["deep"] = d / "deep16.png"
    cv2.imwrite(str(files["deep"]), good.astype(np.uint16) * 257)  # 16 bits per channel
    files["cmyk"] = d / "cmyk.jpg"
    Image.fromarray(good[..., ::-1].copy()).convert("CMYK").save(files["cmyk"], quality=92)
    alpha = np.dstack([good[..., ::-1], np.full(good.shape[:2], 255, np.uint8)])
    alpha[:8, :8, 3] = 0  # a transparent corner, far from the window
    files["alpha"] = d / "alpha.png"
    Image.fromarray(alpha, "RGBA").save(files["alpha"])
    files["no_markers"] = d / "plain-grey.jpg"
    cv2.imwrite(str(files["no_markers"]), np.full((300, 400, 3), 128, np.uint8))
    files["empty"] = d / "empty.jpg"
    files["empty"].write_bytes(b"")
    files["truncated"] = d / "truncated.jpg"
    files["truncated"].write_bytes(jpeg[: len(jpeg) // 2])
    corrupt = bytearray(jpeg)
    for i in range(len(corrupt) // 2, len(corrupt) // 2 + 200, 7):  # garbage mid-stream, EOI intact
        corrupt[i] = 0xFF if corrupt[i] != 0xFF else 0x00
    files["corrupt"] = d / "corrupt.jpg"
    files["corrupt"].write_bytes(bytes(corrupt))
    files["text"] = d / "notes.jpg"
    files["text"].write_text("pass 3: re-spot the front way before lunch\n" * 10)
    files["bomb"] = _bomb_png(d / "bomb.png", 100_000, 100_000)
    files["folder"] = d / "folder.jpg"
    files["folder"].mkdir()
    return files


def _run(capsys: pytest.CaptureFixture[str], *args: Any) -> tuple[int, str, str]:
    code = main([str(a) for a in args])
    out, err = capsys.readouterr()
    return code, out, err


def _one_line(err: str, *needles: str) -> str:
    """The single stderr line, checked: starts 'printcheck: ', names every needle."""
    assert "Traceback" not in err, err
    lines = err.splitlines()
    assert len(lines) == 1 and err.endswith("\n"), err
    line = lines[0]
    assert line.startswith("printcheck: "), line
    for needle in needles:
        assert needle in line, (needle, line)
    return line


def _rows(db: Path) -> list[tuple[str, list[str]]]:
    """Every row of every table of the history at ``db`` (read-only), or [] when absent."""
    if not db.exists():
        return []
    con = sqlite3.connect(f"file:{db}?mode=ro", uri=True)
    try:
        tables = [
            r[0]
            for r in con.execute(
                "SELECT name FROM sqlite_master WHERE type = 'table' ORDER BY name"
            )
        ]
        return [
            (t, sorted(repr(row) for row in con.execute(f'SELECT * FROM "{t}"'))) for t in tables
        ]
    finally:
        con.close()


def _digest(path: Path) -> str | None:
    return hashlib.sha256(path.read_bytes()).hexdigest() if path.exists() else None


def _snapshot(folder: Path) -> dict[str, tuple[str, int]]:
    """Hash and modification time of every file under ``folder`` (photos never change)."""
    return {
        str(p.relative_to(folder)): (
            hashlib.sha256(p.read_bytes()).hexdigest(),
            p.stat().st_mtime_ns,
        )
        for p in sorted(folder.rglob("*"))
        if p.is_file()
    }


@pytest.fixture(scope="session")
def seeded_db(tmp_path_factory: pytest.TempPathFactory, photos: dict[str, Path]) -> Path:
    """A history holding one pass of surface 'bed-front-way', made by a real batch."""
    folder = tmp_path_factory.mktemp("seed")
    shutil.copy(photos["good"], folder / "IMG_0001.jpg")
    db = tmp_path_factory.mktemp("seeddb") / "history.sqlite"
    code = main(
        [
            "batch",
            str(folder),
            "--surface",
            "bed-front-way",
            "--db",
            str(db),
            "--jobs",
            "1",
            "--out",
            str(folder / "out"),
        ]
    )
    assert code == 0
    passes = dict(_rows(db))["passes"]
    assert len(passes) == 1
    return db


@pytest.fixture
def db(tmp_path: Path, seeded_db: Path) -> Path:
    path = tmp_path / "history.sqlite"
    shutil.copy(seeded_db, path)
    return path


# --------------------------------------------------------------------------- photos


def test_good_drawn_photo_is_measured_as_drawn(
    photos: dict[str, Path], capsys: pytest.CaptureFixture[str]
) -> None:
    """The fixture itself: 16 discs drawn, 16 spots found (4 per 1 in cell)."""
    code, out, err = _run(capsys, "inspect", photos["good"], "--json")
    assert code == 0 and err == ""
    data = json.loads(out)
    assert data["spot_count"] == 16 and data["calibration"]["markers"] == [0, 1, 2, 3]
    assert [c["spot_count"] for c in data["cells"]] == [4, 4, 4, 4]
    # bearing of 16 discs of radius 1 mm in the 50.8 mm window: 16 pi / 50.8^2 = 1.95 %
    assert data["bearing_percent"] == pytest.approx(100 * 16 * np.pi / 50.8**2, abs=0.5)


BAD_PHOTOS = [
    ("empty", "file is empty"),
    ("truncated", "truncated"),
    ("corrupt", "could not be decoded"),
    ("text", "not an image"),
    ("bomb", "too many pixels"),
    ("folder", "is a folder"),
]


@pytest.mark.parametrize(("name", "problem"), BAD_PHOTOS, ids=[b[0] for b in BAD_PHOTOS])
def test_bad_photo_exits_2_with_one_line(
    name: str, problem: str, photos: dict[str, Path], capsys: pytest.CaptureFixture[str]
) -> None:
    path = photos[name]
    code, out, err = _run(capsys, "inspect", path)
    assert code == 2 and out == ""
    _one_line(err, f"photo {path}", problem)


def test_tiny_photo(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    path = _save(tmp_path / "thumb.png", np.full((10, 12, 3), 128, np.uint8))
    code, _, err = _run(capsys, "inspect", path)
    assert code == 2
    _one_line(err, str(path), "12 x 10 pixels", "too small")


def test_large_photo_under_printcheck_limit_gives_no_pillow_warning(
    photos: dict[str, Path], capsys: pytest.CaptureFixture[str], monkeypatch: pytest.MonkeyPatch
) -> None:
    """Pillow warns (DecompressionBombWarning) above its own limit, 89 MP by default, which a
    100+ MP phone photo passes though printcheck accepts up to 150 MP.  Lower Pillow's limit
    under the 593 x 593 test photo to stand for that: no stray warning may reach stderr
    (warnings are errors in the tests, so one would also fail the load)."""
    from PIL import Image as PILImage

    monkeypatch.setattr(PILImage, "MAX_IMAGE_PIXELS", 250_000)  # warns above, refuses above 2x
    code, out, err = _run(capsys, "inspect", photos["good"], "--json")
    assert code == 0 and err == "" and json.loads(out)["spot_count"] == 16


def test_missing_photo(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    code, _, err = _run(capsys, "inspect", tmp_path / "IMG_9999.jpg")
    assert code == 2
    _one_line(err, "IMG_9999.jpg", "not found")


def test_photo_without_markers_names_the_ids_and_dictionary(
    photos: dict[str, Path], capsys: pytest.CaptureFixture[str]
) -> None:
    code, out, err = _run(capsys, "inspect", photos["no_markers"])
    assert code == 2 and out == ""
    _one_line(err, "DICT_4X4_50", "0, 1, 2, 3")


def test_print_without_compound_is_not_a_measurement_of_zero(
    photos: dict[str, Path], capsys: pytest.CaptureFixture[str]
) -> None:
    """A photo with no marking compound in the window is unusable (exit 2, one line), not
    a print of zero points: the contract in docs/formats.md, "Command line"."""
    code, out, err = _run(capsys, "inspect", photos["bare"], "--json")
    assert code == 2 and out == ""
    _one_line(err, str(photos["bare"]), "no spot of blue or red marking compound")
    code, out, err = _run(capsys, "inspect", photos["bare"], "--target", "5")
    assert code == 2 and out == ""


def test_print_that_is_all_compound(
    photos: dict[str, Path], capsys: pytest.CaptureFixture[str]
) -> None:
    """A window wholly coated is a measurement (nearly all bearing), not an unusable photo:
    exit 0, and a warning that says what a film over everything means."""
    code, out, err = _run(capsys, "inspect", photos["all_compound"], "--json")
    assert code == 0 and err == ""
    data = json.loads(out)
    assert data["bearing_percent"] >= 90
    assert any("covers nearly the whole surface" in w for w in data["warnings"])


@pytest.mark.parametrize("name", ["deep", "cmyk", "alpha"])
def test_other_pixel_formats_measure_the_same(
    name: str, photos: dict[str, Path], capsys: pytest.CaptureFixture[str]
) -> None:
    """16 bits per channel, CMYK and RGBA hold the same picture: the same 16 spots."""
    code, out, err = _run(capsys, "inspect", photos[name], "--json")
    assert code == 0 and err == ""
    data = json.loads(out)
    assert data["spot_count"] == 16 and [c["spot_count"] for c in data["cells"]] == [4, 4, 4, 4]


@pytest.mark.parametrize("name", ["grey", "grey_rgb"])
def test_greyscale_photo_says_why_nothing_is_found(
    name: str, photos: dict[str, Path], capsys: pytest.CaptureFixture[str]
) -> None:
    """Without colour, compound cannot be told from metal by colour: the photo is refused
    with the reason (exit 2), not reported as a bare print."""
    code, out, err = _run(capsys, "inspect", photos[name], "--json")
    assert code == 2 and out == ""
    _one_line(err, str(photos[name]), "marking compound found in the window")


@pytest.mark.parametrize(("orientation", "turns"), [(6, 1), (8, -1), (3, 2)])
@pytest.mark.parametrize("suffix", [".jpg", ".png"])
def test_exif_rotated_photo_is_measured_the_right_way_up(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], orientation: int, turns: int, suffix: str
) -> None:
    """A square-on 60 x 40 mm scan at 5 px/mm with one disc in four of its six 20 mm cells.

    Stored turned, with the EXIF Orientation tag (EXIF 2.32, tag 0x0112) that turns it back:
    6 = rotate 90 CW to display, 8 = 90 CCW, 3 = 180.  Without the tag applied the window
    would come out 40 x 60 mm and the cells would be wrong.
    """
    h, w = 200, 300
    upright = np.full((h, w, 3), 150, np.uint8)
    for x, y in [(20, 20), (250, 30), (100, 150), (280, 180)]:
        cv2.circle(upright, (x, y), 6, BLUE_BGR, -1)
    upright = np.clip(
        upright + np.random.default_rng(3).normal(0, 2, upright.shape), 0, 255
    ).astype(np.uint8)
    exif = Image.Exif()
    exif[0x0112] = orientation
    path = _save(
        tmp_path / f"scan{suffix}",
        np.rot90(upright, k=turns),
        exif=exif,
        **({"quality": 95} if suffix == ".jpg" else {}),
    )
    code, out, err = _run(
        capsys, "inspect", path, "--px-per-mm", "5", "--unit", "mm", "--cell", "20", "--json"
    )
    assert code == 0 and err == ""
    data = json.loads(out)
    assert (data["window"]["width"], data["window"]["height"]) == (60.0, 40.0)
    counts = {(c["row"], c["col"]): c["spot_count"] for c in data["cells"]}
    # truth from the drawing: discs at x 20, 250, 100, 280 px and y 20, 30, 150, 180 px
    assert counts == {(0, 0): 1, (0, 1): 0, (0, 2): 1, (1, 0): 0, (1, 1): 1, (1, 2): 1}


@pytest.mark.parametrize(
    "name",
    [
        "IMG 0042 (copy).jpg",
        "ünïcödé-φωτο-写真.jpg",
        "a;b&c|d$(rm -rf x)`y`'q\"*?.jpg",
        "-dash.jpg",
    ],
)
def test_awkward_names_are_measured(
    name: str, tmp_path: Path, photos: dict[str, Path], capsys: pytest.CaptureFixture[str]
) -> None:
    path = tmp_path / name
    shutil.copy(photos["good"], path)
    before = _snapshot(tmp_path)
    code, out, err = _run(capsys, "inspect", "--json", "--out", tmp_path / "out", "--", path)
    assert code == 0 and err == ""
    assert json.loads(out)["photo"] == name and json.loads(out)["spot_count"] == 16
    outputs = {p.name for p in (tmp_path / "out").iterdir()}
    assert any(n.endswith(".json") for n in outputs) and not any(n.startswith(".") for n in outputs)
    after = _snapshot(tmp_path)
    assert {k: v for k, v in after.items() if not k.startswith("out")} == before  # photo untouched


def _inspect_as_nobody(path: str, conn: Any) -> None:  # runs in a forked child
    import contextlib
    import io

    os.setgid(65534)
    os.setuid(65534)
    err = io.StringIO()
    with contextlib.redirect_stderr(err), contextlib.redirect_stdout(io.StringIO()):
        code = main(["inspect", path])
    conn.send((code, err.getvalue()))
    conn.close()


def test_unreadable_photo(photos: dict[str, Path]) -> None:
    """Root reads any file, so the check runs in a child that drops to the user 'nobody'."""
    folder = Path(tempfile.mkdtemp(prefix="printcheck-perm-"))
    try:
        folder.chmod(0o755)
        path = folder / "locked.jpg"
        shutil.copy(photos["good"], path)
        path.chmod(0)
        if os.geteuid() != 0:
            code = main(["inspect", str(path)])
            assert code == 2
            return
        ctx = mp.get_context("fork")
        parent, child = ctx.Pipe()
        proc = ctx.Process(target=_inspect_as_nobody, args=(str(path), child))
        proc.start()
        assert parent.poll(60), "child did not answer"
        code, err = parent.recv()
        proc.join(10)
        assert code == 2
        line = _one_line(err, str(path))
        assert "permission denied" in line or "not readable" in line, line
        assert stat.S_IMODE(path.stat().st_mode) == 0  # and left as it was
    finally:
        shutil.rmtree(folder, ignore_errors=True)


def _inspect_with_little_memory(path: str, conn: Any) -> None:  # runs in a forked child
    import contextlib
    import io
    import resource

    with open("/proc/self/statm") as fh:
        in_use = int(fh.read().split()[0]) * os.sysconf("SC_PAGE_SIZE")
    limit = in_use + 512 * 2**20  # 0.5 GB more than now; the bomb would need 30 GB
    resource.setrlimit(resource.RLIMIT_AS, (limit, limit))
    err = io.StringIO()
    with contextlib.redirect_stderr(err), contextlib.redirect_stdout(io.StringIO()):
        code = main(["inspect", path])
    conn.send((code, err.getvalue()))
    conn.close()


def test_decompression_bomb_is_refused_before_allocating(photos: dict[str, Path]) -> None:
    """100000 x 100000 RGB would be 30 GB: under a 0.5 GB address-space margin any attempt to
    allocate it fails (MemoryError, an 'internal error' line); refusing from the header does not."""
    ctx = mp.get_context("fork")
    parent, child = ctx.Pipe()
    proc = ctx.Process(target=_inspect_with_little_memory, args=(str(photos["bomb"]), child))
    proc.start()
    assert parent.poll(60), "child did not answer"
    code, err = parent.recv()
    proc.join(10)
    assert code == 2
    line = _one_line(err, str(photos["bomb"]), "too many pixels")
    assert "internal error" not in line


def test_several_bad_photos_one_line_each_and_the_good_one_measured(
    photos: dict[str, Path], capsys: pytest.CaptureFixture[str]
) -> None:
    bad = [photos[n] for n in ("empty", "text", "bomb")]
    code, out, err = _run(capsys, "inspect", bad[0], photos["good"], bad[1], bad[2])
    assert code == 2  # inspect: any photo that could not be used makes the run unusable
    lines = err.splitlines()
    assert len(lines) == 3 and all(line.startswith("printcheck: photo ") for line in lines)
    assert [str(p) in line for p, line in zip(bad, lines, strict=True)] == [True] * 3
    assert "16 points" in out  # the good one is still measured and summarised


def test_no_marker_message_names_the_photo(
    photos: dict[str, Path], capsys: pytest.CaptureFixture[str]
) -> None:
    code, _, err = _run(capsys, "inspect", photos["good"], photos["no_markers"])
    assert code == 2
    _one_line(err, str(photos["no_markers"]), "DICT_4X4_50")


# --------------------------------------------------------------------------- child processes


def _child(*args: Any, env: dict[str, str] | None = None) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [sys.executable, "-m", "printcheck", *map(str, args)],
        capture_output=True,
        text=True,
        timeout=120,
        env=env if env is not None else dict(os.environ),
        check=False,
    )


def test_no_traceback_or_library_chatter_reaches_the_terminal(
    photos: dict[str, Path], tmp_path: Path
) -> None:
    """libjpeg and Pillow write warnings of their own; only printcheck's lines may show."""
    bad = [photos[n] for n in ("bomb", "text", "corrupt", "truncated", "empty")]
    proc = _child("inspect", *bad)
    assert proc.returncode == 2 and proc.stdout == ""
    lines = proc.stderr.splitlines()
    assert "Traceback" not in proc.stderr
    assert len(lines) == len(bad), proc.stderr
    for path, line in zip(bad, lines, strict=True):
        assert line.startswith(f"printcheck: photo {path}: "), line
    # a usage error too: one line, no traceback
    proc = _child("inspect", photos["good"], "--unit", "furlong")
    assert proc.returncode == 2 and "Traceback" not in proc.stderr
    assert len(proc.stderr.splitlines()) == 1 and "furlong" in proc.stderr


def test_shell_metacharacters_reach_printcheck_unharmed(
    photos: dict[str, Path], tmp_path: Path
) -> None:
    name = "pass 3; $(touch pwned) & `id` 'q' \"d\" <x>.jpg"
    path = tmp_path / name
    shutil.copy(photos["good"], path)
    proc = _child("inspect", "--json", path)
    assert proc.returncode == 0 and proc.stderr == "", proc.stderr
    assert json.loads(proc.stdout)["photo"] == name
    assert not (tmp_path / "pwned").exists() and not Path("pwned").exists()


# --------------------------------------------------------------------------- layouts and specs


LAYOUT_CASES = [
    (
        "no-dictionary.toml",
        lambda t: t.replace('dictionary = "DICT_4X4_50"\n', ""),
        "dictionary",
        "missing",
    ),
    (
        "bad-dictionary.toml",
        lambda t: t.replace("DICT_4X4_50", "DICT_4X4_5"),
        "dictionary",
        "unknown ArUco",
    ),
    ("id-range.toml", lambda t: t.replace("id = 3", "id = 50"), "marker 50.id", "out of range"),
    ("duplicate.toml", lambda t: t.replace("id = 3", "id = 1"), "marker 1.id", "duplicate id"),
    (
        "no-area.toml",
        lambda t: t.replace("width = 50.8", "width = 0.0"),
        "window.width",
        "greater than zero",
    ),
    (
        "wrong-type.toml",
        lambda t: t.replace("height = 50.8", 'height = "2in"'),
        "window.height",
        "must be a number",
    ),
    ("unit.toml", lambda t: t.replace('units = "mm"', 'units = "cm"'), "units", "must be"),
    (
        "exclusion.toml",
        lambda t: t + "\n[[exclude]]\npoints = [[60.0, 0.0], [70.0, 0.0], [70.0, 10.0]]\n",
        "exclude #1.points",
        "wholly outside the window",
    ),
    (
        "all-excluded.toml",
        lambda t: (
            t + "\n[[exclude]]\npoints = [[-1.0, -1.0], [52.0, -1.0], [52.0, 52.0], [-1.0, 52.0]]\n"
        ),
        "exclude",
        "cover the whole window",
    ),
    ("broken.toml", lambda t: t.replace("[window]", "[window"), "", "not valid TOML"),
]


@pytest.mark.parametrize(
    ("file", "edit", "key", "problem"), LAYOUT_CASES, ids=[c[0] for c in LAYOUT_CASES]
)
def test_bad_layout_names_file_key_and_problem(
    file: str,
    edit: Any,
    key: str,
    problem: str,
    tmp_path: Path,
    photos: dict[str, Path],
    db: Path,
    capsys: pytest.CaptureFixture[str],
) -> None:
    layout = tmp_path / file
    layout.write_text(edit(layout_to_toml(card_layout())), encoding="utf-8")
    code, out, err = _run(capsys, "inspect", photos["good"], "--layout", layout)
    assert code == 2 and out == ""
    _one_line(err, f"layout {layout}: {key}", problem)
    # the same layout given to a batch: refused before anything is recorded
    folder = tmp_path / "photos"
    folder.mkdir()
    shutil.copy(photos["good"], folder / "IMG_0002.jpg")
    rows, digest = _rows(db), _digest(db)
    code, _, err = _run(capsys, "batch", folder, "--layout", layout, "--db", db, "--jobs", "1")
    assert code == 2
    _one_line(err, f"layout {layout}", problem)
    assert _rows(db) == rows and _digest(db) == digest
    assert not (folder / "printcheck-out").exists()


def test_bad_spec_file_and_unknown_spec(
    tmp_path: Path, photos: dict[str, Path], capsys: pytest.CaptureFixture[str]
) -> None:
    spec = tmp_path / "way spec.toml"
    spec.write_text('name = "way"\nunits = "in"\nmin_density = "lots"\n', encoding="utf-8")
    code, _, err = _run(capsys, "inspect", photos["good"], "--spec", spec)
    assert code == 2
    _one_line(err, str(spec), "min_density")
    code, _, err = _run(capsys, "inspect", photos["good"], "--spec", "slideway-precisoin")
    assert code == 2
    _one_line(err, "slideway-precisoin", "printcheck specs")


def test_spec_with_a_number_too_large(
    tmp_path: Path, photos: dict[str, Path], capsys: pytest.CaptureFixture[str]
) -> None:
    spec = tmp_path / "huge.toml"
    spec.write_text(
        'name = "huge"\nunits = "in"\nmin_density = 1' + "0" * 400 + "\n", encoding="utf-8"
    )
    code, _, err = _run(capsys, "inspect", photos["good"], "--spec", spec)
    assert code == 2
    line = _one_line(err, str(spec), "min_density")
    assert "internal error" not in line


# --------------------------------------------------------------------------- options

OPTION_CASES = [
    (["--unit", "furlong"], ["--unit", "furlong"]),
    (["--px-per-mm", "0"], ["--px-per-mm", "greater than zero", "got 0"]),
    (["--px-per-mm", "-3"], ["--px-per-mm", "-3"]),
    (["--px-per-mm", "nan"], ["--px-per-mm"]),
    (["--target", "0"], ["--target", "greater than zero"]),
    (["--target", "-2"], ["--target"]),
    (["--cell", "0"], ["--cell", "greater than zero"]),
    (["--min-spot", "-1"], ["--min-spot", "-1"]),
    (["--compound", "green"], ["--compound", "green"]),
    (["--compound-on", "both"], ["--compound-on", "both"]),
    (["--spec", "no-such-spec"], ["no-such-spec"]),
    (["--layout", "no-such-layout.toml"], ["no-such-layout.toml", "not found"]),
    (["--cell", "3", "--layout", "CARD"], ["--cell 3", "larger than the window"]),
]


@pytest.mark.parametrize(
    ("args", "needles"), OPTION_CASES, ids=[" ".join(c[0]) for c in OPTION_CASES]
)
def test_bad_option_exits_2_and_records_nothing(
    args: list[str],
    needles: list[str],
    tmp_path: Path,
    photos: dict[str, Path],
    db: Path,
    capsys: pytest.CaptureFixture[str],
) -> None:
    if "CARD" in args:
        card = tmp_path / "card-2in.toml"
        card.write_text(layout_to_toml(card_layout()), encoding="utf-8")
        args = [str(card) if a == "CARD" else a for a in args]
    code, out, err = _run(capsys, "inspect", photos["good"], *args)
    assert code == 2 and out == ""
    _one_line(err, *needles)
    folder = tmp_path / "photos"
    folder.mkdir()
    shutil.copy(photos["good"], folder / "IMG_0003.jpg")
    rows, digest = _rows(db), _digest(db)
    code, _, err = _run(capsys, "batch", folder, *args, "--db", db, "--jobs", "1")
    assert code == 2
    _one_line(err, *needles)
    assert _rows(db) == rows and _digest(db) == digest


@pytest.mark.parametrize(
    "args", [["--cell", "10"], ["--cell", "3", "--unit", "in"], ["--cell", "60", "--unit", "mm"]]
)
def test_cell_larger_than_the_default_card_window(
    args: list[str], photos: dict[str, Path], capsys: pytest.CaptureFixture[str]
) -> None:
    code, _, err = _run(capsys, "inspect", photos["good"], *args)
    assert code == 2
    _one_line(err, "--cell", "larger than the window")


@pytest.mark.parametrize("value", ["inf", "1e-9", "0.01", "nan"])
def test_absurd_cell_is_refused_by_name(
    value: str, photos: dict[str, Path], capsys: pytest.CaptureFixture[str]
) -> None:
    code, _, err = _run(capsys, "inspect", photos["good"], "--cell", value, "--unit", "mm")
    assert code == 2
    line = _one_line(err, "--cell")
    assert "internal error" not in line


def test_tiny_px_per_mm_is_refused_by_name(
    photos: dict[str, Path], capsys: pytest.CaptureFixture[str]
) -> None:
    code, _, err = _run(capsys, "inspect", photos["good"], "--px-per-mm", "1e-9")
    assert code == 2
    line = _one_line(err, "px")
    assert "internal error" not in line


JOB_CASES = [
    ("cell = [", "not valid TOML"),
    ("colour = 1", "colour: unknown key"),
    ('cell = "big"', "cell: must be a number"),
    ("cell = -1", "cell: must be greater than zero"),
    ("cell = inf", "cell: must be a finite number"),
    ("px_per_mm = nan", "px_per_mm: must be a finite number"),
    ('unit = "furlong"', "unit: must be one of in, mm"),
    ('surface = ""', "surface: must be one line"),
    ('layout = "missing.toml"', "missing.toml: file not found"),
]


@pytest.mark.parametrize(("content", "problem"), JOB_CASES, ids=[c[0] for c in JOB_CASES])
def test_malformed_job_file(
    content: str,
    problem: str,
    tmp_path: Path,
    photos: dict[str, Path],
    db: Path,
    capsys: pytest.CaptureFixture[str],
) -> None:
    folder = tmp_path / "bed front way"
    folder.mkdir()
    shutil.copy(photos["good"], folder / "IMG_0004.jpg")
    job = folder / "printcheck.toml"
    job.write_text(content + "\n", encoding="utf-8")
    code, out, err = _run(capsys, "inspect", folder / "IMG_0004.jpg")
    assert code == 2 and out == ""
    line = _one_line(err, problem)
    if "layout" not in content:
        assert f"job settings {job}: " in line
    rows, digest = _rows(db), _digest(db)
    code, _, err = _run(capsys, "batch", folder, "--db", db, "--jobs", "1")
    assert code == 2
    _one_line(err, problem)
    assert _rows(db) == rows and _digest(db) == digest


def test_job_file_min_spot_zero_is_allowed_as_on_the_command_line(
    tmp_path: Path, photos: dict[str, Path], capsys: pytest.CaptureFixture[str]
) -> None:
    folder = tmp_path / "job"
    folder.mkdir()
    shutil.copy(photos["good"], folder / "IMG_0005.jpg")
    (folder / "printcheck.toml").write_text("min_spot = 0\n", encoding="utf-8")
    code, _, err = _run(capsys, "inspect", folder / "IMG_0005.jpg")
    assert code == 0 and err == ""


# --------------------------------------------------------------------------- batch


NO_MARKERS = "IMG_0005.jpg"


def _batch_folder(root: Path, photos: dict[str, Path]) -> tuple[Path, list[str], list[str]]:
    """Two good photos (taken in this order) among bad ones; returns (folder, good, bad)."""
    folder = root / "bed-front-way"
    folder.mkdir()
    good = ["IMG_0010.jpg", "IMG_0011 <b>&amp;.jpg"]
    bad = {
        "empty": "IMG_0001.jpg",
        "truncated": "IMG_0002.jpg",
        "text": "IMG_0003.jpg",
        "bomb": "IMG_0004.png",
        "no_markers": NO_MARKERS,
        "corrupt": "IMG_0006.jpg",
    }
    for kind, name in bad.items():
        shutil.copy(photos[kind], folder / name)
    (folder / "IMG_0007.jpg").mkdir()  # a folder named like a photo
    for i, name in enumerate(good):
        shutil.copy(photos["good"] if i == 0 else photos["cmyk"], folder / name)
        os.utime(folder / name, (1_800_000_000 + i * 3600, 1_800_000_000 + i * 3600))
    (folder / "notes.txt").write_text("not a photo, not looked at\n")
    return folder, good, [*bad.values(), "IMG_0007.jpg"]


def test_batch_goes_on_past_bad_photos(
    tmp_path: Path, photos: dict[str, Path], db: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    jobs = "1"  # in-process; the pool of worker processes is tested in a child process below
    folder, good, bad = _batch_folder(tmp_path, photos)
    before = _snapshot(folder)
    rows_before = dict(_rows(db))["passes"]
    out_dir = tmp_path / "out"
    code, out, err = _run(
        capsys,
        "batch",
        folder,
        "--db",
        db,
        "--jobs",
        jobs,
        "--out",
        out_dir,
        "--target",
        "3",
        "--surface",
        "<script>way</script>",
    )
    # 16 points in 4 sq in = 4 points per square inch >= 3: the good photos decide: meets
    assert code == 0, err
    assert "Traceback" not in err and all(
        line.startswith("printcheck: ") for line in err.splitlines()
    )
    lines = _without_camera_time_line(err, good)
    assert len(lines) == len(bad), err  # one line for each bad photo, nothing else
    for name in bad:
        if name != NO_MARKERS:  # see test_no_marker_message_names_the_photo
            assert sum(name in line for line in lines) == 1, name
    # the history gained exactly the good passes, whole, and kept the old one
    passes = dict(_rows(db))["passes"]
    assert len(passes) == len(rows_before) + len(good)
    assert set(rows_before) <= set(passes)
    con = sqlite3.connect(f"file:{db}?mode=ro", uri=True)
    try:
        recorded = con.execute(
            "SELECT p.photo, p.spot_count FROM passes p JOIN surfaces s ON s.id = p.surface_id "
            "WHERE s.name = ? ORDER BY p.taken",
            ("<script>way</script>",),
        ).fetchall()
    finally:
        con.close()
    assert recorded == [(good[0], 16), (good[1], 16)]
    # outside strings reach the HTML report escaped
    report = (out_dir / "report.html").read_text(encoding="utf-8")
    assert "<script>way</script>" not in report and "&lt;script&gt;way&lt;/script&gt;" in report
    assert "<b>&amp;.jpg" not in report and "&lt;b&gt;&amp;amp;.jpg" in report
    # the photos (and the notes beside them) are untouched
    assert _snapshot(folder) == before


def test_batch_exit_status_follows_the_good_photos(
    tmp_path: Path, photos: dict[str, Path], db: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    folder, good, bad = _batch_folder(tmp_path, photos)
    code, _, err = _run(
        capsys, "batch", folder, "--db", db, "--jobs", "1", "--out", tmp_path / "o", "--target", "5"
    )
    assert code == 1  # 4 points per square inch does not meet 5; the bad photos do not make it 2
    assert len(_without_camera_time_line(err, good)) == len(bad)


def test_batch_of_only_bad_photos_records_nothing(
    tmp_path: Path, photos: dict[str, Path], db: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    folder = tmp_path / "bad"
    folder.mkdir()
    for kind in ("empty", "text", "no_markers"):
        shutil.copy(photos[kind], folder / photos[kind].name)
    rows = _rows(db)
    code, _, err = _run(capsys, "batch", folder, "--db", db, "--jobs", "1", "--out", tmp_path / "o")
    assert code == 2
    lines = err.splitlines()
    assert "Traceback" not in err and all(line.startswith("printcheck: ") for line in lines)
    assert len(lines) == 4 and "none of the 3 photos" in lines[-1]
    assert _rows(db) == rows


def test_batch_of_an_empty_folder_or_a_file(
    tmp_path: Path, photos: dict[str, Path], db: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    empty = tmp_path / "empty"
    empty.mkdir()
    rows, digest = _rows(db), _digest(db)
    code, _, err = _run(capsys, "batch", empty, "--db", db)
    assert code == 2
    _one_line(err, str(empty), "no photos")
    code, _, err = _run(capsys, "batch", photos["good"], "--db", db)
    assert code == 2
    _one_line(err, str(photos["good"]), "not a folder")
    assert _rows(db) == rows and _digest(db) == digest


def test_history_in_an_impossible_place_is_one_clear_line(
    tmp_path: Path, photos: dict[str, Path], capsys: pytest.CaptureFixture[str]
) -> None:
    folder = tmp_path / "way"
    folder.mkdir()
    shutil.copy(photos["good"], folder / "IMG_0001.jpg")
    blocker = tmp_path / "a-file"
    blocker.write_text("in the way\n")
    db = blocker / "history.sqlite"  # a folder that is a file: cannot be created
    code, _, err = _run(capsys, "batch", folder, "--db", db, "--jobs", "1", "--out", tmp_path / "o")
    assert code == 2
    _one_line(err, "history")
    assert blocker.read_text() == "in the way\n"


def test_history_that_is_not_a_database_is_left_alone(
    tmp_path: Path, photos: dict[str, Path], capsys: pytest.CaptureFixture[str]
) -> None:
    folder = tmp_path / "way"
    folder.mkdir()
    shutil.copy(photos["good"], folder / "IMG_0001.jpg")
    db = tmp_path / "history.sqlite"
    db.write_bytes(b"shop notes, not a database\n" * 100)
    before = _digest(db)
    code, _, err = _run(capsys, "batch", folder, "--db", db, "--jobs", "1", "--out", tmp_path / "o")
    assert code == 2
    _one_line(err, str(db))
    assert _digest(db) == before
    code, _, err = _run(capsys, "progress", "way", "--db", db)
    assert code == 2
    _one_line(err, str(db))
    assert _digest(db) == before


def test_batch_on_two_cores_goes_on_past_bad_photos(
    tmp_path: Path, photos: dict[str, Path], db: Path
) -> None:
    folder, good, bad = _batch_folder(tmp_path, photos)
    before = _snapshot(folder)
    rows_before = dict(_rows(db))["passes"]
    args = ["--db", db, "--jobs", "2", "--out", tmp_path / "out", "--surface", "two-cores"]
    proc = _child("batch", folder, *args)
    assert proc.returncode == 0, proc.stderr
    lines = _without_camera_time_line(proc.stderr, good)
    assert "Traceback" not in proc.stderr and len(lines) == len(bad)
    assert all(line.startswith("printcheck: ") for line in lines)
    assert len(dict(_rows(db))["passes"]) == len(rows_before) + len(good)
    assert _snapshot(folder) == before


_AFTER_OPENCV = """
import sys, cv2, numpy as np
cv2.GaussianBlur(np.zeros((2000, 2000), np.float32), (0, 0), 5)  # OpenCV's thread pool runs
from printcheck.cli import main
sys.exit(main(sys.argv[1:]))
"""


def test_batch_on_two_cores_after_opencv_ran_in_the_same_process(
    tmp_path: Path, photos: dict[str, Path]
) -> None:
    """A process that already ran OpenCV's thread pool ('printcheck demo' renders first) must
    still finish a batch on several workers: forked workers used to deadlock inside cv2."""
    folder = tmp_path / "way"
    folder.mkdir()
    for i in range(2):
        shutil.copy(photos["good"], folder / f"IMG_{i:04d}.jpg")
    args = [
        "batch",
        folder,
        "--db",
        tmp_path / "h.sqlite",
        "--jobs",
        "2",
        "--out",
        tmp_path / "out",
    ]
    proc = subprocess.Popen(
        [sys.executable, "-c", _AFTER_OPENCV, *map(str, args)],
        stdout=subprocess.DEVNULL,
        stderr=subprocess.PIPE,
        start_new_session=True,  # its own process group, so hung workers can be ended with it
    )
    try:
        _, err = proc.communicate(timeout=60)  # a few seconds when it works
    except subprocess.TimeoutExpired:
        os.killpg(proc.pid, signal.SIGKILL)
        proc.communicate()
        pytest.fail("batch --jobs 2 hung after OpenCV had run in the process")
    assert proc.returncode == 0, err
