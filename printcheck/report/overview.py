"""One page for a machine: every surface named ``MACHINE/SURFACE``, its latest state.

Where several surfaces belong to one machine (a bed's front and rear ways, the saddle,
the cross-slide), the overview shows each one's latest pass: its verdict (the worst
station named, for a surface of stations), density and bearing, and the projection.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from printcheck.errors import OptionError
from printcheck.records import Progress

__all__ = ["SurfaceState", "machine_states", "render_overview", "write_overview"]


@dataclass(frozen=True)
class SurfaceState:
    """A surface's latest state for the overview."""

    name: str
    progress: Progress


def machine_states(db: Path, machine: str) -> list[SurfaceState]:
    """The progress of every surface of ``machine`` (named ``machine/...``), by name."""
    from printcheck.history import open_history
    from printcheck.progress import history_progress, surface_spec

    prefix = machine.strip().strip("/") + "/"
    states = []
    with open_history(db, readonly=True) as history:
        names = [n for n in history.surfaces() if n.startswith(prefix)]
        if not names:
            known = sorted({n.split("/")[0] for n in history.surfaces() if "/" in n})
            raise OptionError(
                f"overview: no surface of machine {machine!r} (surfaces named "
                f"{prefix}NAME; machines recorded: {', '.join(known) or 'none'})"
            )
        for name in names:
            stored = history.passes(name)
            if stored:
                progress = history_progress(name, stored, spec=surface_spec(stored))
                states.append(SurfaceState(name, progress))
    return states


def render_overview(machine: str, states: list[SurfaceState]) -> str:
    """The overview page's HTML (``printcheck/templates/overview.html``)."""
    from printcheck.progress import projection_words
    from printcheck.report.templating import render

    prefix = len(machine.strip("/")) + 1
    rows = []
    for state in states:
        p = state.progress
        last = p.passes[-1]
        rows.append(
            {
                "name": state.name,
                "short": state.name[prefix:],
                "passes": len(p.passes),
                "verdict": {True: "meets", False: "does not meet", None: "not judged"}[last.meets],
                "colour": {True: "#d9f2dd", False: "#f9d7d3", None: "#eeeeee"}[last.meets],
                "spec": p.spec or "",
                "worst": last.worst_station
                if last.worst_station is not None and len(last.stations) > 1
                else None,
                "density": "–" if last.density is None else f"{last.density:.1f}",
                "bearing": "–" if last.bearing_percent is None else f"{last.bearing_percent:.1f} %",
                "projection": projection_words(p),
            }
        )
    return render("overview.html", machine=machine, rows=rows)


def write_overview(db: Path, machine: str, out: Path) -> Path:
    """Write ``out/overview.html`` for ``machine``; return its path."""
    from printcheck.report.files import write_text

    states = machine_states(db, machine)
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise OptionError(f"output folder {out}: cannot be created ({exc.strerror})") from None
    return write_text(out, "overview.html", render_overview(machine, states))
