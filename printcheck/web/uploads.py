"""Uploads: check a photo's bytes with the guards of :mod:`printcheck.load`, store it by
content hash inside the output folder.

A name sent with an upload is never used for a path: the stored file is
``<out>/uploads/<sha256>.<suffix>``, the suffix from the format the bytes turn out to be.
The name is kept only as text, to show (escaped) on the pages.
"""

from __future__ import annotations

import hashlib
import json
import threading
from dataclasses import dataclass
from pathlib import Path

from printcheck.errors import PhotoError

__all__ = ["UPLOADS", "CheckedPhoto", "check_photo_bytes", "store_upload", "UploadIndex"]

#: The folder, inside the output folder, that holds the uploaded photos.
UPLOADS = "uploads"

# Pillow's format name -> the suffix the stored photo gets (load.PHOTO_SUFFIXES).
_SUFFIX = {
    "JPEG": ".jpg",
    "MPO": ".jpg",
    "PNG": ".png",
    "TIFF": ".tif",
    "HEIF": ".heic",
    "AVIF": ".heic",
    "WEBP": ".webp",
    "BMP": ".bmp",
}


@dataclass(frozen=True)
class CheckedPhoto:
    """Bytes that passed the checks: their hash, the suffix for their format, the size."""

    sha256: str
    suffix: str
    width: int
    height: int


def check_photo_bytes(data: bytes, *, label: str = "upload") -> CheckedPhoto:
    """Check ``data`` as :func:`printcheck.load.load_photo` checks a file, before decoding.

    The same guards, from the same code: empty, not an image, an odd format, a header
    that claims more pixels than printcheck accepts (a decompression bomb), too small,
    truncated.  The pixels are decoded later, in a worker, by ``load_photo`` itself.

    Raises
    ------
    PhotoError
        One line that names ``label`` and the problem.
    """
    from printcheck import load

    if not data:
        raise PhotoError(f"{label}: the file is empty")
    header = load.photo_header(data, label)  # the same guards as load_photo
    fmt = header.format
    suffix = _SUFFIX.get(fmt)
    if suffix is None:
        raise PhotoError(
            f"{label}: a {fmt or 'unknown'} image; send a JPEG, PNG, TIFF or HEIC photo"
        )
    width, height = header.width, header.height
    load.check_pixels(width, height, label=label)
    if load.is_truncated(data):
        raise PhotoError(f"{label}: the file is truncated (the upload was cut short?)")
    return CheckedPhoto(hashlib.sha256(data).hexdigest(), suffix, width, height)


def store_upload(out: Path, data: bytes, checked: CheckedPhoto) -> Path:
    """Write the photo to ``out/uploads/<sha256><suffix>`` (atomically; once) and return it."""
    from printcheck.report.files import write_bytes

    folder = out / UPLOADS
    name = checked.sha256 + checked.suffix
    path = folder / name
    if path.is_file() and path.stat().st_size == len(data):
        return path  # the same bytes: the name is their hash
    return write_bytes(folder, name, data)


class UploadIndex:
    """``out/uploads/index.jsonl``: one line per upload (hash, surface, station, the name
    it was sent with, when), so the pages can show a pass's station and sent name."""

    def __init__(self, out: Path) -> None:
        self._path = out / UPLOADS / "index.jsonl"
        self._lock = threading.Lock()

    def add(self, *, sha256: str, surface: str, station: str | None, sent_name: str) -> None:
        """Append one line."""
        line = json.dumps(
            {"sha256": sha256, "surface": surface, "station": station, "sent_name": sent_name},
            ensure_ascii=False,
        )
        with self._lock:
            self._path.parent.mkdir(parents=True, exist_ok=True)
            with open(self._path, "a", encoding="utf-8") as fh:
                fh.write(line + "\n")

    def rows(self, surface: str) -> dict[str, dict[str, str | None]]:
        """Each photo uploaded for ``surface`` (by hash): its station and the name it
        was sent with (the latest upload's)."""
        found: dict[str, dict[str, str | None]] = {}
        with self._lock:
            try:
                text = self._path.read_text(encoding="utf-8")
            except OSError:
                return found
        for line in text.splitlines():
            try:
                row = json.loads(line)
            except ValueError:
                continue  # a line cut by a crash: the others still count
            if isinstance(row, dict) and row.get("surface") == surface:
                found[str(row.get("sha256"))] = {
                    "station": row.get("station") or None,
                    "sent_name": row.get("sent_name") or None,
                }
        return found
