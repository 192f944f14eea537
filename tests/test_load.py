"""load: decoding, orientation, EXIF time, and every kind of bad photo file."""

from __future__ import annotations

import os
import struct
import zlib
from datetime import datetime
from pathlib import Path

import cv2
import numpy as np
import pytest
from PIL import Image

from printcheck.errors import PhotoError
from printcheck.load import load_photo, photo_taken


def _pattern(h: int = 60, w: int = 80) -> np.ndarray:
    """RGB test image: a red block at the top-left, blue elsewhere."""
    rgb = np.zeros((h, w, 3), np.uint8)
    rgb[..., 2] = 200
    rgb[: h // 3, : w // 4] = (255, 0, 0)
    return rgb


def test_jpeg_decodes_to_bgr_with_exif_time(tmp_path: Path) -> None:
    im = Image.fromarray(_pattern())
    exif = Image.Exif()
    exif.get_ifd(0x8769)[36867] = "2026:11:30 10:22:31"  # EXIF 2.32 tag DateTimeOriginal
    path = tmp_path / "IMG_0001.jpg"
    im.save(path, quality=95, exif=exif)
    photo = load_photo(path)
    assert photo.image.shape == (60, 80, 3) and photo.image.dtype == np.uint8
    # BGR order: the red block has a high third channel (OpenCV's convention)
    assert photo.image[5, 5, 2] > 200 and photo.image[5, 5, 0] < 60
    assert photo.taken == datetime(2026, 11, 30, 10, 22, 31)
    assert photo_taken(path) == photo.taken


def test_exif_orientation_is_applied(tmp_path: Path) -> None:
    # EXIF Orientation 6 = "rotate 90 CW to display" (EXIF 2.32, tag 0x0112)
    im = Image.fromarray(_pattern())
    exif = Image.Exif()
    exif[0x0112] = 6
    path = tmp_path / "rotated.jpg"
    im.save(path, quality=95, exif=exif)
    photo = load_photo(path)
    expected = np.rot90(_pattern(), k=-1)  # what a viewer shows: the block at top-right
    assert photo.image.shape[:2] == expected.shape[:2]
    red = photo.image[..., 2].astype(int) - photo.image[..., 0].astype(int) > 100
    assert red[:10, -10:].all() and not red[-10:, :10].any()


@pytest.mark.parametrize("mode", ["L", "I;16", "RGBA", "CMYK", "P"])
def test_other_pixel_formats_become_bgr8(tmp_path: Path, mode: str) -> None:
    rgb = Image.fromarray(_pattern())
    if mode == "I;16":
        arr = (np.asarray(rgb.convert("L"), dtype=np.uint16) * 257).astype(np.uint16)
        im = Image.fromarray(arr)
        path = tmp_path / "deep.png"
        im.save(path)
    elif mode == "CMYK":
        path = tmp_path / "cmyk.jpg"
        rgb.convert("CMYK").save(path, quality=95)
    elif mode == "RGBA":
        path = tmp_path / "alpha.png"
        rgb.convert("RGBA").save(path)
    elif mode == "P":
        path = tmp_path / "palette.png"
        rgb.convert("P").save(path)
    else:
        path = tmp_path / "grey.png"
        rgb.convert("L").save(path)
    photo = load_photo(path)
    assert photo.image.dtype == np.uint8 and photo.image.shape == (60, 80, 3)
    grey = cv2.cvtColor(photo.image, cv2.COLOR_BGR2GRAY)
    ref = np.asarray(rgb.convert("L"))
    assert np.abs(grey.astype(int) - ref.astype(int)).mean() < 12  # same picture, same scale


def _bomb_png(path: Path, width: int, height: int) -> None:
    """A PNG whose header claims width x height (ISO/IEC 15948 IHDR) with almost no data."""

    def chunk(kind: bytes, data: bytes) -> bytes:
        return (
            struct.pack(">I", len(data)) + kind + data + struct.pack(">I", zlib.crc32(kind + data))
        )

    ihdr = struct.pack(">IIBBBBB", width, height, 8, 2, 0, 0, 0)
    body = b"\x89PNG\r\n\x1a\n" + chunk(b"IHDR", ihdr) + chunk(b"IDAT", zlib.compress(b"\0" * 64))
    path.write_bytes(body + chunk(b"IEND", b""))


@pytest.mark.parametrize(
    ("name", "content", "message"),
    [
        ("empty.jpg", b"", "file is empty"),
        ("notes.jpg", b"this is not a photo\n" * 20, "not an image"),
    ],
)
def test_bad_files_are_refused_in_one_line(
    tmp_path: Path, name: str, content: bytes, message: str
) -> None:
    path = tmp_path / name
    path.write_bytes(content)
    with pytest.raises(PhotoError, match=message) as info:
        load_photo(path)
    assert "\n" not in str(info.value) and str(path) in str(info.value)


def test_truncated_jpeg_is_refused(tmp_path: Path) -> None:
    ok, buf = cv2.imencode(
        ".jpg", np.random.default_rng(1).integers(0, 255, (200, 200, 3), np.uint8)
    )
    assert ok
    path = tmp_path / "half.jpg"
    path.write_bytes(buf.tobytes()[: len(buf) // 2])
    with pytest.raises(PhotoError, match="truncated"):
        load_photo(path)


def test_decompression_bomb_is_refused_before_decoding(tmp_path: Path) -> None:
    path = tmp_path / "bomb.png"
    _bomb_png(path, 100_000, 100_000)
    with pytest.raises(PhotoError, match="pixels|too many"):
        load_photo(path)


def test_missing_folder_and_unreadable(tmp_path: Path) -> None:
    with pytest.raises(PhotoError, match="not found"):
        load_photo(tmp_path / "nope.jpg")
    folder = tmp_path / "looks-like.jpg"
    folder.mkdir()
    with pytest.raises(PhotoError, match="folder"):
        load_photo(folder)
    if os.geteuid() != 0:  # root reads any file, so the permission case only exists for users
        locked = tmp_path / "locked.jpg"
        Image.fromarray(_pattern()).save(locked)
        locked.chmod(0)
        with pytest.raises(PhotoError, match="permission"):
            load_photo(locked)


@pytest.mark.parametrize("name", ["with space.jpg", "ünïcödé-φωτο.jpg", "a;b&c$(x)`y`'q\".jpg"])
def test_awkward_file_names(tmp_path: Path, name: str) -> None:
    path = tmp_path / name
    Image.fromarray(_pattern()).save(path, format="JPEG")
    before = path.read_bytes()
    photo = load_photo(path)
    assert photo.name == name and photo.image.shape == (60, 80, 3)
    assert path.read_bytes() == before  # photos are never modified


@pytest.mark.parametrize("orientation", range(1, 9))
def test_every_exif_orientation_turns_as_pillow_does(tmp_path: Path, orientation: int) -> None:
    # The JPEG fast path turns the photo itself; the reference is Pillow's
    # ImageOps.exif_transpose of the same file (EXIF 2.32 tag 0x0112, values 1-8).
    from PIL import ImageOps

    rng = np.random.default_rng(orientation)
    rgb = np.kron(rng.integers(0, 256, (6, 8, 3), dtype=np.uint8), np.ones((8, 8, 1), np.uint8))
    exif = Image.Exif()
    exif[0x0112] = orientation
    path = tmp_path / f"turned{orientation}.jpg"
    Image.fromarray(rgb).save(path, quality=95, exif=exif)
    with Image.open(path) as im:
        ref = np.asarray(ImageOps.exif_transpose(im).convert("RGB"))[..., ::-1]
    got = load_photo(path).image
    assert got.shape == ref.shape
    assert np.abs(got.astype(int) - ref.astype(int)).max() <= 1


def test_jpeg_fast_path_equals_pillow_and_opencv(tmp_path: Path) -> None:
    # Same libjpeg decode three ways: printcheck's (simplejpeg), Pillow's and OpenCV's.
    rng = np.random.default_rng(3)
    rgb = cv2.GaussianBlur(rng.integers(0, 256, (120, 160, 3), dtype=np.uint8), (5, 5), 1.5)
    path = tmp_path / "plain.jpg"
    Image.fromarray(rgb).save(path, quality=90)
    got = load_photo(path).image
    pil = np.asarray(Image.open(path).convert("RGB"))[..., ::-1]
    ocv = cv2.imread(str(path), cv2.IMREAD_COLOR)
    assert np.abs(got.astype(int) - pil.astype(int)).max() <= 1
    assert np.abs(got.astype(int) - ocv.astype(int)).max() <= 1


@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="named pipes are POSIX")
def test_a_named_pipe_is_refused_without_waiting_for_a_writer(tmp_path: Path) -> None:
    """Only regular files are photos: a named pipe is refused at once (opening it to read
    would wait for a writer for ever); a folder or a device named like a photo too."""
    import threading
    import time

    pipe = tmp_path / "IMG_0001.jpg"
    os.mkfifo(pipe)
    got: dict[str, object] = {}

    def read() -> None:
        got["taken"] = photo_taken(pipe)
        try:
            load_photo(pipe)
        except PhotoError as exc:
            got["error"] = str(exc)

    reader = threading.Thread(target=read, daemon=True)
    start = time.monotonic()
    reader.start()
    reader.join(5.0)
    if reader.is_alive():  # blocked: a writer lets it go, and the test fails
        with open(pipe, "wb"):
            pass
        pytest.fail("reading a named pipe blocked")
    assert time.monotonic() - start < 1.0
    assert got == {"taken": None, "error": f"photo {pipe}: is a named pipe, not a photo"}
    with pytest.raises(PhotoError, match=r"is a folder, not a photo"):
        load_photo(tmp_path)
    if os.path.exists("/dev/zero"):
        link = tmp_path / "zero.jpg"
        link.symlink_to("/dev/zero")  # would read for ever
        with pytest.raises(PhotoError, match=r"zero\.jpg: is a device, not a photo"):
            load_photo(link)


@pytest.mark.parametrize("orientation", [1, 6, 8])
def test_a_reduced_grey_copy_is_the_area_average_of_the_photo(
    tmp_path: Path, orientation: int
) -> None:
    # libjpeg's scaled decode against OpenCV's reduction by area (cv2.INTER_AREA) of the
    # full decode's grey, the right way up; 3/8 is the smallest n/8 keeping a third
    from printcheck.load import decode_photo, read_photo, reduced_grey

    rng = np.random.default_rng(orientation)
    rgb = cv2.GaussianBlur(rng.integers(0, 256, (240, 320, 3), dtype=np.uint8), (0, 0), 4.0)
    exif = Image.Exif()
    exif[0x0112] = orientation
    path = tmp_path / f"photo{orientation}.jpg"
    Image.fromarray(rgb).save(path, quality=95, exif=exif)
    file = read_photo(path)
    copy = reduced_grey(file, 3)
    assert copy is not None
    grey, (fx, fy) = copy
    full = cv2.cvtColor(decode_photo(file).image, cv2.COLOR_BGR2GRAY)
    assert (fx, fy) == (full.shape[1] / grey.shape[1], full.shape[0] / grey.shape[0])
    assert fx == pytest.approx(8 / 3, abs=0.02) and fy == pytest.approx(8 / 3, abs=0.02)
    ref = cv2.resize(full, (grey.shape[1], grey.shape[0]), interpolation=cv2.INTER_AREA)
    assert np.abs(grey.astype(int) - ref.astype(int)).mean() <= 1.5


def test_no_reduced_copy_of_a_photo_that_is_not_a_jpeg(tmp_path: Path) -> None:
    from printcheck.load import read_photo, reduced_grey

    path = tmp_path / "photo.png"
    Image.fromarray(_pattern(120, 160)).save(path)
    assert reduced_grey(read_photo(path), 2) is None
