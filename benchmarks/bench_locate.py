"""Benchmark: locate on 12 MP and 24 MP photos against the time to decode them.

Builds a photo of the printed card (``render_card``) lying tilted on a textured surface,
seen by a pinhole camera, saves it as JPEG, then times ``cv2.imread`` of the file and
``locate`` of the decoded array (warmed up, best of several runs) and prints the ratio.
The goal is that locating takes well under the time of decoding the photo twice
(ratio < 2).

Run:  /work/venv/bin/python benchmarks/bench_locate.py [--repeat N]
"""

from __future__ import annotations

import argparse
import math
import tempfile
import time
from pathlib import Path

import cv2
import numpy as np

from printcheck.card import card_sheet, render_card
from printcheck.layout import card_layout
from printcheck.locate import locate


def _photo(width: int, height: int, seed: int = 0) -> np.ndarray:
    """A (height, width, 3) BGR photo of the 2 in card, tilted 30 degrees, rolled 25."""
    rng = np.random.default_rng(seed)
    dpi = 600
    card = render_card(dpi=dpi)
    sheet = card_sheet()
    s = dpi / 25.4
    x0, y0 = sheet.origin_mm
    # camera: window about 30 % of the photo width, tilted 30 degrees, rolled 25
    tilt, roll = math.radians(30), math.radians(25)
    rx = cv2.Rodrigues(np.array([tilt, 0.0, 0.0]))[0]
    rz = cv2.Rodrigues(np.array([0.0, 0.0, roll]))[0]
    r = rz @ rx
    f = 0.78 * width
    distance = f * 50.8 / (0.3 * width)
    k = np.array([[f, 0, width / 2], [0, f, height / 2], [0, 0, 1.0]])
    centre = np.array([[1.0, 0, -25.4], [0, 1.0, -25.4], [0, 0, 1.0]])
    h_layout = k @ np.c_[r[:, 0], r[:, 1], [0, 0, distance]] @ centre
    card_to_layout = np.array([[1 / s, 0, x0 + 0.5 / s], [0, 1 / s, y0 + 0.5 / s], [0, 0, 1.0]])
    m = h_layout @ card_to_layout
    # the surface: fine grey texture (gives the JPEG realistic detail)
    # (scraped metal photographs with fine detail; a phone's 12 MP JPEG is ~3-5 MB)
    small = rng.normal(150, 30, (height // 2, width // 2)).astype(np.float32)
    surface = cv2.resize(small, (width, height), interpolation=cv2.INTER_LINEAR)
    paper = cv2.warpPerspective(card, m, (width, height), flags=cv2.INTER_AREA, borderValue=0)
    on_card = (
        cv2.warpPerspective(np.ones_like(card), m, (width, height), flags=cv2.INTER_NEAREST) > 0
    )
    # the window is cut out: the surface shows through it
    win = np.array([[0, 0], [50.8, 0], [50.8, 50.8], [0, 50.8]], dtype=np.float64)
    win_px = cv2.perspectiveTransform(win[None], h_layout)[0]
    hole = np.zeros((height, width), dtype=np.uint8)
    cv2.fillConvexPoly(hole, np.round(win_px * 16).astype(np.int32), 1, shift=4)
    grey = np.where(on_card & (hole == 0), paper.astype(np.float32) * 0.9, surface)
    grey = cv2.GaussianBlur(grey, (0, 0), 0.8) + rng.normal(0, 3.0, grey.shape).astype(np.float32)
    grey = np.clip(grey, 0, 255).astype(np.uint8)
    return cv2.merge([grey, (grey * 0.98).astype(np.uint8), (grey * 0.95).astype(np.uint8)])


def _best(fn, repeat: int) -> float:  # noqa: ANN001
    fn()  # warm up
    times = []
    for _ in range(repeat):
        t = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t)
    return min(times)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=5)
    args = parser.parse_args()
    layout = card_layout()
    with tempfile.TemporaryDirectory() as folder:
        for name, (w, h) in (("12 MP", (4000, 3000)), ("24 MP", (6000, 4000))):
            path = Path(folder) / f"photo-{w}x{h}.jpg"
            cv2.imwrite(str(path), _photo(w, h), [cv2.IMWRITE_JPEG_QUALITY, 92])
            image = cv2.imread(str(path), cv2.IMREAD_COLOR)
            t_decode = _best(lambda p=path: cv2.imread(str(p), cv2.IMREAD_COLOR), args.repeat)
            t_locate = _best(lambda im=image: locate(im, layout=layout), args.repeat)
            rect = locate(image, layout=layout)
            cal = rect.calibration
            print(
                f"{name} ({w}x{h}, {path.stat().st_size / 1e6:.1f} MB JPEG): "
                f"decode {t_decode * 1000:.0f} ms, "
                f"locate {t_locate * 1000:.0f} ms, ratio locate/decode {t_locate / t_decode:.2f} "
                f"(markers {cal.markers}, residual {cal.residual_mm:.3f} mm, "
                f"{cal.photo_px_per_mm:.1f} px/mm -> rectified "
                f"{rect.frame.shape[1]}x{rect.frame.shape[0]} "
                f"at {cal.px_per_mm:g} px/mm)"
            )


if __name__ == "__main__":
    main()
