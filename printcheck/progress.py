"""Progress: a surface's passes so far, their trend, and a projection to spec.

Pure functions on plain data: the pass dicts of :meth:`printcheck.history.History.passes`
(or bare result dicts) in, the progress JSON contract of DESIGN.md
(``printcheck-progress/1``) out.

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
Density is fitted against pass number by least squares on the last ``fit_passes`` passes
(default 5).  With the fitted rate ``a`` (points per pass), its standard error ``se`` and
the fitted density at the latest pass ``y_n``, the passes still needed are
``ceil((target - y_n) / a)`` (at least 1), with ``low`` and ``high`` from the rates
``a + se`` and ``a - se`` (``high`` is ``None`` when ``a - se <= 0``: the trend may not
reach the target at all).  The projection is ``None`` with fewer than three passes, without
a density target, or when the fitted rate is not positive; ``passes_to_spec`` (and
``low``, ``high``) is 0 when the latest pass already reaches the target, however few passes
there are.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

from printcheck.spec import Spec
from printcheck.units import to_mm
from printcheck.wording import density_words, num

__all__ = [
    "PROGRESS_FORMAT",
    "LineFit",
    "build_progress",
    "progress_text",
    "surface_spec",
    "fit_line",
    "project",
    "uniformity",
    "cells_meeting_percent",
    "projection_words",
]

PROGRESS_FORMAT = "printcheck-progress/1"
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
        ``slope_stderr`` is ``sqrt(SSR / (n - 2) / Sxx)`` (0 for n == 2).
    """
    n = len(x)
    if n != len(y) or n < 2:
        raise ValueError(
            f"fit_line needs two or more (x, y) pairs of equal length, got {n}, {len(y)}"
        )
    mx = sum(x) / n
    my = sum(y) / n
    sxx = sum((xi - mx) ** 2 for xi in x)
    if sxx == 0:
        raise ValueError("fit_line needs at least two different x values")
    sxy = sum((xi - mx) * (yi - my) for xi, yi in zip(x, y, strict=True))
    slope = sxy / sxx
    intercept = my - slope * mx
    if n > 2:
        ssr = sum((yi - (slope * xi + intercept)) ** 2 for xi, yi in zip(x, y, strict=True))
        se = math.sqrt(ssr / (n - 2) / sxx)
    else:
        se = 0.0
    return LineFit(slope, intercept, se)


def _cell_mm(result: Mapping[str, Any]) -> float | None:
    unit = result.get("unit")
    cell = result.get("cell")
    if unit not in ("in", "mm") or not isinstance(cell, int | float) or cell <= 0:
        return None
    return to_mm(float(cell), str(unit))


def uniformity(result: Mapping[str, Any]) -> float | None:
    """``100 * (1 - CV)`` of the complete cells' densities, clipped to 0..100 (see module)."""
    dens = [
        float(c["density"])
        for c in result.get("cells") or ()
        if c.get("complete") and c.get("density") is not None
    ]
    if len(dens) < 2:
        return None
    mean = sum(dens) / len(dens)
    if mean <= 0:
        return None
    sd = math.sqrt(sum((d - mean) ** 2 for d in dens) / len(dens))
    return round(min(100.0, max(0.0, 100.0 * (1.0 - sd / mean))), 2)


def cells_meeting_percent(result: Mapping[str, Any], target: float | None) -> float | None:
    """Percent of complete cells with density >= ``target`` (None without either)."""
    if target is None:
        return None
    dens = [
        float(c["density"])
        for c in result.get("cells") or ()
        if c.get("complete") and c.get("density") is not None
    ]
    if not dens:
        return None
    return round(100.0 * sum(d >= target - 1e-9 for d in dens) / len(dens), 2)


def _fit_block(
    densities: Sequence[float], target: float, fit_passes: int
) -> tuple[tuple[LineFit | None, list[float]], dict[str, Any]]:
    """The line through the last ``fit_passes`` (>= 3) passes, and its figures for output."""
    k = max(MIN_PASSES, int(fit_passes))
    ys = [float(d) for d in densities][-k:]
    xs = [float(len(densities) - len(ys) + i + 1) for i in range(len(ys))]
    fit = fit_line(xs, ys) if len(ys) >= MIN_PASSES else None
    return (fit, xs), {
        "rate": None if fit is None else round(fit.slope, 4),
        "rate_stderr": None if fit is None else round(fit.slope_stderr, 4),
        "fit_passes": len(ys),
        "target": round(float(target), 4),
    }


def project(
    densities: Sequence[float],
    target: float | None,
    *,
    fit_passes: int = 5,
) -> dict[str, Any] | None:
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
    dict or None
        ``{"passes_to_spec", "low", "high", "rate", "rate_stderr", "fit_passes", "target"}``
        or None when there is nothing to project.
    """
    if target is None or not densities:
        return None
    if float(densities[-1]) >= target:
        done: dict[str, Any] = {"passes_to_spec": 0, "low": 0, "high": 0}
        return {**done, **_fit_block(densities, target, fit_passes)[1]}
    if len(densities) < MIN_PASSES:
        return None
    (fit, xs), base = _fit_block(densities, target, fit_passes)
    assert fit is not None
    if fit.slope <= 0:
        return None
    # distance still to go, from the fitted line at the latest pass
    gap = max(target - (fit.slope * xs[-1] + fit.intercept), 0.0)

    def needed(rate: float) -> int:
        return max(1, math.ceil(gap / rate - 1e-9))

    mid = needed(fit.slope)
    low = needed(fit.slope + fit.slope_stderr)
    hi_rate = fit.slope - fit.slope_stderr
    high = needed(hi_rate) if hi_rate > 0 else None
    return {"passes_to_spec": mid, "low": low, "high": high, **base}


def _spec_from_fields(fields: Mapping[str, Any]) -> Spec | None:
    """Rebuild a Spec from the fields the history kept (None if they do not fit)."""
    names = {f.name for f in dataclasses.fields(Spec)}
    kwargs = {k: v for k, v in fields.items() if k in names}
    if "sources" in kwargs:
        kwargs["sources"] = tuple(tuple(pair) for pair in kwargs["sources"] or ())
    try:
        return Spec(**kwargs)
    except TypeError:
        return None


def surface_spec(passes: Sequence[Mapping[str, Any]]) -> Spec | None:
    """The spec of a surface's latest pass that names one.

    The spec's targets kept in the history (``spec_targets``) win; otherwise a built-in
    spec of the recorded name; otherwise None.
    """
    from printcheck.builtin_specs import builtin_specs

    for p in reversed(passes):
        fields = p.get("spec_targets")
        if isinstance(fields, Mapping):
            spec = _spec_from_fields(fields)
            if spec is not None:
                return spec
        res = p["result"] if isinstance(p.get("result"), Mapping) else p
        block = res.get("spec")
        name = p.get("spec") if isinstance(p.get("spec"), str) else None
        name = name or (block.get("name") if isinstance(block, Mapping) else None)
        if name:
            for spec in builtin_specs():
                if spec.name == name:
                    return spec
            return None
    return None


def build_progress(
    passes: Sequence[Mapping[str, Any]],
    surface: str | None = None,
    *,
    spec: Spec | None = None,
    fit_passes: int = 5,
) -> dict[str, Any]:
    """The progress JSON object of ``surface`` (contract ``printcheck-progress/1``).

    Parameters
    ----------
    passes : sequence of dict
        In pass order: the dicts of ``History.passes`` (with a ``result`` key) or bare
        result dicts (``result_to_dict`` output).
    surface : str
        The surface's name.  (``build_progress(surface, passes)`` is accepted too.)
    spec : Spec or None
        The surface's spec; gives the density target of the projection.  None takes it
        from the passes (:func:`surface_spec`: the targets the history kept, else a
        built-in spec of the recorded name); without any, ``projection`` is None.
    fit_passes : int
        Passes the trend line is fitted to (the most recent ones).

    Returns
    -------
    dict
        ``format``, ``surface``, ``spec``, ``unit``, ``cell``, ``targets``, ``passes``
        (each ``pass``, ``photo``, ``taken``, ``density``, ``bearing_percent``, ``meets``,
        ``spot_count``, ``uniformity``, ``cells_meeting_percent``) and ``projection``.
        Densities are in points per the latest pass's cell (passes counted on another
        cell are converted: density scales with the cell's area).
    """
    if isinstance(passes, str):  # build_progress(surface, passes)
        passes, surface = surface, passes  # type: ignore[assignment]
    if surface is None:
        raise TypeError("build_progress needs the surface name")
    passes = list(passes or ())
    if spec is None:
        spec = surface_spec(passes)
    results = [p["result"] if "result" in p else p for p in passes]
    last = results[-1] if results else {}
    basis_mm = _cell_mm(last)
    rows = []
    for n, res in enumerate(results, start=1):
        d = res.get("density")
        cell_mm = _cell_mm(res)
        factor = 1.0
        if basis_mm is not None and cell_mm is not None:
            factor = (basis_mm / cell_mm) ** 2
        cell_target = None
        if spec is not None and cell_mm:
            cell_target = spec.density_target(cell_mm, per_cell=True)
        spec_block = res.get("spec") if isinstance(res.get("spec"), Mapping) else None
        rows.append(
            {
                "pass": n,
                "photo": res.get("photo"),
                "taken": res.get("taken"),
                "density": None if d is None else round(float(d) * factor, 2),
                "bearing_percent": res.get("bearing_percent"),
                "meets": None if spec_block is None else spec_block.get("meets"),
                "spot_count": res.get("spot_count"),
                "uniformity": uniformity(res),
                "cells_meeting_percent": cells_meeting_percent(res, cell_target),
            }
        )
    spec_name = spec.name if spec is not None else None
    if spec_name is None:
        for p, res in zip(reversed(passes), reversed(results), strict=True):
            name = p.get("spec") if "result" in p else None
            block = res.get("spec")
            name = name or (block.get("name") if isinstance(block, Mapping) else None)
            if name:
                spec_name = name
                break
    target = cell_target = None
    if spec is not None and basis_mm:
        target = spec.density_target(basis_mm)
        cell_target = spec.density_target(basis_mm, per_cell=True)
    densities = [r["density"] for r in rows]
    known = [float(d) for d in densities if d is not None]
    projection = None
    if len(known) == len(densities):
        projection = project(known, target, fit_passes=fit_passes)
    targets = {
        "density": None if target is None else round(target, 4),
        "cell_density": None if cell_target is None else round(cell_target, 4),
        "bearing_min": None if spec is None else spec.bearing_min,
        "bearing_max": None if spec is None else spec.bearing_max,
    }
    return {
        "format": PROGRESS_FORMAT,
        "surface": surface,
        "spec": spec_name,
        "unit": last.get("unit"),
        "cell": last.get("cell"),
        "targets": targets,
        "passes": rows,
        "projection": projection,
    }


def _per(progress: Mapping[str, Any]) -> str:
    unit = progress.get("unit") or "in"
    return density_words(to_mm(float(progress.get("cell") or 1.0), unit), unit)


def projection_words(progress: Mapping[str, Any]) -> str:
    """The projection as one sentence, for people (no capital, no full stop)."""
    passes = list(progress.get("passes") or ())
    target = (progress.get("targets") or {}).get("density")
    proj = progress.get("projection")
    if target is None:
        return "no density target to project against"
    if proj is None:
        if len(passes) < MIN_PASSES:
            return f"too few passes yet ({len(passes)} of {MIN_PASSES} needed)"
        return f"the density is not approaching the target of {num(target, 1)}"
    if proj["passes_to_spec"] == 0:
        return f"the latest pass reaches the density target of {num(target, 1)}"
    hi = proj.get("high")
    rng = f"{proj['low']} to {hi}" if hi is not None else f"{proj['low']} or more"
    more = proj["passes_to_spec"]
    return (
        f"about {more} more pass{'es' if more != 1 else ''} to {num(target, 1)} "
        f"{_per(progress)} (likely {rng}; {proj['rate']:+.1f} per pass)"
    )


def progress_text(progress: Mapping[str, Any]) -> str:
    """A few lines for people: the latest pass against the spec, the trend, the projection."""
    passes = list(progress.get("passes") or ())
    surface = progress.get("surface") or "surface"
    if not passes:
        return f"{surface}: no passes recorded"
    per = _per(progress)
    last = passes[-1]
    spec = progress.get("spec")
    verdict = {True: "meets", False: "does not meet", None: "not judged against"}[last.get("meets")]
    lines = [
        f"{surface}: {len(passes)} pass{'es' if len(passes) != 1 else ''}; "
        f"latest {last.get('photo')} {verdict} {spec or 'a spec'}".rstrip()
    ]
    for p in passes:
        d = p.get("density")
        b = p.get("bearing_percent")
        u = p.get("uniformity")
        mark = {True: "ok", False: "short", None: ""}[p.get("meets")]
        lines.append(
            f"  pass {p['pass']:>2}  {'-' if d is None else f'{d:6.1f}'} {per}, "
            f"bearing {'-' if b is None else f'{b:4.1f}'} %, "
            f"uniformity {'-' if u is None else f'{u:3.0f}'} %  {mark}".rstrip()
        )
    lines.append(f"projection: {projection_words(progress)}")
    return "\n".join(lines)
