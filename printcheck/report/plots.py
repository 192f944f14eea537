"""Plots for the HTML report, rendered with matplotlib's Agg backend to PNG bytes.

matplotlib is imported inside the functions (not at module import), and figures are built
with :class:`matplotlib.figure.Figure` directly, never through pyplot, so no global figure
state is touched and command start-up stays fast.
"""

from __future__ import annotations

import io
from collections.abc import Mapping
from typing import Any

from printcheck.units import to_mm
from printcheck.wording import density_words, num

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


def trend_png(progress: Mapping[str, Any], *, dpi: int = 110) -> bytes:
    """Density and bearing of every pass against the spec's targets, as PNG bytes.

    Parameters
    ----------
    progress : dict
        The progress object of :func:`printcheck.progress.build_progress` (its ``passes``,
        ``targets``, ``projection``, ``unit`` and ``cell``).
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
    from matplotlib.ticker import MaxNLocator

    passes = list(progress.get("passes") or ())
    targets = progress.get("targets") or {}
    projection = progress.get("projection")
    unit = progress.get("unit") or "in"
    cell = progress.get("cell") or 1.0
    xs = [p["pass"] for p in passes]

    fig = Figure(figsize=(7.2, 4.6), dpi=dpi, layout="constrained")
    FigureCanvasAgg(fig)
    ax_d, ax_b = fig.subplots(2, 1, sharex=True)

    def dots(ax: Any, key: str) -> None:
        pts = [(p["pass"], p[key], p.get("meets")) for p in passes if p.get(key) is not None]
        if not pts:
            return
        ax.plot([x for x, _, _ in pts], [y for _, y, _ in pts], "-", color=_BLUE, lw=1.6, zorder=2)
        for x, y, ok in pts:
            if ok:
                ax.plot(x, y, "o", ms=7, color=_GREEN, zorder=3)
            else:
                ax.plot(
                    x,
                    y,
                    "o",
                    ms=7,
                    mfc="white",
                    mec=_RED if ok is False else _GREY,
                    mew=1.8,
                    zorder=3,
                )

    dots(ax_d, "density")
    target = targets.get("density")
    if target is not None:
        ax_d.axhline(target, color=_RED, ls="--", lw=1.2, label=f"target {num(target, 1)}")
    if projection and target is not None and xs and projection.get("passes_to_spec"):
        last_x = xs[-1]
        last_y = passes[-1]["density"]
        mid = last_x + projection["passes_to_spec"]
        ax_d.plot([last_x, mid], [last_y, target], ":", color=_BLUE, lw=1.6, label="projection")
        low = last_x + projection["low"]
        high = projection.get("high")
        if high is not None:
            ax_d.plot(
                [low, last_x + high],
                [target, target],
                "-",
                color=_BLUE,
                lw=5,
                alpha=0.3,
                solid_capstyle="butt",
            )
        else:
            ax_d.annotate(
                "(open-ended)",
                (low, target),
                textcoords="offset points",
                xytext=(4, 4),
                fontsize=8,
                color=_BLUE,
            )
        ax_d.plot(mid, target, "D", ms=6, color=_BLUE)
    ax_d.set_ylabel(density_words(to_mm(float(cell), str(unit)), str(unit)))
    ax_d.set_title("Density", loc="left", fontsize=10)
    tops = [p["density"] for p in passes if p.get("density") is not None]
    if target is not None:
        tops.append(target)
    ax_d.set_ylim(0, max(tops + [1.0]) * 1.15)
    if any(p.get("meets") is not None for p in passes):
        ax_d.plot([], [], "o", ms=7, color=_GREEN, label="meets spec")
        ax_d.plot([], [], "o", ms=7, mfc="white", mec=_RED, mew=1.8, label="short of spec")
    ax_d.grid(True, alpha=0.3)
    if ax_d.get_legend_handles_labels()[0]:
        ax_d.legend(loc="lower right", fontsize=8, frameon=False)

    dots(ax_b, "bearing_percent")
    bmin, bmax = targets.get("bearing_min"), targets.get("bearing_max")
    if bmin is not None or bmax is not None:
        lo = 0.0 if bmin is None else float(bmin)
        hi = 100.0 if bmax is None else float(bmax)
        ax_b.axhspan(lo, hi, color=_GREEN, alpha=0.12, label="target range")
        for v in (bmin, bmax):
            if v is not None:
                ax_b.axhline(v, color=_GREEN, ls="--", lw=1.0)
        ax_b.legend(loc="lower right", fontsize=8, frameon=False)
    ax_b.set_ylabel("bearing %")
    ax_b.set_title("Bearing", loc="left", fontsize=10)
    ax_b.set_ylim(0, 100)
    ax_b.set_xlabel("pass")
    ax_b.grid(True, alpha=0.3)
    ax_b.xaxis.set_major_locator(MaxNLocator(integer=True))
    if xs:
        right = xs[-1]
        if projection and projection.get("passes_to_spec"):
            right += projection.get("high") or projection["passes_to_spec"]
        ax_b.set_xlim(0.5, right + 0.5)

    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=dpi)
    return buf.getvalue()
