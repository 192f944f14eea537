"""Units and lengths.

The international inch is exactly 25.4 mm (International Yard and Pound Agreement,
1959), so one square inch is exactly 645.16 mm².  Inside printcheck every length is
in millimetres; the chosen unit only matters at the edges (options in, results out).
"""

from __future__ import annotations

import math
import re
from typing import Literal

from printcheck.errors import OptionError

__all__ = [
    "MM_PER_IN",
    "Unit",
    "to_mm",
    "from_mm",
    "parse_length",
    "default_cell",
    "convert_density",
]

MM_PER_IN = 25.4
Unit = Literal["in", "mm"]

_LENGTH = re.compile(r"^\s*([0-9]+\.?[0-9]*|\.[0-9]+)\s*(mm|in|inch|inches|\")?\s*$", re.IGNORECASE)


def to_mm(value: float, unit: str) -> float:
    """Convert ``value`` in ``unit`` ("in" or "mm") to millimetres."""
    if unit == "mm":
        return float(value)
    if unit == "in":
        return float(value) * MM_PER_IN
    raise OptionError(f"unit must be 'in' or 'mm', got {unit!r}")


def from_mm(value_mm: float, unit: str) -> float:
    """Convert ``value_mm`` millimetres to ``unit`` ("in" or "mm")."""
    if unit == "mm":
        return float(value_mm)
    if unit == "in":
        return float(value_mm) / MM_PER_IN
    raise OptionError(f"unit must be 'in' or 'mm', got {unit!r}")


def parse_length(text: str, *, default_unit: str = "mm", what: str = "length") -> float:
    """Parse a length such as ``"2in"``, ``"50mm"`` or ``"50"`` and return millimetres.

    Raises :class:`OptionError` naming ``what`` when the text is not a positive length.
    """
    match = _LENGTH.match(str(text))
    if not match:
        raise OptionError(f"{what} must be a positive length such as 2in or 50mm, got {text!r}")
    value = float(match.group(1))
    unit = (match.group(2) or default_unit).lower()
    unit = "in" if unit in ("in", "inch", "inches", '"') else unit
    if not math.isfinite(value):
        raise OptionError(f"{what} is too large, got {text!r}")
    if value <= 0:
        raise OptionError(f"{what} must be greater than zero, got {text!r}")
    return to_mm(value, unit)


def default_cell(unit: str) -> float:
    """The customary counting square in ``unit``: 1 in, or 25 mm (common practice)."""
    return 1.0 if unit == "in" else 25.0


def convert_density(density: float, *, from_cell_mm: float, to_cell_mm: float) -> float:
    """Convert points per ``from_cell_mm`` square to points per ``to_cell_mm`` square.

    A density is a count per area, so it scales with the square of the cell side:
    20 points per square inch (645.16 mm²) is 20 × 625 / 645.16 = 19.375 points per
    25 mm square.
    """
    return float(density) * (float(to_cell_mm) / float(from_cell_mm)) ** 2
