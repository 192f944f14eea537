"""Inspect options: everything that decides how a photo is inspected, checked where defined.

:class:`InspectOptions` validates itself on construction, so a library caller of
:func:`printcheck.pipeline.inspect_image` gets the same checks as the command line.  Each
error names the parameter in its own name (``px_per_mm must be ...``), the rule, the value
and the fix; the command line says its flags instead (it translates once, where it reports
errors).  :func:`options_from_settings` builds the options from resolved job settings
(:func:`printcheck.jobconfig.resolve_settings`), reading the layout and spec they name.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TypeVar

from printcheck.errors import OptionError
from printcheck.jobconfig import JobSettings
from printcheck.layout import Layout, Window, card_layout
from printcheck.spec import Spec
from printcheck.units import MM_PER_IN, default_cell, to_mm

__all__ = [
    "InspectOptions",
    "options_from_settings",
    "MIN_PX_PER_MM",
    "MAX_PX_PER_MM",
    "MIN_CELL_MM",
    "MAX_MIN_SPOT_MM2",
]

MIN_PX_PER_MM, MAX_PX_PER_MM = 1.0, 500.0  # a coarse scan to a microscope stage
MIN_CELL_MM = 5.0  # a cell must hold a few spots of a millimetre or two
MAX_MIN_SPOT_MM2 = 100.0
T = TypeVar("T")
_CHOICES = {
    "unit": ("in", "mm"),
    "compound": ("blue", "red", "auto"),
    "compound_on": ("reference", "work"),
}


def _fail(parameter: str, problem: str) -> OptionError:
    return OptionError(f"{parameter} {problem}", parameter=parameter)


@dataclass(frozen=True)
class InspectOptions:
    """Everything that decides how a photo is inspected.

    Attributes
    ----------
    layout : Layout or None
        Where the markers are; the built-in 2 in card when neither this nor
        ``px_per_mm`` is given.
    px_per_mm : float or None
        Explicit scale for square-on photos (no markers), 1 to 500.
    scale_window : Window or None
        With ``px_per_mm``: the window in mm from the image's top-left (default: all).
    unit : {"in", "mm"}
    cell : float or None
        Side of the counting cell in ``unit`` (default 1 in or 25 mm); at least 5 mm and
        no larger than the layout's window.
    compound : {"blue", "red", "auto"}
    compound_on : {"reference", "work"}
        See :class:`printcheck.segment.SegmentConfig`.
    spec : Spec or None
    surface : str or None
        A name on one line.
    min_spot_mm2 : float
        Specks smaller than this are not spots, 0 to 100 mm².
    allow_partial : bool
        Measure the visible part of a window that runs out of the photo.

    Raises
    ------
    OptionError
        On construction, when a value breaks its rule (``parameter`` names it).
    """

    layout: Layout | None = None
    px_per_mm: float | None = None
    scale_window: Window | None = None
    unit: str = "in"
    cell: float | None = None
    compound: str = "auto"
    compound_on: str = "reference"
    spec: Spec | None = None
    surface: str | None = None
    min_spot_mm2: float = 0.1
    allow_partial: bool = False

    def __post_init__(self) -> None:
        for name, choices in _CHOICES.items():
            value = getattr(self, name)
            if value not in choices:
                raise _fail(name, f"must be one of {', '.join(choices)}, got {value!r}")
        self._check_scale()
        self._check_cell()
        if not 0 <= self.min_spot_mm2 <= MAX_MIN_SPOT_MM2:
            raise _fail(
                "min_spot_mm2",
                f"must be between 0 and {MAX_MIN_SPOT_MM2:g} mm², got {self.min_spot_mm2:g}; "
                "0.1 mm² (the default) leaves out specks of dust",
            )
        surface = self.surface
        if surface is not None and (
            not surface.strip() or any(ord(ch) < 32 or ord(ch) == 127 for ch in surface)
        ):
            raise _fail(
                "surface",
                f"must be a name on one line, got {surface!r}; give a name such as bed-front-way",
            )

    def _check_scale(self) -> None:
        px = self.px_per_mm
        if px is None:
            return
        if not px > 0:
            raise _fail(
                "px_per_mm",
                f"must be greater than zero, got {px:g}; "
                "give the pixels per mm of the square-on photo or scan",
            )
        if not MIN_PX_PER_MM <= px <= MAX_PX_PER_MM:
            raise _fail(
                "px_per_mm",
                f"must be between {MIN_PX_PER_MM:g} and {MAX_PX_PER_MM:g} (pixels per mm of "
                f"a square-on photo or scan), got {px:g}; measure a rule in the photo",
            )

    def _check_cell(self) -> None:
        cell, unit = self.cell, self.unit
        if cell is None:
            return
        if not cell > 0:
            raise _fail(
                "cell",
                f"must be greater than zero, got {cell:g}; the customary cell is 1 in or 25 mm",
            )
        cell_mm = to_mm(cell, unit) if math.isfinite(cell) else math.inf
        if not MIN_CELL_MM <= cell_mm < math.inf:
            raise _fail(
                "cell",
                f"must be at least {MIN_CELL_MM:g} mm ({MIN_CELL_MM / MM_PER_IN:g} in) "
                f"and finite, got {cell:g} {unit}; the customary cell is 1 in or 25 mm",
            )
        if self.px_per_mm is None:
            w = self.layout_in_use.window
            if cell_mm > max(w.width_mm, w.height_mm) + 1e-9:
                k = MM_PER_IN if unit == "in" else 1.0
                raise _fail(
                    "cell",
                    f"{cell:g} {unit} is larger than the window "
                    f"({w.width_mm / k:g} x {w.height_mm / k:g} {unit}); choose a smaller cell",
                )

    @property
    def cell_in_unit(self) -> float:
        return self.cell if self.cell is not None else default_cell(self.unit)

    @property
    def cell_mm(self) -> float:
        return to_mm(self.cell_in_unit, self.unit)

    @property
    def layout_in_use(self) -> Layout:
        """The layout the markers are read by: ``layout``, else the built-in 2 in card."""
        return self.layout if self.layout is not None else card_layout()


def options_from_settings(settings: JobSettings, *, allow_partial: bool = False) -> InspectOptions:
    """The inspect options of resolved settings; what they leave unset takes its default.

    Reads the layout file (unless ``px_per_mm`` is set) and the spec (a built-in name or a
    spec file), or makes a quick-target spec of ``target`` in points per ``unit`` square.

    Raises
    ------
    OptionError, LayoutError, SpecError
        A value breaks its rule, or the layout or spec cannot be read.
    """
    from printcheck.layout import read_layout
    from printcheck.spec import find_spec, target_spec

    default = InspectOptions()
    unit = _given(settings.unit, default.unit)
    spec = None
    if settings.spec is not None:
        spec = find_spec(settings.spec)
    elif settings.target is not None:
        if not settings.target > 0:
            raise _fail(
                "target",
                f"must be greater than zero, got {settings.target:g}; "
                "give the density the surface must reach",
            )
        spec = target_spec(settings.target, basis_mm=MM_PER_IN if unit == "in" else 25.0)
    return InspectOptions(
        layout=None if settings.layout is None else read_layout(settings.layout),
        px_per_mm=settings.px_per_mm,
        unit=unit,
        cell=settings.cell,
        compound=_given(settings.compound, default.compound),
        compound_on=_given(settings.compound_on, default.compound_on),
        spec=spec,
        surface=None if settings.surface is None else settings.surface.strip(),
        min_spot_mm2=_given(settings.min_spot, default.min_spot_mm2),
        allow_partial=allow_partial,
    )


def _given(value: T | None, default: T) -> T:
    return default if value is None else value
