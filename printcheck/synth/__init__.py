"""Synthetic prints: scraped surfaces, their contact, realistic photos and whole jobs.

The backbone of printcheck's accuracy tests and demo.  It models the physics rather than
drawing blobs: a scraped surface is a height field (crosshatched scrape strokes over a
slight form error), printed against a flat reference through a compound film, so the
contact -- the truth -- is known exactly in the layout frame (mm).  The photo of it is
rendered through a camera homography with a printed marker card, uneven light, glare,
blur, noise, white balance and JPEG.

Example
-------
>>> from printcheck.synth import Camera, Scene, render_photo, simulate_job, write_job
>>> job = simulate_job(seed=1, passes=6)            # doctest: +SKIP
>>> [round(d) for d in job.densities]               # doctest: +SKIP
[4, 10, 15, 22, 31, 35]
>>> scene = Scene(field=job.passes[-1].field, film_um=job.passes[-1].film_um,
...               camera=Camera(tilt_deg=20, rotation_deg=30))
>>> shot = render_photo(scene, seed=0)               # doctest: +SKIP
>>> shot.image.shape, shot.truth.density             # doctest: +SKIP
((900, 1200, 3), 35.25)
>>> shot.homography                                  # layout mm -> photo px  # doctest: +SKIP
>>> square = render_photo(Scene(density=15, camera=None, px_per_mm=12), seed=2)  # doctest: +SKIP
>>> photos = write_job("demo-job", seed=3, passes=6, surface_name="bed-front-way")  # doctest: +SKIP

Modules: :mod:`.surface` (height fields, contact, scraping), :mod:`.truth` (independent
counts by the grid rules of docs/formats.md), :mod:`.render` (photos), :mod:`.job` (jobs, EXIF).
"""

from printcheck.synth.job import (
    Job,
    JobPass,
    JobPhoto,
    add_exif_time,
    job_schedule,
    simulate_job,
    surface_at_density,
    write_job,
)
from printcheck.synth.render import (
    Camera,
    Lighting,
    Rendered,
    Scene,
    camera_homography,
    render_photo,
    square_homography,
    truth_for,
)
from printcheck.synth.surface import (
    HeightField,
    contact_mask,
    cut_exclusions,
    field_for_layout,
    layout_extent_mm,
    make_surface,
    scrape_pass,
)
from printcheck.synth.truth import Truth, TruthCell, layout_masks, truth_stats

__all__ = [
    "Camera",
    "HeightField",
    "Job",
    "JobPass",
    "JobPhoto",
    "Lighting",
    "Rendered",
    "Scene",
    "Truth",
    "TruthCell",
    "add_exif_time",
    "camera_homography",
    "contact_mask",
    "cut_exclusions",
    "field_for_layout",
    "job_schedule",
    "layout_extent_mm",
    "layout_masks",
    "make_surface",
    "render_photo",
    "scrape_pass",
    "simulate_job",
    "square_homography",
    "surface_at_density",
    "truth_for",
    "truth_stats",
    "write_job",
]
