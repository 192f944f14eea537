"""Progress: a surface's passes so far, their trend, and a projection to spec.

Pure functions on records: a surface's pass summaries
(:class:`printcheck.records.PassSummary`, in pass order) and its spec in, a
:class:`printcheck.records.Progress` out (written as the progress JSON,
``printcheck-progress/1`` in docs/formats.md, by :func:`printcheck.serde.progress_to_dict`).

Figures of our own
------------------
uniformity
    How evenly the points are spread over the window, in percent:
    ``100 * (1 - CV)`` clipped to 0..100, where CV is the coefficient of variation
    (population standard deviation over mean) of the densities of the *complete* cells.
    100 means every complete cell holds the same density; ``None`` with fewer than two
    complete cells or no points at all.
cells_meeting_percent
    Share of complete cells whose density reaches the spec's cell target
    (``min_cell_density``, else ``min_density``), in percent; ``None`` without a target
    or without complete cells.

Projection
----------
Density is fitted against pass number by least squares (``scipy.stats.linregress``) on
the last ``fit_passes`` passes (default 5).  With the fitted rate ``a`` (points per pass),
its standard error ``se`` and the fitted density at the latest pass ``y_n``, the passes
still needed are ``ceil((target - y_n) / a)`` (at least 1), with ``low`` and ``high``
from the rates ``a + se`` and ``a - se`` (``high`` is ``None`` when ``a - se <= 0``: the
trend may not reach the target at all).  The projection is ``None`` with fewer than three
passes, without a density target, or when the fitted rate is not positive;
``passes_to_spec`` (and ``low``, ``high``) is 0 when the latest pass already reaches the
target, however few passes there are.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

from printcheck.records import (
    PassSummary,
    Progress,
    ProgressRow,
    Projection,
    StationFigure,
    StationProgress,
    StoredPass,
    Targets,
)
from printcheck.spec import Spec
from printcheck.units import to_mm
from printcheck.wording import cell_words, num

__all__ = [
    "MIN_PASSES",
    "LineFit",
    "build_progress",
    "history_progress",
    "progress_text",
    "projection_words",
    "recorded_progress",
    "station_progress",
    "surface_spec",
    "fit_line",
    "project",
    "uniformity",
    "cells_meeting_percent",
]

MIN_PASSES = 3


@dataclass(frozen=True)
class LineFit:
    """A least-squares line ``y = slope * x + intercept`` and the slope's standard error."""

    slope: float
    intercept: float
    slope_stderr: float


def fit_line(x: Sequence[float], y: Sequence[float]) -> LineFit:
    """Ordinary least-squares line ``y = slope * x + intercept`` and the slope's std. error.

    Parameters
    ----------
    x, y : sequences of float, same length n >= 2, x not all equal

    Returns
    -------
    LineFit
        From ``scipy.stats.linregress``; ``slope_stderr`` is
        ``sqrt(SSR / (n - 2) / Sxx)`` (0 for n == 2).

    Raises
    ------
    ValueError
        Fewer than two pairs, ``x`` and ``y`` of different lengths, or ``x`` all equal.
    """
    n = len(x)
    if n != len(y) or n < 2:
        raise ValueError(
            f"fit_line needs two or more (x, y) pairs of equal length, got {n}, {len(y)}"
        )
    if min(x) == max(x):
        raise ValueError("fit_line needs at least two different x values")
    from scipy.stats import linregress

    fit = linregress([float(v) for v in x], [float(v) for v in y])
    return LineFit(float(fit.slope), float(fit.intercept), float(fit.stderr))


def _cell_mm(summary: PassSummary | None) -> float | None:
    """The counting cell of ``summary`` in mm (None without a usable one)."""
    if summary is None or summary.unit not in ("in", "mm") or not summary.cell > 0:
        return None
    return to_mm(summary.cell, summary.unit)


def _complete_densities(summary: PassSummary) -> list[float]:
    return [c.density for c in summary.cells if c.complete]


def uniformity(summary: PassSummary) -> float | None:
    """``100 * (1 - CV)`` of the complete cells' densities, clipped to 0..100 (see module)."""
    dens = _complete_densities(summary)
    if len(dens) < 2:
        return None
    mean = sum(dens) / len(dens)
    if mean <= 0:
        return None
    sd = math.sqrt(sum((d - mean) ** 2 for d in dens) / len(dens))
    return round(min(100.0, max(0.0, 100.0 * (1.0 - sd / mean))), 2)


def cells_meeting_percent(summary: PassSummary, target: float | None) -> float | None:
    """Percent of complete cells with density >= ``target`` (None without either)."""
    if target is None:
        return None
    dens = _complete_densities(summary)
    if not dens:
        return None
    return round(100.0 * sum(d >= target - 1e-9 for d in dens) / len(dens), 2)


def project(
    densities: Sequence[float],
    target: float | None,
    *,
    fit_passes: int = 5,
) -> Projection | None:
    """Passes still needed for the density to reach ``target`` (see the module docstring).

    Parameters
    ----------
    densities : sequence of float
        Density of each pass, in pass order.
    target : float or None
        Density target in the same terms.
    fit_passes : int
        The line is fitted to the last this many passes (at least 3).

    Returns
    -------
    Projection or None
        None when there is nothing to project.
    """
    if target is None or not densities:
        return None
    k = max(MIN_PASSES, int(fit_passes))
    ys = [float(d) for d in densities][-k:]
    xs = [float(len(densities) - len(ys) + i + 1) for i in range(len(ys))]
    fit = fit_line(xs, ys) if len(ys) >= MIN_PASSES else None

    def projection(low: int, mid: int, high: int | None) -> Projection:
        return Projection(
            passes_to_spec=mid,
            low=low,
            high=high,
            rate=None if fit is None else round(fit.slope, 4),
            rate_stderr=None if fit is None else round(fit.slope_stderr, 4),
            fit_passes=len(ys),
            target=round(float(target), 4),
        )

    if float(densities[-1]) >= target:
        return projection(0, 0, 0)
    if fit is None or fit.slope <= 0:
        return None
    # distance still to go, from the fitted line at the latest pass
    gap = max(target - (fit.slope * xs[-1] + fit.intercept), 0.0)

    def needed(rate: float) -> int:
        return max(1, math.ceil(gap / rate - 1e-9))

    hi_rate = fit.slope - fit.slope_stderr
    return projection(
        needed(fit.slope + fit.slope_stderr),
        needed(fit.slope),
        needed(hi_rate) if hi_rate > 0 else None,
    )


def surface_spec(passes: Sequence[StoredPass]) -> Spec | None:
    """The spec of a surface's latest pass that names one.

    The spec's targets kept in the history win; otherwise a built-in spec of the
    recorded name; otherwise None.
    """
    from printcheck.builtin_specs import builtin_specs

    for p in reversed(passes):
        if p.spec is not None:
            return p.spec
        verdict = p.summary.verdict
        name = p.spec_name or (None if verdict is None else verdict.name)
        if name:
            return next((s for s in builtin_specs() if s.name == name), None)
    return None


def _row(
    number: int, summary: PassSummary, basis_mm: float | None, spec: Spec | None
) -> ProgressRow:
    """One pass, its density converted to points per ``basis_mm`` square."""
    cell_mm = _cell_mm(summary)
    factor = 1.0
    if basis_mm is not None and cell_mm is not None:
        factor = (basis_mm / cell_mm) ** 2
    cell_target = None
    if spec is not None and cell_mm:
        cell_target = spec.density_target(cell_mm, per_cell=True)
    d = summary.density
    return ProgressRow(
        number=number,
        photo=summary.photo,
        taken=summary.taken,
        density=None if d is None else round(d * factor, 2),
        bearing_percent=summary.bearing_percent,
        meets=summary.meets,
        spot_count=summary.spot_count,
        uniformity=uniformity(summary),
        cells_meeting_percent=cells_meeting_percent(summary, cell_target),
    )


def build_progress(
    surface: str,
    passes: Sequence[PassSummary],
    *,
    spec: Spec | None,
    fit_passes: int = 5,
) -> Progress:
    """The progress of ``surface`` (written as ``printcheck-progress/1``).

    Parameters
    ----------
    surface : str
        The surface's name.
    passes : sequence of PassSummary
        The surface's passes, in pass order.
    spec : Spec or None
        The surface's spec (for a history, :func:`surface_spec` finds the one it kept);
        it gives the targets and the projection's density target.  Without one the
        spec's name is the latest verdict's, and ``projection`` is None.
    fit_passes : int
        Passes the trend line is fitted to (the most recent ones).

    Returns
    -------
    Progress
        Densities in points per the latest pass's cell (passes counted on another cell
        are converted: density scales with the cell's area).
    """
    last = passes[-1] if passes else None
    basis_mm = _cell_mm(last)
    rows = tuple(_row(n, s, basis_mm, spec) for n, s in enumerate(passes, start=1))
    spec_name = spec.name if spec is not None else None
    if spec_name is None:
        spec_name = next((s.verdict.name for s in reversed(passes) if s.verdict), None)
    target = cell_target = None
    if spec is not None and basis_mm:
        target = spec.density_target(basis_mm)
        cell_target = spec.density_target(basis_mm, per_cell=True)
    densities = [r.density for r in rows]
    known = [float(d) for d in densities if d is not None]
    projection = None
    if len(known) == len(densities):
        projection = project(known, target, fit_passes=fit_passes)
    targets = Targets(
        density=None if target is None else round(target, 4),
        cell_density=None if cell_target is None else round(cell_target, 4),
        bearing_min=None if spec is None else spec.bearing_min,
        bearing_max=None if spec is None else spec.bearing_max,
    )
    return Progress(
        surface=surface,
        spec=spec_name,
        unit=None if last is None else last.unit,
        cell=None if last is None else last.cell,
        targets=targets,
        passes=rows,
        projection=projection,
    )


def _per(progress: Progress) -> str:
    return cell_words(progress.cell, progress.unit)


def projection_words(progress: Progress) -> str:
    """The projection as one sentence, for people (no capital, no full stop)."""
    target = progress.targets.density
    proj = progress.projection
    n = len(progress.passes)
    if target is None:
        return "no density target to project against"
    if proj is None and progress.slowest_station is not None:
        return (
            f"station {progress.slowest_station}'s density is not yet approaching the "
            f"target of {num(target, 1)} {_per(progress)} (too few passes, or no rise)"
        )
    if proj is None:
        if n < MIN_PASSES:
            return f"too few passes yet ({n} of {MIN_PASSES} needed)"
        return f"the density is not approaching the target of {num(target, 1)} {_per(progress)}"
    if proj.passes_to_spec == 0:
        return f"the latest pass reaches the density target of {num(target, 1)} {_per(progress)}"
    if proj.high is None:
        rng = f"{proj.low} or more"
    elif proj.high == proj.low:  # one value: "likely 1", never "1 to 1"
        rng = f"{proj.low}"
    else:
        rng = f"{proj.low} to {proj.high}"
    more = proj.passes_to_spec
    rate = 0.0 if proj.rate is None else proj.rate
    led = (
        f"; led by station {progress.slowest_station}"
        if progress.slowest_station is not None
        else ""
    )
    return (
        f"about {more} more pass{'es' if more != 1 else ''} to {num(target, 1)} "
        f"{_per(progress)} (likely {rng}; {rate:+.1f} per pass{led})"
    )


def _station_words(row: ProgressRow) -> str:
    parts = []
    for f in row.stations:
        d = "-" if f.density is None else f"{f.density:.1f}"
        b = "-" if f.bearing_percent is None else f"{f.bearing_percent:.0f} %"
        worst = " (worst)" if f.station == row.worst_station and len(row.stations) > 1 else ""
        parts.append(f"{f.station} {d} / {b}{worst}")
    return ", ".join(parts)


def station_progress(progress: Progress, station: StationProgress) -> Progress:
    """The surface's progress as one station sees it: its passes so far, its projection."""
    known = [d for d in station.densities if d is not None]
    return Progress(
        surface=progress.surface,
        spec=progress.spec,
        unit=progress.unit,
        cell=progress.cell,
        targets=progress.targets,
        passes=progress.passes[: len(known)],
        projection=station.projection,
    )


def _station_projection_words(progress: Progress, station: StationProgress) -> str:
    known = [d for d in station.densities if d is not None]
    latest = "-" if not known else f"{known[-1]:.1f}"
    one = station_progress(progress, station)
    return f"latest {latest} {_per(progress)}; {projection_words(one)}"


def progress_text(progress: Progress) -> str:
    """A few lines for people: the latest pass against the spec, the trend, the projection."""
    passes = progress.passes
    surface = progress.surface or "surface"
    if not passes:
        return f"{surface}: no passes recorded"
    per = _per(progress)
    last = passes[-1]
    verdict = {True: "meets", False: "does not meet", None: "not judged against"}[last.meets]
    lines = [
        f"{surface}: {len(passes)} pass{'es' if len(passes) != 1 else ''}; "
        f"latest {last.photo} {verdict} {progress.spec or 'a spec'}".rstrip()
    ]
    for p in passes:
        d, b, u = p.density, p.bearing_percent, p.uniformity
        mark = {True: "ok", False: "short", None: ""}[p.meets]
        lines.append(
            f"  pass {p.number:>2}  {'-' if d is None else f'{d:6.1f}'} {per}, "
            f"bearing {'-' if b is None else f'{b:4.1f}'} %, "
            f"uniformity {'-' if u is None else f'{u:3.0f}'} %  {mark}".rstrip()
        )
        if p.stations:
            lines.append(f"           stations: {_station_words(p)}")
        if p.note:
            lines.append(f"           note: {p.note}")
    lines.append(f"projection: {projection_words(progress)}")
    for s in progress.stations:
        lines.append(f"  station {s.station}: {_station_projection_words(progress, s)}")
    return "\n".join(lines)


# ---------------------------------------------------------------- passes of stations


def recorded_progress(
    history: Any, surface: str, *, command: str
) -> tuple[list[StoredPass], Spec | None, Progress]:
    """A surface's stored passes, its spec and its progress, read from an open history.

    Raises
    ------
    OptionError
        No passes are recorded for ``surface`` (the line names ``command`` and the
        surfaces that are recorded).
    """
    from printcheck.errors import OptionError

    stored = list(history.passes(surface))
    if not stored:
        known = ", ".join(history.surfaces()) or "none"
        raise OptionError(
            f"{command}: no passes recorded for surface {surface!r} (recorded: {known})"
        )
    spec = surface_spec(stored)
    return stored, spec, history_progress(surface, stored, spec=spec)


def history_progress(
    surface: str,
    stored: Sequence[StoredPass],
    *,
    spec: Spec | None,
    fit_passes: int = 5,
) -> Progress:
    """The progress of a surface as the history holds it: passes of one photo each, or
    passes of several stations.

    A pass of stations is judged as a whole: it meets only when every station meets,
    its density and bearing are the lowest of its stations' (the worst station is
    named), and each station's density is followed on its own.  The surface's
    projection is the slowest station's: the most passes any station still needs (and
    none when any station's trend does not approach the target).

    Parameters
    ----------
    surface : str
    stored : sequence of StoredPass
        As :meth:`printcheck.history.History.passes` gives them (pass by pass).
    spec : Spec or None
    fit_passes : int
    """
    groups: dict[int, list[StoredPass]] = {}
    for p in stored:
        groups.setdefault(p.number, []).append(p)
    notes = {n: next((p.note for p in ps if p.note), None) for n, ps in groups.items()}
    plain = all(len(ps) == 1 and ps[0].station is None for ps in groups.values())
    if plain:
        ordered = [ps[0] for _, ps in sorted(groups.items())]
        base = build_progress(
            surface, [p.summary for p in ordered], spec=spec, fit_passes=fit_passes
        )
        noted = tuple(
            row if notes[p.number] is None else dataclasses.replace(row, note=notes[p.number])
            for row, p in zip(base.passes, ordered, strict=True)
        )
        return dataclasses.replace(base, passes=noted)
    last = stored[-1].summary if stored else None
    basis_mm = _cell_mm(last)
    names: list[str] = []
    for p in stored:
        label = p.station or "1"
        if label not in names:
            names.append(label)
    numbers = sorted(groups)
    rows: list[ProgressRow] = []
    per_station: dict[str, list[float | None]] = {name: [] for name in names}
    per_bearing: dict[str, list[float | None]] = {name: [] for name in names}
    for n in numbers:
        members = groups[n]
        figures: list[StationFigure] = []
        singles: list[ProgressRow] = []
        for p in members:
            r = _row(n, p.summary, basis_mm, spec)
            singles.append(r)
            figures.append(
                StationFigure(
                    station=p.station or "1",
                    photo=p.summary.photo,
                    density=r.density,
                    bearing_percent=r.bearing_percent,
                    meets=r.meets,
                    spot_count=r.spot_count,
                )
            )
        by_name = {f.station: f for f in figures}
        for name in names:
            f = by_name.get(name)
            per_station[name].append(None if f is None else f.density)
            per_bearing[name].append(None if f is None else f.bearing_percent)
        rows.append(_combined_row(n, members, figures, singles, notes[n]))
    targets_progress = build_progress(
        surface, [last] if last is not None else [], spec=spec, fit_passes=fit_passes
    )
    target = targets_progress.targets.density
    station_progress = []
    for name in names:
        known = [float(d) for d in per_station[name] if d is not None]
        station_progress.append(
            StationProgress(
                station=name,
                densities=tuple(per_station[name]),
                bearings=tuple(per_bearing[name]),
                projection=project(known, target, fit_passes=fit_passes),
            )
        )
    projection, slowest = _slowest(station_progress, target)
    return Progress(
        surface=surface,
        spec=targets_progress.spec,
        unit=targets_progress.unit,
        cell=targets_progress.cell,
        targets=targets_progress.targets,
        passes=tuple(rows),
        projection=projection,
        stations=tuple(station_progress),
        slowest_station=slowest,
    )


def _worst(figures: Sequence[StationFigure]) -> StationFigure:
    """The station that decides the pass: a failing one before a meeting one, then the
    lowest density, then the lowest bearing."""

    def key(f: StationFigure) -> tuple[int, float, float]:
        return (
            0 if f.meets is False else 1,
            math.inf if f.density is None else f.density,
            math.inf if f.bearing_percent is None else f.bearing_percent,
        )

    return min(figures, key=key)


def _combined_row(
    number: int,
    members: Sequence[StoredPass],
    figures: Sequence[StationFigure],
    singles: Sequence[ProgressRow],
    note: str | None,
) -> ProgressRow:
    """A pass of stations as one row: every station must meet; the lowest figures."""
    verdicts = [f.meets for f in figures]
    meets: bool | None
    if any(v is False for v in verdicts):
        meets = False
    elif verdicts and all(v is True for v in verdicts):
        meets = True
    else:
        meets = None
    dens = [f.density for f in figures]
    bear = [f.bearing_percent for f in figures]
    unif = [r.uniformity for r in singles]
    share = [r.cells_meeting_percent for r in singles]

    def lowest(values: Sequence[float | None]) -> float | None:
        return None if not values or any(v is None for v in values) else min(values)  # type: ignore[type-var]

    first = members[0]
    return ProgressRow(
        number=number,
        photo=first.pass_key or first.summary.photo,
        taken=min((p.summary.taken for p in members if p.summary.taken), default=None),
        density=lowest(dens),
        bearing_percent=lowest(bear),
        meets=meets,
        spot_count=sum(f.spot_count for f in figures),
        uniformity=lowest(unif),
        cells_meeting_percent=lowest(share),
        stations=tuple(figures),
        worst_station=_worst(figures).station,
        note=note,
    )


def _slowest(
    stations: Sequence[StationProgress], target: float | None
) -> tuple[Projection | None, str | None]:
    """The surface's projection, led by the station that needs the most passes."""
    if target is None or not stations:
        return None, None
    stuck = [s for s in stations if s.projection is None]
    if stuck:
        return None, stuck[0].station
    lead = max(stations, key=lambda s: (s.projection.passes_to_spec, s.projection.high or 10**9))  # type: ignore[union-attr]
    proj = lead.projection
    assert proj is not None
    highs = [s.projection.high for s in stations]  # type: ignore[union-attr]
    return (
        dataclasses.replace(
            proj,
            low=max(s.projection.low for s in stations),  # type: ignore[union-attr]
            high=None if any(h is None for h in highs) else max(highs),  # type: ignore[type-var]
        ),
        lead.station,
    )
