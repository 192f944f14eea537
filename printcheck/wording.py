"""Wording: how printcheck writes numbers, densities and a spec's targets in text.

Every text that people read (terminal lines, check reasons, the spec list, the HTML
report, the overlay's figures) formats its numbers and names its densities and targets
here, so that one thing is said one way everywhere.

Number formats
--------------
:func:`num`
    At most ``digits`` decimals, no trailing zeros: ``10.3226 -> "10.3"``, ``20.0 -> "20"``.
    For figures in sentences.
:func:`fixed`
    Exactly ``digits`` decimals, ``"–"`` for a missing value: for the report's tables and
    figure boxes, where columns of numbers line up.
:func:`cell_figure`
    A cell's density on the overlay: whole points from 10 up, else one decimal.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING

from printcheck.units import MM_PER_IN, convert_density, to_mm

if TYPE_CHECKING:
    from printcheck.guidance import Advice
    from printcheck.spec import Spec

__all__ = [
    "BearingWords",
    "TargetLine",
    "num",
    "fixed",
    "cell_figure",
    "density_words",
    "length_words",
    "bearing_words",
    "target_lines",
    "cell_share_words",
    "advice_line",
    "advice_words",
    "CHECK_LABELS",
    "check_label",
    "target_words",
    "range_words",
]

#: What each check of a verdict is called where people read it (never its JSON name).
CHECK_LABELS = {
    "density": "density",
    "cell_density": "every cell",
    "bearing": "bearing",
    "bare_patch": "bare patch",
}


def num(value: float, digits: int = 1) -> str:
    """``value`` with at most ``digits`` decimals and no trailing zeros.

    Examples
    --------
    >>> num(10.3226), num(20.0), num(0.7484, 3), num(-0.01)
    ('10.3', '20', '0.748', '0')
    """
    text = f"{value:.{digits}f}"
    if "." in text:
        text = text.rstrip("0").rstrip(".")
    return "0" if text == "-0" else text


def fixed(value: float | int | bool | None, digits: int = 1) -> str:
    """A figure for a table: ``digits`` decimals for a float, whole for an int.

    ``None`` is ``"–"`` (no value) and a bool ``"yes"``/``"no"``.

    Examples
    --------
    >>> fixed(3.3), fixed(3.304, 2), fixed(12), fixed(None), fixed(True)
    ('3.3', '3.30', '12', '–', 'yes')
    """
    if value is None:
        return "–"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, int):
        return str(value)
    return f"{float(value):.{digits}f}"


def cell_figure(value: float) -> str:
    """A cell's density as the overlay writes it in the cell's corner: ``"24"``, ``"3.5"``.

    Whole points from 10 up (the decimal would not fit a small cell), one decimal below.
    """
    return f"{value:.0f}" if abs(value) >= 10 else f"{value:.1f}"


def density_words(cell_mm: float, unit: str = "mm") -> str:
    """The density unit in words for a counting square of side ``cell_mm``.

    A 25.4 mm square is the trade's ``"points per square inch"`` whatever ``unit``;
    otherwise ``"points per N in square"`` (``unit`` ``"in"``, N to 3 decimals) or
    ``"points per N mm square"`` (N to 2 decimals).

    Examples
    --------
    >>> density_words(25.4, "in"), density_words(25.0), density_words(50.8, "in")
    ('points per square inch', 'points per 25 mm square', 'points per 2 in square')
    """
    if math.isclose(cell_mm, MM_PER_IN, rel_tol=1e-9):
        return "points per square inch"
    if unit == "in":
        return f"points per {num(cell_mm / MM_PER_IN, 3)} in square"
    return f"points per {num(cell_mm, 2)} mm square"


def cell_words(cell: float | None, unit: str | None) -> str:
    """The density unit in words for a counting square of side ``cell`` in ``unit``
    (a job's or a record's; None: the 1 in square and inches).

    >>> cell_words(25.0, "mm"), cell_words(None, None)
    ('points per 25 mm square', 'points per square inch')
    """
    u = unit or "in"
    return density_words(to_mm(cell or 1.0, u), u)


def sentence(words: str) -> str:
    """``words`` with a capital first letter (a line made of words for people)."""
    return words[:1].upper() + words[1:]


def length_words(value_mm: float, unit: str) -> str:
    """A length in ``unit``: ``"0.75 in"`` (2 decimals) or ``"19 mm"`` (1 decimal)."""
    if unit == "in":
        return f"{num(value_mm / MM_PER_IN, 2)} in"
    return f"{num(value_mm, 1)} mm"


@dataclass(frozen=True)
class BearingWords:
    """A bearing range in words, three ways.

    Attributes
    ----------
    target : str
        Short, for a check's target: ``"20-60%"``, ``">= 20%"``, ``"<= 60%"``.
    within : str
        What a bearing that meets it does: ``"is within 20-60%"``, ``"is at least 20%"``.
    span : str
        The range in a listing: ``"20% to 60%"``, ``"at least 20%"``, ``"at most 60%"``.
    """

    target: str
    within: str
    span: str


def bearing_words(low: float | None, high: float | None) -> BearingWords:
    """Words for the bearing range ``low`` to ``high`` percent (either may be None).

    Raises
    ------
    ValueError
        When both are None (there is no range to word).
    """
    if low is not None and high is not None:
        lo, hi = num(low, 1), num(high, 1)
        return BearingWords(f"{lo}-{hi}%", f"is within {lo}-{hi}%", f"{lo}% to {hi}%")
    if low is not None:
        lo = num(low, 1)
        return BearingWords(f">= {lo}%", f"is at least {lo}%", f"at least {lo}%")
    if high is not None:
        hi = num(high, 1)
        return BearingWords(f"<= {hi}%", f"is at most {hi}%", f"at most {hi}%")
    raise ValueError("bearing_words needs a low or a high bound, got neither")


@dataclass(frozen=True)
class TargetLine:
    """One target of a spec in words: ``label`` ("density", "cells", "bearing",
    "bare patch"), ``words`` ("at least 16 points per 25 mm square on average") and
    ``source`` (where its number comes from, or ``""``)."""

    label: str
    words: str
    source: str


def cell_share_words(spec: Spec) -> str:
    """Which cells a spec's cell target holds for: ``"every complete cell"`` or
    ``"75% of complete cells"``."""
    if spec.cell_share >= 1.0:
        return "every complete cell"
    return f"{num(100 * spec.cell_share, 1)}% of complete cells"


def target_lines(
    spec: Spec, unit: str | None = None, cell_mm: float | None = None
) -> list[TargetLine]:
    """Each target ``spec`` sets, in words, in the spec's own units and square; or, given
    a job's ``unit`` and ``cell_mm``, in those, the spec's own figure after it where it
    differs ("at least 16.5 points per square inch (16 per 25 mm square) on average")."""
    per = density_words(spec.basis_mm, spec.units)
    job = unit is not None and cell_mm is not None and unit != spec.units

    def density(value: float) -> str:
        if not job:
            return f"{num(value, 3)} {per}"
        assert unit is not None and cell_mm is not None
        there = convert_density(value, from_cell_mm=spec.basis_mm, to_cell_mm=cell_mm)
        return (
            f"{num(there, 1)} {density_words(cell_mm, unit)} "
            f"({num(value, 3)} {per.replace('points ', '', 1)})"
        )

    out: list[TargetLine] = []
    if spec.min_density is not None:
        out.append(
            TargetLine(
                "density",
                f"at least {density(spec.min_density)} on average",
                spec.source_of("min_density"),
            )
        )
    if spec.min_cell_density is not None:
        share = cell_share_words(spec)
        out.append(
            TargetLine(
                "cells",
                f"at least {density(spec.min_cell_density)} in {share}",
                spec.source_of("min_cell_density"),
            )
        )
    if spec.bearing_min is not None or spec.bearing_max is not None:
        sources = [
            f"{bound}: {text}"
            for bound, text in (
                ("min", spec.source_of("bearing_min")),
                ("max", spec.source_of("bearing_max")),
            )
            if text
        ]
        span = bearing_words(spec.bearing_min, spec.bearing_max).span
        out.append(TargetLine("bearing", span, "; ".join(sources)))
    if spec.max_bare_mm is not None:
        out.append(
            TargetLine(
                "bare patch",
                f"at most {length_words(spec.max_bare_mm, unit if job and unit else spec.units)}"
                " across",
                spec.source_of("max_bare"),
            )
        )
    return out


def advice_line(a: Advice, unit: str) -> str:
    """One place of the guidance list as a fitter reads it.

    ``"1. heavy bearing, cell B2, 12 mm from the left edge and 30 mm from the top edge of
    the window: break up"``; millimetres to the whole mm, inches to the hundredth.
    """
    return f"{a.rank}. {advice_words(a, unit)}"


def advice_words(a: Advice, unit: str) -> str:
    """:func:`advice_line` without its rank (for a numbered list that numbers itself)."""
    digits = 2 if unit == "in" else 0
    fx = f"{a.from_x:.{digits}f} {unit}"
    fy = f"{a.from_y:.{digits}f} {unit}"
    return (
        f"{a.kind}, cell {a.cell}, {fx} from the {a.edge_x} edge and {fy} "
        f"from the {a.edge_y} edge of the window: {a.action}"
    )


def check_label(name: str) -> str:
    """A check's name as people read it: ``"cell_density"`` is ``"every cell"``."""
    return CHECK_LABELS.get(name, name.replace("_", " "))


def target_words(name: str, target: str, unit: str, cell_mm: float) -> str:
    """A check's target (``">= 16.5"`` in the result JSON) in words, with its unit.

    ``target_words("density", ">= 16.5", "in", 25.4)`` is
    ``"at least 16.5 points per square inch"``; a bearing ``"20-60%"`` is
    ``"20% to 60%"``; a bare patch ``"<= 0.748"`` is ``"at most 0.748 in across"``.
    """
    text = target.strip()
    rest = ""
    if " in " in text:  # ">= 16 in 75% of cells"
        text, rest = text.split(" in ", 1)
        rest = f" in {rest}"
    if text.startswith(">="):
        words = "at least " + text[2:].strip()
    elif text.startswith("<="):
        words = "at most " + text[2:].strip()
    elif "-" in text and name == "bearing":
        lo, hi = text.rstrip("%").split("-", 1)
        return f"{lo.strip()}% to {hi.strip()}%"
    else:
        words = text
    if name in ("density", "cell_density"):
        words += " " + density_words(cell_mm, unit)
    elif name == "bare_patch":
        words += f" {unit} across"
    elif name == "bearing" and not words.endswith("%"):
        words += "%"
    return words + rest


def range_words(low: float, high: float, digits: int = 0, unit: str = "") -> str:
    """A likely range, ``"range 12-15 %"``; ``""`` when it is one value (no ``12-12``)."""
    lo, hi = fixed(low, digits), fixed(high, digits)
    if lo == hi:
        return ""
    return f"range {lo}–{hi}" + (f" {unit}" if unit else "")
