"""The result of inspecting one photo: the stages' results, arrays included.

Outputs do not read it directly: :func:`printcheck.serde.summarize` makes the typed,
array-free :class:`printcheck.records.PassSummary` of it that JSON, CSV, HTML and the
history are written from (and :func:`printcheck.serde.result_to_dict` the result JSON,
``printcheck-result/1`` in docs/formats.md).
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime

from printcheck.judge import Verdict
from printcheck.locate import Rectified
from printcheck.measure import Measurement
from printcheck.segment import Segmentation

__all__ = ["Result"]


@dataclass(frozen=True, eq=False)
class Result:
    """Everything printcheck knows about one photo of one print.

    Attributes
    ----------
    photo : str
        The photo's file name (no folder).
    path : str or None
        The photo's path as given.
    sha256 : str or None
        Hash of the photo file's bytes (identifies the photo in the history).
    surface : str or None
    taken : datetime or None
        When the photo was taken (EXIF DateTimeOriginal, else the file time).
    unit : {"in", "mm"}
    cell : float
        Side of the counting cell in ``unit``.
    rectified, segmentation, measurement : the stage results
    verdict : Verdict or None
        None when no spec was asked for.
    warnings : tuple of str
        Every stage's warnings, for the report.
    """

    photo: str
    path: str | None
    sha256: str | None
    surface: str | None
    taken: datetime | None
    unit: str
    cell: float
    rectified: Rectified
    segmentation: Segmentation
    measurement: Measurement
    verdict: Verdict | None
    warnings: tuple[str, ...] = ()

    @property
    def meets(self) -> bool | None:
        return None if self.verdict is None else self.verdict.meets
