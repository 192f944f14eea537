"""Load: decode a photo the right way up, read when it was taken, refuse what cannot be used.

The only module that reads image files.  Photos are opened read-only and never modified.
"""

from __future__ import annotations

import contextlib
import hashlib
import math
import os
import stat
import warnings
from collections.abc import Iterator
from dataclasses import dataclass
from datetime import datetime
from pathlib import Path
from typing import BinaryIO

import numpy as np

from printcheck.errors import PhotoError

__all__ = [
    "MAX_PIXELS",
    "check_pixels",
    "PHOTO_SUFFIXES",
    "Photo",
    "PhotoHeader",
    "is_truncated",
    "load_photo",
    "PhotoFile",
    "read_photo",
    "decode_photo",
    "reduced_grey",
    "photo_header",
    "photo_taken",
    "is_photo_name",
    "not_a_photo_file",
]

MAX_PIXELS = 150_000_000  # 150 MP: well above any phone; refuses decompression bombs
PHOTO_SUFFIXES = (".jpg", ".jpeg", ".png", ".tif", ".tiff", ".heic", ".heif", ".webp", ".bmp")

_EXIF_IFD = 0x8769
_DATETIME_ORIGINAL = 36867
_DATETIME = 306


@dataclass(frozen=True, eq=False)
class Photo:
    """A decoded photo.

    Attributes
    ----------
    image : (M, N, 3) uint8 ndarray, BGR
        Pixels, turned the right way up by the EXIF orientation.
    path : str
    name : str
        File name without the folder.
    sha256 : str
        Hash of the file's bytes.
    taken : datetime or None
        EXIF DateTimeOriginal (else EXIF DateTime); None when the photo has neither.
    file_time : datetime
        The file's modification time (the fallback for ordering).
    """

    image: np.ndarray
    path: str
    name: str
    sha256: str
    taken: datetime | None
    file_time: datetime


def is_photo_name(path: str | Path) -> bool:
    """True when ``path`` has a photo suffix printcheck reads (case-insensitive)."""
    return Path(path).suffix.lower() in PHOTO_SUFFIXES


def _register_heif() -> None:
    try:
        import pillow_heif

        pillow_heif.register_heif_opener()
    except ImportError:  # pragma: no cover - optional at run time
        pass


def not_a_photo_file(mode: int) -> str | None:
    """Why a file of ``mode`` (``os.stat(...).st_mode``) cannot be a photo, or None.

    Only regular files are photos: a folder, a named pipe, a socket or a device named
    like a photo is not one (reading a named pipe would wait for a writer for ever).

    Examples
    --------
    >>> import stat
    >>> not_a_photo_file(stat.S_IFIFO | 0o644)
    'is a named pipe, not a photo'
    >>> not_a_photo_file(stat.S_IFREG | 0o644) is None
    True
    """
    if stat.S_ISREG(mode):
        return None
    if stat.S_ISDIR(mode):
        return "is a folder, not a photo"
    if stat.S_ISFIFO(mode):
        return "is a named pipe, not a photo"
    if stat.S_ISSOCK(mode):
        return "is a socket, not a photo"
    if stat.S_ISCHR(mode) or stat.S_ISBLK(mode):
        return "is a device, not a photo"
    return "is not a regular file"


def _open_regular(path: Path) -> BinaryIO:
    """Open ``path`` for reading if it is a regular file; else raise PhotoError at once.

    The file is opened without blocking (a named pipe would otherwise wait for a writer)
    and checked on the open descriptor, so it cannot be swapped between check and read.
    """
    fd = os.open(path, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0) | getattr(os, "O_BINARY", 0))
    try:
        why = not_a_photo_file(os.fstat(fd).st_mode)
        if why is not None:
            raise PhotoError(f"photo {path}: {why}")
        if hasattr(os, "set_blocking"):
            os.set_blocking(fd, True)
        return os.fdopen(fd, "rb")
    except BaseException:
        os.close(fd)
        raise


def _read_bytes(path: Path) -> bytes:
    try:
        with _open_regular(path) as fh:
            return fh.read()
    except PhotoError:
        raise
    except FileNotFoundError:
        raise PhotoError(f"photo {path}: file not found") from None
    except IsADirectoryError:
        raise PhotoError(f"photo {path}: is a folder, not a photo") from None
    except PermissionError:
        raise PhotoError(f"photo {path}: permission denied; make the file readable") from None
    except OSError as exc:
        raise PhotoError(f"photo {path}: cannot be read ({exc.strerror})") from None


@contextlib.contextmanager
def _quiet() -> Iterator[None]:
    """Silence Pillow's own warnings (pixel count, EXIF, palette) while it reads a photo.

    load turns real problems into PhotoErrors under its own limits; a stray warning line
    must not reach the terminal.
    """
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        yield


def _parse_exif_time(text: object) -> datetime | None:
    if isinstance(text, bytes):
        text = text.decode("ascii", "replace")
    if not isinstance(text, str):
        return None
    text = text.strip().rstrip("\x00")
    for fmt in ("%Y:%m:%d %H:%M:%S", "%Y-%m-%d %H:%M:%S", "%Y:%m:%d %H:%M:%S.%f"):
        try:
            return datetime.strptime(text, fmt)
        except ValueError:
            continue
    return None


def _exif_taken(im: object) -> datetime | None:
    try:
        exif = im.getexif()  # type: ignore[attr-defined]
    except Exception:  # malformed EXIF is not fatal: the photo may still be measured
        return None
    try:
        sub = exif.get_ifd(_EXIF_IFD)
    except Exception:
        sub = {}
    return _parse_exif_time(sub.get(_DATETIME_ORIGINAL)) or _parse_exif_time(exif.get(_DATETIME))


@dataclass(frozen=True)
class PhotoHeader:
    """What a photo's header says: Pillow's format name and the size in pixels."""

    format: str
    width: int
    height: int


def photo_header(data: bytes, name: str | Path) -> PhotoHeader:
    """Read the header of a photo's bytes with the guards of :func:`load_photo`.

    No pixel is decoded.  The caller checks the size against :data:`MAX_PIXELS` and the
    end of the bytes with :func:`is_truncated`, as :func:`load_photo` does.

    Parameters
    ----------
    data : bytes
        The whole file.
    name : str or Path
        What the messages call the photo.

    Raises
    ------
    PhotoError
        Not an image printcheck reads, a decompression bomb, or an unreadable header;
        one line naming ``name``.
    """
    im = _open_header(Path(name), data)
    width, height = im.size
    return PhotoHeader(str(im.format or ""), int(width), int(height))


def is_truncated(data: bytes) -> bool:
    """True when a JPEG or PNG file's bytes lack their end marker (a cut-short copy)."""
    if data[:3] == b"\xff\xd8\xff":  # JPEG ends with the EOI marker (ITU T.81 B.2.1)
        return b"\xff\xd9" not in data[-65536:]
    if data[:8] == b"\x89PNG\r\n\x1a\n":  # PNG ends with an IEND chunk (ISO/IEC 15948 11.2.5)
        return b"IEND" not in data[-64:]
    return False


def _open_header(path: Path, data: bytes):  # type: ignore[no-untyped-def]
    import io

    from PIL import Image, UnidentifiedImageError

    _register_heif()
    try:
        with _quiet():
            im = Image.open(io.BytesIO(data))
    except UnidentifiedImageError:
        raise PhotoError(
            f"photo {path}: not an image printcheck can read (JPEG, PNG, TIFF, HEIC)"
        ) from None
    except Image.DecompressionBombError:
        raise PhotoError(f"photo {path}: claims too many pixels; refused") from None
    except Exception as exc:
        raise PhotoError(f"photo {path}: not a readable image ({exc})") from None
    return im


def _to_bgr8(array: np.ndarray) -> np.ndarray:
    import cv2

    a = array
    if a.dtype != np.uint8:
        if a.dtype == np.uint16:
            a = (a >> 8).astype(np.uint8)
        elif np.issubdtype(a.dtype, np.floating):
            a = np.clip(a * (255.0 if float(np.nanmax(a)) <= 1.0 else 1.0), 0, 255).astype(np.uint8)
        else:
            a = np.clip(a, 0, 255).astype(np.uint8)
    if a.ndim == 2:
        return cv2.cvtColor(a, cv2.COLOR_GRAY2BGR)
    if a.shape[2] == 4:
        return cv2.cvtColor(a, cv2.COLOR_RGBA2BGR)
    return cv2.cvtColor(a, cv2.COLOR_RGB2BGR)


def _decode_pillow(path: Path, im) -> np.ndarray:  # type: ignore[no-untyped-def]
    from PIL import ImageOps

    try:
        with _quiet():
            # in place: ``im`` is this module's own object; exif_transpose would otherwise
            # copy the whole decoded photo even when it needs no turning
            ImageOps.exif_transpose(im, in_place=True)
            return _pillow_to_bgr8(im)
    except OSError as exc:
        raise PhotoError(f"photo {path}: could not be decoded ({exc})") from None
    except (ValueError, SyntaxError) as exc:  # Pillow's word for a malformed stream
        raise PhotoError(f"photo {path}: could not be decoded ({exc})") from None


# EXIF 2.32 tag 0x0112 (Orientation): how the stored pixels turn to the upright photo,
# as OpenCV operations (the same turns as Pillow's ImageOps.exif_transpose)
_ORIENT = 0x0112


def _turn_upright(image: np.ndarray, orientation: int) -> np.ndarray:
    import cv2

    if orientation == 2:
        return cv2.flip(image, 1)
    if orientation == 3:
        return cv2.rotate(image, cv2.ROTATE_180)
    if orientation == 4:
        return cv2.flip(image, 0)
    if orientation == 5:
        return cv2.transpose(image)
    if orientation == 6:
        return cv2.rotate(image, cv2.ROTATE_90_CLOCKWISE)
    if orientation == 7:
        return cv2.flip(cv2.transpose(image), -1)
    if orientation == 8:
        return cv2.rotate(image, cv2.ROTATE_90_COUNTERCLOCKWISE)
    return image


def _libjpeg(data: bytes, im, **options: object) -> np.ndarray | None:  # type: ignore[no-untyped-def]
    """``simplejpeg.decode_jpeg(data, **options)`` (libjpeg-turbo) of a plain JPEG, or None.

    Anything out of the ordinary (not a JPEG, CMYK, a complaint about the stream,
    simplejpeg missing) gives None: Pillow decodes the photo instead, and decides whether
    a damaged stream is refused.
    """
    if im.format not in ("JPEG", "MPO"):
        return None
    try:
        import simplejpeg
    except ImportError:  # pragma: no cover - a dependency; Pillow still decodes
        return None
    try:
        if simplejpeg.decode_jpeg_header(data)[2] not in ("YCbCr", "Gray"):
            return None
        return np.asarray(simplejpeg.decode_jpeg(data, **options))
    except MemoryError:
        raise
    except Exception:  # any complaint: see the docstring
        return None


def _decode_jpeg_fast(data: bytes, im, orientation: int) -> np.ndarray | None:  # type: ignore[no-untyped-def]
    """Decode a plain JPEG straight to BGR with libjpeg-turbo (:func:`_libjpeg`), or None.

    About 1.6x faster than Pillow's decode and copy to numpy (and than cv2.imread) on a
    12 MP phone photo, with the same pixels.
    """
    image = _libjpeg(data, im, colorspace="BGR", strict=True)
    return None if image is None else _turn_upright(image, orientation)


def _pillow_to_bgr8(im) -> np.ndarray:  # type: ignore[no-untyped-def]
    if im.mode in ("I;16", "I;16B", "I;16L", "I"):
        arr = np.asarray(im, dtype=np.uint32)
        scale = 257.0 if arr.max(initial=0) > 255 else 1.0
        arr = np.clip(arr / scale, 0, 255).astype(np.uint8)
        return _to_bgr8(arr)
    if im.mode not in ("RGB", "L", "RGBA"):
        im = im.convert("RGBA" if "A" in im.mode or "transparency" in im.info else "RGB")
    return _to_bgr8(np.asarray(im))


def check_pixels(width: int, height: int, *, label: str, max_pixels: int = MAX_PIXELS) -> None:
    """Refuse, in one line naming ``label``, a photo of more than ``max_pixels`` (a
    decompression bomb, checked from the header before any pixel is decoded) or of
    fewer than 16 pixels a side."""
    if width * height > max_pixels:
        raise PhotoError(
            f"{label}: {width} x {height} pixels is more than the "
            f"{max_pixels // 1_000_000} MP printcheck accepts; refused"
        )
    if width < 16 or height < 16:
        raise PhotoError(f"{label}: {width} x {height} pixels is too small to measure")


@dataclass(frozen=True, eq=False)
class PhotoFile:
    """A photo file read and checked, not yet decoded (see :func:`read_photo`).

    Attributes
    ----------
    path : Path
    data : bytes
        The whole file.
    orientation : int
        The EXIF orientation (1: as stored).
    width, height : int
        The stored size in pixels, before any EXIF turn (from the header).
    """

    path: Path
    data: bytes
    orientation: int
    _header: object  # Pillow's image, opened on the header alone

    @property
    def width(self) -> int:
        return int(self._header.size[0])  # type: ignore[attr-defined]

    @property
    def height(self) -> int:
        return int(self._header.size[1])  # type: ignore[attr-defined]


def read_photo(path: str | Path, *, max_pixels: int = MAX_PIXELS) -> PhotoFile:
    """Read the photo file at ``path`` and check it (the first half of :func:`load_photo`).

    The size is checked from the file header before any pixel is decoded, so a file that
    claims an absurd size is refused without allocating it.

    Raises
    ------
    PhotoError
        One line naming the file and the problem: missing, unreadable, a folder, empty,
        not an image, truncated, or larger than ``max_pixels``.
    """
    path = Path(path)
    data = _read_bytes(path)
    if not data:
        raise PhotoError(f"photo {path}: file is empty")
    im = _open_header(path, data)
    check_pixels(*im.size, label=f"photo {path}", max_pixels=max_pixels)
    if is_truncated(data):
        raise PhotoError(f"photo {path}: file is truncated (incomplete copy or download?)")
    try:
        with _quiet():
            orientation = int(im.getexif().get(_ORIENT, 1))
    except Exception:  # unreadable EXIF: as Pillow does, leave the photo as stored
        orientation = 1
    return PhotoFile(path, data, orientation, im)


def decode_photo(file: PhotoFile) -> Photo:
    """Decode a photo read by :func:`read_photo` (the second half of :func:`load_photo`)."""
    path, data, im = file.path, file.data, file._header
    with _quiet():
        taken = _exif_taken(im)
    # Pillow decodes every format but the plain JPEG: OpenCV's decoders print
    # libjpeg/libpng complaints straight to the terminal and hand back a corrupt photo as
    # if it were whole.
    image = _decode_jpeg_fast(data, im, file.orientation)
    if image is None:
        image = _decode_pillow(path, im)
    stat = os.stat(path)
    return Photo(
        image=image,
        path=str(path),
        name=path.name,
        sha256=hashlib.sha256(data).hexdigest(),
        taken=taken,
        file_time=datetime.fromtimestamp(stat.st_mtime).replace(microsecond=0),
    )


def load_photo(path: str | Path, *, max_pixels: int = MAX_PIXELS) -> Photo:
    """Read and decode the photo at ``path``: :func:`decode_photo` of :func:`read_photo`.

    Raises
    ------
    PhotoError
        One line naming the file and the problem (see :func:`read_photo`), or a stream
        that cannot be decoded.
    """
    return decode_photo(read_photo(path, max_pixels=max_pixels))


def reduced_grey(file: PhotoFile, by: int) -> tuple[np.ndarray, tuple[float, float]] | None:
    """A grey copy of a plain JPEG about ``by`` times smaller a side, the right way up, and
    how many photo pixels one of its pixels spans (x, y); None for any other photo.

    libjpeg scales while it decodes (by n/8: here the smallest n/8 not below 1/``by``, so
    that the copy keeps at least the detail asked for), skipping most of the work of a
    full decode; the copy is the block average a reduction by area would give, to within
    the rounding.  A stream libjpeg cannot read gives None (:func:`decode_photo` says why).
    """
    n = max(1, min(8, math.ceil(8 / max(by, 1))))
    grey = _libjpeg(
        file.data,
        file._header,
        colorspace="GRAY",
        min_width=math.ceil(file.width * n / 8),
        min_height=math.ceil(file.height * n / 8),
    )
    if grey is None:  # the caller reduces the full photo
        return None
    grey = _turn_upright(np.ascontiguousarray(grey[..., 0]), file.orientation)
    turned = file.orientation in (5, 6, 7, 8)
    width, height = (file.height, file.width) if turned else (file.width, file.height)
    return grey, (width / grey.shape[1], height / grey.shape[0])


def photo_taken(path: str | Path) -> datetime | None:
    """EXIF time of the photo at ``path`` from its header alone, or None (cheap; for ordering)."""
    from PIL import Image

    _register_heif()
    try:
        # only a regular file is opened: a named pipe named like a photo would block
        with _open_regular(Path(path)) as fh, Image.open(fh) as im:  # lazy: the header only
            return _exif_taken(im)
    except Exception:  # any unreadable file simply has no EXIF time; load_photo says why
        return None
