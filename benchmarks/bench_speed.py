"""Benchmark: speed and memory of inspect against the cost of decoding the photo.

Run by hand; prints figures (it is not a timed test)::

    /work/venv/bin/python benchmarks/bench_speed.py            # the whole set, a few minutes
    /work/venv/bin/python benchmarks/bench_speed.py --quick    # 12 MP only, fewer photos

What it measures, on photos rendered by :mod:`printcheck.synth` (rendered once and cached
as JPEG under ``--cache``, default ``/tmp/printcheck-bench``):

1. start-up: ``python -m printcheck --help`` and the ``printcheck`` console script, beside
   a bare ``python -c pass``, and the slowest imports of ``printcheck.cli`` (-X importtime);
2. stages, in one warmed process, on a 12 MP and a 24 MP JPEG of the 2 in card: decode
   (``cv2.imread`` and printcheck's ``load_photo``), locate (marker detection), rectify
   (fit, warp and masks: locate less detection), segment (with its two alternates for
   the range), measure, judge, report (result JSON, overlay PNG, preview JPEG, as batch
   writes them) and the whole inspect (load to verdict) and inspect plus report; the
   ratio of the whole
   to ``cv2.imread`` of the same file;
3. peak memory (RSS) per photo, each inspected (and reported) in a fresh child process:
   the child's peak, and that less its RSS after the imports;
4. a whole-surface layout (a slideway window with markers stuck at its ends) at a fixed
   resolution, the photo growing with the window (100 x 300, 200 x 600, 300 x 900 mm; the
   last in a 24 MP photo): time per analysed area shows how cost grows with area;
5. batch of 20 photos of 12 MP on 1 core and on all cores (``run_batch(jobs=...)``).

Targets (issue 8 and 6): inspect of a 12 MP card photo at most 3x ``cv2.imread``; peak
RSS under 600 MB (12 MP) and 1 GB (24 MP); cost linear in area, 300 x 900 mm in one 24 MP
photo within 10 s; ``printcheck --help`` under 0.5 s; batch on 2 cores at least 1.7 times
the single-core rate.

Timings are the median of ``--repeat`` runs after one warm-up run.  The machine's other
load shows in the figures: compare figures of one run with each other (the ratios), not
with another run's.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from collections.abc import Callable
from dataclasses import dataclass
from datetime import datetime, timedelta
from pathlib import Path
from typing import Any

HERE = Path(__file__).resolve()

# --------------------------------------------------------------------------- scenes


@dataclass(frozen=True)
class Shot:
    """One cached benchmark photo: its file and the layout to inspect it with."""

    key: str
    path: Path
    layout: str  # "card" or "way:<width>x<height>"
    megapixels: float


def _way_layout(width_mm: float, height_mm: float):  # noqa: ANN202
    """A slideway window ``width_mm`` x ``height_mm`` with two 30 mm markers at each end."""
    from printcheck.synth.layouts import slideway_layout

    return slideway_layout(width_mm, height_mm)


def _layout_for(name: str):  # noqa: ANN202
    from printcheck.layout import card_layout

    if name == "card":
        return card_layout()
    w, h = name.split(":", 1)[1].split("x")
    return _way_layout(float(w), float(h))


def _render_card(path: Path, size: tuple[int, int], seed: int) -> None:
    from printcheck.synth.render import Camera, Lighting, Scene, render_photo

    # hand-held poses with the whole card (all four markers) in frame
    poses = [(10, 8), (15, -15), (8, 20), (12, 95)]
    tilt, rot = poses[seed % len(poses)]
    scene = Scene(
        image_size=size,
        camera=Camera(tilt_deg=tilt, rotation_deg=rot, window_fraction=0.28),
        density=12.0 + 4.0 * (seed % 4),
        lighting=Lighting(glare=0.15 * (seed % 2)),
    )
    shot = render_photo(scene, seed=seed)
    assert shot.jpeg is not None
    path.write_bytes(shot.jpeg)


def _render_way(path: Path, width_mm: float, height_mm: float, size: tuple[int, int]) -> None:
    from printcheck.synth.render import Camera, Scene, render_photo

    # surface grid 8 px/mm, finer than the photo resolves (WAY_PX_PER_MM)
    scene = Scene(
        layout=_way_layout(width_mm, height_mm),
        image_size=size,
        camera=Camera(
            tilt_deg=10.0, rotation_deg=3.0, window_fraction=width_mm * WAY_PX_PER_MM / size[0]
        ),
        density=15.0,
        truth_px_per_mm=8.0,
    )
    shot = render_photo(scene, seed=2)
    assert shot.jpeg is not None
    path.write_bytes(shot.jpeg)


def _cached(
    cache: Path, key: str, make: Callable[[Path], None], log: Callable[[str], None]
) -> Path:
    path = cache / f"{key}.jpg"
    if not path.exists():
        log(f"  rendering {key} (cached in {cache}) ...")
        t = time.perf_counter()
        tmp = path.with_suffix(".part")
        make(tmp)
        tmp.replace(path)
        log(f"    {time.perf_counter() - t:.1f} s")
    return path


def card_shot(cache: Path, mp: int, seed: int, log: Callable[[str], None]) -> Shot:
    size = {12: (4000, 3000), 24: (6000, 4000)}[mp]
    key = f"card-{mp}mp-w28-s{seed}"
    path = _cached(cache, key, lambda p: _render_card(p, size, seed), log)
    return Shot(key, path, "card", size[0] * size[1] / 1e6)


# The way layouts are photographed at one resolution, WAY_PX_PER_MM at zero tilt: the
# window and the markers beyond its ends (45 mm each side, and margin) fill 0.9 of the photo
# width, 3:2 photos; 300 x 900 mm is a 24 MP (6000 x 4000) photo.
WAY_PX_PER_MM = 5.4


def _way_size(width_mm: float) -> tuple[int, int]:
    w = round((width_mm + 100.0) * WAY_PX_PER_MM / 0.9)
    return w, round(w * 2 / 3)


WAYS = {(h, w): _way_size(w) for h, w in ((100, 300), (200, 600), (300, 900))}


def way_shot(cache: Path, height: int, width: int, log: Callable[[str], None]) -> Shot:
    size = WAYS[(height, width)]
    key = f"way-{height}x{width}mm-{size[0]}x{size[1]}"
    path = _cached(cache, key, lambda p: _render_way(p, width, height, size), log)
    return Shot(key, path, f"way:{width}x{height}", size[0] * size[1] / 1e6)


# --------------------------------------------------------------------------- timing


def _median(fn: Callable[[], Any], repeat: int) -> tuple[float, Any]:
    """Median wall time of ``repeat`` calls of ``fn`` (after the caller's warm-up)."""
    times = []
    out = None
    for _ in range(max(1, repeat)):
        t = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t)
    return statistics.median(times), out


def _options(layout_name: str):  # noqa: ANN202
    from printcheck.pipeline import InspectOptions
    from printcheck.spec import find_spec

    return InspectOptions(layout=_layout_for(layout_name), spec=find_spec("slideway-precision"))


def _report(result: Any, out: Path) -> None:
    """What batch writes per photo: JSON, overlay PNG, and the HTML report's preview JPEG."""
    from printcheck.report.files import encode_image, output_name, write_bytes, write_json
    from printcheck.report.overlay import draw_overlay
    from printcheck.serde import result_to_dict

    data = result_to_dict(result)
    overlay = draw_overlay(result)
    write_json(out, output_name(result.photo, ".json"), data)
    write_bytes(out, output_name(result.photo, ".overlay.png"), encode_image(overlay, ".png"))
    import cv2

    h, w = overlay.shape[:2]
    scale = 1400 / max(h, w)
    small = (
        overlay
        if scale >= 1
        else cv2.resize(overlay, (round(w * scale), round(h * scale)), interpolation=cv2.INTER_AREA)
    )
    encode_image(small, ".jpg", jpeg_quality=85)


def time_stages(shot: Shot, repeat: int) -> dict[str, Any]:
    """Time each stage of inspect on ``shot`` as pipeline.inspect_image chains them."""
    import cv2

    from printcheck.judge import judge
    from printcheck.load import load_photo
    from printcheck.locate import LocateConfig, detect_markers, locate
    from printcheck.measure import MeasureConfig
    from printcheck.pipeline import frame_blur_px, inspect_photo, measure_segmented
    from printcheck.segment import SegmentConfig, segment

    options = _options(shot.layout)
    layout = options.layout
    assert layout is not None and options.spec is not None
    path = str(shot.path)
    out = Path(tempfile.mkdtemp(prefix="printcheck-bench-"))
    try:
        _report(inspect_photo(path, options=options), out)  # warm-up: imports, first calls
        t: dict[str, float] = {}
        t["imread"], _ = _median(lambda: cv2.imread(path, cv2.IMREAD_COLOR), repeat)
        t["decode"], photo = _median(lambda: load_photo(path), repeat)
        image = photo.image
        t["detect"], _ = _median(
            lambda: detect_markers(image, dictionary=layout.dictionary), repeat
        )
        t["locate"], rect = _median(
            lambda: locate(image, layout=layout, config=LocateConfig()), repeat
        )
        seg_config = SegmentConfig(
            compound=options.compound,  # type: ignore[arg-type]
            compound_on=options.compound_on,  # type: ignore[arg-type]
            px_per_mm=rect.frame.px_per_mm,
            paper_bgr=rect.paper_bgr,
            blur_px=frame_blur_px(rect),
        )

        def segment_whole():  # noqa: ANN202 - the alternates too (inspect overlaps them)
            seg = segment(
                rect.image, visible=rect.visible, analysed=rect.analysed, config=seg_config
            )
            tuple(seg.alternates)
            return seg

        t["segment"], seg = _median(segment_whole, repeat)
        meas_config = MeasureConfig(
            cell_mm=options.cell_mm,
            min_spot_mm2=options.min_spot_mm2,
            max_bare_mm=options.spec.max_bare_mm,
        )
        t["measure"], meas = _median(
            lambda: measure_segmented(
                seg, frame=rect.frame, analysed=rect.analysed, config=meas_config
            ),
            repeat,
        )
        spec = options.spec
        t["judge"], _ = _median(lambda: judge(meas, spec, unit=options.unit), repeat)
        t["inspect"], result = _median(lambda: inspect_photo(path, options=options), repeat)
        # the ratio to the floor from back-to-back pairs (imread, inspect): on a shared
        # machine whose speed drifts, each pair sees the same speed
        ratios = []
        for _ in range(max(3, repeat)):
            a = time.perf_counter()
            cv2.imread(path, cv2.IMREAD_COLOR)
            b = time.perf_counter()
            inspect_photo(path, options=options)
            ratios.append((time.perf_counter() - b) / (b - a))
        t["paired ratio"] = statistics.median(ratios)
        t["paired ratio max"] = max(ratios)
        t["report"], _ = _median(lambda: _report(result, out), repeat)
        t["inspect + report"], _ = _median(
            lambda: _report(inspect_photo(path, options=options), out), repeat
        )
    finally:
        shutil.rmtree(out, ignore_errors=True)
    t["rectify"] = max(t["locate"] - t["detect"], 0.0)
    frame = result.rectified.frame
    return {
        "times": t,
        "rect_shape": tuple(frame.shape),
        "px_per_mm": frame.px_per_mm,
        "area_mm2": layout.window.area_mm2,
        "spots": result.measurement.spot_count,
        "warnings": result.warnings,
    }


STAGE_ROWS = [
    ("imread", "cv2.imread (the floor)"),
    ("decode", "decode: load_photo"),
    ("detect", "locate: find markers"),
    ("rectify", "rectify: fit, warp, masks"),
    ("segment", "segment"),
    ("measure", "measure"),
    ("judge", "judge"),
    ("report", "report: JSON, PNG, preview"),
    ("inspect", "whole inspect (load..judge)"),
    ("inspect + report", "inspect + report"),
]


def print_stages(named: list[tuple[str, dict[str, Any]]]) -> None:
    head = f"{'stage':32s}" + "".join(f"{name:>18s}" for name, _ in named)
    print(head)
    print("-" * len(head))
    for key, label in STAGE_ROWS:
        cells = []
        for _, r in named:
            v = r["times"][key]
            ratio = v / r["times"]["imread"]
            cells.append(f"{v:8.3f} s {ratio:5.1f}x")
        print(f"{label:32s}" + "".join(f"{c:>18s}" for c in cells))
    stage_sum = ("decode", "locate", "segment", "measure", "judge")
    print(
        f"{'(stages one after another)':32s}"
        + "".join(f"{sum(r['times'][k] for k in stage_sum):8.3f} s{'':7s}" for _, r in named)
    )
    print(
        "  (the whole inspect overlaps work on a second core: the coarse marker search with\n"
        "  the decode; in segment, half of the larger block-quantile passes, the relief with\n"
        "  the body, the colour's spread and half the watershed, the watershed's boundary\n"
        "  with the seeds, and the range's decisions with the main one and measure; the\n"
        "  stage rows time each stage alone)"
    )
    for name, r in named:
        rows, cols = r["rect_shape"]
        print(
            f"  {name}: rectified {cols} x {rows} px at {r['px_per_mm']:.2f} px/mm "
            f"({rows * cols / 1e6:.1f} MP), {r['spots']} spots; ratio whole/imread "
            f"{r['times']['inspect'] / r['times']['imread']:.1f}, from back-to-back pairs "
            f"{r['times']['paired ratio']:.2f} (median; worst {r['times']['paired ratio max']:.2f}"
            f") (target <= 3 for 12 MP)"
        )
        for w in r["warnings"]:
            print(f"    warning: {w}")


# --------------------------------------------------------------------------- memory


def _child_rss(path: str, layout_name: str) -> None:
    """In a fresh process: import, then inspect and report one photo stage by stage as
    pipeline.inspect_image chains them, printing the peak RSS (MB) after each as JSON."""
    import skimage.segmentation  # noqa: F401  (imported lazily by measure)

    import printcheck.report.files  # noqa: F401
    import printcheck.report.overlay  # noqa: F401
    from printcheck.judge import judge
    from printcheck.load import load_photo
    from printcheck.locate import LocateConfig, locate
    from printcheck.measure import MeasureConfig
    from printcheck.pipeline import frame_blur_px, inspect_photo, measure_segmented
    from printcheck.segment import SegmentConfig, segment

    options = _options(layout_name)
    assert options.layout is not None and options.spec is not None
    peaks = {"base": _peak_rss_mb()}
    if os.environ.get("PRINTCHECK_BENCH_WHOLE"):
        result = inspect_photo(path, options=options)
        peaks["inspect"] = _peak_rss_mb()
    else:
        photo = load_photo(path)
        peaks["decode"] = _peak_rss_mb()
        rect = locate(photo.image, layout=options.layout, config=LocateConfig())
        peaks["locate"] = _peak_rss_mb()
        seg = segment(
            rect.image,
            visible=rect.visible,
            analysed=rect.analysed,
            config=SegmentConfig(
                px_per_mm=rect.frame.px_per_mm,
                paper_bgr=rect.paper_bgr,
                blur_px=frame_blur_px(rect),
            ),
        )
        tuple(seg.alternates)  # decided on a spare core: wait for them
        peaks["segment"] = _peak_rss_mb()
        meas = measure_segmented(
            seg,
            frame=rect.frame,
            analysed=rect.analysed,
            config=MeasureConfig(
                cell_mm=options.cell_mm,
                min_spot_mm2=options.min_spot_mm2,
                max_bare_mm=options.spec.max_bare_mm,
            ),
        )
        peaks["measure"] = _peak_rss_mb()
        judge(meas, options.spec, unit=options.unit)
        del photo, rect, seg, meas
        result = inspect_photo(path, options=options)  # for the report (peak already counted)
        peaks["inspect"] = _peak_rss_mb()
    out = Path(tempfile.mkdtemp(prefix="printcheck-bench-"))
    try:
        _report(result, out)
    finally:
        shutil.rmtree(out, ignore_errors=True)
    peaks["report"] = _peak_rss_mb()
    print(json.dumps(peaks))


def _peak_rss_mb() -> float:
    """This process's peak RSS in MB.

    Linux keeps ``ru_maxrss`` across ``exec`` (a child started by a big parent reports the
    parent's peak), so the process's own high-water mark ``VmHWM`` is read where it exists.
    """
    try:
        with open("/proc/self/status") as fh:
            for line in fh:
                if line.startswith("VmHWM:"):
                    return int(line.split()[1]) / 1024.0  # kB
    except OSError:
        pass
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0  # Linux: KiB


def peak_rss(shot: Shot, *, whole: bool) -> dict[str, float]:
    """Peaks of a fresh child: stage by stage, or (``whole``) one inspect_photo call."""
    cmd = [sys.executable, str(HERE), "--child-rss", str(shot.path), shot.layout]
    env = _env()
    if whole:
        env["PRINTCHECK_BENCH_WHOLE"] = "1"
    out = subprocess.run(cmd, check=True, capture_output=True, text=True, env=env).stdout
    return json.loads(out.strip().splitlines()[-1])


def _env() -> dict[str, str]:
    env = dict(os.environ)
    root = str(HERE.parent.parent)
    env["PYTHONPATH"] = root + (os.pathsep + env["PYTHONPATH"] if env.get("PYTHONPATH") else "")
    return env


# --------------------------------------------------------------------------- start-up


def startup(runs: int) -> None:
    exe = sys.executable
    script = Path(exe).parent / "printcheck"
    cases = [
        ("python -c pass", [exe, "-c", "pass"]),
        ("python -m printcheck --help", [exe, "-m", "printcheck", "--help"]),
    ]
    if script.exists():
        cases.append(("printcheck --help", [str(script), "--help"]))
    print(f"{'command':34s}{'median':>10s}{'min':>10s}   (target --help < 0.5 s)")
    for name, cmd in cases:
        times = []
        for _ in range(runs):
            t = time.perf_counter()
            subprocess.run(cmd, check=True, capture_output=True, env=_env())
            times.append(time.perf_counter() - t)
        print(f"{name:34s}{statistics.median(times):9.3f}s{min(times):9.3f}s")
    err = subprocess.run(
        [exe, "-X", "importtime", "-c", "import printcheck.cli"],
        check=True,
        capture_output=True,
        text=True,
        env=_env(),
    ).stderr
    rows = []
    for line in err.splitlines():
        parts = line.split("|")
        if len(parts) == 3 and parts[1].strip().isdigit():
            rows.append((int(parts[1]), parts[2].rstrip()))
    heavy = {"cv2", "numpy", "scipy", "skimage", "matplotlib", "PIL"}
    loaded = sorted({name.strip().split(".")[0] for _, name in rows} & heavy)
    print("slowest imports of printcheck.cli (cumulative):")
    for us, name in sorted(rows, reverse=True)[:6]:
        print(f"  {us / 1000:7.1f} ms  {name.strip()}")
    print(f"heavy modules imported by the CLI at start-up: {', '.join(loaded) or 'none'}")


# --------------------------------------------------------------------------- batch


def batch_folder(cache: Path, n: int, distinct: int, log: Callable[[str], None]) -> Path:
    """A folder of ``n`` 12 MP photos: ``distinct`` renders, each copy with its own EXIF time."""
    from printcheck.synth.job import add_exif_time

    folder = cache / f"batch-w28-{n}"
    if folder.exists() and len(list(folder.glob("*.jpg"))) == n:
        return folder
    shutil.rmtree(folder, ignore_errors=True)
    folder.mkdir(parents=True)
    shots = [card_shot(cache, 12, seed, log) for seed in range(distinct)]
    start = datetime(2026, 11, 30, 8, 0, 0)
    for i in range(n):
        jpeg = shots[i % distinct].path.read_bytes()
        stamped = add_exif_time(jpeg, start + timedelta(minutes=10 * i))
        (folder / f"pass{i + 1:02d}.jpg").write_bytes(stamped)
    return folder


def time_batch(folder: Path, jobs: int, *, pin_one_core: bool = False) -> float:
    """Wall time of run_batch on ``folder``; ``pin_one_core``: this process and its
    children on one CPU (else OpenCV's threads would use the other cores)."""
    saved = None
    if pin_one_core and hasattr(os, "sched_setaffinity"):
        saved = os.sched_getaffinity(0)
        os.sched_setaffinity(0, {min(saved)})
    try:
        return _time_batch(folder, jobs)
    finally:
        if saved is not None:
            os.sched_setaffinity(0, saved)


def _time_batch(folder: Path, jobs: int) -> float:
    from printcheck.batch import run_batch
    from printcheck.pipeline import InspectOptions
    from printcheck.spec import find_spec

    work = Path(tempfile.mkdtemp(prefix="printcheck-bench-batch-"))
    try:
        t = time.perf_counter()
        run_batch(
            folder,
            options=InspectOptions(spec=find_spec("slideway-precision"), surface="bench-way"),
            out=work / "report",
            db=work / "history.sqlite",
            jobs=jobs,
            echo=lambda _s: None,
            warn=lambda _s: None,
            show_progress=False,
        )
        return time.perf_counter() - t
    finally:
        shutil.rmtree(work, ignore_errors=True)


# --------------------------------------------------------------------------- main


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="12 MP only, fewer photos, 1 run")
    parser.add_argument("--repeat", type=int, default=None, help="timed runs per stage (median)")
    parser.add_argument(
        "--cache", type=Path, default=Path(tempfile.gettempdir()) / "printcheck-bench"
    )
    parser.add_argument("--photos", type=int, default=None, help="photos in the batch (20)")
    parser.add_argument(
        "--only",
        nargs="*",
        choices=["startup", "stages", "memory", "surface", "batch"],
        help="run only these parts",
    )
    parser.add_argument("--child-rss", nargs=2, metavar=("PHOTO", "LAYOUT"), help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.child_rss:
        _child_rss(*args.child_rss)
        return
    parts = set(args.only or ["startup", "stages", "memory", "surface", "batch"])
    repeat = args.repeat or (1 if args.quick else 3)
    n_batch = args.photos or (6 if args.quick else 20)
    cache: Path = args.cache
    cache.mkdir(parents=True, exist_ok=True)

    def log(msg: str) -> None:
        print(msg, flush=True)

    import cv2
    import numpy as np

    print(
        f"printcheck speed benchmark: {os.cpu_count()} cores, Python {sys.version.split()[0]}, "
        f"numpy {np.__version__}, OpenCV {cv2.__version__} ({cv2.getNumThreads()} threads); "
        f"median of {repeat} after a warm-up"
    )
    print(f"load average now: {', '.join(f'{x:.1f}' for x in os.getloadavg())}")

    if "startup" in parts:
        print("\n== start-up")
        startup(3 if args.quick else 7)

    cards = [card_shot(cache, 12, 0, log)]
    if not args.quick:
        cards.append(card_shot(cache, 24, 0, log))

    if "stages" in parts:
        print("\n== stages, one warmed process (time, and x cv2.imread of the same file)")
        named = []
        for shot in cards:
            named.append((f"card {shot.megapixels:.0f} MP", time_stages(shot, repeat)))
        print_stages(named)

    ways = [(100, 300)] if args.quick else list(WAYS)
    if "memory" in parts:
        print("\n== peak memory (RSS) per photo, fresh process each (MB)")
        shots = cards + ([] if args.quick else [way_shot(cache, 300, 900, log)])
        stages = ("decode", "locate", "segment", "measure")
        print(
            f"{'photo':28s}{'imports':>8s}{'inspect':>8s}{'+report':>8s}{'added':>7s}  target"
            "   peak after each stage (stage by stage): " + ", ".join(stages)
        )
        for shot in shots:
            whole = peak_rss(shot, whole=True)
            staged = peak_rss(shot, whole=False)
            target = 600 if shot.megapixels < 15 else 1000
            ok = "ok" if whole["report"] < target else "OVER"
            print(
                f"{shot.key:28s}{whole['base']:8.0f}{whole['inspect']:8.0f}{whole['report']:8.0f}"
                f"{whole['report'] - whole['base']:7.0f}  <{target} {ok:4s} "
                + " ".join(f"{staged[k]:5.0f}" for k in stages)
            )

    if "surface" in parts:
        print("\n== whole-surface layout: slideway window, markers at its ends, same px/mm")
        print(
            f"{'window (mm)':14s}{'photo':>13s}{'rectified':>16s}{'px/mm':>7s}{'decode':>9s}"
            f"{'inspect':>9s}{'+report':>9s}{'s per m2':>10s}{'spots':>7s}"
        )
        for height, width in ways:
            shot = way_shot(cache, height, width, log)
            r = time_stages(shot, repeat)
            t = r["times"]
            rows, cols = r["rect_shape"]
            w, h = WAYS[(height, width)]
            print(
                f"{f'{height} x {width}':14s}{f'{w}x{h}':>13s}{f'{cols}x{rows}':>16s}"
                f"{r['px_per_mm']:7.2f}{t['decode']:8.2f}s{t['inspect']:8.2f}s"
                f"{t['inspect + report']:8.2f}s{t['inspect'] / (r['area_mm2'] / 1e6):9.1f}s"
                f"{r['spots']:7d}"
            )
            for warn in r["warnings"]:
                print(f"    warning: {warn}")
        print("  target: 300 x 900 mm in one 24 MP photo within 10 s; s per m2 not growing")

    if "batch" in parts:
        print(f"\n== batch of {n_batch} photos of 12 MP (inspect + JSON, overlay, HTML report)")
        folder = batch_folder(cache, n_batch, 2 if args.quick else 4, log)
        cores = os.cpu_count() or 1
        # the same runs on the first half of the photos: the difference is the cost of the
        # other half, free of the fixed costs (imports, worker start-up, the HTML report)
        half_n = n_batch // 2
        half = Path(tempfile.mkdtemp(prefix="printcheck-bench-half-"))
        try:
            for photo in sorted(folder.glob("*.jpg"))[:half_n]:
                shutil.copy2(photo, half / photo.name)
            configs = [
                ("1 core (pinned), 1 worker", 1, True),
                (f"1 worker, OpenCV on {cores} cores", 1, False),
                (f"{cores} cores, {cores} workers", cores, False),
            ]
            runs = []
            for name, jobs, pin in configs:
                full_t = time_batch(folder, jobs, pin_one_core=pin)
                half_t = time_batch(half, jobs, pin_one_core=pin)
                runs.append((name, full_t, half_t))
        finally:
            shutil.rmtree(half, ignore_errors=True)
        print(
            f"{'run':34s}{'time':>9s}{'photos/min':>12s}{'speed-up':>10s}"
            f"{'per photo':>11s}{'fixed':>8s}{'speed-up':>10s}"
        )
        t1 = runs[0][1]
        per1 = (runs[0][1] - runs[0][2]) / (n_batch - half_n)
        for name, t, th in runs:
            per = (t - th) / (n_batch - half_n)
            fixed = t - n_batch * per
            print(
                f"{name:34s}{t:8.1f}s{60 * n_batch / t:12.1f}{t1 / t:10.2f}"
                f"{per:10.2f}s{fixed:7.1f}s{per1 / per:10.2f}"
            )
        print(
            f"  time, photos/min, speed-up: the whole batch of {n_batch}; per photo, fixed, "
            f"speed-up: from the batch of {half_n} and of {n_batch} (per photo = the "
            "difference / the photos added; fixed = the rest: imports, worker start-up, "
            "report)"
        )
        print(f"  target: {cores} cores at least 1.7 times the single-core rate (on 2 cores)")


if __name__ == "__main__":
    main()
