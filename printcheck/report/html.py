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
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any
from urllib.parse import quote

from printcheck import __version__
from printcheck.progress import projection_words
from printcheck.report.files import CSV_NAME, output_name, write_text
from printcheck.spec import Spec
from printcheck.units import to_mm
from printcheck.wording import bearing_words, density_words, fixed, num, target_lines

__all__ = ["render_report", "write_report"]

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


def _per(result: Mapping[str, Any]) -> str:
    """The density unit of a result in words, escaped."""
    unit = str(result.get("unit") or "in")
    return _e(density_words(to_mm(float(result.get("cell") or 1.0), unit), unit))


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


_PALE_RED = (246, 196, 190)
_PALE_AMBER = (252, 226, 164)
_PALE_GREEN = (181, 228, 195)
_PALE_BLUE = (196, 218, 244)
_PALE_ORANGE = (250, 205, 160)
_WHITE = (248, 249, 250)


def _density_colour(value: float, target: float | None, top: float) -> str:
    if target is None or target <= 0:
        return _mix(_WHITE, _PALE_BLUE, value / top if top > 0 else 0.0)
    ratio = value / target
    if ratio >= 1.0:
        return _mix(_PALE_GREEN, _PALE_GREEN, 0.0)
    if ratio >= 0.75:
        return _mix(_PALE_AMBER, _PALE_GREEN, (ratio - 0.75) / 0.25 * 0.4)
    return _mix(_PALE_RED, _PALE_AMBER, ratio / 0.75)


def _bearing_colour(value: float, lo: float | None, hi: float | None) -> str:
    if lo is None and hi is None:
        return _mix(_WHITE, _PALE_BLUE, value / 100.0)
    if lo is not None and value < lo:
        return _mix(_PALE_BLUE, _PALE_AMBER, value / lo if lo > 0 else 1.0)
    if hi is not None and value > hi:
        return _mix(_PALE_ORANGE, _PALE_RED, (value - hi) / max(100.0 - hi, 1.0))
    return _mix(_PALE_GREEN, _PALE_GREEN, 0.0)


def _cell_target(result: Mapping[str, Any], spec: Spec | None) -> float | None:
    unit, cell = result.get("unit"), result.get("cell")
    if spec is None or unit not in ("in", "mm") or not cell:
        return None
    return spec.density_target(to_mm(float(cell), str(unit)), per_cell=True)


def _heat_tables(result: Mapping[str, Any], spec: Spec | None) -> str:
    cells = list(result.get("cells") or ())
    if not cells:
        return '<p class="key">No cells.</p>'
    rows = max(int(c["row"]) for c in cells) + 1
    cols = max(int(c["col"]) for c in cells) + 1
    grid: dict[tuple[int, int], Mapping[str, Any]] = {
        (int(c["row"]), int(c["col"])): c for c in cells
    }
    target = _cell_target(result, spec)
    top = max((float(c.get("density") or 0.0) for c in cells), default=0.0)
    lo = None if spec is None else spec.bearing_min
    hi = None if spec is None else spec.bearing_max
    unit_text = _per(result)

    def table(key: str, caption: str) -> str:
        out = [f'<table class="heat"><caption>{caption}</caption>']
        for r in range(rows):
            out.append("<tr>")
            for c in range(cols):
                cell = grid.get((r, c))
                if cell is None:
                    out.append("<td></td>")
                    continue
                v = float(cell.get(key) or 0.0)
                if key == "density":
                    bg = _density_colour(v, target, top)
                    text = fixed(v, 1)
                    small = f"{fixed(cell.get('spot_count'))} pts"
                else:
                    bg = _bearing_colour(v, lo, hi)
                    text = f"{v:.0f}%"
                    small = ""
                cls = "" if cell.get("complete") else ' class="part"'
                title = "" if cell.get("complete") else ' title="incomplete cell"'
                sm = f"<small>{small}</small>" if small else ""
                out.append(f'<td{cls}{title} style="background:{bg}">{text}{sm}</td>')
            out.append("</tr>")
        out.append("</table>")
        return "".join(out)

    dcap = f"Density, {unit_text}" + ("" if target is None else f" (target {num(target, 1)})")
    bcap = "Bearing"
    if lo is not None or hi is not None:
        bcap = f"Bearing (target {_e(bearing_words(lo, hi).span)})"
    return (
        '<div class="cols"><div>'
        + table("density", dcap)
        + "</div><div>"
        + table("bearing_percent", bcap)
        + '</div></div><p class="key">Italic: incomplete cell (cut by the window edge or an '
        "exclusion). Green: meets the target; amber: close; red: well short.</p>"
    )


def _figure(value: str, key: str, rng: str = "") -> str:
    r = f'<div class="r">{rng}</div>' if rng else ""
    return f'<div class="fig"><div class="v">{value}</div><div class="k">{key}</div>{r}</div>'


def _pass_section(
    number: int,
    result: Mapping[str, Any],
    overlay: bytes | None,
    spec: Spec | None,
    folder: Path | None,
) -> str:
    spec_block = result.get("spec") if isinstance(result.get("spec"), Mapping) else None
    meets = None if spec_block is None else spec_block.get("meets")
    unit = _e(result.get("unit") or "")
    result.get("cell")
    conf = result.get("confidence") if isinstance(result.get("confidence"), Mapping) else None
    taken = result.get("taken")
    parts = [f'<section class="pass" id="pass-{number}">']
    parts.append(
        f"<h2>Pass {number} · {_e(result.get('photo'))} {_badge(meets)}</h2>"
        f'<p class="sub">{"taken " + _e(str(taken).replace("T", " ")) if taken else "time unknown"}'
    )
    cal = result.get("calibration") if isinstance(result.get("calibration"), Mapping) else {}
    if cal:
        how = "layout " + _e(cal.get("layout")) if cal.get("method") == "layout" else "given scale"
        res = cal.get("residual_mm")
        parts.append(
            f" · scale from {how}, {fixed(cal.get('px_per_mm'), 1)} px/mm"
            + ("" if res is None else f", fit residual {fixed(res, 3)} mm")
        )
    if folder is not None and result.get("photo"):
        for suffix, label in ((".json", "result JSON"), (".overlay.png", "full-size overlay")):
            name = output_name(str(result["photo"]), suffix)
            if (folder / name).is_file():
                parts.append(f' · <a href="{_e(quote(name))}">{label}</a>')
    parts.append("</p>")

    cnt_rng = den_rng = bear_rng = ""
    if conf:
        cnt_rng = f"range {fixed(conf.get('spot_count_low'))}–{fixed(conf.get('spot_count_high'))}"
        b_lo, b_hi = conf.get("bearing_percent_low"), conf.get("bearing_percent_high")
        bear_rng = f"range {fixed(b_lo)}–{fixed(b_hi)} %"
    parts.append('<div class="figures">')
    parts.append(
        _figure(
            fixed(result.get("density")),
            _per(result),
            den_rng,
        )
    )
    parts.append(_figure(fixed(result.get("bearing_percent")) + " %", "bearing", bear_rng))
    parts.append(_figure(fixed(result.get("spot_count")), "spots in the window", cnt_rng))
    parts.append(_figure(fixed(result.get("largest_bare"), 2) + f" {unit}", "largest bare patch"))
    parts.append("</div>")
    if conf and conf.get("doubtful"):
        parts.append(
            '<ul class="warn"><li>The count is uncertain: '
            f"{_e(conf.get('reason') or 'the segmentation threshold matters')}</li></ul>"
        )

    if spec_block and spec_block.get("checks"):
        parts.append(f"<h3>Checks against {_e(spec_block.get('name'))}</h3>")
        parts.append(
            '<table class="checks"><tr><th>check</th><th>target</th><th>value</th>'
            "<th></th><th>reason</th></tr>"
        )
        for ch in spec_block["checks"]:
            ok = bool(ch.get("ok"))
            parts.append(
                f"<tr><td>{_e(ch.get('name'))}</td><td>{_e(ch.get('target'))}</td>"
                f"<td>{fixed(ch.get('value'), 2)}</td>"
                f'<td class="{"ok" if ok else "bad"}">{"✓ ok" if ok else "✗ short"}</td>'
                f"<td>{_e(ch.get('reason'))}</td></tr>"
            )
        parts.append("</table>")

    warnings = list(result.get("warnings") or ())
    if warnings:
        parts.append('<h3>Warnings</h3><ul class="warn">')
        parts.extend(f"<li>{_e(w)}</li>" for w in warnings)
        parts.append("</ul>")

    if overlay:
        parts.append("<h3>Print</h3>")
        parts.append(
            f'<img class="overlay" src="{_data_uri(overlay)}" '
            f'alt="overlay of {_e(result.get("photo"))}">'
        )
    parts.append("<h3>Cells</h3>")
    parts.append(_heat_tables(result, spec))
    parts.append("</section>")
    return "".join(parts)


def _spec_text(spec: Spec | None) -> str:
    """The spec's title and its targets, in the words of ``printcheck specs``."""
    if spec is None:
        return "No spec: figures only."
    targets = "; ".join(f"{t.label} {t.words}" for t in target_lines(spec))
    title = spec.title or spec.name
    return f"<b>{_e(title)}</b> ({_e(spec.name)}): " + _e(targets or "no targets")


def render_report(
    *,
    surface: str,
    spec: Spec | None,
    passes: Sequence[tuple[Mapping[str, Any], bytes | None]],
    progress: Mapping[str, Any] | None = None,
    folder: str | os.PathLike[str] | None = None,
) -> str:
    """The report's HTML text (see :func:`write_report`); ``folder`` is where it will live."""
    from printcheck.report.plots import trend_png

    folder_path = None if folder is None else Path(folder)
    results = [r for r, _ in passes]
    latest = results[-1] if results else None
    latest_spec = latest.get("spec") if latest and isinstance(latest.get("spec"), Mapping) else None
    meets = None if latest_spec is None else latest_spec.get("meets")
    head = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>{_e(surface)} · print report</title>",
        f"<style>{_CSS}</style></head><body><main>",
        '<header class="surface">',
        f"<h1>{_e(surface)} {_badge(meets) if latest is not None else ''}</h1>",
        f'<p class="sub">{len(results)} pass{"es" if len(results) != 1 else ""} in this report'
        + (f" · latest: {_e(latest.get('photo'))}" if latest is not None else "")
        + "</p>",
        f"<p>Spec: {_spec_text(spec)}</p>",
    ]
    if latest is not None:
        head.append('<div class="figures">')
        head.append(
            _figure(
                fixed(latest.get("density")),
                _per(latest) + ", latest",
            )
        )
        head.append(_figure(fixed(latest.get("bearing_percent")) + " %", "bearing, latest"))
        head.append("</div>")
    if progress is not None:
        words = projection_words(progress)
        head.append(f"<p>{_e(words[:1].upper() + words[1:])}.</p>")
        if progress.get("passes"):
            png = trend_png(progress)
            head.append(
                f'<img class="trend" src="{_data_uri(png)}" '
                f'alt="density and bearing across the passes of {_e(surface)}">'
            )
    if folder_path is not None and (folder_path / CSV_NAME).is_file():
        head.append(f'<p class="key">All figures: <a href="{quote(CSV_NAME)}">{CSV_NAME}</a></p>')
    head.append("</header>")

    body = []
    numbers = list(range(1, len(passes) + 1))
    if progress is not None and len(progress.get("passes") or ()) == len(passes):
        numbers = [int(p["pass"]) for p in progress["passes"]]
    for n, (res, overlay) in reversed(list(zip(numbers, passes, strict=True))):
        body.append(_pass_section(n, res, overlay, spec, folder_path))
    foot = f"<footer>printcheck {_e(__version__)}</footer></main></body></html>\n"
    return "\n".join(head) + "\n" + "\n".join(body) + "\n" + foot


def write_report(
    path: str | os.PathLike[str],
    *,
    surface: str,
    spec: Spec | None,
    passes: Sequence[tuple[Mapping[str, Any], bytes | None]],
    progress: Mapping[str, Any] | None = None,
) -> Path:
    """Write the surface's self-contained HTML report atomically.

    Parameters
    ----------
    path : path
        The report file, e.g. ``out/report.html``; its folder is the output folder.
    surface : str
    spec : Spec or None
    passes : sequence of (result dict, overlay image bytes or None)
        In pass order (oldest first); shown newest first.  The overlay is PNG or JPEG
        bytes (``printcheck.report.files.encode_image(draw_overlay(result))``).
    progress : dict or None
        :func:`printcheck.progress.build_progress` output, for the header and trend plot.

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
        surface=surface, spec=spec, passes=passes, progress=progress, folder=p.parent
    )
    return write_text(p.parent, p.name, text)
