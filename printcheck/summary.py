"""A short human summary of one measured photo, for the terminal."""

from __future__ import annotations

from printcheck.cells import edge_strip
from printcheck.records import CellSummary, PassSummary
from printcheck.units import to_mm
from printcheck.wording import advice_line, check_label, density_words

__all__ = ["advice_lines", "summary_text"]

_MAX_GRID_CELLS = 64  # larger grids are left to the report


def _figure(value: float | None, spec: str) -> str:
    return "-" if value is None else format(value, spec)


def summary_text(s: PassSummary) -> str:
    """The photo, its figures, the spec's checks, the cells and the warnings, as lines."""
    unit = s.unit
    head = s.photo
    if s.surface:
        head += f"  surface {s.surface}"
    if s.taken is not None:
        head += f"  taken {s.taken.isoformat(sep=' ', timespec='seconds')}"
    lines = [head]
    conf = s.confidence
    count = f"{s.spot_count} points"
    if conf and (conf.spot_count_low, conf.spot_count_high) != (s.spot_count,) * 2:
        count += f" ({conf.spot_count_low}-{conf.spot_count_high})"
    per = density_words(to_mm(s.cell, unit), unit)
    lines.append(
        f"  {_figure(s.density, '.1f')} {per}   {count} in "
        f"{s.window.width:g} x {s.window.height:g} {unit}"
    )
    bearing = f"{_figure(s.bearing_percent, '.1f')}%"
    if conf and f"{conf.bearing_percent_low:.0f}" != f"{conf.bearing_percent_high:.0f}":
        bearing += f" ({conf.bearing_percent_low:.0f}-{conf.bearing_percent_high:.0f}%)"
    bare = _figure(s.largest_bare, ".2f" if unit == "in" else ".1f")
    lines.append(f"  bearing {bearing}   largest bare patch {bare} {unit}")
    if s.verdict is not None:
        v = s.verdict
        lines.append(f"  spec {v.name}: {'MEETS' if v.meets else 'DOES NOT MEET'}")
        for check in v.checks:
            mark = "ok  " if check.ok else "FAIL"
            lines.append(f"    {mark} {check_label(check.name)}: {check.reason}")
    if s.cells and len(s.cells) <= _MAX_GRID_CELLS:
        lines.append("  cells (points / bearing %; * incomplete):")
        strips = [edge_strip(s.window.width, s.cell), edge_strip(s.window.height, s.cell)]
        lines += _cell_grid(s.cells, drop_last=(strips[1] is not None, strips[0] is not None))
        if any(w is not None for w in strips):
            width = max(w for w in strips if w is not None)
            lines.append(
                f"    (edge strips {width:.2g} {unit} wide, under a quarter cell, not shown; "
                "their points count in the window's figures)"
            )
    lines += advice_lines(s)
    lines += [f"  warning: {warning}" for warning in s.warnings]
    return "\n".join(lines)


def advice_lines(s: PassSummary, indent: str = "  ") -> list[str]:
    """The guidance list of ``s`` under its heading (no lines when there is none)."""
    if not s.advice:
        return []
    return [f"{indent}where to scrape next:"] + [
        f"{indent}  {advice_line(a, s.unit)}" for a in s.advice
    ]


def _cell_grid(
    cells: tuple[CellSummary, ...], drop_last: tuple[bool, bool] = (False, False)
) -> list[str]:
    """One line per row of cells: ``density/bearing%``, ``*`` marking incomplete cells;
    ``drop_last`` leaves out the last row and/or column (edge strips)."""
    rows = 1 + max(c.row for c in cells) - int(drop_last[0])
    cols = 1 + max(c.col for c in cells) - int(drop_last[1])
    grid = {(c.row, c.col): c for c in cells}
    lines = []
    for r in range(rows):
        parts = []
        for c in range(cols):
            cell = grid.get((r, c))
            if cell is None:
                parts.append(" " * 11)
                continue
            star = " " if cell.complete else "*"
            parts.append(f"{cell.density:5.1f}/{cell.bearing_percent:3.0f}%{star}")
        lines.append("    " + "  ".join(parts))
    return lines
