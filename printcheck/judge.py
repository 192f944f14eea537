"""Judge: a spec's targets against a measurement, one check per target.

Checks, in order, for each target the spec sets:

``density``
    The window's average density against ``min_density``.
``cell_density``
    The share of complete cells reaching ``min_cell_density`` against ``cell_share``.
    Cells cut by the window edge or an exclusion (incomplete) are not judged: their
    density rests on too small an area.  When the window holds no complete cell at all
    (a window smaller than one cell, or every cell cut), the window itself stands in for
    the one cell: its average density is held to the per-cell minimum, and the reason
    says so.
``bearing``
    The bearing percent against ``bearing_min`` and/or ``bearing_max`` (too little
    contact and too much are both faults).
``bare_patch``
    The largest bare patch's diameter against ``max_bare_mm``.

Densities (``value`` and ``target``) are in points per the measurement's own cell
(``measurement.cell_mm`` square); the spec's figures are converted from its basis
square by area (1 in² = 645.16 mm² exactly).  Lengths are in ``unit``.  Cells are named
in reasons by row and column counted from 1 at the window's top-left, the way a fitter
counts them ("row 1 cols 3-4"); the result JSON keeps its 0-based ``row``/``col``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING

from printcheck.units import from_mm
from printcheck.wording import bearing_words, density_words, num

if TYPE_CHECKING:
    from printcheck.measure import Measurement
    from printcheck.spec import Spec

__all__ = ["Check", "Verdict", "certainty", "judge", "describe_cells"]

# Float noise allowance when comparing a measured figure to a converted target.
_REL_TOL = 1e-9


@dataclass(frozen=True)
class Check:
    """One target of a spec, checked.

    ``target`` is a short text such as ``">= 20"``; ``value`` the measured figure in the
    same terms (densities in points per the result's cell, percentages, lengths in the
    result's unit); ``reason`` a plain sentence a fitter can act on.
    """

    name: str
    target: str
    value: float | None
    ok: bool
    reason: str


@dataclass(frozen=True)
class Verdict:
    """The spec's verdict: ``meets`` is the conjunction of every check."""

    name: str
    meets: bool
    checks: tuple[Check, ...]


def _at_least(value: float, target: float) -> bool:
    return value >= target - _REL_TOL * max(abs(target), 1.0)


def _at_most(value: float, target: float) -> bool:
    return value <= target + _REL_TOL * max(abs(target), 1.0)


def _pair(value: float, target: float, ok: bool, digits: int = 1) -> tuple[str, str]:
    """Format value and target so that a failing value never reads equal to its target."""
    for d in range(digits, digits + 4):
        v, t = num(value, d), num(target, d)
        if v != t or ok:
            return v, t
    return v, t


def describe_cells(cells: list[tuple[int, int]], *, limit: int = 6) -> str:
    """Name cells by their labels: ``[(0, 2), (0, 3), (1, 0)]`` -> ``"C1-D1; A2"``.

    ``cells`` are 0-based (row, col) pairs; a label is the column letter from the left
    and the row number from the top (:func:`printcheck.guidance.cell_label`, as the
    guidance list names cells).  Runs along a row are joined (``C1-E1``).  At most
    ``limit`` rows are named, then ``"and N more cells"``.
    """
    from printcheck.guidance import cell_label

    by_row: dict[int, list[int]] = {}
    for row, col in sorted(set(cells)):
        by_row.setdefault(row, []).append(col)
    parts: list[str] = []
    shown = 0
    for row, cols in by_row.items():
        if len(parts) == limit:
            break
        runs: list[str] = []
        start = prev = cols[0]
        for col in [*cols[1:], -1]:  # -1 closes the last run
            if col == prev + 1:
                prev = col
                continue
            first, last = cell_label(row, start), cell_label(row, prev)
            runs.append(first if start == prev else f"{first}-{last}")
            start = prev = col
        parts.append(", ".join(runs))
        shown += len(cols)
    text = "; ".join(parts)
    rest = len(set(cells)) - shown
    if rest:
        text += f"; and {rest} more {'cell' if rest == 1 else 'cells'}"
    return text


def _as_stated(figure: float, spec: Spec, m: Measurement) -> str:
    """``" (20 per 25 mm square)"`` when the spec's square differs from the cell, else ``""``."""
    if math.isclose(spec.basis_mm, m.cell_mm, rel_tol=1e-9):
        return ""
    return f" ({num(figure, 3)} {density_words(spec.basis_mm, spec.units)})"


def _density_check(m: Measurement, spec: Spec, unit: str) -> Check:
    assert spec.min_density is not None
    target = spec.density_target(m.cell_mm)
    assert target is not None
    per = density_words(m.cell_mm, unit)
    value = float(m.density)
    if not math.isfinite(value) or not m.area_mm2 > 0:
        return Check(
            "density",
            f">= {num(target, 1)}",
            None,
            False,
            "no analysed area in the window, so no density; check the window and exclusions",
        )
    ok = _at_least(value, target)
    v, t = _pair(value, target, ok)
    stated = _as_stated(spec.min_density, spec, m)
    if ok:
        reason = f"{v} {per} over the window; at least {t} {per} needed{stated}"
    else:
        reason = f"{v} {per} over the window, below the {t} {per} needed{stated}"
    return Check("density", f">= {num(target, 1)}", value, ok, reason)


def _cell_check(m: Measurement, spec: Spec, unit: str) -> Check:
    assert spec.min_cell_density is not None
    target = spec.density_target(m.cell_mm, per_cell=True)
    assert target is not None
    stated = _as_stated(spec.min_cell_density, spec, m)
    per = density_words(m.cell_mm, unit)
    share = spec.cell_share
    t = num(target, 1)
    target_text = f">= {t}" if share >= 1.0 else f">= {t} in {num(100 * share, 1)}% of cells"
    complete = [c for c in m.cells if c.complete and c.area_mm2 > 0]
    partial = len(m.cells) - len(complete)

    if not complete:
        value = float(m.density)
        if not math.isfinite(value) or not m.area_mm2 > 0:
            return Check(
                "cell_density",
                target_text,
                None,
                False,
                "no analysed area in the window, so no cell can be judged",
            )
        ok = _at_least(value, target)
        v, t2 = _pair(value, target, ok)
        verdict = "reaches" if ok else "is below"
        reason = (
            f"no complete cell in the window, so the window stands in for one: "
            f"{v} {per} {verdict} {t2}{stated}"
        )
        return Check("cell_density", target_text, value, ok, reason)

    densities = sorted((float(c.density) for c in complete), reverse=True)
    failing = [(c.row, c.col) for c in complete if not _at_least(float(c.density), target)]
    n = len(complete)
    n_ok = n - len(failing)
    # The density the required share of cells reaches: the k-th highest, k = ceil(share * n).
    need = max(1, math.ceil(share * n - 1e-9))
    value = densities[need - 1]
    ok = n_ok >= need
    cells_word = "cell" if n == 1 else "cells"
    if failing:
        where = describe_cells(failing)
        reason = f"{len(failing)} of {n} {cells_word} below {t} {per}{stated}: {where}"
        if share < 1.0:
            reason += f"; {n_ok} reach it, {need} must ({num(100 * share, 1)}%)"
    else:
        lowest = densities[-1]
        reason = f"all {n} {cells_word} reach {t} {per}{stated} (lowest {num(lowest, 1)} {per})"
    if partial:
        reason += f"; {partial} part {'cell' if partial == 1 else 'cells'} at the edge not judged"
    return Check("cell_density", target_text, value, ok, reason)


def _bearing_check(m: Measurement, spec: Spec) -> Check:
    lo, hi = spec.bearing_min, spec.bearing_max
    words = bearing_words(lo, hi)
    target_text = words.target
    value = float(m.bearing_percent)
    if not math.isfinite(value):
        return Check("bearing", target_text, None, False, "no analysed area, so no bearing")
    if lo is not None and not _at_least(value, lo):
        v, t = _pair(value, lo, False)
        fault = f"bearing {v}% is below {t}%: too little contact"
    elif hi is not None and not _at_most(value, hi):
        v, t = _pair(value, hi, False)
        fault = (
            f"bearing {v}% is above {t}%: too much contact leaves no oil pockets "
            "and the parts wring; break up the large spots"
        )
    else:
        fault = ""
    if fault:
        return Check("bearing", target_text, value, False, fault)
    return Check("bearing", target_text, value, True, f"bearing {num(value, 1)}% {words.within}")


def _bare_check(m: Measurement, spec: Spec, unit: str) -> Check:
    assert spec.max_bare_mm is not None
    limit = from_mm(spec.max_bare_mm, unit)
    target_text = f"<= {num(limit, 3 if unit == 'in' else 1)}"  # the result JSON's target
    digits = 2 if unit == "in" else 1  # as the figures beside it: 0.33 in, 8.4 mm
    bare = m.largest_bare
    d_mm = float(bare.diameter_mm)
    if not math.isfinite(d_mm):
        return Check("bare_patch", target_text, None, False, "the bare patch could not be measured")
    value = from_mm(d_mm, unit)
    ok = _at_most(value, limit)
    v, t = _pair(value, limit, ok, digits)
    where = (
        f"centre x {num(from_mm(bare.x_mm, unit), digits)} {unit}, "
        f"y {num(from_mm(bare.y_mm, unit), digits)} {unit}"
    )
    if ok:
        reason = f"largest bare patch {v} {unit} across ({where}); at most {t} {unit} allowed"
    else:
        reason = (
            f"largest bare patch {v} {unit} across ({where}), over the {t} {unit} "
            "allowed: a low area, bring the rest down to it"
        )
    return Check("bare_patch", target_text, value, ok, reason)


def judge(measurement: Measurement, spec: Spec, *, unit: str = "in") -> Verdict:
    """Check ``measurement`` against ``spec``, reporting values in ``unit``.

    Parameters
    ----------
    measurement : Measurement
        Densities in it are points per ``measurement.cell_mm`` square.
    spec : Spec
    unit : {"in", "mm"}
        Unit of lengths (the bare patch) in checks and reasons.

    Returns
    -------
    Verdict
        One :class:`Check` per target the spec sets (see the module docstring);
        ``meets`` is true when every check is ok (and for a spec with no targets).

    Raises
    ------
    OptionError
        When ``unit`` is not "in" or "mm".
    """
    from_mm(1.0, unit)  # validates the unit (OptionError)
    checks: list[Check] = []
    if spec.min_density is not None:
        checks.append(_density_check(measurement, spec, unit))
    if spec.min_cell_density is not None:
        checks.append(_cell_check(measurement, spec, unit))
    if spec.bearing_min is not None or spec.bearing_max is not None:
        checks.append(_bearing_check(measurement, spec))
    if spec.max_bare_mm is not None:
        checks.append(_bare_check(measurement, spec, unit))
    checks = [_with_certainty(c, spec) for c in checks]
    return Verdict(
        name=spec.name,
        meets=all(c.ok for c in checks),
        checks=tuple(checks),
    )


#: The target keys behind each check, and how each is named beside the verdict.
_CHECK_KEYS: dict[str, tuple[tuple[str, str], ...]] = {
    "density": (("min_density", "target"),),
    "cell_density": (("min_cell_density", "target"),),
    "bearing": (("bearing_min", "minimum"), ("bearing_max", "maximum")),
    "bare_patch": (("max_bare", "limit"),),
}


def certainty(source: str) -> str | None:
    """How sure a target's source is, in words; None for a published figure.

    ``"from memory"``, ``"common practice"``, ``"printcheck's rule"`` (our own rule) or
    ``"printcheck's reading"`` (our reading of a standard's words).
    """
    low = source.lower()
    if "from memory" in low:
        return "from memory"
    if low.startswith("common practice"):
        return "common practice"
    if "printcheck's own rule" in low:
        return "printcheck's rule"
    if "our reading" in low:
        return "printcheck's reading"
    return None


def _with_certainty(check: Check, spec: Spec) -> Check:
    """``check`` with how sure its targets are said beside its reason (nothing when the
    figures are published or the spec gives no sources)."""
    notes = []
    n_set = 0
    for key, word in _CHECK_KEYS.get(check.name, ()):
        if _target_set(spec, key):
            n_set += 1
            how = certainty(spec.source_of(key))
            if how is not None:
                notes.append((word, how))
    if not notes:
        return check
    if len(notes) == n_set and len({how for _w, how in notes}) == 1:
        plural = "s" if len(notes) > 1 else ""
        text = f"target{plural}: {notes[0][1]}"
    else:
        text = "; ".join(f"{word}: {how}" for word, how in notes)
    return Check(check.name, check.target, check.value, check.ok, f"{check.reason} ({text})")


def _target_set(spec: Spec, key: str) -> bool:
    value = {
        "min_density": spec.min_density,
        "min_cell_density": spec.min_cell_density,
        "bearing_min": spec.bearing_min,
        "bearing_max": spec.bearing_max,
        "max_bare": spec.max_bare_mm,
    }[key]
    return value is not None
