"""The job sheet: one or two printed pages per surface, for the customer and the records.

Read from the history alone (like ``printcheck report SURFACE``): the surface (and its
machine), the spec with the source of each target, the dates of the first and the last
pass, a verdict line per pass and per station, the latest print (its overlay, when an
earlier batch left one in the output folder, and a small map of its cells), the trend
plot and a sign-off block with blank lines to sign.

The sheet is ONE self-contained HTML file (images inlined as ``data:`` URIs, the CSS
inline, no script) rendered by Jinja2 with autoescape on from ``printcheck/templates/sheet.html``;
its print stylesheet sets the paper (``@page`` size and margins), keeps each section
whole on a page (``break-inside: avoid``) and never leaves a heading at a page's foot
(``break-after: avoid``).  :func:`print_pdf` prints it to PDF with a headless Chromium
run as a separate program (``--print-to-pdf``), so printcheck needs no browser library
at run time; :func:`find_chromium` finds one.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import tempfile
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from datetime import datetime
from pathlib import Path
from typing import TYPE_CHECKING, Literal

from printcheck.errors import OptionError, ReportError
from printcheck.records import CellSummary, PassSummary, Progress, ProgressRow, StoredPass
from printcheck.report.views import data_uri
from printcheck.spec import Spec
from printcheck.wording import (
    TargetLine,
    cell_share_words,
    cell_words,
    fixed,
    sentence,
    target_lines,
)

if TYPE_CHECKING:
    from jinja2 import Environment

__all__ = [
    "CHROMIUM_ENV",
    "CHROMIUM_NAMES",
    "PAPERS",
    "MapCell",
    "Paper",
    "PrintView",
    "SheetFiles",
    "VerdictLine",
    "find_chromium",
    "print_pdf",
    "render_sheet",
    "sheet_name",
    "write_sheet",
]

Paper = Literal["a4", "letter"]

#: Paper sizes: the CSS ``@page`` size keyword and the sheet's page margins (mm).
PAPERS: dict[str, tuple[str, str]] = {
    "a4": ("A4", "14mm 15mm 16mm 15mm"),
    "letter": ("letter", "13mm 15mm 15mm 15mm"),
}

#: The environment variable that names the Chromium to print with.
CHROMIUM_ENV = "PRINTCHECK_CHROMIUM"

#: The programs looked for on PATH, in this order.
CHROMIUM_NAMES = ("chromium", "chromium-browser", "google-chrome")

_VERDICT = {True: ("meets", "ok"), False: ("does not meet", "short"), None: ("not judged", "none")}
_PRINT_TIMEOUT_S = 120.0


# ---------------------------------------------------------------- what the sheet shows


@dataclass(frozen=True)
class VerdictLine:
    """One line of the passes table: a pass as a whole (``station`` None) or one station.

    Figures are text, rounded as shown (density per the progress's cell); ``state`` is
    ``"ok"``, ``"short"`` or ``"none"`` (no spec); ``short_on`` names the checks that
    failed.
    """

    number: int
    station: str | None
    when: str
    photo: str
    density: str
    bearing: str
    verdict: str
    state: str
    short_on: str
    worst: bool
    note: str


@dataclass(frozen=True)
class MapCell:
    """One cell of the latest print's map: its label, figures and colours."""

    label: str
    density: str
    bearing: str
    background: str
    ink: str
    complete: bool


@dataclass(frozen=True)
class PrintView:
    """One photo of the latest pass: its station, verdict, overlay and cell map."""

    station: str | None
    photo: str
    when: str
    verdict: str
    state: str
    worst: bool
    overlay: str | None  # a data: URI, or None when no overlay was found
    columns: tuple[str, ...]
    rows: tuple[tuple[str, tuple[MapCell | None, ...]], ...]
    caption: str


@dataclass(frozen=True)
class SheetFiles:
    """What :func:`write_sheet` wrote: the HTML sheet, and the PDF (None: not printed)."""

    html: Path
    pdf: Path | None


def sheet_name(surface: str, suffix: str) -> str:
    """The sheet's file name: ``sheet-<surface><suffix>``, the surface made a plain name.

    Characters that would leave the folder or upset another system (``/ \\ : * ? " < >
    |`` and control characters) become ``_``: ``lathe-1/front-way`` gives
    ``sheet-lathe-1_front-way.html``.
    """
    from printcheck.report.files import plain_name

    return f"sheet-{plain_name(surface) or '_'}{suffix}"


def _when(taken: datetime | None, *, time: bool = True) -> str:
    if taken is None:
        return "time unknown"
    return taken.strftime("%Y-%m-%d %H:%M" if time else "%Y-%m-%d")


def _station_when(taken: datetime | None, pass_taken: datetime | None) -> str:
    """A station's time: the hour only when it is the day its pass began."""
    if taken is not None and pass_taken is not None and taken.date() == pass_taken.date():
        return f"{taken:%H:%M}"
    return _when(taken)


def _short_on(summary: PassSummary | None) -> str:
    from printcheck.wording import check_label

    if summary is None or summary.verdict is None:
        return ""
    return ", ".join(check_label(c.name) for c in summary.verdict.checks if not c.ok)


def _verdict_lines(progress: Progress, stored: Sequence[StoredPass]) -> list[VerdictLine]:
    """A line per pass (the pass as the history judges it), and under a pass of several
    stations a line per station."""
    by_key = {(p.number, p.station or "1"): p.summary for p in stored}
    lines = []
    for row in progress.passes:
        lines.append(_pass_line(row, by_key))
        if not row.stations:
            continue
        several = len(row.stations) > 1
        for f in row.stations:
            summary = by_key.get((row.number, f.station))
            verdict, state = _VERDICT[f.meets]
            lines.append(
                VerdictLine(
                    number=row.number,
                    station=f.station,
                    when=_station_when(None if summary is None else summary.taken, row.taken),
                    photo=f.photo,
                    density=fixed(f.density),
                    bearing=fixed(f.bearing_percent),
                    verdict=verdict,
                    state=state,
                    short_on=_short_on(summary),
                    worst=several and f.station == row.worst_station,
                    note="",
                )
            )
    return lines


def _pass_line(row: ProgressRow, by_key: Mapping[tuple[int, str], PassSummary]) -> VerdictLine:
    verdict, state = _VERDICT[row.meets]
    deciding = row.worst_station if row.stations else "1"
    return VerdictLine(
        number=row.number,
        station=None,
        when=_when(row.taken),
        photo=row.photo,
        density=fixed(row.density),
        bearing=fixed(row.bearing_percent),
        verdict=verdict,
        state=state,
        short_on=_short_on(by_key.get((row.number, deciding or "1"))),
        worst=False,
        note=row.note or "",
    )


def _spec_lines(spec: Spec | None) -> list[TargetLine]:
    return [] if spec is None else target_lines(spec)


def _job_target(progress: Progress, spec: Spec | None) -> str:
    """The spec's density targets in the job's own unit and cell, in words (or ``""``)."""
    from printcheck.wording import num

    t = progress.targets
    if spec is None or t.density is None:
        return ""
    per = cell_words(progress.cell, progress.unit)
    words = f"at least {num(t.density, 1)} {per}"
    if spec.min_density is not None:
        words += " on average"
    if spec.min_cell_density is not None and t.cell_density is not None:
        share = cell_share_words(spec)
        if spec.min_density is None:
            words += f" in {share}"
        else:
            words += f", and at least {num(t.cell_density, 1)} in {share}"
    return words


def _cell_map(
    cells: Sequence[CellSummary], summary: PassSummary, spec: Spec | None
) -> tuple[tuple[str, ...], tuple[tuple[str, tuple[MapCell | None, ...]], ...], str]:
    """The latest print's cells on their grid, coloured against ``spec`` as the report's
    cell maps are (:mod:`printcheck.report.views`' colour classes), the edge strips left
    out as there (:func:`~printcheck.report.views.drawn_cells`)."""
    from printcheck.guidance import cell_label
    from printcheck.report.views import CELL_COLOURS, density_class, drawn_cells
    from printcheck.units import to_mm
    from printcheck.wording import num

    per = cell_words(summary.cell, summary.unit)
    if not cells:
        return (), (), f"no cells ({per})"
    target = None
    if spec is not None:
        target = spec.density_target(to_mm(summary.cell, summary.unit), per_cell=True)
    keep_rows, keep_cols, _ = drawn_cells(summary)
    grid = {(c.row, c.col): c for c in cells}
    columns = tuple(cell_label(0, c)[:-1] for c in keep_cols)
    rows = []
    for r in keep_rows:
        out: list[MapCell | None] = []
        for c in keep_cols:
            cell = grid.get((r, c))
            if cell is None:
                out.append(None)
                continue
            cls = None if target is None or target <= 0 else density_class(cell.density, target)
            rgb = (255, 255, 255) if cls is None else CELL_COLOURS[cls]
            ink = "#ffffff" if sum(rgb) < 3 * 110 else "#1d232a"
            out.append(
                MapCell(
                    label=cell_label(r, c),
                    density=fixed(cell.density),
                    bearing=f"{cell.bearing_percent:.0f}%",
                    background="#{:02x}{:02x}{:02x}".format(*rgb),
                    ink=ink,
                    complete=cell.complete,
                )
            )
        rows.append((str(r + 1), tuple(out)))
    caption = f"density, {per}"
    if target is not None:
        caption += f" (target at least {num(target, 1)} in each cell)"
    caption += "; small: bearing"
    return columns, tuple(rows), caption


def _latest_prints(
    progress: Progress, stored: Sequence[StoredPass], spec: Spec | None, out: Path
) -> list[PrintView]:
    """Each photo of the latest pass (one per station): overlay and cell map."""
    from printcheck.report.history_report import stored_preview

    last = progress.passes[-1]
    members = [p for p in stored if p.number == last.number]
    figures = {f.station: f for f in last.stations}
    views = []
    for p in members:
        summary = p.summary
        figure = figures.get(p.station or "1")
        meets = summary.meets if figure is None else figure.meets
        verdict, state = _VERDICT[meets]
        preview = stored_preview(out, summary.photo, summary.sha256)
        columns, rows, caption = _cell_map(summary.cells, summary, spec)
        views.append(
            PrintView(
                station=p.station if len(members) > 1 or p.station else None,
                photo=summary.photo,
                when=_when(summary.taken),
                verdict=verdict,
                state=state,
                worst=len(members) > 1 and (p.station or "1") == last.worst_station,
                overlay=None if preview is None else data_uri(preview),
                columns=columns,
                rows=rows,
                caption=caption,
            )
        )
    return views


# ---------------------------------------------------------------- the HTML


def _environment() -> Environment:
    """The pages' one environment (:mod:`printcheck.report.templating`), strict: a name
    the sheet's template uses and the view lacks is an error, not a blank."""
    from jinja2 import StrictUndefined

    from printcheck.report.templating import environment

    env = environment()
    env.undefined = StrictUndefined
    return env


def render_sheet(
    *,
    surface: str,
    spec: Spec | None,
    stored: Sequence[StoredPass],
    progress: Progress,
    out: Path,
    paper: Paper = "a4",
    today: datetime | None = None,
) -> str:
    """The job sheet's HTML text.

    Parameters
    ----------
    surface : str
        The surface's name as the history holds it (``MACHINE/SURFACE`` names a machine).
    spec : Spec or None
        The surface's spec (:func:`printcheck.progress.surface_spec`).
    stored : sequence of StoredPass
        The surface's passes as the history gives them (a photo each, pass by pass).
    progress : Progress
        The surface's progress (:func:`printcheck.progress.history_progress`), at
        least one pass.
    out : Path
        The folder overlays of earlier runs are looked for in.
    paper : {"a4", "letter"}
        The paper the print stylesheet sets.
    today : datetime, optional
        The date the sheet is made on (default: now).

    Returns
    -------
    str
        One self-contained HTML document.
    """
    from printcheck import __version__
    from printcheck.progress import projection_words
    from printcheck.report.plots import trend_png

    if paper not in PAPERS:
        raise OptionError(f"--paper must be one of {', '.join(PAPERS)}, got {paper!r}")
    if not progress.passes:
        raise OptionError(f"sheet: no passes recorded for surface {surface!r}")
    size, margins = PAPERS[paper]
    machine, _, name = surface.rpartition("/")
    rows = progress.passes
    latest = rows[-1]
    verdict, state = _VERDICT[latest.meets]
    words = projection_words(progress)
    context = {
        "surface": surface,
        "machine": machine,
        "name": name,
        "paper": size,
        "margins": margins,
        "spec": spec,
        "spec_lines": _spec_lines(spec),
        "spec_name": progress.spec,
        "first": _when(rows[0].taken, time=False),
        "last": _when(latest.taken, time=False),
        "passes": len(rows),
        "stations": [s.station for s in progress.stations],
        "latest_number": latest.number,
        "verdict": verdict,
        "state": state,
        "worst_station": latest.worst_station if len(latest.stations) > 1 else None,
        "projection": sentence(words) + ".",
        "per": cell_words(progress.cell, progress.unit),
        "job_target": _job_target(progress, spec),
        "lines": _verdict_lines(progress, stored),
        "prints": _latest_prints(progress, stored, spec, out),
        "trend": data_uri(trend_png(progress, dpi=150)),
        "today": (today or datetime.now()).strftime("%Y-%m-%d"),
        "version": __version__,
    }
    return str(_environment().get_template("sheet.html").render(**context))


# ---------------------------------------------------------------- the PDF


def find_chromium(
    given: str | os.PathLike[str] | None = None, environ: Mapping[str, str] | None = None
) -> str | None:
    """The Chromium to print with: ``given``, else ``$PRINTCHECK_CHROMIUM``, else the
    first of :data:`CHROMIUM_NAMES` on PATH; None when there is none.

    Raises
    ------
    OptionError
        ``given`` (or the environment variable) names no program that can be run.
    """
    env = os.environ if environ is None else environ
    for value, where in ((given, "--chromium"), (env.get(CHROMIUM_ENV), CHROMIUM_ENV)):
        if value is None or str(value) == "":
            continue
        found = shutil.which(str(value), path=env.get("PATH"))
        if found is None:
            raise OptionError(
                f"{where} {str(value)!r}: no such program; give the path of a Chromium "
                "(or Chrome) to print the PDF with, or --no-pdf"
            )
        return found
    for name in CHROMIUM_NAMES:
        found = shutil.which(name, path=env.get("PATH"))
        if found is not None:
            return found
    return None


def print_pdf(
    html_path: Path, pdf_path: Path, *, chromium: str, timeout_s: float = _PRINT_TIMEOUT_S
) -> Path:
    """Print the page at ``html_path`` to ``pdf_path`` with a headless Chromium.

    The page sets its own paper and margins (``@page``); Chromium's own header and footer
    (date, file name) are switched off.  Chromium runs with a fresh profile in a temporary
    folder (so it neither touches the user's nor waits for a running browser's), and
    without its sandbox, which refuses to start as root: the page is printcheck's own
    file, with no script and no outside resource.  Chromium prints into a temporary
    folder inside the output folder (a browser confined to the user's files, as a snap
    is, may not see the system's temporary folder), and the PDF is moved into place
    only when whole.

    Raises
    ------
    ReportError
        Chromium failed, took longer than ``timeout_s``, or wrote no PDF.
    """
    folder = pdf_path.parent
    with tempfile.TemporaryDirectory(prefix=".sheet-print-", dir=folder) as tmp:
        part = Path(tmp) / "sheet.pdf"
        args = [
            chromium,
            "--headless",
            "--no-sandbox",
            "--disable-gpu",
            "--no-first-run",
            "--no-default-browser-check",
            "--disable-background-networking",
            "--disable-component-update",
            "--disable-sync",
            "--disable-extensions",
            f"--user-data-dir={Path(tmp) / 'profile'}",
            "--no-pdf-header-footer",
            f"--print-to-pdf={part}",
            html_path.resolve().as_uri(),
        ]
        try:
            run = subprocess.run(
                args,
                stdin=subprocess.DEVNULL,
                capture_output=True,
                text=True,
                errors="replace",
                timeout=timeout_s,
                check=False,
            )
        except subprocess.TimeoutExpired:
            raise ReportError(
                f"{chromium}: did not print the sheet within {timeout_s:.0f} s; "
                "the HTML sheet is written, print it from a browser"
            ) from None
        except OSError as exc:
            raise ReportError(f"{chromium}: cannot be run ({exc.strerror or exc})") from None
        if run.returncode != 0 or not part.is_file() or part.stat().st_size == 0:
            last = next((ln.strip() for ln in reversed(run.stderr.splitlines()) if ln.strip()), "")
            raise ReportError(
                f"{chromium}: printing the sheet failed (exit {run.returncode})"
                + (f": {last[:200]}" if last else "")
                + "; the HTML sheet is written, print it from a browser"
            )
        from printcheck.report.files import write_bytes

        return write_bytes(folder, pdf_path.name, part.read_bytes())


def write_sheet(
    db: Path,
    surface: str,
    out: Path,
    *,
    paper: Paper = "a4",
    chromium: str | None = None,
) -> SheetFiles:
    """Write ``out/sheet-<surface>.html`` from the history at ``db``, and its PDF when
    ``chromium`` is given.

    Raises
    ------
    OptionError
        No passes are recorded for the surface, or the output folder cannot be made.
    HistoryError, ReportError
        The history cannot be read, the sheet cannot be written, or Chromium failed.
    """
    from printcheck.report.files import write_text
    from printcheck.report.history_report import read_recorded

    stored, spec, progress = read_recorded(db, surface, out, command="sheet")
    text = render_sheet(
        surface=surface, spec=spec, stored=stored, progress=progress, out=out, paper=paper
    )
    html_path = write_text(out, sheet_name(surface, ".html"), text)
    pdf = None
    if chromium is not None:
        pdf = print_pdf(html_path, out / sheet_name(surface, ".pdf"), chromium=chromium)
    return SheetFiles(html_path, pdf)
