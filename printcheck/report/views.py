"""What the report and the web pages show of a pass, as plain values for the templates.

The words, units, roundings and cell colours are decided here, once, from the records;
the Jinja2 templates in ``printcheck/templates`` only lay them out (and escape every
text: autoescape is on).  Both the offline ``report.html`` and the web application's
pass page are rendered from these views, so they say the same thing the same way.
"""

from __future__ import annotations

import base64
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path
from urllib.parse import quote

from printcheck.cells import edge_strip
from printcheck.records import CellSummary, PassSummary
from printcheck.spec import Spec
from printcheck.units import to_mm
from printcheck.wording import (
    advice_words,
    bearing_words,
    cell_words,
    check_label,
    fixed,
    num,
    range_words,
    target_lines,
    target_words,
)

__all__ = [
    "CELL_COLOURS",
    "CellView",
    "ChangeView",
    "CheckRow",
    "Figure",
    "MapView",
    "PassView",
    "bearing_class",
    "data_uri",
    "drawn_cells",
    "density_class",
    "legend_items",
    "pass_view",
    "pass_views",
    "spec_words",
]

#: The cell maps' classes: one lightness each, far apart (CIE L* about 30, 60, 90), so
#: they read apart to a colour-blind eye and in grey print; hues on the blue-yellow
#: axis, which red-green colour blindness keeps.  (sRGB; the key below names them.)
CELL_COLOURS: dict[str, tuple[int, int, int]] = {
    "short": (38, 66, 120),  # dark blue: well short of the target (under 75 % of it)
    "close": (140, 140, 128),  # grey: close (75 % of the target up to it)
    "meets": (250, 232, 140),  # pale yellow: meets the target
    "over": (205, 110, 40),  # orange-brown: more bearing than the spec allows
}
_DARK = {"short"}  # classes whose figures are written in white
_WHITE = (248, 249, 250)


def data_uri(data: bytes) -> str:
    """``data`` (PNG or JPEG bytes) as a ``data:`` URI, for a self-contained page."""
    if data[:8] == b"\x89PNG\r\n\x1a\n":
        mime = "image/png"
    elif data[:3] == b"\xff\xd8\xff":
        mime = "image/jpeg"
    else:
        mime = "application/octet-stream"
    return f"data:{mime};base64,{base64.b64encode(data).decode('ascii')}"


def _hex(rgb: tuple[int, int, int]) -> str:
    return "#{:02x}{:02x}{:02x}".format(*rgb)


def _mix(a: tuple[int, int, int], b: tuple[int, int, int], t: float) -> str:
    t = min(1.0, max(0.0, t))
    r, g, bl = (int(round(x + (y - x) * t)) for x, y in zip(a, b, strict=True))
    return f"#{r:02x}{g:02x}{bl:02x}"


def density_class(value: float, target: float) -> str:
    """The cell-map class of a density against its target (see :data:`CELL_COLOURS`)."""
    ratio = value / target
    if ratio >= 1.0 - 1e-9:
        return "meets"
    return "close" if ratio >= 0.75 else "short"


def bearing_class(value: float, lo: float | None, hi: float | None) -> str:
    """The cell-map class of a bearing against the spec's range."""
    if hi is not None and value > hi:
        return "over"
    if lo is not None and value < lo:
        return "close" if value >= 0.75 * lo else "short"
    return "meets"


def _colour_style(cls: str | None, t: float = 0.0) -> str:
    """The inline style of a map cell: its class's colour, or a ramp from white to the
    dark blue by ``t`` (0..1) where there is no target (lightness falls with ``t``)."""
    if cls is None:
        rgb = _mix(_WHITE, CELL_COLOURS["short"], 0.75 * t)
        text = "#fff" if t > 0.55 else "#1d232a"
        return f"background:{rgb};color:{text}"
    text = "#fff" if cls in _DARK else "#1d232a"
    return f"background:{_hex(CELL_COLOURS[cls])};color:{text}"


def _density_colour(value: float, target: float | None, top: float) -> str:
    if target is None or target <= 0:
        return _colour_style(None, value / top if top > 0 else 0.0)
    return _colour_style(density_class(value, target))


def _bearing_colour(value: float, lo: float | None, hi: float | None) -> str:
    if lo is None and hi is None:
        return _colour_style(None, value / 100.0)
    return _colour_style(bearing_class(value, lo, hi))


def _per(summary: PassSummary) -> str:
    """The density unit of ``summary`` in words."""
    return cell_words(summary.cell, summary.unit)


def _points(n: int) -> str:
    return f"{n} point" if n == 1 else f"{n} points"


# ------------------------------------------------------------------ the views


@dataclass(frozen=True)
class Figure:
    """One figure box: the value, what it is, its likely range (or ``""``) and the id a
    web page gives its value (``""``: none)."""

    value: str
    key: str
    range: str = ""
    ident: str = ""


@dataclass(frozen=True)
class CheckRow:
    """One check of the spec, in words."""

    label: str
    target: str
    value: str
    ok: bool
    reason: str


@dataclass(frozen=True)
class CellView:
    """One cell of a map: its figure, a smaller line under it, its colour, and whether
    it is a complete cell."""

    text: str
    small: str
    style: str
    complete: bool


@dataclass(frozen=True)
class MapView:
    """A map of the cells: a caption and rows of cells (None where there is no cell)."""

    caption: str
    rows: list[list[CellView | None]]
    css_class: str = "heat"


@dataclass(frozen=True)
class ChangeView:
    """The change since the pass before: a map, or a note why there is none."""

    map: MapView | None = None
    note: str = ""
    contacts_src: str | None = None  # this print laid on the one before (a data: URI)
    contacts_alt: str = ""
    contacts_key: str = ""


@dataclass(frozen=True)
class PassView:
    """Everything the templates show of one pass."""

    number: int
    photo: str
    meets: bool | None
    when: str
    scale: str
    links: list[tuple[str, str]]
    figures: list[Figure]
    doubt: str | None
    spec_name: str | None
    checks: list[CheckRow]
    warnings: list[str]
    advice: list[str]
    per: str
    maps: list[MapView]
    hidden_strips: str
    change: ChangeView | None
    overlay_src: str | None = None
    overlay_href: str | None = None
    station: str | None = None


def legend_items() -> list[tuple[str, str, str]]:
    """The overlay's marks for the key: (CSS colour, shape, words)."""
    from printcheck.report.overlay import COLOURS, LEGEND

    items = []
    for key, shape, words in LEGEND:
        b, g, r = COLOURS[key]
        items.append((f"#{r:02x}{g:02x}{b:02x}", shape, words))
    return items


def spec_words(
    spec: Spec | None, unit: str | None = None, cell_mm: float | None = None
) -> tuple[str, str, str] | None:
    """The spec's title, name and targets in words, in the job's ``unit`` and cell where
    given (the spec's own figures beside them), else as ``printcheck specs`` has them."""
    if spec is None:
        return None
    targets = "; ".join(f"{t.label} {t.words}" for t in target_lines(spec, unit, cell_mm))
    return (spec.title or spec.name, spec.name, targets or "no targets")


def drawn_cells(summary: PassSummary) -> tuple[list[int], list[int], float]:
    """The rows and columns a cell map draws, and the widest edge strip it leaves out
    (0 when none): the last row or column when it is an edge strip
    (:func:`printcheck.cells.edge_strip`; never the only one)."""
    rows = max(c.row for c in summary.cells) + 1
    cols = max(c.col for c in summary.cells) + 1
    across = edge_strip(summary.window.width, summary.cell)
    down = edge_strip(summary.window.height, summary.cell)
    hidden = [w for w in (across, down) if w is not None]
    keep_cols = cols - (across is not None)
    keep_rows = rows - (down is not None)
    return list(range(keep_rows)), list(range(keep_cols)), max(hidden, default=0.0)


def _map(
    summary: PassSummary,
    caption: str,
    cell_text: Callable[[CellSummary], tuple[str, str]],
    colour: Callable[[CellSummary], str],
    css_class: str = "heat",
) -> MapView:
    """A map of ``summary``'s cells on their grid, leaving out the thin edge strips."""
    keep_rows, keep_cols, _ = drawn_cells(summary)
    grid = {(c.row, c.col): c for c in summary.cells}
    rows: list[list[CellView | None]] = []
    for r in sorted(keep_rows):
        line: list[CellView | None] = []
        for c in sorted(keep_cols):
            cell = grid.get((r, c))
            if cell is None:
                line.append(None)
                continue
            text, small = cell_text(cell)
            line.append(CellView(text, small, colour(cell), cell.complete))
        rows.append(line)
    return MapView(caption, rows, css_class)


def _maps(summary: PassSummary, spec: Spec | None) -> list[MapView]:
    """The density and bearing maps of one pass's cells, coloured against ``spec``."""
    cells = summary.cells
    if not cells:
        return []
    cell_mm = to_mm(summary.cell, summary.unit)
    target = None if spec is None else spec.density_target(cell_mm, per_cell=True)
    top = max((c.density for c in cells), default=0.0)
    lo = None if spec is None else spec.bearing_min
    hi = None if spec is None else spec.bearing_max
    per = _per(summary)
    dcap = f"Density, {per}" + (
        "" if target is None else f" (target at least {num(target, 1)} {per})"
    )
    bcap = "Bearing"
    if lo is not None or hi is not None:
        bcap = f"Bearing (target {bearing_words(lo, hi).span})"
    density = _map(
        summary,
        dcap,
        lambda c: (fixed(c.density, 1), _points(c.spot_count)),
        lambda c: _density_colour(c.density, target, top),
    )
    bearing = _map(
        summary,
        bcap,
        lambda c: (f"{c.bearing_percent:.0f}%", ""),
        lambda c: _bearing_colour(c.bearing_percent, lo, hi),
    )
    return [density, bearing]


def _hidden_words(summary: PassSummary) -> str:
    """The line under the maps when thin edge strips are left out of them."""
    if not summary.cells:
        return ""
    _, _, widest = drawn_cells(summary)
    if widest <= 0:
        return ""
    digits = 2 if summary.unit == "in" else 1
    width = f"{widest:.{digits}f} {summary.unit}"
    return (
        f"Edge strips under a quarter cell ({width}) are not shown; their spots count in "
        "the window's figures."
    )


def _change(
    summary: PassSummary, previous: PassSummary | None, folder: Path | None = None
) -> ChangeView | None:
    """The change since the pass before: where contacts appeared and disappeared (from
    the contact maps kept in ``folder``), and per cell (same grid only)."""
    from dataclasses import replace

    from printcheck.compare import change_view, change_words

    cells = _cell_change(summary, previous)
    laid = change_view(folder, summary, previous)
    if laid is None or previous is None:
        return cells
    key, alt = change_words(laid.change, summary, previous)
    return replace(
        cells or ChangeView(),
        contacts_src=data_uri(laid.png),
        contacts_alt=alt,
        contacts_key=key,
    )


def _cell_change(summary: PassSummary, previous: PassSummary | None) -> ChangeView | None:
    """Per-cell change of density and bearing since the pass before (same grid only)."""
    if previous is None or not summary.cells:
        return None
    same_grid = (
        previous.unit == summary.unit
        and previous.cell == summary.cell
        and {(c.row, c.col) for c in previous.cells} == {(c.row, c.col) for c in summary.cells}
    )
    if not same_grid:
        return ChangeView(
            note="No cell-by-cell change: the pass before was counted on another grid "
            "(unit, cell size or window)."
        )
    before = {(c.row, c.col): c for c in previous.cells}

    def text(c: CellSummary) -> tuple[str, str]:
        b = before[(c.row, c.col)]
        dd = c.density - b.density
        db = c.bearing_percent - b.bearing_percent
        return f"{dd:+.1f} points", f"{db:+.0f} % bearing"

    caption = (
        f"Change since the pass before: density in {_per(summary)}, and bearing in "
        "percentage points"
    )
    return ChangeView(
        map=_map(
            summary, caption, text, lambda c: "background:#f4f6f8;color:#1d232a", "heat change"
        )
    )


def _check_value(name: str, value: float | None, summary: PassSummary) -> str:
    """A check's value with its unit, rounded as the pass's figures above it are."""
    if value is None:
        return "–"
    if name in ("density", "cell_density"):
        return f"{fixed(value, 1)} {_per(summary)}"
    if name == "bearing":
        return f"{fixed(value, 1)} %"
    if name == "bare_patch":
        return f"{fixed(value, 2 if summary.unit == 'in' else 1)} {summary.unit}"
    return fixed(value, 2)


def _figures(summary: PassSummary) -> tuple[list[Figure], str | None]:
    """The pass's density, bearing, count and largest bare patch with their ranges, and
    why the count is uncertain (None when it is not)."""
    conf = summary.confidence
    cnt_rng = bear_rng = ""
    if conf is not None:
        cnt_rng = range_words(conf.spot_count_low, conf.spot_count_high, 0, "spots")
        bear_rng = range_words(conf.bearing_percent_low, conf.bearing_percent_high, 1, "%")
    figures = [
        Figure(fixed(summary.density), _per(summary)),
        Figure(fixed(summary.bearing_percent) + " %", "bearing", bear_rng),
        Figure(fixed(summary.spot_count), "spots in the window", cnt_rng, "count"),
        Figure(
            fixed(summary.largest_bare, 2 if summary.unit == "in" else 1) + f" {summary.unit}",
            "largest bare patch",
        ),
    ]
    doubt = None
    if conf is not None and conf.doubtful:
        doubt = conf.reason or "the segmentation threshold matters"
    return figures, doubt


def pass_view(
    number: int,
    summary: PassSummary,
    spec: Spec | None,
    *,
    previous: PassSummary | None = None,
    folder: Path | None = None,
    overlay_src: str | None = None,
    overlay_href: str | None = None,
    station: str | None = None,
    maps: Path | None = None,
) -> PassView:
    """The view of one pass.

    Parameters
    ----------
    number : int
        The pass's number on its surface.
    summary : PassSummary
    spec : Spec or None
        What the cell maps are coloured against.
    previous : PassSummary or None
        The pass before, for the per-cell change.
    folder : Path or None
        The output folder the page lives in: links to the pass's result JSON and
        full-size overlay there (relative names), where those files are.
    overlay_src : str or None
        The overlay image's address (a ``data:`` URI in the report, a route on the web).
    overlay_href : str or None
        Where the image links to (the full-size overlay); in a report, the overlay file
        beside it where there is one.
    station : str or None
        The station the photo was taken at.
    maps : Path or None
        The output folder whose contact maps give where contacts appeared and
        disappeared (default ``folder``; the web app's pages link no files there).
    """
    from printcheck.report.files import output_stem

    when = "time unknown"
    if summary.taken is not None:
        when = "taken " + summary.taken.isoformat(sep=" ", timespec="seconds")
    cal = summary.calibration
    how = "layout " + str(cal.layout) if cal.method == "layout" else "given scale"
    scale = f"scale from {how}, {fixed(cal.px_per_mm, 1)} px/mm" + (
        "" if cal.residual_mm is None else f", fit residual {fixed(cal.residual_mm, 3)} mm"
    )
    links: list[tuple[str, str]] = []
    href = overlay_href
    if folder is not None and summary.photo:
        stem = output_stem(folder, summary.photo, summary.sha256)
        for suffix, label in ((".json", "result JSON"), (".overlay.png", "full-size overlay")):
            name = stem + suffix
            if (folder / name).is_file():
                links.append((quote(name), label))
                if suffix == ".overlay.png" and href is None:
                    href = quote(name)
    figures, doubt = _figures(summary)
    verdict = summary.verdict
    checks: list[CheckRow] = []
    if verdict is not None:
        cell_mm = to_mm(summary.cell, summary.unit)
        checks = [
            CheckRow(
                check_label(ch.name),
                target_words(ch.name, ch.target, summary.unit, cell_mm),
                _check_value(ch.name, ch.value, summary),
                ch.ok,
                ch.reason,
            )
            for ch in verdict.checks
        ]
    return PassView(
        number=number,
        photo=summary.photo,
        meets=summary.meets,
        when=when,
        scale=scale,
        links=links,
        figures=figures,
        doubt=doubt,
        spec_name=None if verdict is None else verdict.name,
        checks=checks,
        warnings=list(summary.warnings or ()),
        advice=[advice_words(a, summary.unit) for a in summary.advice or ()],
        per=_per(summary),
        maps=_maps(summary, spec),
        hidden_strips=_hidden_words(summary),
        change=_change(summary, previous, maps if maps is not None else folder),
        overlay_src=overlay_src,
        overlay_href=href,
        station=station,
    )


def pass_views(
    passes: Sequence[tuple[PassSummary, bytes | None]],
    numbers: Sequence[int],
    spec: Spec | None,
    folder: Path | None,
    stations: Sequence[str | None] | None = None,
) -> list[PassView]:
    """The views of a report's photos, oldest first, each with the one before it at its
    station (``stations``: each photo's; None: one photo a pass)."""
    views = []
    before: dict[str | None, PassSummary] = {}
    places = list(stations) if stations is not None else [None] * len(passes)
    for n, (summary, overlay), station in zip(numbers, passes, places, strict=True):
        src = data_uri(overlay) if overlay else None
        previous = before.get(station)
        views.append(
            pass_view(
                n,
                summary,
                spec,
                previous=previous,
                folder=folder,
                overlay_src=src,
                station=station,
            )
        )
        before[station] = summary
    return views
