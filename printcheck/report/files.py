"""Writers: result JSON, the results CSV and overlay images, each written atomically.

Every file is written to a temporary file in the same folder, flushed to disk (fsync) and
renamed over its final name (``os.replace``), so a reader never sees half a file and a
crash leaves either the old file or the new one.  Names are plain file names inside the
given output folder: a name that would land anywhere else is refused, and names derived
from photos (:func:`output_name`) never contain a folder separator.
"""

from __future__ import annotations

import csv
import errno
import io
import json
import os
import tempfile
from collections.abc import Iterable, Mapping
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from printcheck.errors import ReportError
from printcheck.records import PassSummary

if TYPE_CHECKING:
    from printcheck.result import Result

__all__ = [
    "CSV_COLUMNS",
    "CSV_NAME",
    "OVERLAY_SUFFIX",
    "is_output_name",
    "output_name",
    "result_row",
    "write_bytes",
    "write_text",
    "write_json",
    "write_csv",
    "write_image",
    "encode_image",
    "write_photo_outputs",
]

CSV_NAME = "results.csv"

#: The end of every overlay image's name: ``<photo stem>.overlay.png``.
OVERLAY_SUFFIX = ".overlay.png"

CSV_COLUMNS: tuple[str, ...] = (
    "photo",
    "surface",
    "taken",
    "unit",
    "cell",
    "density",
    "bearing_percent",
    "spot_count",
    "largest_bare",
    "spec",
    "meets",
    "spot_count_low",
    "spot_count_high",
    "bearing_percent_low",
    "bearing_percent_high",
    "doubtful",
    "warnings",
)

_FORBIDDEN = set('/\\\x00:*?"<>|')


def plain_name(text: str) -> str:
    """``text`` with the characters that could leave a folder or upset another system
    (``/ \\ : * ? " < > |`` and control characters) made ``_``, stripped of spaces."""
    return "".join("_" if (ch in _FORBIDDEN or ord(ch) < 32) else ch for ch in text).strip()


def output_name(photo: str, suffix: str) -> str:
    """The output file name for ``photo``: its stem plus ``suffix`` (e.g. ``".json"``).

    Characters that could leave the folder or upset another system (``/ \\ : * ? " < > |``
    and control characters) become ``_``; a stem of only dots becomes ``_``.

    Examples
    --------
    >>> output_name("IMG_0042.jpg", ".json")
    'IMG_0042.json'
    >>> output_name("../../etc/passwd", ".json")
    '.._.._etc_passwd.json'
    """
    base = str(photo)
    head, dot, ext = base.rpartition(".")
    stem = head if dot and head.strip(".") and not set(ext) & {"/", "\\"} else base
    clean = plain_name(stem)
    if not clean.strip("."):
        clean = "_"
    return clean + suffix


def output_stem(folder: Path, photo: str, sha256: str | None) -> str:
    """The stem of the output files of ``photo`` (its content ``sha256``) in ``folder``.

    ``output_name(photo, "")``, unless the result JSON of that name holds another
    photo's results: a name used again for new content (a phone that numbers its photos
    afresh, two phones syncing into one folder, a photo replaced by a retake), whose
    files must not be written over.  Then the stem is followed by ``~`` and the first 10
    hex digits of ``sha256``.  Writers and readers both ask here, so that a report or
    page of the earlier photo still shows its own overlay.

    Examples
    --------
    >>> output_stem(Path("/nonexistent"), "IMG_0042.jpg", "ab" * 32)
    'IMG_0042'
    """
    stem = output_name(photo, "")
    if sha256 is None:
        return stem
    other = f"{stem}~{sha256[:10]}"
    if (folder / (other + ".json")).is_file():
        return other
    try:
        with open(folder / (stem + ".json"), encoding="utf-8") as fh:
            owner = json.load(fh).get("sha256")
    except (OSError, ValueError, AttributeError):
        return stem  # none yet, or not readable: the name is this photo's
    return stem if owner in (None, sha256) else other


def is_output_name(name: str) -> bool:
    """True when a file called ``name`` is one printcheck writes that looks like a photo.

    The overlays (``<stem>.overlay.png``) are PNG images: with ``--out`` set to the photo
    folder, a second batch must not take them for photos.

    Examples
    --------
    >>> is_output_name("IMG_0042.overlay.png"), is_output_name("IMG_0042.png")
    (True, False)
    """
    return name.lower().endswith(OVERLAY_SUFFIX)


def _target(folder: str | os.PathLike[str], name: str) -> Path:
    """``folder / name``, refusing a name that is not a plain file name inside ``folder``."""
    if (
        not name
        or name in (".", "..")
        or "/" in name
        or "\\" in name
        or "\x00" in name
        or os.path.isabs(name)
    ):
        raise ReportError(
            f"output name {name!r} is not a plain file name; give a name without folders"
        )
    root = Path(folder)
    path = root / name
    if path.resolve().parent != root.resolve():
        raise ReportError(f"output {path} would land outside the output folder {root}")
    return path


def _explain(path: Path, exc: OSError) -> ReportError:
    code = exc.errno
    if code in (errno.ENOSPC, errno.EDQUOT, errno.EFBIG):
        why = "the disk is full; free some space or give another --out folder"
    elif code in (errno.EROFS, errno.EACCES, errno.EPERM):
        why = "the folder is read-only or not writable; give a writable --out folder"
    elif code == errno.ENOENT:
        why = "the folder does not exist; create it or give another --out folder"
    elif code == errno.ENOTDIR:
        why = "a file stands where the output folder should be; give another --out folder"
    else:
        why = f"{exc.strerror or exc}; give another --out folder"
    return ReportError(f"cannot write {path}: {why}")


def write_bytes(folder: str | os.PathLike[str], name: str, data: bytes) -> Path:
    """Write ``data`` to ``folder/name`` atomically and return the path.

    Parameters
    ----------
    folder : path
        The output folder (created if missing).
    name : str
        A plain file name (no folder parts).

    Raises
    ------
    ReportError
        The name would leave the folder, or the folder is read-only or full.
    """
    path = _target(folder, name)
    tmp: str | None = None
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(prefix=f".{name}.", suffix=".tmp", dir=path.parent)
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        os.chmod(tmp, 0o644)
        os.replace(tmp, path)
        tmp = None
        _fsync_dir(path.parent)
    except OSError as exc:
        raise _explain(path, exc) from None
    finally:
        if tmp is not None:
            try:
                os.unlink(tmp)
            except OSError:
                pass
    return path


def _fsync_dir(folder: Path) -> None:
    """Make the rename durable (a no-op where folders cannot be opened, e.g. Windows)."""
    try:
        fd = os.open(folder, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


def write_text(folder: str | os.PathLike[str], name: str, text: str) -> Path:
    """Write ``text`` (UTF-8) to ``folder/name`` atomically."""
    return write_bytes(folder, name, text.encode("utf-8"))


def write_json(folder: str | os.PathLike[str], name: str, data: Mapping[str, Any]) -> Path:
    """Write a result dict (or any plain-data dict) as JSON, indent 2, atomically.

    ``name`` is the file name, e.g. ``output_name(result["photo"], ".json")``.
    """
    try:
        text = json.dumps(data, indent=2, ensure_ascii=False, allow_nan=False)
    except (TypeError, ValueError) as exc:
        raise ReportError(
            f"cannot write {name}: the data is not plain JSON ({exc}); pass result_to_dict output"
        ) from None
    return write_text(folder, name, text + "\n")


def result_row(summary: PassSummary) -> dict[str, Any]:
    """One CSV row (the :data:`CSV_COLUMNS`) of a measured photo.

    Booleans become ``true``/``false``, missing values the empty string, warnings are
    joined with ``"; "``.  Text that a spreadsheet would take for a formula (starting
    with ``= + - @``, a tab or a carriage return) gets a leading ``'``; numbers are
    left as they are.
    """
    verdict, conf = summary.verdict, summary.confidence

    def b(v: bool | None) -> str:
        return "" if v is None else ("true" if v else "false")

    def v(x: Any) -> Any:
        return "" if x is None else x

    row = {
        "photo": summary.photo,
        "surface": v(summary.surface),
        "taken": "" if summary.taken is None else summary.taken.isoformat(timespec="seconds"),
        "unit": summary.unit,
        "cell": summary.cell,
        "density": v(summary.density),
        "bearing_percent": v(summary.bearing_percent),
        "spot_count": summary.spot_count,
        "largest_bare": v(summary.largest_bare),
        "spec": "" if verdict is None else verdict.name,
        "meets": "" if verdict is None else b(verdict.meets),
        "spot_count_low": "" if conf is None else conf.spot_count_low,
        "spot_count_high": "" if conf is None else conf.spot_count_high,
        "bearing_percent_low": "" if conf is None else conf.bearing_percent_low,
        "bearing_percent_high": "" if conf is None else conf.bearing_percent_high,
        "doubtful": "" if conf is None else b(conf.doubtful),
        "warnings": "; ".join(summary.warnings),
    }
    return {key: _inert(value) for key, value in row.items()}


# A text cell starting with one of these is read as a formula by spreadsheet programs
# (a photo or surface named "=HYPERLINK(...)"); OWASP's advice on CSV injection is to
# start such a cell with a single quote, which the spreadsheet shows as text.
_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")


def _inert(value: Any) -> Any:
    if isinstance(value, str) and value.startswith(_FORMULA_START):
        return "'" + value
    return value


def write_csv(
    folder: str | os.PathLike[str],
    name: str,
    summaries: Iterable[PassSummary],
) -> Path:
    """Write a CSV (``name`` is usually :data:`CSV_NAME`): a header of :data:`CSV_COLUMNS`,
    then one row per measured photo (:func:`result_row`), atomically."""
    buf = io.StringIO(newline="")
    writer = csv.DictWriter(buf, fieldnames=list(CSV_COLUMNS), lineterminator="\r\n")
    writer.writeheader()
    for summary in summaries:
        writer.writerow(result_row(summary))
    return write_text(folder, name, buf.getvalue())


def encode_image(image: np.ndarray, suffix: str = ".png", *, jpeg_quality: int = 90) -> bytes:
    """Encode a (M, N, 3) uint8 BGR image as PNG or JPEG bytes (``suffix`` picks which)."""
    import cv2

    suffix = suffix.lower()
    if suffix == ".png":
        # zlib's run-length strategy on Paeth-filtered rows: on overlays (photo texture with
        # flat drawn marks) 1.6-1.8x faster than compression level 3 and 2-9 % smaller
        # (benchmarks/bench_speed.py); the pixels are the same, PNG is lossless
        params = [
            cv2.IMWRITE_PNG_COMPRESSION, 1,
            cv2.IMWRITE_PNG_STRATEGY, cv2.IMWRITE_PNG_STRATEGY_RLE,
            cv2.IMWRITE_PNG_FILTER, cv2.IMWRITE_PNG_FILTER_PAETH,
        ]  # fmt: skip
    elif suffix in (".jpg", ".jpeg"):
        params = [cv2.IMWRITE_JPEG_QUALITY, int(jpeg_quality)]
    else:
        raise ReportError(f"image format {suffix!r} is not supported; use .png or .jpg")
    img = np.asarray(image)
    if img.dtype != np.uint8 or img.ndim not in (2, 3):
        raise ReportError(
            f"image must be a (M, N, 3) uint8 array, got {img.dtype} of shape {img.shape}"
        )
    ok, buf = cv2.imencode(suffix, img, params)
    if not ok:
        raise ReportError(f"could not encode the image as {suffix}")
    return buf.tobytes()


def write_image(folder: str | os.PathLike[str], name: str, image: np.ndarray) -> Path:
    """Write a (M, N, 3) uint8 BGR image as PNG or JPEG (by ``name``'s suffix), atomically."""
    suffix = os.path.splitext(name)[1] or ".png"
    return write_bytes(folder, name, encode_image(image, suffix))


def write_photo_outputs(result: Result, folder: str | os.PathLike[str]) -> list[Path]:
    """Write one photo's ``<stem>.json`` and ``<stem>.overlay.png`` into ``folder``.

    Parameters
    ----------
    result : printcheck.result.Result
        The photo's result: its JSON (:func:`printcheck.serde.result_to_dict`) and its
        overlay (:func:`printcheck.report.overlay.draw_overlay`).
    folder : path
        The output folder (created if missing).

    Returns
    -------
    list of Path
        The JSON file, then the overlay image.
    """
    from printcheck.report.overlay import draw_overlay
    from printcheck.serde import result_to_dict

    stem = output_stem(Path(folder), result.photo, result.sha256)
    json_path = write_json(folder, stem + ".json", result_to_dict(result))
    png_path = write_bytes(folder, stem + OVERLAY_SUFFIX, encode_image(draw_overlay(result)))
    return [json_path, png_path]
