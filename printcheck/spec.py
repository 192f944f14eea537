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
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from printcheck.errors import SpecError
from printcheck.tomlfile import read_toml_as, shown_key
from printcheck.units import MM_PER_IN, convert_density
from printcheck.wording import density_words, num

__all__ = [
    "Spec",
    "TARGET_KEYS",
    "find_spec",
    "parse_spec",
    "read_spec",
    "spec_to_toml",
    "target_spec",
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
_KNOWN_KEYS = ("name", "title", "units", "basis", *TARGET_KEYS, "source", "sources", "notes")


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

    def density_target(self, cell_mm: float, *, per_cell: bool = False) -> float | None:
        """The density target in points per ``cell_mm`` square, or None without one.

        ``per_cell`` asks for the cell target (``min_cell_density``, falling back to
        ``min_density``); otherwise the window target (``min_density``, falling back to
        ``min_cell_density``).  The spec states densities per ``basis_mm`` square; they
        are converted by area (:func:`printcheck.units.convert_density`).
        """
        first, second = (
            (self.min_cell_density, self.min_density)
            if per_cell
            else (self.min_density, self.min_cell_density)
        )
        value = first if first is not None else second
        if value is None:
            return None
        return convert_density(value, from_cell_mm=self.basis_mm, to_cell_mm=cell_mm)


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
        raise _fail(source, key, f"must be at most {num(upper, 3)}, got {value!r}")
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
    units = _units(data, source)
    scale = MM_PER_IN if units == "in" else 1.0
    basis = _number(data, "basis", source)
    basis_mm = (1.0 * MM_PER_IN if units == "in" else 25.0) if basis is None else basis * scale
    if not math.isfinite(basis_mm):
        raise _fail(source, "basis", f"is too large, got {data['basis']!r}")
    targets = _targets(data, source)
    max_bare = targets["max_bare"]
    max_bare_mm = None if max_bare is None else max_bare * scale
    if max_bare_mm is not None and not math.isfinite(max_bare_mm):
        raise _fail(source, "max_bare", f"is too large, got {data['max_bare']!r}")
    share = targets["cell_share"]
    return Spec(
        name=name,
        title=title,
        basis_mm=basis_mm,
        min_density=targets["min_density"],
        min_cell_density=targets["min_cell_density"],
        cell_share=1.0 if share is None else share,
        bearing_min=targets["bearing_min"],
        bearing_max=targets["bearing_max"],
        max_bare_mm=max_bare_mm,
        source=_text(data, "source", source, "", one_line=False),
        units=units,
        sources=_sources(data, source, targets),
        notes=_text(data, "notes", source, "", one_line=False),
        origin=source,
    )


def _units(data: dict[str, Any], source: str) -> str:
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
    return str(units)


def _targets(data: dict[str, Any], source: str) -> dict[str, float | None]:
    """Each of :data:`TARGET_KEYS` as the file gives it (None: not set); at least one set."""
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
            f"{num(bearing_min, 3)} is above bearing_max {num(bearing_max, 3)}; "
            "the range must run low to high",
        )
    max_bare = _number(data, "max_bare", source)
    targets = {
        "min_density": min_density,
        "min_cell_density": min_cell_density,
        "cell_share": share,
        "bearing_min": bearing_min,
        "bearing_max": bearing_max,
        "max_bare": max_bare,
    }
    if all(v is None for v in targets.values()):
        raise _fail(
            source,
            "(targets)",
            "none given; set at least one of min_density, min_cell_density, "
            "bearing_min, bearing_max, max_bare",
        )
    return targets


def _sources(
    data: dict[str, Any], source: str, targets: dict[str, float | None]
) -> tuple[tuple[str, str], ...]:
    """The ``[sources]`` table: (target key, text) for targets the spec sets, in key order."""
    raw_sources = data.get("sources", {})
    if not isinstance(raw_sources, dict):
        raise _fail(source, "sources", f'must be a table of target = "text", got {raw_sources!r}')
    sources: list[tuple[str, str]] = []
    for key in raw_sources:
        where = f"sources.{shown_key(key)}"
        if key not in TARGET_KEYS:
            raise _fail(source, where, f"not a target; use one of {', '.join(TARGET_KEYS)}")
        if targets[key] is None:
            raise _fail(source, where, f"names a target the spec does not set; add {key}")
        text = raw_sources[key]
        if not isinstance(text, str):
            raise _fail(source, where, f"must be a string, got {text!r}")
        sources.append((key, text.strip()))
    sources.sort(key=lambda item: TARGET_KEYS.index(item[0]))
    return tuple(sources)


def read_spec(path: str | Path) -> Spec:
    """Read and validate a spec TOML file (SpecError: missing, unreadable, not TOML, or
    not a valid spec)."""
    hint = "; give a spec .toml file or a built-in name (printcheck specs)"
    return read_toml_as(path, parse_spec, kind="spec", error=SpecError, missing_hint=hint)


def find_spec(name_or_path: str) -> Spec:
    """A built-in spec by name, else a spec read from the TOML file at that path.

    Raises
    ------
    SpecError
        When the name is neither a built-in spec nor a readable, valid spec file.
    """
    from printcheck.builtin_specs import builtin_specs

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
    """An ad-hoc spec for a quick density target: at least ``density`` points on average.

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
        raise SpecError(
            f"density must be a number of points greater than zero, got {density!r}; "
            "give the average density the surface must reach"
        )
    if not (isinstance(basis_mm, int | float) and math.isfinite(basis_mm) and basis_mm > 0):
        raise SpecError(
            f"basis_mm (the counting square) must be greater than zero, got {basis_mm!r}; "
            "give 25.4 for points per square inch or 25.0 for per 25 mm square"
        )
    if math.isclose(basis_mm, MM_PER_IN, rel_tol=1e-9):
        per, units = "ppi", "in"
    else:
        per, units = f"per-{num(basis_mm, 2)}mm", "mm"
    return Spec(
        name=f"target-{num(density, 3)}-{per}",
        title=f"ad-hoc target: at least {num(density, 3)} {density_words(basis_mm, units)}",
        basis_mm=float(basis_mm),
        min_density=float(density),
        source="given on the command line (--target)",
        units=units,
        sources=(("min_density", "given on the command line (--target)"),),
        origin="--target",
    )


# --------------------------------------------------------------------------- writing


def spec_to_toml(spec: Spec) -> str:
    """Write ``spec`` as TOML in its own units (round-trips through :func:`parse_spec`).

    The text is written by ``tomli_w``, which quotes and escapes strings and keys as
    TOML 1.0 requires.
    """
    import tomli_w

    k = MM_PER_IN if spec.units == "in" else 1.0
    data: dict[str, Any] = {
        "name": spec.name,
        "title": spec.title,
        "units": spec.units,
        "basis": spec.basis_mm / k,
    }
    for key, value in (
        ("min_density", spec.min_density),
        ("min_cell_density", spec.min_cell_density),
        ("cell_share", spec.cell_share if spec.min_cell_density is not None else None),
        ("bearing_min", spec.bearing_min),
        ("bearing_max", spec.bearing_max),
        ("max_bare", None if spec.max_bare_mm is None else spec.max_bare_mm / k),
    ):
        if value is not None:
            data[key] = float(value)
    if spec.source:
        data["source"] = spec.source
    if spec.notes:
        data["notes"] = spec.notes
    if spec.sources:
        data["sources"] = dict(spec.sources)
    return tomli_w.dumps(data)
