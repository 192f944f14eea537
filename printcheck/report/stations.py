"""The report's stations strip: each pass of a surface as a row of its stations.

A pass of several stations is judged as a whole (every station must meet); this section
shows, pass by pass (newest first), each station's density and bearing, the worst
station marked, the pass's note, and each station's projection.  For a surface whose
passes are single photos it shows only the passes' notes, if any.
"""

from __future__ import annotations

from dataclasses import dataclass

from printcheck.progress import MIN_PASSES, projection_words, station_progress
from printcheck.records import Progress, ProgressRow, StationProgress

__all__ = ["StationsView", "stations_section", "stations_view"]

_OK, _SHORT, _NONE = "#d9f2dd", "#f9d7d3", "#eeeeee"


@dataclass(frozen=True)
class StationCell:
    """One station of one pass: its figures, colour and whether it is the worst."""

    station: str
    photo: str
    density: str
    bearing: str
    colour: str
    worst: bool


@dataclass(frozen=True)
class StationRow:
    """One pass of the strip: its number, verdict, worst station, note and cells."""

    number: int
    verdict: str
    worst: str | None
    note: str | None
    cells: list[StationCell | None]


@dataclass(frozen=True)
class StationsView:
    """The stations strip (``rows``, newest pass first) or, for a surface of single
    photos, only its passes' notes."""

    names: list[str]
    per: str
    rows: list[StationRow]
    lead: str
    each: list[str]
    notes: list[tuple[int, str]]


def _fig(value: float | None, digits: int = 1) -> str:
    return "–" if value is None else f"{value:.{digits}f}"


def _cell(row: ProgressRow, station: str) -> StationCell | None:
    figure = next((f for f in row.stations if f.station == station), None)
    if figure is None:
        return None
    return StationCell(
        station=station,
        photo=figure.photo,
        density=_fig(figure.density),
        bearing=_fig(figure.bearing_percent),
        colour={True: _OK, False: _SHORT, None: _NONE}[figure.meets],
        worst=figure.station == row.worst_station and len(row.stations) > 1,
    )


def _verdict(meets: bool | None) -> str:
    return {True: "meets", False: "does not meet", None: "not judged"}[meets]


def _station_projection(progress: Progress, s: StationProgress) -> str:
    known = [d for d in s.densities if d is not None]
    one = station_progress(progress, s)
    if s.projection is None and len(known) < MIN_PASSES and progress.targets.density is not None:
        return f"too few passes yet ({len(known)} of {MIN_PASSES} needed)"
    return projection_words(one)


def stations_view(progress: Progress) -> StationsView:
    """The stations strip and notes of ``progress``, for the ``stations`` macro."""
    from printcheck.wording import cell_words

    per = cell_words(progress.cell, progress.unit)
    if not progress.stations:
        notes = [(r.number, r.note) for r in progress.passes if r.note]
        return StationsView([], per, [], "", [], notes)
    names = [s.station for s in progress.stations]
    rows = [
        StationRow(
            number=row.number,
            verdict=_verdict(row.meets),
            worst=row.worst_station
            if row.worst_station is not None and len(row.stations) > 1
            else None,
            note=row.note,
            cells=[_cell(row, n) for n in names],
        )
        for row in reversed(progress.passes)
    ]
    lead = (
        f"Projection for the surface, led by its slowest station "
        f"({progress.slowest_station}): {projection_words(progress)}."
        if progress.slowest_station is not None
        else ""
    )
    each = [f"station {s.station}: {_station_projection(progress, s)}" for s in progress.stations]
    return StationsView(names, per, rows, lead, each, [])


def stations_section(progress: Progress | None) -> str:
    """The stations strip and notes of ``progress`` as an HTML section (or ``""``),
    rendered by the ``stations`` macro of ``printcheck/templates/_macros.html``."""
    if progress is None:
        return ""
    from printcheck.report.templating import environment

    view = stations_view(progress)
    if not view.rows and not view.notes:
        return ""
    macros = environment().get_template("_macros.html").module
    return str(macros.stations(view)).strip()  # type: ignore[attr-defined]
