"""The result of inspecting one photo, and its one conversion to plain data.

:func:`result_to_dict` is the single door from results to every output (JSON, CSV,
HTML, history): numpy scalars become Python numbers here and nowhere else.  Its
output is the result JSON contract of DESIGN.md (``printcheck-result/1``).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from datetime import datetime
from typing import Any

import numpy as np

from printcheck.judge import Verdict
from printcheck.locate import Rectified
from printcheck.measure import Measurement
from printcheck.segment import Segmentation
from printcheck.units import from_mm

__all__ = ["RESULT_FORMAT", "Result", "result_to_dict", "plain"]

RESULT_FORMAT = "printcheck-result/1"


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


def plain(value: Any) -> Any:
    """Convert numpy scalars/arrays, tuples and datetimes to JSON-ready Python values."""
    if isinstance(value, dict):
        return {str(k): plain(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [plain(v) for v in value]
    if isinstance(value, np.ndarray):
        return plain(value.tolist())
    if isinstance(value, np.bool_ | bool):
        return bool(value)
    if isinstance(value, np.integer):
        return int(value)
    if isinstance(value, np.floating | float):
        f = float(value)
        return None if not math.isfinite(f) else f
    if isinstance(value, datetime):
        return value.isoformat(timespec="seconds")
    return value


def _r(value: float, digits: int = 4) -> float:
    return round(float(value), digits)


def result_to_dict(result: Result) -> dict[str, Any]:
    """The result JSON object (DESIGN.md contract, format ``printcheck-result/1``)."""
    u = result.unit
    m = result.measurement
    cal = result.rectified.calibration
    win = result.rectified.frame.window

    def length(mm: float) -> float:
        return _r(from_mm(mm, u), 4)

    def area(mm2: float) -> float:
        return _r(from_mm(from_mm(mm2, u), u), 4)

    cells = [
        {
            "row": c.row,
            "col": c.col,
            "complete": c.complete,
            "spot_count": c.spot_count,
            "density": _r(c.density, 2),
            "bearing_percent": _r(c.bearing_percent, 2),
            "area": area(c.area_mm2),
        }
        for c in m.cells
    ]
    out: dict[str, Any] = {
        "format": RESULT_FORMAT,
        "photo": result.photo,
        "surface": result.surface,
        "taken": result.taken,
        "unit": u,
        "cell": _r(result.cell, 4),
        "calibration": {
            "method": cal.method,
            "layout": cal.layout,
            "markers": list(cal.markers),
            "px_per_mm": _r(cal.px_per_mm, 3),
            "residual_mm": None if cal.residual_mm is None else _r(cal.residual_mm, 4),
            "photo_px_per_mm": None if cal.photo_px_per_mm is None else _r(cal.photo_px_per_mm, 3),
        },
        "window": {
            "width": length(win.width_mm),
            "height": length(win.height_mm),
            "area": area(m.area_mm2),
        },
        "spot_count": m.spot_count,
        "density": _r(m.density, 2),
        "bearing_percent": _r(m.bearing_percent, 2),
        "largest_bare": length(m.largest_bare.diameter_mm),
        "cells": cells,
        "spec": None,
        # --- additions beyond the contract's keys (allowed: "more keys may be added")
        "sha256": result.sha256,
        "confidence": None,
        "spot_sizes": {k: _r(v, 4) for k, v in m.size_stats.items()},
        "segmentation": {
            "compound": result.segmentation.compound,
            "compound_on": result.segmentation.compound_on,
            "compound_level": _r(result.segmentation.compound_level, 4),
            "noise": _r(result.segmentation.noise, 5),
        },
        "guidance": {
            "high": [
                {"x": length(x), "y": length(y), "size": length(s), "reason": why}
                for x, y, s, why in m.guidance.high
            ],
            "bare": [
                {"x": length(b.x_mm), "y": length(b.y_mm), "diameter": length(b.diameter_mm)}
                for b in m.guidance.bare
            ],
        },
        "warnings": list(result.warnings),
    }
    if m.confidence is not None:
        c = m.confidence
        out["confidence"] = {
            "spot_count_low": c.count_low,
            "spot_count_high": c.count_high,
            "bearing_percent_low": _r(c.bearing_low, 2),
            "bearing_percent_high": _r(c.bearing_high, 2),
            "doubtful": c.doubtful,
            "reason": c.reason,
        }
    if result.verdict is not None:
        v = result.verdict
        out["spec"] = {
            "name": v.name,
            "meets": v.meets,
            "checks": [
                {
                    "name": ch.name,
                    "target": ch.target,
                    "value": None if ch.value is None else _r(ch.value, 3),
                    "ok": ch.ok,
                    "reason": ch.reason,
                }
                for ch in v.checks
            ],
        }
    return plain(out)
