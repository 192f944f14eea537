"""Accuracy on photos from an independent print simulator (the development set).

The development set is a folder of phone-like photos of spotting prints rendered by a
simulator that shares no code with printcheck.synth, each with its exact answer
(``NAME.truth.json``: count, bearing, cells, the extra options the photo needs).  It is
not part of printcheck; this script reads it where it lies (``--devset``, default
``../shared/devset`` beside the checkout) and says so in one line when it is absent.

Each photo runs through the library exactly as ``printcheck inspect PHOTO --layout
NAME.layout.toml --unit U --cell C [options]`` would, and is scored as the set's own
rules say: within tolerance when the count is within max(10 %, 2 spots) and the bearing
within 3 percentage points.  Per folder it prints:

- photos within tolerance;
- count error median and 90th percentile (% of the true count);
- bearing error median and 90th percentile (percentage points);
- per-cell count error median (% of the true cell count, complete cells);
- range coverage: the share of photos whose stated count range (and bearing range)
  holds the true value, and the ranges' median widths (% of the count; points);
- seconds per photo (load to judge, in this process).

Run::

    python benchmarks/bench_devset.py                    # every folder
    python benchmarks/bench_devset.py --only card dense  # some folders
    python benchmarks/bench_devset.py --progress         # also the progress job (batch)
    python benchmarks/bench_devset.py --retake darker    # the same prints, other pixels

A method tuned to these photos would not carry over to others of the same kinds.
``--retake`` asks how it does on the same prints photographed otherwise: farther off,
darker and noisier, under a warmer or a cooler light, a little out of focus, or sent on
through a chat app that shrinks and recompresses it (see :func:`_retaken`).

This is a script, not a test: it prints figures and exits 0.
"""

from __future__ import annotations

import argparse
import json
import math
import subprocess
import sys
import tempfile
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np

DEFAULT_DEVSET = Path(__file__).resolve().parents[2] / "shared" / "devset"
COUNT_REL_TOL, COUNT_ABS_TOL, BEARING_TOL = 0.10, 2, 3.0


@dataclass
class Row:
    scene: str
    folder: str
    true_count: int
    count: int | None
    true_bearing: float
    bearing: float | None
    count_range: tuple[int, int] | None
    bearing_range: tuple[float, float] | None
    cell_errors: list[float]
    seconds: float
    note: str = ""

    @property
    def count_error(self) -> float | None:
        if self.count is None:
            return None
        return 100.0 * abs(self.count - self.true_count) / max(self.true_count, 1)

    @property
    def bearing_error(self) -> float | None:
        return None if self.bearing is None else abs(self.bearing - self.true_bearing)

    @property
    def ok(self) -> bool:
        if self.count is None or self.bearing is None:
            return False
        tol = max(COUNT_REL_TOL * self.true_count, COUNT_ABS_TOL)
        return abs(self.count - self.true_count) <= tol and (
            abs(self.bearing - self.true_bearing) <= BEARING_TOL
        )


def _options(truth: dict, layout_path: Path):  # type: ignore[no-untyped-def]
    from printcheck.layout import read_layout
    from printcheck.options import InspectOptions

    args = [str(a) for a in truth.get("cli_args") or []]
    kw: dict[str, object] = {
        "layout": read_layout(layout_path),
        "unit": truth["unit"],
        "cell": float(truth["cell"]),
    }
    for flag, key in (("--compound-on", "compound_on"), ("--compound", "compound")):
        if flag in args:
            kw[key] = args[args.index(flag) + 1]
    return InspectOptions(**kw)  # type: ignore[arg-type]


def _retaken(image: np.ndarray, how: str, scene: str) -> np.ndarray:
    """The photo as if taken again otherwise (the same print, other pixels), JPEG-encoded
    again: ``farther`` (0.8 of the size, as from a quarter further off), ``darker``
    (underexposed by a quarter, a steeper tone curve and more sensor noise), ``warmer``
    (white balance off toward red: blue x 0.85, red x 1.12, so bright metal burns its red
    out first), ``cooler`` (off toward blue: blue x 1.12, red x 0.88), ``softer``
    (focus a little off, a 1 px Gaussian), ``shared`` (sent on through a chat app:
    shrunk to 1600 px on its long side and saved again at JPEG quality 75; the layout's
    markers still give the scale), ``shadowed`` (the shadow of the photographer's arm
    across the photo: the light down to 0.45 beyond a line through its middle, at an
    angle drawn per photo, its edge soft over a few pixels) or ``shaken`` (the phone
    moved while the shutter was open: a 4 px streak in a direction drawn per photo)."""
    import zlib

    import cv2

    rng = np.random.default_rng(zlib.crc32(scene.encode()))
    quality = 85
    if how == "farther":
        out = cv2.resize(image, None, fx=0.8, fy=0.8, interpolation=cv2.INTER_AREA)
        quality = 80
    elif how == "darker":
        f = image.astype(np.float32) / 255.0
        f = f**1.25 * 0.75 + rng.normal(0.0, 0.012, f.shape).astype(np.float32)
        out = (np.clip(f, 0.0, 1.0) * 255.0).astype(np.uint8)
        quality = 70
    elif how in ("warmer", "cooler"):
        gains = np.array([0.85, 1.0, 1.12] if how == "warmer" else [1.12, 1.0, 0.88], np.float32)
        out = np.clip(image.astype(np.float32) * gains, 0, 255).astype(np.uint8)
    elif how == "softer":
        out = cv2.GaussianBlur(image, (0, 0), 1.0)
    elif how == "shadowed":
        from printcheck.synth.render import shadow_light

        # a logistic step 2.5 px soft (tanh over 5 px)
        light = shadow_light(image.shape[:2], 0.55, float(rng.uniform(0.0, 180.0)), 5.0)
        out = np.clip(image.astype(np.float32) * light[..., None], 0, 255).astype(np.uint8)
    elif how == "shaken":
        a = rng.uniform(0.0, np.pi)
        k = np.zeros((9, 9), np.float32)
        for t in np.linspace(-2.0, 2.0, 17):
            k[int(round(4 + t * np.sin(a))), int(round(4 + t * np.cos(a)))] += 1.0
        out = cv2.filter2D(image, -1, k / k.sum())
    elif how == "shared":
        f = 1600.0 / max(image.shape[:2])
        out = cv2.resize(image, None, fx=f, fy=f, interpolation=cv2.INTER_AREA)
        quality = 75
    else:
        raise ValueError(f"unknown retake {how!r}")
    ok, buf = cv2.imencode(".jpg", out, [cv2.IMWRITE_JPEG_QUALITY, quality])
    assert ok
    return np.asarray(cv2.imdecode(buf, cv2.IMREAD_COLOR))


RETAKES = ("farther", "darker", "warmer", "cooler", "softer", "shared", "shadowed", "shaken")


def score_scene(truth_path: Path, retake: str | None = None) -> Row:
    from printcheck.errors import PrintcheckError
    from printcheck.pipeline import inspect_image, inspect_photo

    truth = json.loads(truth_path.read_text())
    folder = truth_path.parent.name
    photo = truth_path.parent / truth["photo"]
    row = Row(
        truth["scene"],
        folder,
        int(truth["spot_count"]),
        None,
        float(truth["bearing_percent"]),
        None,
        None,
        None,
        [],
        0.0,
    )
    t0 = time.perf_counter()
    options = _options(truth, truth_path.parent / truth["layout"])
    try:
        if retake is None:
            result = inspect_photo(photo, options=options)
        else:
            import cv2

            image = _retaken(cv2.imread(str(photo), cv2.IMREAD_COLOR), retake, truth["scene"])
            result = inspect_image(image, options=options, photo=truth["photo"])
    except PrintcheckError as exc:
        row.seconds = time.perf_counter() - t0
        row.note = str(exc)[:90]
        return row
    row.seconds = time.perf_counter() - t0
    m = result.measurement
    row.count, row.bearing = m.spot_count, m.bearing_percent
    if m.confidence is not None:
        c = m.confidence
        row.count_range = (c.count_low, c.count_high)
        row.bearing_range = (c.bearing_low, c.bearing_high)
    got = {(c.row, c.col): c for c in m.cells}
    for tc in truth["cells"]:
        if tc["complete"]:
            g = got.get((tc["row"], tc["col"]))
            err = (
                1.0
                if g is None
                else abs(g.spot_count - tc["spot_count"]) / max(tc["spot_count"], 1)
            )
            row.cell_errors.append(100.0 * err)
    return row


def _pct(values: list[float], q: float) -> float:
    return float(np.percentile(values, q)) if values else math.nan


def summarise(name: str, rows: list[Row]) -> str:
    ce = [r.count_error for r in rows if r.count_error is not None]
    be = [r.bearing_error for r in rows if r.bearing_error is not None]
    cells = [e for r in rows for e in r.cell_errors]
    ranged = [r for r in rows if r.count_range is not None and r.count is not None]
    c_in = sum(r.count_range[0] <= r.true_count <= r.count_range[1] for r in ranged)  # type: ignore[index]
    b_in = sum(
        r.bearing_range[0] - 1e-9 <= r.true_bearing <= r.bearing_range[1] + 1e-9  # type: ignore[index]
        for r in ranged
    )
    c_w = [
        100.0 * (r.count_range[1] - r.count_range[0]) / max(r.count, 1)  # type: ignore[index,operator]
        for r in ranged
    ]
    b_w = [r.bearing_range[1] - r.bearing_range[0] for r in ranged]  # type: ignore[index]
    failed = sum(r.count is None for r in rows)
    return (
        f"{name:10s} {sum(r.ok for r in rows):2d}/{len(rows):<2d} "
        f"{_pct(ce, 50):6.1f} {_pct(ce, 90):6.1f} {_pct(be, 50):6.2f} {_pct(be, 90):6.2f} "
        f"{_pct(cells, 50):6.1f} {c_in:3d}/{len(ranged):<3d}{b_in:3d}/{len(ranged):<3d}"
        f"{_pct(c_w, 50):6.1f} {_pct(b_w, 50):6.2f} {_pct([r.seconds for r in rows], 50):6.2f}"
        + (f"  {failed} refused" if failed else "")
    )


def score_progress(folder: Path) -> str:
    """The progress job through the command line: batch, then progress --json."""
    truth = json.loads((folder / "truth.json").read_text())
    with tempfile.TemporaryDirectory(prefix="printcheck-devset-") as tmp:
        photos = Path(tmp) / "photos"
        photos.mkdir()
        for p in truth["passes"]:
            (photos / p["photo"]).write_bytes((folder / p["photo"]).read_bytes())
        db = Path(tmp) / "history.sqlite"
        cmd = [sys.executable, "-m", "printcheck"]
        subprocess.run(
            cmd
            + [
                "batch",
                str(photos),
                "--layout",
                str(folder / truth["layout"]),
                "--unit",
                truth["unit"],
                "--cell",
                f"{truth['cell']:g}",
                "--surface",
                truth["surface"],
                "--db",
                str(db),
                "--out",
                str(Path(tmp) / "out"),
            ],
            capture_output=True,
            text=True,
            check=False,
        )
        out = subprocess.run(
            cmd + ["progress", truth["surface"], "--db", str(db), "--json"],
            capture_output=True,
            text=True,
            check=False,
        ).stdout
    passes = json.loads(out)["passes"] if out.strip() else []
    area = truth["passes"][0]["window"]["area"]
    cell = truth["cell"]
    ok = 0
    names_ok = len(passes) == len(truth["passes"])
    for got, want in zip(passes, truth["passes"], strict=False):
        tol = max(COUNT_REL_TOL * want["density"], COUNT_ABS_TOL / area * cell * cell)
        ok += abs(got["density"] - want["density"]) <= tol
        names_ok &= Path(got["photo"]).stem == Path(want["photo"]).stem
    return (
        f"progress: {len(passes)} passes, order {'right' if names_ok else 'WRONG'}, "
        f"{ok}/{len(truth['passes'])} densities within tolerance"
    )


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--devset", type=Path, default=DEFAULT_DEVSET)
    ap.add_argument("--only", nargs="*", help="folders to score (default: all)")
    ap.add_argument("--progress", action="store_true", help="also the progress job")
    ap.add_argument("--rows", action="store_true", help="print a line per photo")
    ap.add_argument(
        "--retake",
        choices=RETAKES,
        help="score the photos as if taken again otherwise (the same print, other "
        "pixels): " + ", ".join(RETAKES),
    )
    args = ap.parse_args(argv)
    if not args.devset.is_dir():
        print(f"development set not found at {args.devset}; nothing to score (skipped)")
        return 0
    folders = sorted(p for p in args.devset.iterdir() if p.is_dir() and p.name != "progress")
    if args.only:
        folders = [f for f in folders if f.name in args.only]
    print(
        f"{'folder':10s} {'ok':5s} {'cnt%':>6s} {'p90':>6s} {'bear':>6s} {'p90':>6s} "
        f"{'cell%':>6s} {'in range c/b':>14s}{'wid%':>6s} {'widpp':>6s} {'s':>6s}"
    )
    everything: list[Row] = []
    for folder in folders:
        rows = [score_scene(t, args.retake) for t in sorted(folder.glob("*.truth.json"))]
        if not rows:
            continue
        everything += rows
        if args.rows:
            for r in rows:
                rng = "" if r.count_range is None else f"{r.count_range[0]}-{r.count_range[1]}"
                brng = (
                    ""
                    if r.bearing_range is None
                    else f" ({r.bearing_range[0]:.2f}-{r.bearing_range[1]:.2f})"
                )
                print(
                    f"  {r.scene:14s} {r.count}/{r.true_count} ({rng}) bearing "
                    f"{r.bearing if r.bearing is None else round(r.bearing, 2)}/"
                    f"{r.true_bearing:.2f}{brng} {'ok' if r.ok else 'NO'} {r.note}"
                )
        print(summarise(folder.name, rows), flush=True)
    if everything:
        coarse = [r for r in everything if r.folder != "dense"]
        if coarse and len(coarse) < len(everything):
            print(summarise("not dense", coarse))
        print(summarise("all", everything))
    if args.progress and (args.devset / "progress" / "truth.json").is_file():
        print(score_progress(args.devset / "progress"))
    return 0


if __name__ == "__main__":
    sys.exit(main())
