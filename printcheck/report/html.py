"""The HTML report of one surface: ONE self-contained file that opens offline.

Rendered from the Jinja2 templates in ``printcheck/templates`` (``report.html`` and the
macros it shares with the web pages), from the views of :mod:`printcheck.report.views`.
Every image (overlays, the trend plot) is embedded as a base64 ``data:`` URI, the CSS is
inline, there is no script and no external resource.  Autoescape is on: every string that
comes from outside (file names, surface, layout and spec names, check reasons, warnings)
is escaped; links point only at files next to the report (relative names, never a folder
part).

The page leads with the surface (verdict, spec, latest figures, projection and trend),
then the latest pass in full; earlier passes fold away in closed ``<details>`` (plain
HTML, no script), newest first.
"""

from __future__ import annotations

import os
from collections.abc import Sequence
from pathlib import Path
from urllib.parse import quote

from markupsafe import Markup

from printcheck import __version__
from printcheck.records import PassSummary, Progress
from printcheck.report.files import CSV_NAME, write_text
from printcheck.report.views import (
    CELL_COLOURS,
    Figure,
    bearing_class,
    data_uri,
    density_class,
    legend_items,
    pass_views,
    spec_words,
)
from printcheck.spec import Spec
from printcheck.units import to_mm

__all__ = ["CELL_COLOURS", "bearing_class", "density_class", "render_report", "write_report"]


def render_report(
    *,
    surface: str,
    spec: Spec | None,
    passes: Sequence[tuple[PassSummary, bytes | None]],
    progress: Progress | None = None,
    folder: str | os.PathLike[str] | None = None,
    skipped: Sequence[tuple[str, str]] = (),
    extra_html: str = "",
) -> str:
    """The report's HTML text (see :func:`write_report`); ``folder`` is where it will live."""
    from printcheck.progress import projection_words
    from printcheck.report.plots import trend_png
    from printcheck.report.templating import render
    from printcheck.wording import fixed, sentence

    folder_path = None if folder is None else Path(folder)
    numbers, stations = _places(passes, progress)
    views = pass_views(passes, numbers, spec, folder_path, stations)
    latest = views[-1] if views else None
    # the badge is the surface's latest pass (all its stations), as the history holds it
    verdict = progress.passes[-1].meets if progress is not None and progress.passes else None
    if verdict is None and latest is not None:
        verdict = latest.meets
    head_figures: list[Figure] = []
    if passes:
        last = passes[-1][0]
        head_figures = [
            Figure(fixed(last.density), latest.per + ", latest" if latest else ""),
            Figure(fixed(last.bearing_percent) + " %", "bearing, latest"),
        ]
    projection = trend_src = None
    if progress is not None:
        words = projection_words(progress)
        projection = sentence(words)
        if progress.passes:
            trend_src = data_uri(trend_png(progress))
    csv = folder_path is not None and (folder_path / CSV_NAME).is_file()
    return render(
        "report.html",
        surface=surface,
        verdict=verdict,
        spec=spec_words(
            spec,
            passes[-1][0].unit if passes else None,
            to_mm(passes[-1][0].cell, passes[-1][0].unit) if passes else None,
        ),
        views=views,
        latest=latest,
        earlier=list(reversed(views[:-1])),
        head_figures=head_figures,
        projection=projection,
        trend_src=trend_src,
        csv_name=CSV_NAME if csv else None,
        csv_href=quote(CSV_NAME),
        skipped=list(skipped),
        # a section rendered by another of printcheck's templates (already escaped)
        extra=Markup(extra_html),
        legend_items=legend_items(),
        version=__version__,
    )


def _places(
    passes: Sequence[tuple[PassSummary, bytes | None]], progress: Progress | None
) -> tuple[list[int], list[str | None] | None]:
    """Each photo's pass number and station, as the progress groups them (photos named
    once each); else numbered in order, one photo a pass."""
    numbers = list(range(1, len(passes) + 1))
    if progress is None:
        return numbers, None
    if len(progress.passes) == len(passes) and not any(p.stations for p in progress.passes):
        return [p.number for p in progress.passes], None
    where: dict[str, tuple[int, str | None]] = {}
    for row in progress.passes:
        for st in row.stations:
            where[st.photo] = (row.number, st.station)
        if not row.stations:
            where[row.photo] = (row.number, None)
    names = [summary.photo for summary, _ in passes]
    if len(set(names)) != len(names) or any(name not in where for name in names):
        return numbers, None
    return [where[n][0] for n in names], [where[n][1] for n in names]


def write_report(
    path: str | os.PathLike[str],
    *,
    surface: str,
    spec: Spec | None,
    passes: Sequence[tuple[PassSummary, bytes | None]],
    progress: Progress | None = None,
    skipped: Sequence[tuple[str, str]] = (),
    extra_html: str = "",
) -> Path:
    """Write the surface's self-contained HTML report atomically.

    Parameters
    ----------
    path : path
        The report file, e.g. ``out/report.html``; its folder is the output folder.
    surface : str
    spec : Spec or None
    passes : sequence of (PassSummary, overlay image bytes or None)
        In pass order (oldest first); shown newest first.  The overlay is PNG or JPEG
        bytes (``printcheck.report.files.encode_image(draw_overlay(result))``).
    progress : Progress or None
        :func:`printcheck.progress.build_progress` output, for the header and trend plot.
    skipped : sequence of (photo name, reason)
        The photos of the batch that were not measured, listed under the header.
    extra_html : str
        A section placed under the header (the stations and notes of a surface's
        passes, :func:`printcheck.report.stations.stations_section`).

    Returns
    -------
    Path
        The written file.

    Raises
    ------
    ReportError
        The folder is read-only or full.
    """
    p = Path(path)
    text = render_report(
        surface=surface,
        spec=spec,
        passes=passes,
        progress=progress,
        folder=p.parent,
        skipped=skipped,
        extra_html=extra_html,
    )
    return write_text(p.parent, p.name, text)
