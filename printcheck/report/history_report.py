"""A surface's report written from the history alone (no photo is measured).

What the history holds now is what the report shows: after a pass was removed or a
note kept, ``printcheck report SURFACE`` writes the report again.  The overlays an
earlier batch wrote into the output folder are shown where they are found.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

from printcheck.errors import OptionError

__all__ = ["stored_preview", "write_history_report"]


def stored_preview(out: Path, photo: str, sha256: str | None = None) -> bytes | None:
    """A JPEG preview of the overlay an earlier run wrote to ``out`` for ``photo`` (its
    content ``sha256``), or None."""
    from printcheck.report.files import OVERLAY_SUFFIX, output_stem

    path = out / (output_stem(out, photo, sha256) + OVERLAY_SUFFIX)
    if not path.is_file():
        return None
    try:
        import cv2
        import numpy as np

        image = cv2.imdecode(np.fromfile(path, dtype=np.uint8), cv2.IMREAD_COLOR)
        if image is None:
            return None
        h, w = image.shape[:2]
        scale = 1400 / max(h, w)
        if scale < 1:
            size = (round(w * scale), round(h * scale))
            image = cv2.resize(image, size, interpolation=cv2.INTER_AREA)
        from printcheck.report.files import encode_image

        return bytes(encode_image(image, ".jpg", jpeg_quality=85))
    except (OSError, ValueError):
        return None


def read_recorded(db: Path, surface: str, out: Path, *, command: str) -> tuple[Any, Any, Any]:
    """``surface``'s recorded passes, spec and progress from the history at ``db``
    (:func:`printcheck.progress.recorded_progress`), with the output folder ``out`` made.

    Raises
    ------
    OptionError
        No passes recorded for the surface, or ``out`` cannot be made.
    HistoryError
        The history cannot be read.
    """
    from printcheck.history import open_history
    from printcheck.progress import recorded_progress

    with open_history(db, readonly=True) as history:
        found = recorded_progress(history, surface, command=command)
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise OptionError(f"output folder {out}: cannot be created ({exc.strerror})") from None
    return found


def write_history_report(db: Path, surface: str, out: Path) -> Path:
    """Write ``out/report.html`` for ``surface`` from the history at ``db``.

    Raises
    ------
    OptionError
        No passes recorded for the surface.
    HistoryError, ReportError
        The history cannot be read, or the report cannot be written.
    """
    from printcheck.report.files import write_csv
    from printcheck.report.html import write_report
    from printcheck.report.stations import stations_section

    stored, spec, progress = read_recorded(db, surface, out, command="report")
    write_csv(out, "results.csv", [p.summary for p in stored])
    return write_report(
        out / "report.html",
        surface=surface,
        spec=spec,
        passes=[
            (p.summary, stored_preview(out, p.summary.photo, p.summary.sha256)) for p in stored
        ],
        progress=progress,
        extra_html=stations_section(progress),
    )
