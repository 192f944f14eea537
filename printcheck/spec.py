"""Specs: the targets a surface must meet, built-in or from TOML.

A spec states its densities per ``basis_mm`` square (25.4 mm for points per square
inch, 25 mm for points per 25 mm square), bearing in percent of the analysed area and
the largest allowed bare patch as a diameter in mm.  :func:`printcheck.judge.judge`
converts the densities to the measurement's own counting cell.

The TOML format is printcheck's own; it is described in ``docs/specs.md``::

    name = "bed-front-way"
    title = "lathe bed, front way, precision"
    units = "mm"              # unit of basis and max_bare: "mm" or "in" (required)
    basis = 25                # side of the counting square (default 25 mm or 1 in)
    min_density = 16          # points per basis square, average over the window
    min_cell_density = 16     # ... and in each complete cell
    cell_share = 1.0          # share of complete cells that must reach it (0 to 1]
    bearing_min = 20          # percent
    bearing_max = 60          # percent
    max_bare = 19             # largest bare patch, diameter in units
    source = "our shop's rebuild sheet"

    [sources]                 # optional: where each number comes from
    min_density = "from memory"

Every problem is reported as one line, ``spec FILE: KEY: problem``, like layouts.
"""

from __future__ import annotations

import difflib
import math
from collections.abc import Iterable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from printcheck.errors import SpecError
from printcheck.tomlfile import shown_key
from printcheck.units import MM_PER_IN

__all__ = [
    "Spec",
    "TARGET_KEYS",
    "convert_density",
    "density_words",
    "builtin_specs",
    "find_spec",
    "parse_spec",
    "read_spec",
    "spec_to_toml",
    "target_spec",
    "describe_specs",
]

# The spec keys that set a target, in the order they are checked and shown.
TARGET_KEYS = (
    "min_density",
    "min_cell_density",
    "cell_share",
    "bearing_min",
    "bearing_max",
    "max_bare",
)
_KNOWN_KEYS = (
    "name",
    "title",
    "units",
    "basis",
    "min_density",
    "min_cell_density",
    "cell_share",
    "bearing_min",
    "bearing_max",
    "max_bare",
    "source",
    "sources",
    "notes",
)


@dataclass(frozen=True)
class Spec:
    """Targets for one kind of surface.

    Densities are stated per ``basis_mm`` square (25.4 for points per square inch,
    25.0 for points per 25 mm square); lengths are mm; bearing in percent.
    A target of ``None`` is not checked.

    Attributes
    ----------
    name : str
        Short slug used on the command line and in the history.
    title : str
        One line saying what the spec is for.
    basis_mm : float
        Side of the square the densities are counted in, mm.
    min_density : float or None
        Least average density over the window, points per basis square.
    min_cell_density : float or None
        Least density of a complete cell, points per basis square.
    cell_share : float
        Share (0 to 1] of complete cells that must reach ``min_cell_density``.
    bearing_min, bearing_max : float or None
        Bearing range, percent of the analysed area.
    max_bare_mm : float or None
        Largest allowed bare patch (diameter of the largest circle touching no spot), mm.
    source : str
        Where the numbers come from, in one paragraph.
    units : {"mm", "in"}
        Units the spec is written in (basis and bare patch in files and listings).
    sources : tuple of (key, text)
        Where each target's number comes from, keyed by a name in ``TARGET_KEYS``.
    notes : str
        Advice that is not checked (e.g. "spots heavier at the ends").
    origin : str
        ``"built-in"``, ``"--target"`` or the file the spec was read from.
    """

    name: str
    title: str
    basis_mm: float
    min_density: float | None = None  # window average
    min_cell_density: float | None = None  # every complete cell (see cell_share)
    cell_share: float = 1.0  # share of complete cells that must reach min_cell_density
    bearing_min: float | None = None
    bearing_max: float | None = None
    max_bare_mm: float | None = None
    source: str = ""
    units: str = "mm"
    sources: tuple[tuple[str, str], ...] = ()
    notes: str = ""
    origin: str = "built-in"

    def source_of(self, key: str) -> str:
        """Where the target ``key`` (one of ``TARGET_KEYS``) comes from, or ``""``."""
        for k, text in self.sources:
            if k == key:
                return text
        return ""


# --------------------------------------------------------------------------- units


def convert_density(density: float, *, from_cell_mm: float, to_cell_mm: float) -> float:
    """Convert points per ``from_cell_mm`` square to points per ``to_cell_mm`` square.

    A density is a count per area, so it scales with the square of the cell side:
    20 points per square inch (645.16 mm²) is 20 × 625 / 645.16 = 19.375 points per
    25 mm square.
    """
    return float(density) * (float(to_cell_mm) / float(from_cell_mm)) ** 2


def _num(value: float, digits: int = 1) -> str:
    """A number for people: ``digits`` decimals at most, no trailing zeros."""
    text = f"{value:.{digits}f}"
    if "." in text:
        text = text.rstrip("0").rstrip(".")
    return "0" if text == "-0" else text


def density_words(cell_mm: float, unit: str = "mm") -> str:
    """The density unit in words for a counting square of ``cell_mm``.

    ``"points per square inch"`` for 25.4 mm, ``"points per 25 mm square"`` for 25 mm,
    otherwise ``"points per N mm square"`` (``"points per N in square"`` when ``unit``
    is ``"in"``).
    """
    if math.isclose(cell_mm, MM_PER_IN, rel_tol=1e-9):
        return "points per square inch"
    if unit == "in":
        return f"points per {_num(cell_mm / MM_PER_IN, 3)} in square"
    return f"points per {_num(cell_mm, 2)} mm square"


def _length_words(value_mm: float, unit: str) -> str:
    if unit == "in":
        return f"{_num(value_mm / MM_PER_IN, 3)} in"
    return f"{_num(value_mm, 1)} mm"


# --------------------------------------------------------------------------- built-ins

# Phrases shared by several built-in specs (each says how sure we are).
_BEARING_MAX_SOURCE = (
    "common practice: more leaves no oil pockets and the parts wring (principle: "
    "ISO 8512-1:1990 clause 9; the 60% figure is ours)"
)
_EVEN_SOURCE = "our reading of 'evenly spread': the count must hold wherever the frame is put down"
_BARE_SOURCE = (
    "printcheck's own rule, not a standard: 3 x the even-grid spacing at the target density"
)
_PLATE_STD = "ISO 8512-1:1990 clause 9 (clause not re-checked here)"
_MACHINE_STD = (
    "from memory, not verified: a national machine-tool assembly standard "
    "(general assembly conditions for metal-cutting machine tools)"
)
_FITTERS = "from memory: a fitters' training text's table of scraped-surface counts"


def bare_rule_mm(density: float, basis_mm: float) -> float:
    """printcheck's bare-patch limit: 3 × the even-grid spacing, to the nearest mm.

    Points spread on a square grid at ``density`` per ``basis_mm`` square lie
    ``basis_mm / sqrt(density)`` apart; a well-spread print leaves no bare circle much
    over twice that, a random one often leaves four or five times it (our simulation,
    docs/specs.md).  This is our rule, not a standard's.
    """
    return float(round(3.0 * basis_mm / math.sqrt(density)))


def _even(
    name: str,
    title: str,
    density: float,
    density_source: str,
    *,
    bearing_min: float | None = None,
    bearing_min_source: str = "",
    bearing_max: float | None = 60.0,
    bare: bool = True,
    notes: str = "",
    extra_source: str = "",
) -> Spec:
    """A built-in spec whose points must be evenly spread (counted per 25 mm square)."""
    sources = [("min_density", density_source), ("min_cell_density", _EVEN_SOURCE)]
    if bearing_min is not None:
        sources.append(("bearing_min", bearing_min_source))
    if bearing_max is not None:
        sources.append(("bearing_max", _BEARING_MAX_SOURCE))
    max_bare = bare_rule_mm(density, 25.0) if bare else None
    if max_bare is not None:
        sources.append(("max_bare", _BARE_SOURCE))
    summary = f"density: {density_source}"
    if bearing_min is not None:
        summary += f"; bearing minimum: {bearing_min_source}"
    if extra_source:
        summary += f"; {extra_source}"
    return Spec(
        name=name,
        title=title,
        basis_mm=25.0,
        min_density=density,
        min_cell_density=density,
        cell_share=1.0,
        bearing_min=bearing_min,
        bearing_max=bearing_max,
        max_bare_mm=max_bare,
        source=summary,
        units="mm",
        sources=tuple(sources),
        notes=notes,
    )


def _builtins() -> tuple[Spec, ...]:
    plate_density = "from memory: a national cast-iron surface plate standard"
    specs = [
        _even(
            "plate-grade-0",
            "cast-iron surface plate, grade 0",
            25.0,
            plate_density + " (about 25)",
            bearing_min=20.0,
            bearing_min_source=_PLATE_STD,
            notes="spots evenly spread; not so much bearing that the work wrings",
        ),
        _even(
            "plate-grade-1",
            "cast-iron surface plate, grade 1",
            20.0,
            plate_density + " (20 to 25); a fitters' training text agrees",
            bearing_min=15.0,
            bearing_min_source=_PLATE_STD + "; BS 817:1988 clause 8.1 asks at least 20%",
            notes="BS 817:1988 asks at least 20% bearing; use a spec file for that",
        ),
    ]
    for grade in (2, 3):
        specs.append(
            _even(
                f"plate-grade-{grade}",
                f"cast-iron surface plate, grade {grade} (grades 2 and 3 share targets)",
                12.0,
                plate_density + " (about 12)",
                bearing_min=10.0,
                bearing_min_source=_PLATE_STD,
            )
        )
    for slug, words, narrow, wide in (
        ("high-precision", "high-precision", 20.0, 16.0),
        ("precision", "precision", 16.0, 12.0),
        ("ordinary", "ordinary", 10.0, 8.0),
    ):
        specs.append(
            _even(
                f"slideway-{slug}",
                f"{words} machine-tool slideway, up to 250 mm wide",
                narrow,
                _MACHINE_STD,
                notes="points evenly spread",
            )
        )
        specs.append(
            _even(
                f"slideway-{slug}-wide",
                f"{words} machine-tool slideway, over 250 mm wide",
                wide,
                _MACHINE_STD,
                notes="points evenly spread",
            )
        )
    specs += [
        _even(
            "straightedge",
            "scraped straightedge or precision datum face",
            16.0,
            _FITTERS + " (16 to 20)",
        ),
        _even(
            "bearing-shell",
            "precision plain bearing shell (machine-tool spindle)",
            20.0,
            "common practice, from memory",
            notes="points heavier at the ends than in the middle (not checked: "
            "photograph the ends and the middle as separate prints)",
        ),
        _even(
            "datum-face",
            "machine table or general datum face, sealing joint",
            8.0,
            _FITTERS + " (8 to 12)",
            bearing_max=None,
            bare=False,
        ),
        _even(
            "fixed-joint",
            "important fixed joint (bolted mounting face)",
            6.0,
            "common practice, from memory (6 to 12; 12 for high-precision machines)",
            bearing_max=None,
            bare=False,
        ),
        Spec(
            name="roughing",
            title="roughing pass (before the finishing passes)",
            basis_mm=MM_PER_IN,
            min_density=5.0,
            source="density: common practice",
            units="in",
            sources=(("min_density", "common practice"),),
            notes="only the window average is checked; spread and bearing come later",
        ),
    ]
    return tuple(specs)


def builtin_specs() -> tuple[Spec, ...]:
    """Every built-in spec, in the order ``printcheck specs`` lists them."""
    return _builtins()


# --------------------------------------------------------------------------- parsing


def _fail(source: str, key: str, problem: str) -> SpecError:
    return SpecError(f"spec {source}: {key}: {problem}")


def _text(data: dict[str, Any], key: str, source: str, default: str, *, one_line: bool) -> str:
    value = data.get(key, default)
    if not isinstance(value, str):
        raise _fail(source, key, f"must be a string, got {value!r}")
    if one_line and any(ord(ch) < 32 or ord(ch) == 127 for ch in value):
        raise _fail(source, key, "must be one line of text without control characters")
    return value.strip()


def _number(
    data: dict[str, Any],
    key: str,
    source: str,
    *,
    positive: bool = True,
    upper: float | None = None,
) -> float | None:
    if key not in data:
        return None
    value = data[key]
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise _fail(source, key, f"must be a number, got {value!r}")
    try:
        number = float(value)
    except OverflowError:
        raise _fail(source, key, f"must be a finite number, got {value!r}") from None
    if not math.isfinite(number):
        raise _fail(source, key, f"must be a finite number, got {value!r}")
    if positive and number <= 0:
        raise _fail(source, key, f"must be greater than zero, got {value!r}")
    if not positive and number < 0:
        raise _fail(source, key, f"must be zero or more, got {value!r}")
    if upper is not None and number > upper:
        raise _fail(source, key, f"must be at most {_num(upper, 3)}, got {value!r}")
    return number


def parse_spec(data: dict[str, Any], *, source: str = "<memory>") -> Spec:
    """Validate a spec read from TOML.

    Parameters
    ----------
    data : dict
        The parsed TOML document (see the module docstring and docs/specs.md).
    source : str
        Name used in error messages (usually the file path).

    Returns
    -------
    Spec
        With ``origin`` set to ``source``.

    Raises
    ------
    SpecError
        One line naming the source, the key and the problem, e.g.
        ``spec ways.toml: bearing_min: 70 is above bearing_max 60``.
    """
    if not isinstance(data, dict):
        raise _fail(source, "(top level)", "must be a TOML table")
    unknown = sorted(str(k) for k in data if k not in _KNOWN_KEYS)
    if unknown:
        near = difflib.get_close_matches(unknown[0], _KNOWN_KEYS, n=1)
        hint = f"did you mean {near[0]}?" if near else f"expected one of {', '.join(_KNOWN_KEYS)}"
        raise _fail(source, shown_key(unknown[0]), f"unknown key; {hint}")

    default_name = Path(source).stem if source != "<memory>" else "spec"
    name = _text(data, "name", source, default_name, one_line=True)
    if not name:
        raise _fail(source, "name", "must not be empty")
    title = _text(data, "title", source, name, one_line=True) or name

    if "units" not in data:
        raise _fail(
            source,
            "units",
            'missing; say "in" (densities per square inch, lengths in inches) or "mm" '
            "(per 25 mm square, lengths in mm)",
        )
    units = data["units"]
    if units not in ("mm", "in"):
        raise _fail(source, "units", f'must be "mm" or "in", got {units!r}')
    scale = MM_PER_IN if units == "in" else 1.0

    basis = _number(data, "basis", source)
    basis_mm = (1.0 * MM_PER_IN if units == "in" else 25.0) if basis is None else basis * scale
    if not math.isfinite(basis_mm):
        raise _fail(source, "basis", f"is too large, got {data['basis']!r}")

    min_density = _number(data, "min_density", source)
    min_cell_density = _number(data, "min_cell_density", source)
    share = _number(data, "cell_share", source, upper=1.0)
    if share is not None and min_cell_density is None:
        raise _fail(source, "cell_share", "has no effect without min_cell_density; add it")
    bearing_min = _number(data, "bearing_min", source, positive=False, upper=100.0)
    bearing_max = _number(data, "bearing_max", source, positive=True, upper=100.0)
    if bearing_min is not None and bearing_max is not None and bearing_min > bearing_max:
        raise _fail(
            source,
            "bearing_min",
            f"{_num(bearing_min, 3)} is above bearing_max {_num(bearing_max, 3)}; "
            "the range must run low to high",
        )
    max_bare = _number(data, "max_bare", source)
    max_bare_mm = None if max_bare is None else max_bare * scale
    if max_bare_mm is not None and not math.isfinite(max_bare_mm):
        raise _fail(source, "max_bare", f"is too large, got {data['max_bare']!r}")

    present = {
        "min_density": min_density,
        "min_cell_density": min_cell_density,
        "cell_share": share,
        "bearing_min": bearing_min,
        "bearing_max": bearing_max,
        "max_bare": max_bare,
    }
    if all(v is None for v in present.values()):
        raise _fail(
            source,
            "(targets)",
            "none given; set at least one of min_density, min_cell_density, "
            "bearing_min, bearing_max, max_bare",
        )

    raw_sources = data.get("sources", {})
    if not isinstance(raw_sources, dict):
        raise _fail(source, "sources", f'must be a table of target = "text", got {raw_sources!r}')
    sources: list[tuple[str, str]] = []
    for key in raw_sources:
        where = f"sources.{shown_key(key)}"
        if key not in TARGET_KEYS:
            raise _fail(source, where, f"not a target; use one of {', '.join(TARGET_KEYS)}")
        if present[key] is None:
            raise _fail(source, where, f"names a target the spec does not set; add {key}")
        text = raw_sources[key]
        if not isinstance(text, str):
            raise _fail(source, where, f"must be a string, got {text!r}")
        sources.append((key, text.strip()))
    sources.sort(key=lambda item: TARGET_KEYS.index(item[0]))

    return Spec(
        name=name,
        title=title,
        basis_mm=basis_mm,
        min_density=min_density,
        min_cell_density=min_cell_density,
        cell_share=1.0 if share is None else share,
        bearing_min=bearing_min,
        bearing_max=bearing_max,
        max_bare_mm=max_bare_mm,
        source=_text(data, "source", source, "", one_line=False),
        units=units,
        sources=tuple(sources),
        notes=_text(data, "notes", source, "", one_line=False),
        origin=source,
    )


def read_spec(path: str | Path) -> Spec:
    """Read and validate a spec TOML file.

    Raises
    ------
    SpecError
        When the file is missing, unreadable, not TOML, or not a valid spec.
    """
    from printcheck.tomlfile import read_toml

    data = read_toml(
        path,
        kind="spec",
        error=SpecError,
        missing_hint="; give a spec .toml file or a built-in name (printcheck specs)",
    )
    return parse_spec(data, source=str(path))


def find_spec(name_or_path: str) -> Spec:
    """A built-in spec by name, else a spec read from the TOML file at that path.

    Raises
    ------
    SpecError
        When the name is neither a built-in spec nor a readable, valid spec file.
    """
    text = str(name_or_path).strip()
    specs = builtin_specs()
    for spec in specs:
        if spec.name == text:
            return spec
    path = Path(text)
    if text and (path.suffix.lower() == ".toml" or path.exists() or "/" in text or "\\" in text):
        return read_spec(path)
    names = [s.name for s in specs]
    near = difflib.get_close_matches(text, names, n=1)
    hint = f"did you mean {near[0]}? " if near else ""
    raise SpecError(
        f"spec {text!r}: no built-in spec of that name and no such file; {hint}"
        "run 'printcheck specs' for the list, or give a spec .toml file"
    )


def target_spec(density: float, *, basis_mm: float) -> Spec:
    """An ad-hoc spec for ``--target N``: at least ``density`` points on average.

    Parameters
    ----------
    density : float
        Points per ``basis_mm`` square, over the window (the average only).
    basis_mm : float
        25.4 for points per square inch (``--unit in``), 25.0 for per 25 mm square.

    Raises
    ------
    SpecError
        When ``density`` or ``basis_mm`` is not a finite number greater than zero.
    """
    if (
        isinstance(density, bool)
        or not isinstance(density, int | float)
        or not (math.isfinite(density) and density > 0)
    ):
        raise SpecError(f"--target: must be a number of points greater than zero, got {density!r}")
    if not (isinstance(basis_mm, int | float) and math.isfinite(basis_mm) and basis_mm > 0):
        raise SpecError(
            f"--target: the counting square must be greater than zero, got {basis_mm!r}"
        )
    if math.isclose(basis_mm, MM_PER_IN, rel_tol=1e-9):
        per, units = "ppi", "in"
    else:
        per, units = f"per-{_num(basis_mm, 2)}mm", "mm"
    return Spec(
        name=f"target-{_num(density, 3)}-{per}",
        title=f"ad-hoc target: at least {_num(density, 3)} {density_words(basis_mm, units)}",
        basis_mm=float(basis_mm),
        min_density=float(density),
        source="given on the command line (--target)",
        units=units,
        sources=(("min_density", "given on the command line (--target)"),),
        origin="--target",
    )


# --------------------------------------------------------------------------- writing


def _toml_str(text: str) -> str:
    out = []
    for ch in text:
        if ch == '"':
            out.append('\\"')
        elif ch == "\\":
            out.append("\\\\")
        elif ord(ch) < 32 or ord(ch) == 127:
            out.append(f"\\u{ord(ch):04x}")
        else:
            out.append(ch)
    return '"' + "".join(out) + '"'


def _toml_key(key: str) -> str:
    return key if key.replace("_", "").isalnum() and key.isascii() else _toml_str(key)


def spec_to_toml(spec: Spec) -> str:
    """Write ``spec`` as TOML in its own units (round-trips through :func:`parse_spec`)."""
    k = MM_PER_IN if spec.units == "in" else 1.0
    lines = [
        f"name = {_toml_str(spec.name)}",
        f"title = {_toml_str(spec.title)}",
        f"units = {_toml_str(spec.units)}",
        f"basis = {spec.basis_mm / k!r}",
    ]
    for key, value in (
        ("min_density", spec.min_density),
        ("min_cell_density", spec.min_cell_density),
        ("cell_share", spec.cell_share if spec.min_cell_density is not None else None),
        ("bearing_min", spec.bearing_min),
        ("bearing_max", spec.bearing_max),
        ("max_bare", None if spec.max_bare_mm is None else spec.max_bare_mm / k),
    ):
        if value is not None:
            lines.append(f"{key} = {float(value)!r}")
    if spec.source:
        lines.append(f"source = {_toml_str(spec.source)}")
    if spec.notes:
        lines.append(f"notes = {_toml_str(spec.notes)}")
    if spec.sources:
        lines += ["", "[sources]"]
        lines += [f"{_toml_key(key)} = {_toml_str(text)}" for key, text in spec.sources]
    return "\n".join(lines) + "\n"


# --------------------------------------------------------------------------- listing


def _target_lines(spec: Spec) -> list[tuple[str, str, str]]:
    """(label, target in words, source) for each target of ``spec``."""
    per = density_words(spec.basis_mm, spec.units)
    out: list[tuple[str, str, str]] = []
    if spec.min_density is not None:
        out.append(
            (
                "density",
                f"at least {_num(spec.min_density, 3)} {per} on average",
                spec.source_of("min_density"),
            )
        )
    if spec.min_cell_density is not None:
        share = (
            "every complete cell"
            if spec.cell_share >= 1.0
            else f"{_num(100 * spec.cell_share, 1)}% of complete cells"
        )
        out.append(
            (
                "cells",
                f"at least {_num(spec.min_cell_density, 3)} {per} in {share}",
                spec.source_of("min_cell_density"),
            )
        )
    if spec.bearing_min is not None or spec.bearing_max is not None:
        lo, hi = spec.bearing_min, spec.bearing_max
        if lo is not None and hi is not None:
            words = f"{_num(lo, 1)}% to {_num(hi, 1)}%"
        elif lo is not None:
            words = f"at least {_num(lo, 1)}%"
        else:
            words = f"at most {_num(hi, 1)}%"  # type: ignore[arg-type]
        srcs = [
            f"{bound}: {text}"
            for bound, text in (
                ("min", spec.source_of("bearing_min")),
                ("max", spec.source_of("bearing_max")),
            )
            if text
        ]
        out.append(("bearing", words, "; ".join(srcs)))
    if spec.max_bare_mm is not None:
        out.append(
            (
                "bare patch",
                f"at most {_length_words(spec.max_bare_mm, spec.units)} across",
                spec.source_of("max_bare"),
            )
        )
    return out


def describe_specs(specs: Iterable[Spec] | None = None) -> str:
    """The spec list for ``printcheck specs``: plain text lines, sources with each number.

    Parameters
    ----------
    specs : iterable of Spec, optional
        Default: :func:`builtin_specs`.
    """
    chosen = builtin_specs() if specs is None else tuple(specs)
    lines = [
        "Built-in specs (use the name with --spec; --target N sets an ad-hoc density).",
        "Densities are counted per 25 mm square unless stated; the judge converts them",
        "to the counting cell you choose. 'from memory' marks a figure not checked",
        "against its standard here.",
    ]
    for spec in chosen:
        lines += ["", f"{spec.name}: {spec.title}"]
        for label, words, src in _target_lines(spec):
            lines.append(f"  {label:<11}{words}")
            if src:
                lines.append(f"  {'':<11}  source: {src}")
        if spec.notes:
            lines.append(f"  {'note':<11}{spec.notes}")
        if spec.origin != "built-in":
            lines.append(f"  {'from':<11}{spec.origin}")
    return "\n".join(lines)
