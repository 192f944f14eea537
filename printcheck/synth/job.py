"""A simulated scraping job: prints pass after pass, and a folder of dated photos of them.

Pass 1 is the print of a roughed-in surface (a crosshatch of long strokes over a form
error); after each print every marked high spot is scraped (:func:`scrape_pass`) with
strokes that get shorter pass by pass, alternating +45 and -45 degrees, as in the shop.
The reference then rests lower and bears on more, smaller spots, so the density rises.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, replace
from datetime import datetime, timedelta
from pathlib import Path
from typing import Any

import numpy as np

from printcheck.errors import OptionError, ReportError
from printcheck.layout import Layout, card_layout, layout_to_toml
from printcheck.synth.render import Camera, Lighting, Scene, render_photo, truth_for
from printcheck.synth.surface import Form, HeightField, field_for_layout, scrape_pass
from printcheck.synth.truth import Truth

__all__ = [
    "JobPass",
    "Job",
    "job_schedule",
    "simulate_job",
    "JobPhoto",
    "write_job",
    "add_exif_time",
    "surface_at_density",
]

#: Compound film thickness of the simulated prints, µm.
DEFAULT_FILM_UM = 1.5


@dataclass(frozen=True, eq=False)
class JobPass:
    """One print of a simulated job.

    Attributes
    ----------
    index : int
        Pass number, from 1.
    field : HeightField
        The surface as printed on this pass.
    film_um : float
    truth : Truth
    """

    index: int
    field: HeightField
    film_um: float
    truth: Truth


@dataclass(frozen=True, eq=False)
class Job:
    """A simulated job: its layout and its passes in order."""

    layout: Layout
    passes: tuple[JobPass, ...]

    @property
    def densities(self) -> tuple[float, ...]:
        """Truth density (points per square inch) of each pass."""
        return tuple(p.truth.density for p in self.passes)


def job_schedule(passes: int) -> list[dict[str, Any]]:
    """Scraping settings after each of ``passes`` prints (kwargs of :func:`scrape_pass`).

    Strokes shorten by 1 mm a pass from 14 mm to 5 mm (width half the length) and alternate +-45
    degrees; each cuts 0.75 µm below the contact level.
    """
    out = []
    for k in range(passes):
        length = max(14.0 - 1.0 * k, 5.0)
        out.append(
            {
                "stroke_mm": (length, length / 2),
                "depth_um": 0.9,
                "angle_deg": -45.0 if k % 2 == 0 else 45.0,
            }
        )
    return out


def simulate_job(
    *,
    seed: int = 0,
    passes: int = 6,
    layout: Layout | None = None,
    px_per_mm: float = 20.0,
    film_um: float = DEFAULT_FILM_UM,
    form: Form | None = "crown",
    form_um: float = 2.5,
) -> Job:
    """Simulate ``passes`` prints of a scraping job on the surface under ``layout``.

    Parameters
    ----------
    seed : int
    passes : int
        Number of prints (the surface is scraped between them).
    layout : Layout or None
        Default the built-in 2 in card.
    px_per_mm : float
        Grid resolution of the surface and truth.
    film_um : float
        Compound film thickness of every print, µm.
    form, form_um :
        Form error of the roughed-in surface (see :func:`make_surface`).

    Returns
    -------
    Job
    """
    if passes < 1:
        raise OptionError(f"passes must be 1 or more, got {passes!r}")
    layout = card_layout() if layout is None else layout
    fld = field_for_layout(
        layout, px_per_mm=px_per_mm, seed=seed, form=form, form_um=form_um, stroke_mm=(14.0, 7.0)
    )
    out: list[JobPass] = []
    schedule = job_schedule(passes)
    for k in range(passes):
        truth = truth_for(fld, layout, film_um)
        out.append(JobPass(index=k + 1, field=fld, film_um=film_um, truth=truth))
        if k + 1 < passes:
            from printcheck.synth.surface import contact_mask

            fld = scrape_pass(
                fld,
                contact_mask(fld, film_um),
                seed=seed * 7717 + k,
                film_um=film_um,
                **schedule[k],
            )
    return Job(layout=layout, passes=tuple(out))


def surface_at_density(
    layout: Layout,
    density: float,
    *,
    seed: int = 0,
    px_per_mm: float = 20.0,
    film_um: float = DEFAULT_FILM_UM,
    max_passes: int = 12,
) -> HeightField:
    """The surface of a simulated job at the pass whose density is nearest ``density``.

    Passes are simulated as in :func:`simulate_job` until the density reaches
    ``density`` (at most ``max_passes``).
    """
    from printcheck.synth.surface import contact_mask

    fld = field_for_layout(
        layout, px_per_mm=px_per_mm, seed=seed, form="crown", form_um=2.5, stroke_mm=(14.0, 7.0)
    )
    best, best_err = fld, math.inf
    schedule = job_schedule(max_passes)
    for k in range(max_passes):
        truth = truth_for(fld, layout, film_um)
        err = abs(truth.density - density)
        if err < best_err:
            best, best_err = fld, err
        if truth.density >= density or k + 1 == max_passes:
            break
        fld = scrape_pass(
            fld, contact_mask(fld, film_um), seed=seed * 7717 + k, film_um=film_um, **schedule[k]
        )
    return best


# --------------------------------------------------------------------------- photos


def add_exif_time(jpeg: bytes, taken: datetime) -> bytes:
    """Insert EXIF DateTimeOriginal (36867) and DateTime (306) into JPEG bytes, losslessly.

    The image data are untouched; an APP1 Exif segment is placed right after SOI.
    """
    from PIL import Image

    if jpeg[:2] != b"\xff\xd8":
        raise OptionError("add_exif_time needs JPEG bytes (they must start with FF D8)")
    stamp = taken.strftime("%Y:%m:%d %H:%M:%S")
    exif = Image.Exif()
    exif[306] = stamp  # DateTime (IFD0)
    exif[0x010F] = "printcheck-synth"  # Make
    sub = exif.get_ifd(0x8769)  # Exif sub-IFD
    sub[36867] = stamp  # DateTimeOriginal
    sub[36868] = stamp  # DateTimeDigitized
    payload = exif.tobytes()
    if not payload.startswith(b"Exif\x00\x00"):
        payload = b"Exif\x00\x00" + payload
    if len(payload) + 2 > 0xFFFF:
        raise OptionError("EXIF block too large for one APP1 segment")
    segment = b"\xff\xe1" + (len(payload) + 2).to_bytes(2, "big") + payload
    return jpeg[:2] + segment + jpeg[2:]


def _hand_held_camera(
    rng: np.random.Generator, layout: Layout, image_size: tuple[int, int]
) -> Camera:
    """A random hand-held pose that keeps every marker well inside the photo."""
    from printcheck.synth.render import camera_homography

    width, height = image_size
    pts = np.array([c for m in layout.markers for c in m.corners_mm], dtype=float)
    w = layout.window
    pts = np.vstack([pts, [[w.x_mm, w.y_mm], [w.x_mm + w.width_mm, w.y_mm + w.height_mm]]])
    margin = 0.04 * width
    cam = Camera()
    for attempt in range(60):
        shrink = 1.0 - 0.01 * attempt
        cam = Camera(
            tilt_deg=float(rng.uniform(5, 25)),
            rotation_deg=float(rng.uniform(-15, 15)),
            window_fraction=float(rng.uniform(0.25, 0.34) * shrink),
            tilt_axis_deg=float(rng.uniform(0, 360)),
            offset=(float(rng.uniform(-0.05, 0.05)), float(rng.uniform(-0.05, 0.05))),
        )
        hom = camera_homography(cam, layout, image_size)
        ph = np.column_stack([pts, np.ones(len(pts))]) @ hom.T
        xy = ph[:, :2] / ph[:, 2:3]
        if (
            np.all(ph[:, 2] > 0)
            and xy[:, 0].min() > margin
            and xy[:, 1].min() > margin
            and xy[:, 0].max() < width - margin
            and xy[:, 1].max() < height - margin
        ):
            return cam
    return cam


@dataclass(frozen=True)
class JobPhoto:
    """One photo written by :func:`write_job`."""

    index: int
    file: str
    taken: datetime
    density: float
    bearing_percent: float
    spot_count: int


def write_job(
    folder: str | Path,
    *,
    seed: int = 0,
    passes: int = 6,
    start: datetime = datetime(2026, 3, 2, 8, 30, 0),
    interval: timedelta = timedelta(minutes=47),
    surface_name: str = "surface",
    image_size: tuple[int, int] = (2000, 1500),
    jpeg_quality: int = 88,
    layout: Layout | None = None,
    compound: str = "blue",
    compound_on: str = "reference",
    shuffle_names: bool = False,
    cameras: Sequence[Camera] | None = None,
    lighting: Lighting | None = None,
    job: Job | None = None,
) -> tuple[JobPhoto, ...]:
    """Render a simulated job to dated JPEG photos and write its layout beside them.

    Files are ``<surface_name>-pass<k>.jpg`` (or meaningless shuffled names, e.g.
    ``IMG_4821.jpg``, with ``shuffle_names``), each with EXIF DateTimeOriginal and
    DateTime ``start + (k - 1) * interval`` (plus a few seconds' jitter); the layout is
    written to ``layout.toml``.  Each photo is taken from a slightly different camera
    pose unless ``cameras`` (one per pass, cycled) are given.

    Returns
    -------
    tuple of JobPhoto
        One per pass, in pass order (not file-name order).
    """
    folder = Path(folder)
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise ReportError(f"job folder {folder}: cannot be created ({exc.strerror})") from None
    if job is None:
        layout = card_layout() if layout is None else layout
        job = simulate_job(seed=seed, passes=passes, layout=layout)
    else:
        layout = job.layout
    rng = np.random.default_rng(seed + 104729)
    names = [f"{surface_name}-pass{k + 1}.jpg" for k in range(len(job.passes))]
    if shuffle_names:
        numbers = rng.choice(np.arange(1000, 9999), size=len(names), replace=False)
        names = [f"IMG_{int(n):04d}.jpg" for n in numbers]
    base_light = (
        Lighting(jpeg_quality=jpeg_quality)
        if lighting is None
        else replace(lighting, jpeg_quality=jpeg_quality)
    )
    photos: list[JobPhoto] = []
    try:
        (folder / "layout.toml").write_text(layout_to_toml(layout), encoding="utf-8")
    except OSError as exc:
        raise ReportError(
            f"job folder {folder}: cannot write layout.toml ({exc.strerror})"
        ) from None
    for k, jp in enumerate(job.passes):
        if cameras:
            cam = cameras[k % len(cameras)]
        else:
            cam = _hand_held_camera(rng, layout, image_size)
        light = replace(
            base_light,
            gradient_deg=float(rng.uniform(0, 360)),
            glare=float(rng.uniform(0.0, 0.35)),
            glare_at=(float(rng.uniform(0.3, 0.7)), float(rng.uniform(0.25, 0.7))),
        )
        scene = Scene(
            layout=layout,
            compound=compound,  # type: ignore[arg-type]
            compound_on=compound_on,  # type: ignore[arg-type]
            field=jp.field,
            film_um=jp.film_um,
            image_size=image_size,
            camera=cam,
            lighting=light,
        )
        rendered = render_photo(scene, seed=seed * 31 + k)
        assert rendered.jpeg is not None
        taken = start + k * interval + timedelta(seconds=int(rng.integers(0, 50)))
        data = add_exif_time(rendered.jpeg, taken)
        path = folder / names[k]
        try:
            path.write_bytes(data)
        except OSError as exc:
            raise ReportError(f"job photo {path}: cannot be written ({exc.strerror})") from None
        photos.append(
            JobPhoto(
                index=k + 1,
                file=names[k],
                taken=taken,
                density=jp.truth.density,
                bearing_percent=jp.truth.bearing_percent,
                spot_count=jp.truth.spot_count,
            )
        )
    return tuple(photos)
