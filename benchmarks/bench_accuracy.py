"""Accuracy benchmark of segment + measure against rendered truth.

Renders 44 photos of prints with printcheck.synth (seeds 5000 and up and settings that
tests/test_accuracy.py does not use), runs them through locate (or, should locate
refuse a photo, a rectification by the renderer's known homography, reported as such),
segment and measure, and compares with the renderer's truth counted by the docs/formats.md
grid rules:

- spot-count error, % of the truth count (targets: median <= 4 %, 90th pct <= 8 %)
- bearing error, percentage points (targets: median <= 1.5, 90th pct <= 3)
- per-cell count error, % of the cell's truth count, complete cells (target: median <= 10 %)

The photos span 3-60 points per square inch (dense prints with sub-millimetre spots),
blue and red compound, compound on the reference and on the work, camera tilt,
exclusions (an oil groove), and harsh but usable photos: dim and uneven light, broad
glare, heavy haze, pale thin compound, 8 MP frames with a small window, low JPEG quality.

Run::

    python benchmarks/bench_accuracy.py                 # all 44 photos (about 15 min)
    python benchmarks/bench_accuracy.py --only 0-9      # a subset by index
    python benchmarks/bench_accuracy.py --cache /tmp/pc-bench   # keep renders for reruns
    python benchmarks/bench_accuracy.py --tone srgb     # the same photos stored as a phone
                                                        # stores them (sRGB transfer curve)

This is a script, not a timed test; it prints one line per photo and a summary.
"""

from __future__ import annotations

import argparse
import math
import pickle
import sys
import time
from dataclasses import dataclass, field, replace
from pathlib import Path

import cv2
import numpy as np

from printcheck.errors import PrintcheckError
from printcheck.frame import Frame
from printcheck.layout import Layout, card_layout, parse_layout
from printcheck.measure import MeasureConfig, Measurement
from printcheck.pipeline import frame_blur_px, measure_segmented
from printcheck.segment import SegmentConfig, segment
from printcheck.synth import Camera, Lighting, Scene, render_photo
from printcheck.synth.truth import Truth, layout_masks

TARGETS = {
    "count_median": 4.0,
    "count_p90": 8.0,
    "bearing_median": 1.5,
    "bearing_p90": 3.0,
    "cell_median": 10.0,
}


def groove_layout() -> Layout:
    """A 76 x 51 mm window on a slideway with an oil groove across it; labels as markers."""
    m = 10.0
    return parse_layout(
        {
            "name": "bench-groove",
            "dictionary": "DICT_4X4_50",
            "units": "mm",
            "window": {"x": 0.0, "y": 0.0, "width": 76.2, "height": 50.8, "margin": 4.0},
            "marker": [
                {
                    "id": 4,
                    "corners": [[-16, -16], [-16 + m, -16], [-16 + m, -16 + m], [-16, -16 + m]],
                },
                {"id": 5, "corners": [[82, -16], [82 + m, -16], [82 + m, -16 + m], [82, -16 + m]]},
                {"id": 6, "corners": [[82, 56], [82 + m, 56], [82 + m, 56 + m], [82, 56 + m]]},
                {"id": 7, "corners": [[-16, 56], [-16 + m, 56], [-16 + m, 56 + m], [-16, 56 + m]]},
            ],
            "exclude": [{"points": [[30.0, -4.0], [36.0, -4.0], [42.0, 54.8], [36.0, 54.8]]}],
        },
        source="bench-groove",
    )


@dataclass(frozen=True)
class Case:
    name: str
    scene: Scene
    seed: int
    tags: tuple[str, ...] = field(default=())


def cases() -> list[Case]:
    """The benchmark photos (fixed; seeds 5000+)."""
    card = card_layout()
    groove = groove_layout()
    densities = [3, 5, 8, 12, 16, 20, 25, 30, 36, 42, 50, 60]
    harsh = {
        "dim-uneven": Lighting(exposure=0.4, gradient=0.7, vignetting=0.5, noise_sigma=3.0),
        "glare": Lighting(glare=0.55, glare_radius=0.22, glare_at=(0.45, 0.4)),
        "haze": Lighting(haze=1.0),
        "pale": Lighting(compound_strength=0.45),
        "jpeg-low": Lighting(jpeg_quality=45, noise_sigma=3.0),
        "white-balance": Lighting(white_balance=(1.25, 1.0, 0.8)),
        "blur": Lighting(blur_sigma_px=1.6),
    }
    out: list[Case] = []
    rng = np.random.default_rng(5000)
    k = 0
    # 1. square-on, across densities, both colours, both ways of spotting
    for i, d in enumerate(densities):
        colour = "blue" if i % 2 == 0 else "red"
        on = "reference" if i % 3 != 2 else "work"
        px = 16.0 if d >= 36 else 12.0
        out.append(
            Case(
                f"square-{d}ppi-{colour}-{on}",
                Scene(density=d, compound=colour, compound_on=on, camera=None, px_per_mm=px),
                5000 + k,
                ("square", colour, on),
            )
        )
        k += 1
    # 2. camera photos with tilt and rotation, across densities
    for i, d in enumerate(densities):
        tilt = float(rng.uniform(5, 35))
        rot = float(rng.uniform(-180, 180))
        colour = "red" if i % 3 == 0 else "blue"
        on = "work" if i % 4 == 1 else "reference"
        cam = Camera(
            tilt_deg=tilt,
            rotation_deg=rot,
            window_fraction=0.45,
            tilt_axis_deg=float(rng.uniform(0, 180)),
        )
        out.append(
            Case(
                f"tilt{tilt:.0f}-{d}ppi-{colour}-{on}",
                Scene(
                    density=d, compound=colour, compound_on=on, camera=cam, image_size=(1600, 1200)
                ),
                5000 + k,
                ("tilt", colour, on),
            )
        )
        k += 1
    # 3. harsh photos
    for j, (hname, light) in enumerate(harsh.items()):
        for d in (10, 30):
            colour = "blue" if (j + d) % 2 == 0 else "red"
            on = "work" if (j == 2 and d == 30) or (j == 4 and d == 10) else "reference"
            cam = Camera(
                tilt_deg=float(rng.uniform(0, 20)),
                rotation_deg=float(rng.uniform(-30, 30)),
                window_fraction=0.45,
            )
            out.append(
                Case(
                    f"{hname}-{d}ppi-{colour}-{on}",
                    Scene(
                        density=d,
                        compound=colour,
                        compound_on=on,
                        camera=cam,
                        image_size=(1600, 1200),
                        lighting=light,
                    ),
                    5000 + k,
                    ("harsh", hname, colour, on),
                )
            )
            k += 1
    # 4. 8 MP frames with a small window
    for d in (20, 45):
        cam = Camera(tilt_deg=12.0, rotation_deg=float(rng.uniform(-90, 90)), window_fraction=0.22)
        out.append(
            Case(
                f"8mp-small-window-{d}ppi",
                Scene(density=d, camera=cam, image_size=(3264, 2448)),
                5000 + k,
                ("8mp",),
            )
        )
        k += 1
    # 5. exclusions: a slideway with an oil groove, marker labels on the surface
    for d, colour, on in (
        (8, "blue", "reference"),
        (22, "red", "reference"),
        (35, "blue", "work"),
        (14, "blue", "reference"),
    ):
        cam = Camera(
            tilt_deg=float(rng.uniform(0, 25)),
            rotation_deg=float(rng.uniform(-20, 20)),
            window_fraction=0.55,
        )
        out.append(
            Case(
                f"groove-{d}ppi-{colour}-{on}",
                Scene(
                    layout=groove,
                    density=d,
                    compound=colour,
                    compound_on=on,
                    camera=cam,
                    image_size=(1600, 1200),
                ),
                5000 + k,
                ("exclusion", colour, on),
            )
        )
        k += 1
    del card
    return out


# --------------------------------------------------------------------------- running


@dataclass(frozen=True)
class Outcome:
    case: Case
    truth: Truth
    measurement: Measurement
    method: str
    px_per_mm: float
    seconds: float
    warnings: tuple[str, ...]

    @property
    def count_error(self) -> float:
        t = self.truth.spot_count
        return 100.0 * (self.measurement.spot_count - t) / max(t, 1)

    @property
    def bearing_error(self) -> float:
        return self.measurement.bearing_percent - self.truth.bearing_percent

    @property
    def cell_errors(self) -> list[float]:
        out = []
        truth_cells = {(c.row, c.col): c for c in self.truth.cells}
        for c in self.measurement.cells:
            t = truth_cells.get((c.row, c.col))
            if t is None or not t.complete or t.spot_count == 0:
                continue
            out.append(100.0 * abs(c.spot_count - t.spot_count) / t.spot_count)
        return out


def rectify_known(image: np.ndarray, hom: np.ndarray, layout: Layout, px_per_mm: float):
    """Rectify by the renderer's homography (layout mm -> photo px): image, frame, masks."""
    w = layout.window
    m = layout.margin_mm
    x0, y0 = w.x_mm - m, w.y_mm - m
    cols = int(math.ceil((w.width_mm + 2 * m) * px_per_mm))
    rows = int(math.ceil((w.height_mm + 2 * m) * px_per_mm))
    s = px_per_mm
    rect_to_mm = np.array([[1 / s, 0, x0 + 0.5 / s], [0, 1 / s, y0 + 0.5 / s], [0, 0, 1.0]])
    m_dst_to_src = hom @ rect_to_mm
    img = cv2.warpPerspective(
        image,
        m_dst_to_src,
        (cols, rows),
        flags=cv2.INTER_LINEAR | cv2.WARP_INVERSE_MAP,
        borderMode=cv2.BORDER_REPLICATE,
    )
    frame = Frame(px_per_mm=s, origin_mm=(x0, y0), shape=(rows, cols), window=w)
    visible, analysed = layout_masks(layout, frame)
    return img, frame, visible, analysed


def _photo_px_per_mm(hom: np.ndarray, layout: Layout) -> float:
    w = layout.window
    c = np.array([w.x_mm + w.width_mm / 2, w.y_mm + w.height_mm / 2, 1.0])

    def p(v):
        q = hom @ v
        return q[:2] / q[2]

    p0, p1, p2 = p(c), p(c + [1, 0, 0]), p(c + [0, 1, 0])
    a, b = p1 - p0, p2 - p0
    return math.sqrt(abs(float(a[0] * b[1] - a[1] * b[0])))


def run_case(case: Case, cache: Path | None) -> Outcome:
    rendered = None
    path = None
    if cache is not None:
        path = cache / f"{case.seed}-{case.name}.pkl"
        if path.exists():
            rendered = pickle.loads(path.read_bytes())
    if rendered is None:
        r = render_photo(case.scene, seed=case.seed)
        rendered = {"image": r.image, "homography": r.homography, "truth": r.truth}
        if path is not None:
            path.write_bytes(pickle.dumps(rendered))
    scene = case.scene
    layout = scene.layout
    image = rendered["image"]
    t0 = time.perf_counter()
    warnings: list[str] = []
    paper = None  # the markers' white paper, where locate reads it (as inspect does)
    blur = None  # the photo's blur in the frame, where the card's edges tell it (as inspect)
    if scene.camera is None:
        # square-on: the photo is the layout frame at px_per_mm
        s = scene.px_per_mm
        w = layout.window
        b = scene.border_mm
        frame = Frame(
            px_per_mm=s, origin_mm=(w.x_mm - b, w.y_mm - b), shape=image.shape[:2], window=w
        )
        visible, analysed = layout_masks(layout, frame)
        rect_img, method, photo_ppm = image, "square-on", s
    else:
        from printcheck.locate import locate

        try:
            rect = locate(image, layout=layout)
            rect_img, frame, visible, analysed = rect.image, rect.frame, rect.visible, rect.analysed
            method = "locate"
            paper = rect.paper_bgr
            blur = frame_blur_px(rect)
            photo_ppm = rect.calibration.photo_px_per_mm
            warnings.extend(rect.warnings)
        except (PrintcheckError, NotImplementedError) as exc:
            s = min(_photo_px_per_mm(rendered["homography"], layout), 20.0)
            rect_img, frame, visible, analysed = rectify_known(
                image, rendered["homography"], layout, s
            )
            method = f"homography ({type(exc).__name__})"
            photo_ppm = _photo_px_per_mm(rendered["homography"], layout)
    s = frame.px_per_mm
    seg = segment(
        rect_img,
        visible=visible,
        analysed=analysed,
        config=SegmentConfig(
            compound=scene.compound,
            compound_on=scene.compound_on,
            px_per_mm=s,
            paper_bgr=paper,
            blur_px=blur,
        ),
    )
    meas = measure_segmented(
        seg,
        frame=frame,
        analysed=analysed,
        config=MeasureConfig(cell_mm=25.4),
        photo_px_per_mm=photo_ppm,
    )
    warnings.extend(seg.warnings)
    if meas.confidence is not None and meas.confidence.doubtful:
        warnings.append(f"doubtful: {meas.confidence.reason}")
    return Outcome(
        case, rendered["truth"], meas, method, s, time.perf_counter() - t0, tuple(warnings)
    )


def _pct(values: list[float], q: float) -> float:
    return float(np.percentile(np.asarray(values, float), q)) if values else float("nan")


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--only", help="indices to run, e.g. 0-9 or 3,5,7")
    ap.add_argument("--cache", type=Path, help="folder to keep rendered photos in")
    ap.add_argument(
        "--tone",
        choices=("linear", "srgb"),
        default="linear",
        help="how the photos store their light (default linear, as the renderer does; "
        "srgb: through the sRGB transfer curve, as a phone does)",
    )
    args = ap.parse_args(argv)
    all_cases = cases()
    if args.tone != "linear":
        all_cases = [
            replace(
                c,
                name=f"{c.name}-{args.tone}",
                scene=replace(c.scene, lighting=replace(c.scene.lighting, tone=args.tone)),
            )
            for c in all_cases
        ]
    chosen = list(range(len(all_cases)))
    if args.only:
        chosen = []
        for part in args.only.split(","):
            if "-" in part:
                a, b = part.split("-")
                chosen.extend(range(int(a), int(b) + 1))
            else:
                chosen.append(int(part))
    if args.cache:
        args.cache.mkdir(parents=True, exist_ok=True)
    print(
        f"{'#':>2} {'photo':34s} {'rect':10s} {'px/mm':>5} {'truth':>5} {'found':>5} "
        f"{'range':>9} {'cnt%':>6} {'bear':>5} {'got':>5} {'d':>5} {'cell%':>5} {'s':>5}"
    )
    outcomes: list[Outcome] = []
    for i in chosen:
        case = all_cases[i]
        o = run_case(case, args.cache)
        outcomes.append(o)
        c = o.measurement.confidence
        rng = f"{c.count_low}-{c.count_high}" if c else ""
        brng = f" ({c.bearing_low:.1f}-{c.bearing_high:.1f})" if c else ""
        cells = o.cell_errors
        print(
            f"{i:2d} {case.name:34s} {o.method[:10]:10s} {o.px_per_mm:5.1f} "
            f"{o.truth.spot_count:5d} {o.measurement.spot_count:5d} {rng:>9} "
            f"{o.count_error:+6.1f} {o.truth.bearing_percent:5.1f} "
            f"{o.measurement.bearing_percent:5.1f} {o.bearing_error:+5.1f} "
            f"{(np.median(cells) if cells else float('nan')):5.1f} {o.seconds:5.2f}{brng}"
            + (f"  [{'; '.join(w[:40] for w in o.warnings)}]" if o.warnings else ""),
            flush=True,
        )
    counts = [abs(o.count_error) for o in outcomes]
    bears = [abs(o.bearing_error) for o in outcomes]
    cells = [e for o in outcomes for e in o.cell_errors]
    summary = {
        "count_median": _pct(counts, 50),
        "count_p90": _pct(counts, 90),
        "bearing_median": _pct(bears, 50),
        "bearing_p90": _pct(bears, 90),
        "cell_median": _pct(cells, 50),
    }
    print()
    print(f"summary over {len(outcomes)} photos ({len(cells)} complete cells):")
    ok_all = True
    for key, value in summary.items():
        ok = value <= TARGETS[key]
        ok_all &= ok
        unit = "points" if key.startswith("bearing") else "%"
        print(
            f"  {key:15s} {value:6.2f} {unit:6s} target <= {TARGETS[key]:g}  "
            f"{'ok' if ok else 'MISSED'}"
        )
    held = [o for o in outcomes if o.measurement.confidence is not None]
    confs = [(o, o.measurement.confidence) for o in held]
    c_in = sum(c.count_low <= o.truth.spot_count <= c.count_high for o, c in confs)  # type: ignore[union-attr]
    b_in = sum(
        c.bearing_low - 1e-9 <= o.truth.bearing_percent <= c.bearing_high + 1e-9  # type: ignore[union-attr]
        for o, c in confs
    )
    doubtful = sum(c.doubtful for _, c in confs)  # type: ignore[union-attr]
    print(
        f"  ranges holding the truth: count {c_in}/{len(held)}, bearing {b_in}/{len(held)}; "
        f"doubtful photos: {doubtful}"
    )
    methods = sorted({o.method for o in outcomes})
    print(f"  rectification: {', '.join(methods)}")
    print(
        f"  seconds per photo (segment + measure, incl. locate): median "
        f"{_pct([o.seconds for o in outcomes], 50):.2f}"
    )
    return 0 if ok_all else 1


if __name__ == "__main__":
    sys.exit(main())
