"""Specs: the targets a surface must meet, built-in or from TOML.

(Interface fixed here; the implementation is being built.)
"""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["Spec"]


@dataclass(frozen=True)
class Spec:
    """Targets for one kind of surface.

    Densities are stated per ``basis_mm`` square (25.4 for points per square inch,
    25.0 for points per 25 mm square); lengths are mm; bearing in percent.
    A target of ``None`` is not checked.
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
