"""A short human summary of one result, for the terminal."""

from __future__ import annotations

from typing import Any

from printcheck.units import to_mm
from printcheck.wording import density_words

__all__ = ["summary_text"]


def summary_text(data: dict[str, Any]) -> str:
    """Format a result dict (:func:`printcheck.result.result_to_dict`) as a few lines."""
    unit = data["unit"]
    lines = []
    head = data["photo"]
    if data.get("surface"):
        head += f"  surface {data['surface']}"
    if data.get("taken"):
        head += f"  taken {str(data['taken']).replace('T', ' ')}"
    lines.append(head)
    conf = data.get("confidence") or {}
    count = f"{data['spot_count']} points"
    if conf and (conf["spot_count_low"], conf["spot_count_high"]) != (data["spot_count"],) * 2:
        count += f" ({conf['spot_count_low']}-{conf['spot_count_high']})"
    win = data["window"]
    lines.append(
        f"  {data['density']:.1f} {density_words(to_mm(data['cell'], unit), unit)}   {count} in "
        f"{win['width']:g} x {win['height']:g} {unit}"
    )
    bearing = f"{data['bearing_percent']:.1f}%"
    if conf:
        bearing += f" ({conf['bearing_percent_low']:.0f}-{conf['bearing_percent_high']:.0f}%)"
    lines.append(f"  bearing {bearing}   largest bare patch {data['largest_bare']:.2f} {unit}")
    spec = data.get("spec")
    if spec:
        lines.append(f"  spec {spec['name']}: {'MEETS' if spec['meets'] else 'DOES NOT MEET'}")
        for check in spec["checks"]:
            mark = "ok  " if check["ok"] else "FAIL"
            lines.append(f"    {mark} {check['name']}: {check['reason']}")
    cells = data.get("cells") or []
    if cells and len(cells) <= 64:
        rows = 1 + max(c["row"] for c in cells)
        cols = 1 + max(c["col"] for c in cells)
        grid = {(c["row"], c["col"]): c for c in cells}
        lines.append("  cells (points / bearing %; * incomplete):")
        for r in range(rows):
            parts = []
            for c in range(cols):
                cell = grid.get((r, c))
                if cell is None:
                    parts.append(" " * 11)
                    continue
                star = " " if cell["complete"] else "*"
                parts.append(f"{cell['density']:5.1f}/{cell['bearing_percent']:3.0f}%{star}")
            lines.append("    " + "  ".join(parts))
    for warning in data.get("warnings") or []:
        lines.append(f"  warning: {warning}")
    return "\n".join(lines)
