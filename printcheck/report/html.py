"""The HTML report of one surface: ONE self-contained file that opens offline.

Every image (overlays, the trend plot) is embedded as a base64 ``data:`` URI, the CSS is
inline, there is no script and no external resource.  Every string that comes from outside
(file names, surface, layout and spec names, check reasons, warnings) is escaped with
:func:`html.escape`; links point only at files next to the report (relative names, never
a folder part).
"""

from __future__ import annotations

import base64
import html
import os
from collections.abc import Sequence
from pathlib import Path
from typing import Any
from urllib.parse import quote

from printcheck import __version__
from printcheck.progress import projection_words
from printcheck.records import CellSummary, PassSummary, Progress
from printcheck.report.files import CSV_NAME, output_name, write_text
from printcheck.spec import Spec
from printcheck.units import to_mm
from printcheck.wording import (
    advice_words,
    bearing_words,
    check_label,
    density_words,
    fixed,
    num,
    range_words,
    target_lines,
    target_words,
)

__all__ = ["CELL_COLOURS", "bearing_class", "density_class", "render_report", "write_report"]

_CSS = """
:root { --ink:#1d232a; --muted:#5f6b76; --line:#d9dee3; --ok:#1e7e46; --bad:#b3261e;
        --okbg:#e3f4ea; --badbg:#fbe6e4; --warnbg:#fff5da; }
* { box-sizing: border-box; }
body { font: 15px/1.45 system-ui, -apple-system, "Segoe UI", Roboto, Helvetica, Arial, sans-serif;
       color: var(--ink); margin: 0; background: #f4f6f8; }
main { max-width: 1040px; margin: 0 auto; padding: 24px 20px 48px; }
header.surface { background: #fff; border: 1px solid var(--line); border-radius: 10px;
       padding: 18px 22px; margin-bottom: 22px; }
h1 { font-size: 26px; margin: 0 0 4px; }
h2 { font-size: 19px; margin: 0 0 10px; }
h3 { font-size: 15px; margin: 14px 0 6px; color: var(--muted); text-transform: uppercase;
     letter-spacing: .04em; }
.sub { color: var(--muted); margin: 0 0 12px; }
.badge { display: inline-block; font-weight: 700; padding: 3px 12px; border-radius: 999px;
         font-size: 14px; vertical-align: middle; }
.badge.ok { background: var(--okbg); color: var(--ok); }
.badge.bad { background: var(--badbg); color: var(--bad); }
.badge.none { background: #eceff1; color: var(--muted); }
.figures { display: flex; flex-wrap: wrap; gap: 10px; margin: 10px 0; }
.fig { background: #fff; border: 1px solid var(--line); border-radius: 8px; padding: 8px 14px;
       min-width: 130px; }
.fig .v { font-size: 22px; font-weight: 700; }
.fig .k { font-size: 12px; color: var(--muted); }
.fig .r { font-size: 12px; color: var(--muted); }
section.pass { background: #fff; border: 1px solid var(--line); border-radius: 10px;
       padding: 18px 22px; margin: 0 0 22px; }
img { max-width: 100%; height: auto; display: block; }
img.overlay { border-radius: 6px; border: 1px solid var(--line); }
img.trend { margin-top: 8px; }
.cols { display: flex; flex-wrap: wrap; gap: 22px; align-items: flex-start; }
.cols > div { flex: 1 1 300px; }
table { border-collapse: collapse; }
table.checks { width: 100%; font-size: 14px; }
table.checks th, table.checks td { text-align: left; padding: 5px 8px;
       border-bottom: 1px solid var(--line); vertical-align: top; }
table.checks td.ok { color: var(--ok); font-weight: 700; }
table.checks td.bad { color: var(--bad); font-weight: 700; }
table.heat td { width: 64px; height: 54px; text-align: center; border: 2px solid #fff;
       font-weight: 700; font-size: 15px; color: #1d232a; }
table.heat td.part { font-weight: 400; font-style: italic; opacity: .75; }
table.heat td small { display: block; font-weight: 400; font-size: 11px; }
table.heat caption { caption-side: top; text-align: left; font-size: 13px; color: var(--muted);
       padding-bottom: 4px; }
ul.warn { background: var(--warnbg); border-radius: 6px; padding: 8px 8px 8px 28px; margin: 8px 0; }
.key { font-size: 12px; color: var(--muted); }
ol.advice { margin: 6px 0 10px; padding-left: 26px; }
ol.advice li { margin: 2px 0; }
ul.legend { list-style: none; padding: 0; margin: 6px 0 0; display: flex; flex-wrap: wrap;
       gap: 4px 18px; font-size: 13px; }
ul.legend svg { vertical-align: middle; margin-right: 5px; }
footer { color: var(--muted); font-size: 12px; text-align: center; margin-top: 30px; }
a { color: #1f5fa8; }
@media print {
  body { background: #fff; font-size: 12px; }
  main { max-width: none; padding: 0; }
  header.surface, section.pass { border: none; padding: 0; }
  section.pass { break-before: page; }
  .fig, table.heat, img { break-inside: avoid; }
  * { -webkit-print-color-adjust: exact; print-color-adjust: exact; }
  a { color: inherit; text-decoration: none; }
}
"""


def _e(value: Any) -> str:
    """Escape any outside text for HTML (element content and quoted attributes)."""
    return html.escape("" if value is None else str(value), quote=True)


def _data_uri(data: bytes) -> str:
    if data[:8] == b"\x89PNG\r\n\x1a\n":
        mime = "image/png"
    elif data[:3] == b"\xff\xd8\xff":
        mime = "image/jpeg"
    else:
        mime = "application/octet-stream"
    return f"data:{mime};base64,{base64.b64encode(data).decode('ascii')}"


def _badge(meets: bool | None) -> str:
    if meets is None:
        return '<span class="badge none">no spec</span>'
    if meets:
        return '<span class="badge ok">meets spec</span>'
    return '<span class="badge bad">does not meet spec</span>'


def _mix(a: tuple[int, int, int], b: tuple[int, int, int], t: float) -> str:
    t = min(1.0, max(0.0, t))
    r, g, bl = (int(round(x + (y - x) * t)) for x, y in zip(a, b, strict=True))
    return f"#{r:02x}{g:02x}{bl:02x}"


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


def _hex(rgb: tuple[int, int, int]) -> str:
    return "#{:02x}{:02x}{:02x}".format(*rgb)


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
    """The density unit of ``summary`` in words, escaped."""
    return _e(density_words(to_mm(summary.cell, summary.unit), summary.unit))


def _heat_table(
    cells: tuple[CellSummary, ...],
    caption: str,
    cell_html: Any,
    colour: Any,
    css_class: str = "heat",
) -> str:
    """A table of the cells on their grid: ``cell_html(cell)`` gives (text, small text),
    ``colour(cell)`` the background."""
    rows = max(c.row for c in cells) + 1
    cols = max(c.col for c in cells) + 1
    grid = {(c.row, c.col): c for c in cells}
    out = [f'<table class="{css_class}"><caption>{caption}</caption>']
    for r in range(rows):
        out.append("<tr>")
        for c in range(cols):
            cell = grid.get((r, c))
            if cell is None:
                out.append("<td></td>")
                continue
            text, small = cell_html(cell)
            cls = "" if cell.complete else ' class="part"'
            title = "" if cell.complete else ' title="incomplete cell"'
            sm = f"<small>{small}</small>" if small else ""
            out.append(f'<td{cls}{title} style="{colour(cell)}">{text}{sm}</td>')
        out.append("</tr>")
    out.append("</table>")
    return "".join(out)


def _heat_tables(summary: PassSummary, spec: Spec | None) -> str:
    """The density and bearing maps of one pass's cells, coloured against ``spec``."""
    cells = summary.cells
    if not cells:
        return '<p class="key">No cells.</p>'
    cell_mm = to_mm(summary.cell, summary.unit)
    target = None if spec is None else spec.density_target(cell_mm, per_cell=True)
    top = max((c.density for c in cells), default=0.0)
    lo = None if spec is None else spec.bearing_min
    hi = None if spec is None else spec.bearing_max
    dcap = f"Density, {_per(summary)}" + (
        "" if target is None else f" (target at least {num(target, 1)} {_per(summary)})"
    )
    bcap = "Bearing"
    if lo is not None or hi is not None:
        bcap = f"Bearing (target {_e(bearing_words(lo, hi).span)})"
    density = _heat_table(
        cells,
        dcap,
        lambda c: (fixed(c.density, 1), _points(c.spot_count)),
        lambda c: _density_colour(c.density, target, top),
    )
    bearing = _heat_table(
        cells,
        bcap,
        lambda c: (f"{c.bearing_percent:.0f}%", ""),
        lambda c: _bearing_colour(c.bearing_percent, lo, hi),
    )
    return (
        f'<div class="cols"><div>{density}</div><div>{bearing}</div></div>'
        '<p class="key">Italic: incomplete cell (cut by the window edge or an '
        "exclusion). Pale yellow: meets the target; grey: close (within a quarter of it); "
        "dark blue: well short; orange-brown: more bearing than allowed.</p>"
    )


def _figure(value: str, key: str, rng: str = "") -> str:
    r = f'<div class="r">{rng}</div>' if rng else ""
    return f'<div class="fig"><div class="v">{value}</div><div class="k">{key}</div>{r}</div>'


def _pass_head(number: int, summary: PassSummary, folder: Path | None) -> str:
    """The pass's title, its time, its scale and links to its files."""
    taken = summary.taken
    when = "time unknown"
    if taken is not None:
        when = "taken " + _e(taken.isoformat(sep=" ", timespec="seconds"))
    parts = [
        f"<h2>Pass {number} · {_e(summary.photo)} {_badge(summary.meets)}</h2>",
        f'<p class="sub">{when}',
    ]
    cal = summary.calibration
    how = "layout " + _e(cal.layout) if cal.method == "layout" else "given scale"
    res = cal.residual_mm
    parts.append(
        f" · scale from {how}, {fixed(cal.px_per_mm, 1)} px/mm"
        + ("" if res is None else f", fit residual {fixed(res, 3)} mm")
    )
    if folder is not None and summary.photo:
        for suffix, label in ((".json", "result JSON"), (".overlay.png", "full-size overlay")):
            name = output_name(summary.photo, suffix)
            if (folder / name).is_file():
                parts.append(f' · <a href="{_e(quote(name))}">{label}</a>')
    parts.append("</p>")
    return "".join(parts)


def _pass_figures(summary: PassSummary) -> str:
    """The pass's density, bearing, count and largest bare patch, with their ranges."""
    conf = summary.confidence
    cnt_rng = bear_rng = ""
    if conf is not None:
        cnt_rng = range_words(conf.spot_count_low, conf.spot_count_high, 0, "spots")
        bear_rng = range_words(conf.bearing_percent_low, conf.bearing_percent_high, 1, "%")
    parts = [
        '<div class="figures">',
        _figure(fixed(summary.density), _per(summary)),
        _figure(fixed(summary.bearing_percent) + " %", "bearing", bear_rng),
        _figure(fixed(summary.spot_count), "spots in the window", cnt_rng),
        _figure(
            fixed(summary.largest_bare, 2 if summary.unit == "in" else 1) + f" {_e(summary.unit)}",
            "largest bare patch",
        ),
        "</div>",
    ]
    if conf is not None and conf.doubtful:
        parts.append(
            '<ul class="warn"><li>The count is uncertain: '
            f"{_e(conf.reason or 'the segmentation threshold matters')}</li></ul>"
        )
    return "".join(parts)


def _points(n: int) -> str:
    return f"{n} point" if n == 1 else f"{n} points"


def _check_value(name: str, value: float | None, summary: PassSummary) -> str:
    """A check's value with its unit, rounded as the pass's figures above it are."""
    if value is None:
        return "–"
    if name in ("density", "cell_density"):
        return f"{fixed(value, 1)} {_e(_per(summary))}"
    if name == "bearing":
        return f"{fixed(value, 1)} %"
    if name == "bare_patch":
        return f"{fixed(value, 2 if summary.unit == 'in' else 1)} {_e(summary.unit)}"
    return fixed(value, 2)


def _checks(summary: PassSummary) -> str:
    """The table of the spec's checks, or nothing without a spec."""
    verdict = summary.verdict
    if verdict is None or not verdict.checks:
        return ""
    parts = [
        f"<h3>Checks against {_e(verdict.name)}</h3>",
        '<table class="checks"><tr><th>check</th><th>target</th><th>value</th>'
        "<th></th><th>reason</th></tr>",
    ]
    cell_mm = to_mm(summary.cell, summary.unit)
    for ch in verdict.checks:
        target = target_words(ch.name, ch.target, summary.unit, cell_mm)
        parts.append(
            f"<tr><td>{_e(check_label(ch.name))}</td><td>{_e(target)}</td>"
            f"<td>{_check_value(ch.name, ch.value, summary)}</td>"
            f'<td class="{"ok" if ch.ok else "bad"}">{"✓ ok" if ch.ok else "✗ short"}</td>'
            f"<td>{_e(ch.reason)}</td></tr>"
        )
    parts.append("</table>")
    return "".join(parts)


def _advice(summary: PassSummary) -> str:
    """Where to scrape next: the ranked list in words (nothing when there is none)."""
    if not summary.advice:
        return ""
    items = "".join(f"<li>{_e(advice_words(a, summary.unit))}</li>" for a in summary.advice)
    return (
        "<h3>Where to scrape next</h3>"
        f'<ol class="advice">{items}</ol>'
        '<p class="key">Cells are lettered by column from the left (A, B, ...) and numbered '
        "by row from the top; the numbers on the print are these ranks.</p>"
    )


def _swatch(colour_key: str, shape: str) -> str:
    """A small inline SVG of one overlay mark, in the overlay's own colour."""
    from printcheck.report.overlay import COLOURS

    b, g, r = COLOURS[colour_key]
    c = f"#{r:02x}{g:02x}{b:02x}"
    if shape == "diamond":
        body = f'<polygon points="9,2 16,9 9,16 2,9" fill="none" stroke="{c}" stroke-width="2.5"/>'
    elif shape == "dashed circle":
        body = (
            f'<circle cx="9" cy="9" r="6.5" fill="none" stroke="{c}" stroke-width="2.5" '
            'stroke-dasharray="3 2"/>'
        )
    elif shape == "hatched circle":
        body = (
            f'<circle cx="9" cy="9" r="6.5" fill="{c}" fill-opacity=".35" stroke="{c}" '
            'stroke-width="2.5"/>'
        )
    else:
        body = (
            f'<rect x="2" y="4" width="14" height="10" fill="none" stroke="{c}" stroke-width="2"/>'
        )
    return (
        '<svg width="18" height="18" viewBox="0 0 18 18" aria-hidden="true">'
        f'<rect width="18" height="18" fill="#333"/>{body}</svg>'
    )


def _legend(summary: PassSummary) -> str:
    """The key to the overlay's marks and figures, beside the image."""
    from printcheck.report.overlay import LEGEND

    items = [f"<li>{_swatch(key, shape)}{_e(words)}</li>" for key, shape, words in LEGEND]
    per = density_words(to_mm(summary.cell, summary.unit), summary.unit)
    items.append(f"<li>figures in each cell: large, {_e(per)}; small, bearing %</li>")
    return f'<ul class="legend">{"".join(items)}</ul>'


def _change_table(summary: PassSummary, previous: PassSummary | None) -> str:
    """Per-cell change of density and bearing since the pass before (same grid only)."""
    if previous is None or not summary.cells:
        return ""
    same_grid = (
        previous.unit == summary.unit
        and previous.cell == summary.cell
        and {(c.row, c.col) for c in previous.cells} == {(c.row, c.col) for c in summary.cells}
    )
    if not same_grid:
        return (
            '<p class="key">No cell-by-cell change: the pass before was counted on another '
            "grid (unit, cell size or window).</p>"
        )
    before = {(c.row, c.col): c for c in previous.cells}

    def text(c: CellSummary) -> tuple[str, str]:
        b = before[(c.row, c.col)]
        dd = c.density - b.density
        db = c.bearing_percent - b.bearing_percent
        return f"{dd:+.1f} points", f"{db:+.0f} % bearing"

    def colour(c: CellSummary) -> str:
        return "background:#f4f6f8;color:#1d232a"

    caption = (
        f"Change since the pass before: density in {_per(summary)}, and bearing in "
        "percentage points"
    )
    return _heat_table(summary.cells, caption, text, colour, css_class="heat change")


def _pass_section(
    number: int,
    summary: PassSummary,
    overlay: bytes | None,
    spec: Spec | None,
    folder: Path | None,
    previous: PassSummary | None = None,
) -> str:
    """One pass: its head, figures, checks, warnings, overlay and cell maps."""
    parts = [
        f'<section class="pass" id="pass-{number}">',
        _pass_head(number, summary, folder),
        _pass_figures(summary),
        _checks(summary),
    ]
    if summary.warnings:
        parts.append('<h3>Warnings</h3><ul class="warn">')
        parts.extend(f"<li>{_e(w)}</li>" for w in summary.warnings)
        parts.append("</ul>")
    parts.append(_advice(summary))
    if overlay:
        parts.append("<h3>Print</h3>")
        parts.append(
            f'<img class="overlay" src="{_data_uri(overlay)}" alt="overlay of {_e(summary.photo)}">'
        )
        parts.append(_legend(summary))
    parts.append("<h3>Cells</h3>")
    parts.append(_heat_tables(summary, spec))
    change = _change_table(summary, previous)
    from printcheck.compare import change_view  # where contacts appeared and disappeared

    view = change_view(folder, summary, previous)
    if change or view is not None:
        parts.append("<h3>Change since the pass before</h3>")
        parts.append(change + (view.html if view is not None else ""))
    parts.append("</section>")
    return "".join(parts)


def _spec_text(spec: Spec | None) -> str:
    """The spec's title and its targets, in the words of ``printcheck specs``."""
    if spec is None:
        return "No spec: figures only."
    targets = "; ".join(f"{t.label} {t.words}" for t in target_lines(spec))
    title = spec.title or spec.name
    return f"<b>{_e(title)}</b> ({_e(spec.name)}): " + _e(targets or "no targets")


def _header(
    surface: str,
    spec: Spec | None,
    summaries: Sequence[PassSummary],
    progress: Progress | None,
    folder: Path | None,
) -> list[str]:
    """The report's head and its header: surface, verdict, spec, figures, projection."""
    from printcheck.report.plots import trend_png

    latest = summaries[-1] if summaries else None
    # the badge is the surface's latest pass (all its stations), as the history holds it
    verdict = progress.passes[-1].meets if progress is not None and progress.passes else None
    if verdict is None and latest is not None:
        verdict = latest.meets
    head = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>{_e(surface)} · print report</title>",
        f"<style>{_CSS}</style></head><body><main>",
        '<header class="surface">',
        f"<h1>{_e(surface)} {_badge(verdict) if latest is not None else ''}</h1>",
        f'<p class="sub">{len(summaries)} pass{"es" if len(summaries) != 1 else ""} in this report'
        + (f" · latest: {_e(latest.photo)}" if latest is not None else "")
        + "</p>",
        f"<p>Spec: {_spec_text(spec)}</p>",
    ]
    if latest is not None:
        head.append('<div class="figures">')
        head.append(_figure(fixed(latest.density), _per(latest) + ", latest"))
        head.append(_figure(fixed(latest.bearing_percent) + " %", "bearing, latest"))
        head.append("</div>")
    if progress is not None:
        words = projection_words(progress)
        head.append(f"<p>{_e(words[:1].upper() + words[1:])}.</p>")
        if progress.passes:
            head.append(
                f'<img class="trend" src="{_data_uri(trend_png(progress))}" '
                f'alt="density and bearing across the passes of {_e(surface)}">'
            )
    if folder is not None and (folder / CSV_NAME).is_file():
        head.append(f'<p class="key">All figures: <a href="{quote(CSV_NAME)}">{CSV_NAME}</a></p>')
    head.append("</header>")
    return head


def _skipped_section(skipped: Sequence[tuple[str, str]]) -> str:
    """The photos of the batch that were not measured, each with its reason; or nothing."""
    if not skipped:
        return ""
    n = len(skipped)
    rows = "".join(f"<li><b>{_e(name)}</b>: {_e(reason)}</li>" for name, reason in skipped)
    return (
        '<section class="pass" id="skipped">'
        f"<h2>Not measured: {n} photo{'s' if n != 1 else ''}</h2>"
        f'<ul class="warn">{rows}</ul></section>'
    )


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
    folder_path = None if folder is None else Path(folder)
    head = _header(surface, spec, [s for s, _ in passes], progress, folder_path)
    head.append(_skipped_section(skipped))
    head.append(extra_html)  # e.g. printcheck.report.stations.stations_section
    numbers = list(range(1, len(passes) + 1))
    if progress is not None and len(progress.passes) == len(passes):
        numbers = [p.number for p in progress.passes]
    body = [
        _pass_section(n, summary, overlay, spec, folder_path, previous)
        for n, (summary, overlay), previous in reversed(
            list(zip(numbers, passes, [None, *[s for s, _ in passes[:-1]]], strict=True))
        )
    ]
    foot = f"<footer>printcheck {_e(__version__)}</footer></main></body></html>\n"
    return "\n".join(head) + "\n" + "\n".join(body) + "\n" + foot


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
