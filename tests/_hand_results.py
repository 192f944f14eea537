"""Hand-built Results for the report/history/progress tests (no pipeline needed).

Spots are discs drawn with cv2.circle into a label image; areas and centroids come from
skimage.measure.regionprops (a reference library), so every figure of the Result is what a
measure stage would report for that picture.
"""

from __future__ import annotations

import hashlib
from datetime import datetime, timedelta

import cv2
import numpy as np
from skimage.measure import regionprops

from printcheck.frame import Frame
from printcheck.guidance import HighArea
from printcheck.judge import Check, Verdict
from printcheck.layout import Window
from printcheck.locate import Calibration, Rectified
from printcheck.measure import BarePatch, Cell, Confidence, Guidance, Measurement, Spots
from printcheck.records import (
    CalibrationSummary,
    CellSummary,
    PassSummary,
    SegmentationSummary,
    WindowSummary,
)
from printcheck.result import Result
from printcheck.segment import Segmentation

__all__ = ["make_result", "make_summary", "a_verdict"]


def make_result(
    *,
    photo: str = "IMG_0001.jpg",
    surface: str | None = "bed-front-way",
    taken: datetime | None = datetime(2026, 11, 30, 10, 0, 0),
    sha256: str | None = None,
    discs_mm: tuple[tuple[float, float, float], ...] = ((10.0, 10.0, 2.0), (35.0, 12.0, 3.0)),
    window_mm: float = 50.8,
    margin_mm: float = 0.0,
    px_per_mm: float = 4.0,
    cell_mm: float = 25.4,
    unit: str = "in",
    cell: float = 1.0,
    high: tuple[tuple[float, float, float, str], ...] = (),
    bare: tuple[BarePatch, ...] = (),
    verdict: Verdict | None = None,
    warnings: tuple[str, ...] = (),
    seed: int = 0,
) -> Result:
    """A Result for a square window with the given disc spots (x_mm, y_mm, radius_mm)."""
    side_mm = window_mm + 2 * margin_mm
    n = int(round(side_mm * px_per_mm))
    window = Window(0.0, 0.0, window_mm, window_mm)
    frame = Frame(px_per_mm, (-margin_mm, -margin_mm), (n, n), window)
    rng = np.random.default_rng(seed)
    image = np.full((n, n, 3), 150, np.uint8)
    image += rng.integers(0, 20, size=image.shape, dtype=np.uint8)
    labels = np.zeros((n, n), np.int32)
    for k, (x, y, r) in enumerate(discs_mm, start=1):
        row, col = frame.to_px(np.array(x), np.array(y))
        cv2.circle(
            labels,
            (int(round(float(col))), int(round(float(row)))),
            int(round(r * px_per_mm)),
            k,
            -1,
        )
    image[labels > 0] = (160, 60, 20)  # compound blue (BGR)
    rs, cs = frame.window_slices()
    analysed = np.zeros((n, n), bool)
    analysed[rs, cs] = True
    visible = np.ones((n, n), bool)
    props = regionprops(labels)
    k_spots = len(discs_mm)
    area = np.zeros(k_spots)
    xs = np.zeros(k_spots)
    ys = np.zeros(k_spots)
    for p in props:
        area[p.label - 1] = p.area / px_per_mm**2
        xs[p.label - 1], ys[p.label - 1] = frame.to_mm(
            np.array(p.centroid[0]), np.array(p.centroid[1])
        )
    in_window = (xs >= 0) & (xs < window_mm) & (ys >= 0) & (ys < window_mm)
    ncell = int(np.ceil(window_mm / cell_mm - 1e-9))
    col = np.where(in_window, np.floor(xs / cell_mm), -1).astype(int)
    row = np.where(in_window, np.floor(ys / cell_mm), -1).astype(int)
    spots = Spots(area, 2 * np.sqrt(area / np.pi), xs, ys, in_window, row, col)
    mask = labels > 0
    cells = []
    for r in range(ncell):
        for c in range(ncell):
            x0, y0 = c * cell_mm, r * cell_mm
            wmm = min(cell_mm, window_mm - x0)
            hmm = min(cell_mm, window_mm - y0)
            cx = np.arange(n)
            xmm, ymm = frame.to_mm(cx, cx)
            sel_c = (xmm >= x0) & (xmm < x0 + wmm)
            sel_r = (ymm >= y0) & (ymm < y0 + hmm)
            sub = mask[np.ix_(sel_r, sel_c)] & analysed[np.ix_(sel_r, sel_c)]
            a = wmm * hmm
            cnt = int(np.sum((row == r) & (col == c)))
            cells.append(
                Cell(
                    r,
                    c,
                    x0,
                    y0,
                    wmm,
                    hmm,
                    a,
                    bool(wmm == cell_mm and hmm == cell_mm),
                    cnt,
                    cnt * cell_mm**2 / a,
                    100.0 * sub.mean() if sub.size else 0.0,
                )
            )
    total = int(in_window.sum())
    win_area = window_mm**2
    measurement = Measurement(
        spots=spots,
        labels=labels,
        area_mm2=win_area,
        spot_count=total,
        density=total * cell_mm**2 / win_area,
        bearing_percent=100.0 * float((mask & analysed).sum()) / float(analysed.sum()),
        largest_bare=BarePatch(12.0, 25.0, 40.0),
        cells=tuple(cells),
        rows=ncell,
        cols=ncell,
        cell_mm=cell_mm,
        confidence=Confidence(max(total - 1, 0), total + 1, 1.0, 3.0, False, ""),
        guidance=Guidance(high=tuple(HighArea(*h) for h in high), bare=bare),
        size_stats={"median_area_mm2": float(np.median(area)) if k_spots else 0.0},
    )
    seg = Segmentation(
        mask=mask,
        alternates=(mask, mask),
        visible=visible,
        compound="blue",
        compound_on="reference",
        px_per_mm=px_per_mm,
        compound_level=1.2,
        noise=0.01,
        glare_fraction=0.0,
    )
    cal = Calibration("layout", "card-2in", (0, 1, 2, 3), px_per_mm, 0.03, 20.0)
    rect = Rectified(image, frame, visible, analysed, cal, np.eye(3))
    return Result(
        photo=photo,
        path=None,
        sha256=sha256
        if sha256 is not None
        else hashlib.sha256(f"{photo}/{seed}".encode()).hexdigest(),
        surface=surface,
        taken=taken,
        unit=unit,
        cell=cell,
        rectified=rect,
        segmentation=seg,
        measurement=measurement,
        verdict=verdict,
        warnings=warnings,
    )


def a_verdict(meets: bool = False) -> Verdict:
    return Verdict(
        "slideway",
        meets,
        (
            Check("density", ">= 20", 14.0, meets, "2 of 4 cells below 20 points"),
            Check("bearing", "25 - 50 %", 31.0, True, "bearing 31 % is within 25 - 50 %"),
        ),
    )


def make_summary(
    i: int = 1,
    density: float = 10.0,
    *,
    photo: str | None = None,
    taken: datetime | None = None,
    unit: str = "in",
    cell: float = 1.0,
    bearing_percent: float | None = None,
    cells: tuple[CellSummary, ...] = (),
    verdict: Verdict | None = None,
    sha256: str | None = None,
    warnings: tuple[str, ...] = (),
) -> PassSummary:
    """A small PassSummary of pass ``i`` (a 2 x 2 in window), for history and progress."""
    return PassSummary(
        photo=photo or f"IMG_{i:04d}.jpg",
        surface="bed",
        taken=taken if taken is not None else datetime(2026, 11, 10, 10) + timedelta(days=i),
        unit=unit,
        cell=cell,
        calibration=CalibrationSummary("layout", "card-2in", (0, 1, 2, 3), 20.0, 0.03, 21.0),
        window=WindowSummary(2.0, 2.0, 4.0),
        spot_count=int(round(density * 4)),
        density=density,
        bearing_percent=10.0 + 5 * i if bearing_percent is None else bearing_percent,
        largest_bare=0.3,
        cells=cells,
        verdict=verdict,
        sha256=sha256 if sha256 is not None else f"{i:064x}",
        confidence=None,
        spot_sizes=(("median_area_mm2", 1.5),),
        compound="blue",
        segmentation=SegmentationSummary("reference", 1.2, 0.01),
        warnings=warnings,
    )


def with_added_contacts(field):  # type: ignore[no-untyped-def]
    """``field`` (a synth SurfaceField) with twelve new contacts, 1.2 mm across, on a
    4-5 mm grid in cell B2 of the 2 in card (centres x 31-43, y 32-42 mm): the known
    region of the change tests."""
    import dataclasses

    import numpy as np

    h = field.height_um.copy()
    y = field.origin_mm[1] + (np.arange(h.shape[0]) + 0.5) / field.px_per_mm
    x = field.origin_mm[0] + (np.arange(h.shape[1]) + 0.5) / field.px_per_mm
    xx, yy = np.meshgrid(x, y)
    top = float(h.max())
    for cx in (31.0, 35.0, 39.0, 43.0):
        for cy in (32.0, 37.0, 42.0):
            disc = (xx - cx) ** 2 + (yy - cy) ** 2 <= 0.6**2
            h[disc] = np.maximum(h[disc], top - 0.5)
    return dataclasses.replace(field, height_um=h)
