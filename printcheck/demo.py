"""The demo job: render a scraping job with the simulator and run batch on it, offline.

The scenario is our own: the front flat way of a small lathe bed in a rebuilding shop,
scraped to the precision-slideway spec over several spotting passes, a photo of the
print with the 2 in marker card after each pass.
"""

from __future__ import annotations

from collections.abc import Callable
from datetime import datetime
from pathlib import Path

__all__ = ["DEMO_SURFACE", "DEMO_SPEC", "write_demo_job", "run_demo"]

DEMO_SURFACE = "lathe-bed-front-flat"
DEMO_SPEC = "slideway-precision"

_JOB_FILE = f"""\
# Job settings for the demo: every photo in this folder is one spotting pass of one surface.
surface = "{DEMO_SURFACE}"
layout = "layout.toml"
spec = "{DEMO_SPEC}"
unit = "in"
# the demo keeps its own history beside its photos' folder, never the user's own
history = "../history.sqlite"
"""


def write_demo_job(
    folder: Path, *, passes: int = 6, seed: int = 7
) -> list[tuple[str, float, float]]:
    """Render the demo photos, their layout and a ``printcheck.toml`` into ``folder``.

    Returns (file name, true density in points per square inch, true bearing %) per pass.
    """
    from printcheck.report.files import write_text
    from printcheck.synth.job import write_job

    photos = write_job(
        folder,
        seed=seed,
        passes=passes,
        start=datetime(2026, 11, 30, 8, 5, 0),
        surface_name=DEMO_SURFACE,
    )
    write_text(folder, "printcheck.toml", _JOB_FILE)
    return [(p.file, p.density, p.bearing_percent) for p in photos]


def run_demo(
    folder: Path,
    *,
    passes: int = 6,
    seed: int = 7,
    echo: Callable[[str], None] = print,
    warn: Callable[[str], None] = print,
) -> int:
    """Render the demo job into ``folder/photos`` and run batch on it.

    The report goes to ``folder/report`` and the history to ``folder/history.sqlite``
    (never the user's own history).  Returns batch's exit status.
    """
    from printcheck.batch import run_batch
    from printcheck.jobconfig import read_job_settings
    from printcheck.options import options_from_settings

    photos = folder / "photos"
    echo(f"rendering {passes} passes of a simulated scraping job into {photos} ...")
    truth = write_demo_job(photos, passes=passes, seed=seed)
    options = options_from_settings(read_job_settings(photos / "printcheck.toml"))
    status = run_batch(
        photos,
        options=options,
        out=folder / "report",
        db=folder / "history.sqlite",
        echo=echo,
        warn=warn,
    )
    echo("the simulator's truth, for comparison:")
    for name, density, bearing in truth:
        echo(f"  {name}: {density:5.1f} points per square inch, bearing {bearing:4.1f} %")
    return status
