"""Serde: results, specs and progress into and out of plain data.

The one door between the pipeline's objects and every output:

- :func:`summarize` makes a :class:`printcheck.records.PassSummary` of a Result.  It is
  the only place that reads the measurement (numpy scalars become Python numbers here,
  figures are converted to the result's unit and rounded as the JSON writes them).
- :func:`summary_to_dict` / :func:`summary_from_dict` write and read the result JSON
  (``printcheck-result/1``, docs/formats.md); :func:`result_to_dict` is the two steps.
- :func:`spec_to_dict` / :func:`spec_from_dict` keep a spec's targets with a pass.
- :func:`progress_to_dict` writes the progress JSON (``printcheck-progress/1``).
- :func:`overlay_marks` gives the overlay what it draws, in mm.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Mapping
from dataclasses import dataclass
from datetime import datetime
from typing import TYPE_CHECKING, Any

import numpy as np

from printcheck.guidance import Advice, advise
from printcheck.judge import Check, Verdict
from printcheck.records import (
    BareArea,
    CalibrationSummary,
    CellSummary,
    ConfidenceSummary,
    HighArea,
    PassSummary,
    Progress,
    SegmentationSummary,
    WindowSummary,
)
from printcheck.spec import Spec
from printcheck.units import from_mm

if TYPE_CHECKING:
    from printcheck.result import Result

__all__ = [
    "RESULT_FORMAT",
    "PROGRESS_FORMAT",
    "CellBox",
    "OverlayMarks",
    "summarize",
    "result_to_dict",
    "summary_to_dict",
    "summary_from_dict",
    "spec_to_dict",
    "spec_from_dict",
    "progress_to_dict",
    "overlay_marks",
]

RESULT_FORMAT = "printcheck-result/1"
PROGRESS_FORMAT = "printcheck-progress/1"


# --------------------------------------------------------------------------- Result -> summary


def _r(value: float, digits: int) -> float | None:
    """``value`` rounded to ``digits`` as a Python float; None when it is not finite."""
    f = float(value)
    return round(f, digits) if math.isfinite(f) else None


def _rf(value: float, digits: int) -> float:
    """:func:`_r` for a figure that is always finite (a cell's, a threshold)."""
    f = _r(value, digits)
    if f is None:
        raise ValueError(f"expected a finite number, got {value!r}")
    return f


def _taken(value: datetime | None) -> datetime | None:
    """A photo time to the second, as the JSON keeps it."""
    return None if value is None else value.replace(microsecond=0)


def summarize(result: Result) -> PassSummary:
    """The typed, array-free summary of one Result (every figure of its result JSON)."""
    u = result.unit
    m = result.measurement
    cal = result.rectified.calibration
    win = result.rectified.frame.window

    def length(mm: float) -> float | None:
        return _r(from_mm(mm, u), 4)

    def area(mm2: float) -> float | None:
        return _r(from_mm(from_mm(mm2, u), u), 4)

    cells = tuple(
        CellSummary(
            row=int(c.row),
            col=int(c.col),
            complete=bool(c.complete),
            spot_count=int(c.spot_count),
            density=_rf(c.density, 2),
            bearing_percent=_rf(c.bearing_percent, 2),
            area=_rf(from_mm(from_mm(c.area_mm2, u), u), 4),
        )
        for c in m.cells
    )
    return PassSummary(
        photo=result.photo,
        surface=result.surface,
        taken=_taken(result.taken),
        unit=u,
        cell=_rf(result.cell, 4),
        calibration=CalibrationSummary(
            method=cal.method,
            layout=cal.layout,
            markers=tuple(int(k) for k in cal.markers),
            px_per_mm=_rf(cal.px_per_mm, 3),
            residual_mm=None if cal.residual_mm is None else _r(cal.residual_mm, 4),
            photo_px_per_mm=None if cal.photo_px_per_mm is None else _r(cal.photo_px_per_mm, 3),
            photo_blur_px=None if cal.photo_blur_px is None else _r(cal.photo_blur_px, 2),
        ),
        window=WindowSummary(
            width=_rf(from_mm(win.width_mm, u), 4),
            height=_rf(from_mm(win.height_mm, u), 4),
            area=_rf(from_mm(from_mm(m.area_mm2, u), u), 4),
        ),
        spot_count=int(m.spot_count),
        density=_r(m.density, 2),
        bearing_percent=_r(m.bearing_percent, 2),
        largest_bare=length(m.largest_bare.diameter_mm),
        cells=cells,
        verdict=None if result.verdict is None else _rounded_verdict(result.verdict),
        sha256=result.sha256,
        confidence=None if m.confidence is None else _confidence(m.confidence),
        spot_sizes=tuple((str(k), _r(v, 4)) for k, v in m.size_stats.items()),
        compound=result.segmentation.compound,
        segmentation=SegmentationSummary(
            compound_on=result.segmentation.compound_on,
            compound_level=_rf(result.segmentation.compound_level, 4),
            noise=_rf(result.segmentation.noise, 5),
        ),
        high=tuple(
            HighArea(
                _rf(from_mm(h.x_mm, u), 4),
                _rf(from_mm(h.y_mm, u), 4),
                _rf(from_mm(h.size_mm, u), 4),
                h.reason,
            )
            for h in m.guidance.high
        ),
        bare=tuple(
            BareArea(
                _rf(from_mm(b.x_mm, u), 4),
                _rf(from_mm(b.y_mm, u), 4),
                _rf(from_mm(b.diameter_mm, u), 4),
            )
            for b in m.guidance.bare
        ),
        warnings=tuple(str(w) for w in result.warnings),
        advice=advise(
            m.guidance,
            window=win,
            cell_mm=float(m.cell_mm),
            meets=result.meets,
            to_unit=from_mm(1.0, u),
            digits=2 if u == "in" else 1,
        ),
    )


def _confidence(c: Any) -> ConfidenceSummary:
    return ConfidenceSummary(
        spot_count_low=int(c.count_low),
        spot_count_high=int(c.count_high),
        bearing_percent_low=_rf(c.bearing_low, 2),
        bearing_percent_high=_rf(c.bearing_high, 2),
        doubtful=bool(c.doubtful),
        reason=str(c.reason),
    )


def _rounded_verdict(v: Verdict) -> Verdict:
    checks = tuple(
        Check(
            ch.name,
            ch.target,
            None if ch.value is None else _r(ch.value, 3),
            bool(ch.ok),
            ch.reason,
        )
        for ch in v.checks
    )
    return Verdict(v.name, bool(v.meets), checks)


# --------------------------------------------------------------------------- summary <-> dict


def result_to_dict(result: Result) -> dict[str, Any]:
    """The result JSON object of ``result`` (format ``printcheck-result/1``)."""
    return summary_to_dict(summarize(result))


def _iso(value: datetime | None) -> str | None:
    return None if value is None else value.isoformat(timespec="seconds")


def _verdict_dict(v: Verdict | None) -> dict[str, Any] | None:
    if v is None:
        return None
    checks = [
        {"name": c.name, "target": c.target, "value": c.value, "ok": c.ok, "reason": c.reason}
        for c in v.checks
    ]
    return {"name": v.name, "meets": v.meets, "checks": checks}


def summary_to_dict(s: PassSummary) -> dict[str, Any]:
    """The result JSON object (docs/formats.md, ``printcheck-result/1``) of a summary.

    Keys keep the order and meaning of the contract; the ones after ``spec`` are the
    additions the format allows.
    """
    cal = s.calibration
    return {
        "format": RESULT_FORMAT,
        "photo": s.photo,
        "surface": s.surface,
        "taken": _iso(s.taken),
        "unit": s.unit,
        "cell": s.cell,
        "calibration": {
            "method": cal.method,
            "layout": cal.layout,
            "markers": list(cal.markers),
            "px_per_mm": cal.px_per_mm,
            "residual_mm": cal.residual_mm,
            "photo_px_per_mm": cal.photo_px_per_mm,
            # added: left out where not read (and in results made before it was)
            **({} if cal.photo_blur_px is None else {"photo_blur_px": cal.photo_blur_px}),
        },
        "window": dataclasses.asdict(s.window),
        "spot_count": s.spot_count,
        "density": s.density,
        "bearing_percent": s.bearing_percent,
        "largest_bare": s.largest_bare,
        "cells": [dataclasses.asdict(c) for c in s.cells],
        "spec": _verdict_dict(s.verdict),
        "sha256": s.sha256,
        "confidence": None if s.confidence is None else dataclasses.asdict(s.confidence),
        "spot_sizes": dict(s.spot_sizes),
        "segmentation": _segmentation_dict(s),
        "guidance": {
            "high": [dataclasses.asdict(h) for h in s.high],
            "bare": [dataclasses.asdict(b) for b in s.bare],
        },
        "warnings": list(s.warnings),
    } | _advice_dict(s)


def _advice_dict(s: PassSummary) -> dict[str, Any]:
    """The added ``advice`` key; none for a pass recorded before it was made."""
    if s.advice is None:
        return {}
    return {"advice": [dataclasses.asdict(a) for a in s.advice]}


def _opt_float(value: Any) -> float | None:
    return None if value is None else float(value)


def _verdict_from(block: Any) -> Verdict | None:
    if block is None:
        return None
    checks = tuple(
        Check(
            str(c["name"]),
            str(c["target"]),
            _opt_float(c.get("value")),
            bool(c["ok"]),
            str(c["reason"]),
        )
        for c in block.get("checks") or ()
    )
    return Verdict(str(block["name"]), bool(block["meets"]), checks)


def summary_from_dict(data: Mapping[str, Any]) -> PassSummary:
    """Read a result JSON object back (the inverse of :func:`summary_to_dict`).

    The contract's keys are required; the added ones (``sha256``, ``confidence``,
    ``spot_sizes``, ``segmentation``, ``guidance``, ``warnings``, ``advice``) may be
    missing.

    Raises
    ------
    ValueError
        When a key is missing or holds the wrong kind of value.
    """
    try:
        return _summary_from(data)
    except (KeyError, TypeError, AttributeError) as exc:
        raise ValueError(f"not a printcheck result object ({type(exc).__name__}: {exc})") from None


def _segmentation_dict(s: PassSummary) -> dict[str, Any]:
    """The result JSON's ``segmentation``: the keys the summary holds, in their order."""
    out: dict[str, Any] = {"compound": s.compound}
    for key, value in (
        ("threshold", s.segmentation.threshold),
        ("compound_on", s.segmentation.compound_on),
        ("compound_level", s.segmentation.compound_level),
        ("noise", s.segmentation.noise),
    ):
        if value is not None:
            out[key] = value
    return out


def _summary_from(d: Mapping[str, Any]) -> PassSummary:
    cal, win = d["calibration"], d["window"]
    conf = d.get("confidence")
    seg = d.get("segmentation") or {}
    guidance = d.get("guidance") or {}
    taken = d.get("taken")
    return PassSummary(
        photo=str(d["photo"]),
        surface=d.get("surface"),
        taken=None if taken is None else datetime.fromisoformat(str(taken)),
        unit=str(d["unit"]),
        cell=float(d["cell"]),
        calibration=CalibrationSummary(
            method=str(cal["method"]),
            layout=cal.get("layout"),
            markers=tuple(int(k) for k in cal.get("markers") or ()),
            px_per_mm=float(cal["px_per_mm"]),
            residual_mm=_opt_float(cal.get("residual_mm")),
            photo_px_per_mm=_opt_float(cal.get("photo_px_per_mm")),
            photo_blur_px=_opt_float(cal.get("photo_blur_px")),
        ),
        window=WindowSummary(float(win["width"]), float(win["height"]), float(win["area"])),
        spot_count=int(d["spot_count"]),
        density=_opt_float(d["density"]),
        bearing_percent=_opt_float(d["bearing_percent"]),
        largest_bare=_opt_float(d["largest_bare"]),
        cells=tuple(CellSummary(**c) for c in d["cells"]),
        verdict=_verdict_from(d["spec"]),
        sha256=d.get("sha256"),
        confidence=None if conf is None else ConfidenceSummary(**conf),
        spot_sizes=tuple((str(k), _opt_float(v)) for k, v in (d.get("spot_sizes") or {}).items()),
        compound=str(seg.get("compound", "")),
        segmentation=SegmentationSummary(
            compound_on=None if seg.get("compound_on") is None else str(seg["compound_on"]),
            compound_level=_opt_float(seg.get("compound_level")),
            noise=_opt_float(seg.get("noise")),
            threshold=_opt_float(seg.get("threshold")),
        ),
        high=tuple(HighArea(**h) for h in guidance.get("high") or ()),
        bare=tuple(BareArea(**b) for b in guidance.get("bare") or ()),
        warnings=tuple(str(w) for w in d.get("warnings") or ()),
        advice=None if d.get("advice") is None else tuple(Advice(**a) for a in d["advice"]),
    )


# --------------------------------------------------------------------------- specs


def spec_to_dict(spec: Spec) -> dict[str, Any]:
    """Every field of ``spec`` as plain data (``sources`` as a list of pairs)."""
    return dataclasses.asdict(spec)


def spec_from_dict(data: Mapping[str, Any]) -> Spec | None:
    """Rebuild a Spec from :func:`spec_to_dict` output; None when the fields do not fit.

    Unknown keys are left out (a newer printcheck may keep more).
    """
    names = {f.name for f in dataclasses.fields(Spec)}
    kwargs = {k: v for k, v in data.items() if k in names}
    if "sources" in kwargs:
        kwargs["sources"] = tuple(tuple(pair) for pair in kwargs["sources"] or ())
    try:
        return Spec(**kwargs)
    except TypeError:
        return None


# --------------------------------------------------------------------------- progress


def progress_to_dict(p: Progress) -> dict[str, Any]:
    """The progress JSON object (docs/formats.md, ``printcheck-progress/1``)."""
    passes = []
    for row in p.passes:
        entry: dict[str, Any] = {
            "pass": row.number,
            "photo": row.photo,
            "taken": _iso(row.taken),
            "density": row.density,
            "bearing_percent": row.bearing_percent,
            "meets": row.meets,
            "spot_count": row.spot_count,
            "uniformity": row.uniformity,
            "cells_meeting_percent": row.cells_meeting_percent,
        }
        # added keys (a surface of stations, a pass with a note); absent otherwise
        if row.stations:
            entry["stations"] = [dataclasses.asdict(f) for f in row.stations]
            entry["worst_station"] = row.worst_station
        if row.note:
            entry["note"] = row.note
        passes.append(entry)
    data: dict[str, Any] = {
        "format": PROGRESS_FORMAT,
        "surface": p.surface,
        "spec": p.spec,
        "unit": p.unit,
        "cell": p.cell,
        "targets": dataclasses.asdict(p.targets),
        "passes": passes,
        "projection": None if p.projection is None else dataclasses.asdict(p.projection),
    }
    if p.stations:
        data["stations"] = [
            {
                "station": s.station,
                "densities": list(s.densities),
                "bearings": list(s.bearings),
                "projection": None if s.projection is None else dataclasses.asdict(s.projection),
            }
            for s in p.stations
        ]
        data["slowest_station"] = p.slowest_station
    return data


# --------------------------------------------------------------------------- overlay


@dataclass(frozen=True)
class CellBox:
    """A counting cell as the overlay draws it: its rectangle in mm (layout frame) and
    its figures."""

    x_mm: float
    y_mm: float
    width_mm: float
    height_mm: float
    complete: bool
    density: float
    bearing_percent: float


@dataclass(frozen=True, eq=False)
class OverlayMarks:
    """What the overlay draws over the rectified photo.

    Attributes
    ----------
    labels : (M, N) int ndarray
        Spot labels on the rectified image (0 background, k for spot k - 1).
    counted : (K,) bool ndarray
        Spot k - 1 counts (centroid in the analysed window).
    cells : tuple of CellBox
    cell_mm : float
        Side of the counting cell, mm.

    The places to scrape are :func:`printcheck.guidance.advise`'s, drawn from the
    summary.
    """

    labels: np.ndarray
    counted: np.ndarray
    cells: tuple[CellBox, ...]
    cell_mm: float


def overlay_marks(result: Result) -> OverlayMarks:
    """The spots and cells of ``result`` for the overlay, in mm."""
    m = result.measurement
    return OverlayMarks(
        labels=np.asarray(m.labels),
        counted=np.asarray(m.spots.in_window, dtype=bool),
        cells=tuple(
            CellBox(
                c.x_mm,
                c.y_mm,
                c.width_mm,
                c.height_mm,
                bool(c.complete),
                float(c.density),
                float(c.bearing_percent),
            )
            for c in m.cells
        ),
        cell_mm=float(m.cell_mm),
    )
