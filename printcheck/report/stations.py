"""The report's stations strip: each pass of a surface as a row of its stations.

A pass of several stations is judged as a whole (every station must meet); this section
shows, pass by pass (newest first), each station's density and bearing, the worst
station marked, the pass's note, and each station's projection.  For a surface whose
passes are single photos it shows only the passes' notes, if any.
"""

from __future__ import annotations

from html import escape

from printcheck.progress import MIN_PASSES, projection_words, station_progress
from printcheck.records import Progress, ProgressRow, StationProgress

__all__ = ["stations_section"]

_OK, _SHORT, _NONE = "#d9f2dd", "#f9d7d3", "#eeeeee"


def _e(value: object) -> str:
    return escape(str(value), quote=True)


def _fig(value: float | None, digits: int = 1) -> str:
    return "–" if value is None else f"{value:.{digits}f}"


def _cell(row: ProgressRow, station: str, per: str) -> str:
    figure = next((f for f in row.stations if f.station == station), None)
    if figure is None:
        return '<td style="background:#fafafa;color:#999">no photo</td>'
    colour = {True: _OK, False: _SHORT, None: _NONE}[figure.meets]
    worst = figure.station == row.worst_station and len(row.stations) > 1
    mark = "<br><b>worst</b>" if worst else ""
    border = "border:2px solid #a33;" if worst else ""
    return (
        f'<td class="station" data-station="{_e(station)}" style="background:{colour};{border}'
        f'padding:4px 8px;text-align:center" title="{_e(figure.photo)}">'
        f"<b>{_fig(figure.density)}</b> {_e(per)}<br>bearing {_fig(figure.bearing_percent)} %"
        f"{mark}</td>"
    )


def _verdict(meets: bool | None) -> str:
    return {True: "meets", False: "does not meet", None: "not judged"}[meets]


def _station_projection(progress: Progress, s: StationProgress) -> str:
    known = [d for d in s.densities if d is not None]
    one = station_progress(progress, s)
    if s.projection is None and len(known) < MIN_PASSES and progress.targets.density is not None:
        return f"too few passes yet ({len(known)} of {MIN_PASSES} needed)"
    return projection_words(one)


def stations_section(progress: Progress | None) -> str:
    """The stations strip and notes of ``progress`` as an HTML section (or ``""``)."""
    if progress is None:
        return ""
    from printcheck.units import to_mm
    from printcheck.wording import density_words

    per = density_words(to_mm(progress.cell or 1.0, progress.unit or "in"), progress.unit or "in")
    if not progress.stations:
        notes = [r for r in progress.passes if r.note]
        if not notes:
            return ""
        items = "".join(f"<li>pass {r.number}: {_e(r.note)}</li>" for r in notes)
        return f'<section class="pass" id="notes"><h2>Pass notes</h2><ul>{items}</ul></section>'
    names = [s.station for s in progress.stations]
    head = "".join(f'<th style="padding:4px 8px">station {_e(n)}</th>' for n in names)
    rows = []
    for row in reversed(progress.passes):
        cells = "".join(_cell(row, n, per) for n in names)
        note = f"<br><i>{_e(row.note)}</i>" if row.note else ""
        worst = (
            f"; worst station {_e(row.worst_station)}"
            if row.worst_station is not None and len(row.stations) > 1
            else ""
        )
        rows.append(
            f'<tr data-pass="{row.number}"><th style="text-align:left;padding:4px 8px">'
            f"pass {row.number}<br><small>{_e(_verdict(row.meets))}{worst}</small>{note}</th>"
            f"{cells}</tr>"
        )
    lead = (
        f"<p>Projection for the surface, led by its slowest station "
        f"({_e(progress.slowest_station)}): {_e(projection_words(progress))}.</p>"
        if progress.slowest_station is not None
        else ""
    )
    each = "".join(
        f"<li>station {_e(s.station)}: {_e(_station_projection(progress, s))}</li>"
        for s in progress.stations
    )
    return (
        '<section class="pass" id="stations"><h2>Stations</h2>'
        "<p>A pass meets only when every station meets; the worst station decides.</p>"
        f'<table class="stations" style="border-collapse:separate;border-spacing:3px">'
        f"<tr><th></th>{head}</tr>{''.join(rows)}</table>{lead}<ul>{each}</ul></section>"
    )
