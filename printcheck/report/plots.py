"""Plots for the HTML report, rendered with matplotlib's Agg backend to PNG bytes.

matplotlib is imported inside the functions (not at module import), and figures are built
with :class:`matplotlib.figure.Figure` directly, never through pyplot, so no global figure
state is touched and command start-up stays fast.
"""

from __future__ import annotations

import io
from typing import Any

from printcheck.records import Progress, ProgressRow
from printcheck.units import to_mm
from printcheck.wording import cell_words, density_words, num

__all__ = ["trend_png", "warm_up"]

_BLUE = "#1f5fa8"
_GREEN = "#2e8b57"
_RED = "#c0392b"
_GREY = "#7f8c8d"


def warm_up() -> None:
    """Import matplotlib and draw a tiny labelled figure, so the first real plot is quick.

    Importing matplotlib and its first text drawing (font loading) take about a second;
    batch runs this on a thread while the photos are measured.  Any failure is left
    for :func:`trend_png` to report.
    """
    try:
        from matplotlib.backends.backend_agg import FigureCanvasAgg
        from matplotlib.figure import Figure

        fig = Figure(figsize=(1.0, 1.0), dpi=20, layout="constrained")
        FigureCanvasAgg(fig)
        ax = fig.subplots()
        ax.plot([0, 1], [0, 1], marker="o")
        ax.set_ylabel(density_words(to_mm(1.0, "in"), "in"))
        fig.savefig(io.BytesIO(), format="png")
    except Exception:  # the report itself will say what is wrong
        pass


def trend_png(progress: Progress, *, dpi: int = 110) -> bytes:
    """Density and bearing of every pass against the spec's targets, as PNG bytes.

    Parameters
    ----------
    progress : Progress
        A surface's progress (:func:`printcheck.progress.build_progress`): its passes,
        targets, projection, unit and cell.
    dpi : int
        Resolution of the PNG (the figure is 7.2 x 4.6 in).

    Returns
    -------
    bytes
        A PNG image.  Passes that meet the spec are drawn as filled green dots, others as
        open red ones; the projection, when there is one, as a dotted line to the
        density target with its low/high range.
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(7.2, 4.6), dpi=dpi, layout="constrained")
    FigureCanvasAgg(fig)
    ax_d, ax_b = fig.subplots(2, 1, sharex=True)
    _density_panel(ax_d, progress)
    _bearing_panel(ax_b, progress)
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=dpi)
    return buf.getvalue()


def _dots(ax: Any, passes: tuple[ProgressRow, ...], key: str) -> None:
    """The figure ``key`` of each pass: a line, and a dot per pass by its verdict."""
    pts = [(p.number, getattr(p, key), p.meets) for p in passes if getattr(p, key) is not None]
    if not pts:
        return
    ax.plot([x for x, _, _ in pts], [y for _, y, _ in pts], "-", color=_BLUE, lw=1.6, zorder=2)
    for x, y, ok in pts:
        if ok:
            ax.plot(x, y, "o", ms=7, color=_GREEN, zorder=3)
        else:
            ax.plot(
                x, y, "o", ms=7, mfc="white", mec=_RED if ok is False else _GREY, mew=1.8, zorder=3
            )


def _density_panel(ax: Any, progress: Progress) -> None:
    """Density per pass, the target line and the projection."""
    passes = progress.passes
    target = progress.targets.density
    _dots(ax, passes, "density")
    if target is not None:
        ax.axhline(target, color=_RED, ls="--", lw=1.2, label=f"target {num(target, 1)}")
    projection = progress.projection
    if projection and target is not None and passes and projection.passes_to_spec:
        last_x = passes[-1].number
        mid = last_x + projection.passes_to_spec
        last_y = passes[-1].density
        ax.plot([last_x, mid], [last_y, target], ":", color=_BLUE, lw=1.6, label="projection")
        low = last_x + projection.low
        if projection.high is not None:
            high = last_x + projection.high
            ax.plot(
                [low, high],
                [target, target],
                "-",
                color=_BLUE,
                lw=5,
                alpha=0.3,
                solid_capstyle="butt",
            )
        else:
            ax.annotate(
                "(open-ended)",
                (low, target),
                textcoords="offset points",
                xytext=(4, 4),
                fontsize=8,
                color=_BLUE,
            )
        ax.plot(mid, target, "D", ms=6, color=_BLUE)
    ax.set_ylabel(cell_words(progress.cell, progress.unit))
    ax.set_title("Density", loc="left", fontsize=10)
    tops = [p.density for p in passes if p.density is not None]
    if target is not None:
        tops.append(target)
    ax.set_ylim(0, max(tops + [1.0]) * 1.15)
    if any(p.meets is not None for p in passes):
        ax.plot([], [], "o", ms=7, color=_GREEN, label="meets spec")
        ax.plot([], [], "o", ms=7, mfc="white", mec=_RED, mew=1.8, label="short of spec")
    ax.grid(True, alpha=0.3)
    if ax.get_legend_handles_labels()[0]:
        ax.legend(loc="lower right", fontsize=8, frameon=False)


def _bearing_panel(ax: Any, progress: Progress) -> None:
    """Bearing per pass within the target range; the pass axis."""
    from matplotlib.ticker import MaxNLocator

    passes = progress.passes
    _dots(ax, passes, "bearing_percent")
    bmin, bmax = progress.targets.bearing_min, progress.targets.bearing_max
    if bmin is not None or bmax is not None:
        lo = 0.0 if bmin is None else float(bmin)
        hi = 100.0 if bmax is None else float(bmax)
        ax.axhspan(lo, hi, color=_GREEN, alpha=0.12, label="target range")
        for v in (bmin, bmax):
            if v is not None:
                ax.axhline(v, color=_GREEN, ls="--", lw=1.0)
        ax.legend(loc="lower right", fontsize=8, frameon=False)
    ax.set_ylabel("bearing %")
    ax.set_title("Bearing", loc="left", fontsize=10)
    ax.set_ylim(0, 100)
    ax.set_xlabel("pass")
    ax.grid(True, alpha=0.3)
    ax.xaxis.set_major_locator(MaxNLocator(integer=True))
    if passes:
        right = passes[-1].number
        projection = progress.projection
        if projection and projection.passes_to_spec:
            right += projection.high or projection.passes_to_spec
        ax.set_xlim(0.5, right + 0.5)
