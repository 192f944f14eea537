"""The built-in specs: targets for the common kinds of scraped surface, with their sources.

Each target's number carries where it comes from and how sure we are of it ("from
memory" marks a figure not checked against its standard here; "common practice" a trade
figure without a written source; printcheck's own rules say so).  ``printcheck specs``
lists them (:func:`describe_specs`); docs/specs.md explains the choices.
"""

from __future__ import annotations

import math
from collections.abc import Iterable

from printcheck.spec import Spec
from printcheck.units import MM_PER_IN
from printcheck.wording import num, target_lines

__all__ = ["bare_rule_mm", "builtin_specs", "describe_specs"]

# Phrases shared by several built-in specs (each says how sure we are).
_BEARING_MAX_SOURCE = (
    "common practice: more leaves no oil pockets and the parts wring (principle: "
    "ISO 8512-1:1990 clause 9; the 60% figure is ours)"
)
_EVEN_SOURCE = "our reading of 'evenly spread': the count must hold wherever the frame is put down"
_BARE_SOURCE = (
    "printcheck's own rule, not a standard: 3 x the even-grid spacing at the target density"
)
_PLATE_STD = "ISO 8512-1:1990 clause 9"
_PLATE_NOTES = (
    "ISO 8512-1:1990 clause 9: high spots uniformly distributed, and the bearing not so "
    "high that plates wring"
)
_BS817 = "BS 817:1988 clause 8.1"
_SP19 = "Indian Standard SP:19-1980 Table 1"
_SP19_AREA = (
    "its counting area was not legible in the copy seen; counted per 25 mm square, "
    "the usual practice"
)
_SLIDE_BEARING = (
    "common practice: no published slideway minimum known to us; the ISO 8512-1:1990 "
    "clause 9 plate minimum of the matching class, applied here by printcheck"
)
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


def _plate_specs() -> list[Spec]:
    """Cast-iron surface plates: ISO 8512-1 grades 0 to 3, BS 817 grades 0 and 1.

    The two standards disagree on grade 1's bearing (ISO 15 %, BS 20 %): each keeps its
    own figure under its own name.
    """
    plate_density = "from memory: a national cast-iron surface plate standard"
    iso = [(0, 25.0, " (about 25)", 20.0), (1, 20.0, " (20 to 25)", 15.0)]
    iso += [(g, 12.0, " (about 12)", 10.0) for g in (2, 3)]
    specs = [
        _even(
            f"plate-grade-{grade}",
            f"cast-iron surface plate, grade {grade} (ISO 8512-1)",
            density,
            plate_density + words,
            bearing_min=bearing,
            bearing_min_source=_PLATE_STD,
            notes=_PLATE_NOTES,
        )
        for grade, density, words, bearing in iso
    ]
    for grade, density, words in ((0, 25.0, " (about 25)"), (1, 20.0, " (20 to 25)")):
        specs.append(
            _even(
                f"plate-bs817-grade-{grade}",
                f"cast-iron surface plate, grade {grade} (BS 817)",
                density,
                plate_density + words,
                bearing_min=20.0,
                bearing_min_source=_BS817,
                notes="high spots evenly spread; not so much bearing that the work wrings",
            )
        )
    return specs


def _scraped_class_specs() -> list[Spec]:
    """The five classes of scraped surface by contact points (SP:19-1980 Table 1)."""
    classes = (
        ("sp19-instrument", "precision instruments", 22.0, 32, True),
        (
            "sp19-plate",
            "surface plates, straightedges, precision guideways, bearing bushes",
            15.0,
            21,
            True,
        ),
        ("sp19-guideway", "machine-tool guideways, jigs", 10.0, 14, True),
        ("sp19-table", "tables, clamping faces, covers (6 to 9 points)", 6.0, 9, False),
        ("sp19-cover", "tables, clamping faces, covers (4 to 5 points)", 4.0, 5, False),
    )
    return [
        _even(
            name,
            f"scraped surface, {words}",
            low,
            f"{_SP19}: {num(low)} to {high} points; {_SP19_AREA}",
            bearing_max=60.0 if sliding else None,
            bare=sliding,
            notes=f"the class runs to {high} points; more is not a fault here",
        )
        for name, words, low, high, sliding in classes
    ]


def _slideway_specs() -> list[Spec]:
    """Machine-tool slideways: three grades, each narrow (up to 250 mm) and wide."""
    specs = []
    for slug, words, narrow, wide, bearing in (
        ("high-precision", "high-precision", 20.0, 16.0, 20.0),
        ("precision", "precision", 16.0, 12.0, 15.0),
        ("ordinary", "ordinary", 10.0, 8.0, 10.0),
    ):
        for suffix, width, density in (("", "up to", narrow), ("-wide", "over", wide)):
            specs.append(
                _even(
                    f"slideway-{slug}{suffix}",
                    f"{words} machine-tool slideway, {width} 250 mm wide",
                    density,
                    _MACHINE_STD,
                    bearing_min=bearing,
                    bearing_min_source=_SLIDE_BEARING,
                    notes="points evenly spread",
                )
            )
    return specs


def _other_specs() -> list[Spec]:
    """Straightedges, bearing shells, datum faces, fixed joints and the roughing pass."""
    return [
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


def builtin_specs() -> tuple[Spec, ...]:
    """Every built-in spec, in the order ``printcheck specs`` lists them."""
    return (*_plate_specs(), *_slideway_specs(), *_scraped_class_specs(), *_other_specs())


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
        for target in target_lines(spec):
            lines.append(f"  {target.label:<11}{target.words}")
            if target.source:
                lines.append(f"  {'':<11}  source: {target.source}")
        if spec.notes:
            lines.append(f"  {'note':<11}{spec.notes}")
        if spec.origin != "built-in":
            lines.append(f"  {'from':<11}{spec.origin}")
    return "\n".join(lines)
