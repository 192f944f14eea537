"""The printcheck command line.

Commands only parse options, build configs, call the pipeline and pick a writer.
Heavy modules (cv2, skimage, matplotlib) are imported inside the commands that use them,
so ``printcheck --help`` is instant.

Exit status: 0 the surface meets its spec (or no spec was asked for), 1 it does not,
2 the input could not be used (one line on stderr, never a traceback).
"""

from __future__ import annotations

import json
import math
import os
import sys
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Annotated, Any, Literal

import typer

from printcheck.errors import OptionError, PrintcheckError

if TYPE_CHECKING:
    from printcheck.jobconfig import JobSettings
    from printcheck.pipeline import InspectOptions
    from printcheck.result import Result

__all__ = ["app", "main"]

app = typer.Typer(
    name="printcheck",
    add_completion=False,
    no_args_is_help=True,
    pretty_exceptions_enable=False,
    rich_markup_mode=None,
    help="Count and judge scraping prints (points per square inch, bearing) from photos.",
)

EXIT_MEETS, EXIT_FAILS, EXIT_UNUSABLE = 0, 1, 2
MIN_PX_PER_MM, MAX_PX_PER_MM = 1.0, 500.0  # a coarse scan to a microscope stage
MIN_CELL_MM = 5.0  # a cell must hold a few spots of a millimetre or two
MAX_MIN_SPOT_MM2 = 100.0

# ---------------------------------------------------------------- shared options

LayoutOpt = Annotated[
    Path | None,
    typer.Option(
        "--layout", help="Layout TOML: where the markers sit (default: the built-in 2 in card)."
    ),
]
ScaleOpt = Annotated[
    float | None,
    typer.Option(
        "--px-per-mm", help="Explicit scale for square-on photos (a rig or a scan); no markers."
    ),
]
UnitOpt = Annotated[
    Literal["in", "mm"] | None,
    typer.Option(
        "--unit", help="Units of results: in (points per square inch) or mm (per 25 mm square)."
    ),
]
CellOpt = Annotated[
    float | None,
    typer.Option("--cell", help="Side of the counting cell in --unit (default 1 in, or 25 mm)."),
]
CompoundOpt = Annotated[
    Literal["blue", "red", "auto"] | None,
    typer.Option("--compound", help="Colour of the marking compound (default auto: found from the photo)."),
]
CompoundOnOpt = Annotated[
    Literal["reference", "work"] | None,
    typer.Option(
        "--compound-on",
        help="reference: the spots carry compound (default); work: the work was coated "
        "and the spots are where the reference rubbed it through.",
    ),
]
SpecOpt = Annotated[
    str | None,
    typer.Option(
        "--spec", help="A built-in spec name (see 'printcheck specs') or a spec TOML file."
    ),
]
TargetOpt = Annotated[
    float | None,
    typer.Option(
        "--target", help="Quick density target in points per --unit cell, instead of --spec."
    ),
]
SurfaceOpt = Annotated[
    str | None, typer.Option("--surface", help="Name of the surface, e.g. bed-front-way.")
]
OutOpt = Annotated[
    Path | None, typer.Option("--out", help="Folder for result JSON, overlays and reports.")
]
JsonOpt = Annotated[bool, typer.Option("--json", help="Print only the result JSON on stdout.")]
MinSpotOpt = Annotated[
    float | None,
    typer.Option(
        "--min-spot", help="Smallest spot in mm²; smaller specks are not spots (default 0.1)."
    ),
]
ConfigOpt = Annotated[
    Path | None,
    typer.Option(
        "--config", help="Job settings file (default: printcheck.toml beside the photos)."
    ),
]
PartialOpt = Annotated[
    bool,
    typer.Option(
        "--partial", help="Measure what is visible when the window runs out of the photo."
    ),
]
DbOpt = Annotated[
    Path | None,
    typer.Option(
        "--db", help="History database (default: PRINTCHECK_DB, else the user's data folder)."
    ),
]
JobsOpt = Annotated[
    int | None, typer.Option("--jobs", help="Photos processed at once (default: all cores).")
]


@dataclass(frozen=True)
class _Common:
    """The inspect options as typed, before the job file fills the gaps."""

    layout: Path | None
    px_per_mm: float | None
    unit: str | None
    cell: float | None
    compound: str | None
    compound_on: str | None
    spec: str | None
    target: float | None
    surface: str | None
    min_spot: float | None
    partial: bool


def _pick(cli_value: Any, job_value: Any, default: Any) -> Any:
    if cli_value is not None:
        return cli_value
    if job_value is not None:
        return job_value
    return default


def _job_settings(config: Path | None, folder: Path | None) -> JobSettings:
    from printcheck.jobconfig import JobSettings, find_job_file, read_job_settings

    if config is not None:
        return read_job_settings(config)
    found = find_job_file(folder) if folder is not None else None
    return read_job_settings(found) if found is not None else JobSettings()


def _build_options(common: _Common, job: JobSettings) -> InspectOptions:
    from printcheck.layout import read_layout
    from printcheck.pipeline import InspectOptions
    from printcheck.units import MM_PER_IN, to_mm

    unit = _pick(common.unit, job.unit, "in")
    px_per_mm = _pick(common.px_per_mm, job.px_per_mm, None)
    if px_per_mm is not None and not px_per_mm > 0:
        raise OptionError(f"--px-per-mm must be greater than zero, got {px_per_mm:g}")
    if px_per_mm is not None and not MIN_PX_PER_MM <= px_per_mm <= MAX_PX_PER_MM:
        raise OptionError(
            f"--px-per-mm must be between {MIN_PX_PER_MM:g} and {MAX_PX_PER_MM:g} "
            f"(pixels per mm of a square-on photo or scan), got {px_per_mm:g}"
        )
    cell = _pick(common.cell, job.cell, None)
    if cell is not None and not cell > 0:
        raise OptionError(f"--cell must be greater than zero, got {cell:g}")
    if cell is not None:
        cell_mm = to_mm(cell, unit) if math.isfinite(cell) else math.inf
        if not MIN_CELL_MM <= cell_mm < math.inf:
            raise OptionError(
                f"--cell must be at least {MIN_CELL_MM:g} mm ({MIN_CELL_MM / MM_PER_IN:g} in) "
                f"and finite, got {cell:g} {unit}; the customary cell is 1 in or 25 mm"
            )
    min_spot = _pick(common.min_spot, job.min_spot, 0.1)
    if not 0 <= min_spot <= MAX_MIN_SPOT_MM2:
        raise OptionError(
            f"--min-spot must be between 0 and {MAX_MIN_SPOT_MM2:g} mm², got {min_spot:g}"
        )
    surface = _pick(common.surface, job.surface, None)
    if surface is not None and (not surface.strip() or "\n" in surface):
        raise OptionError(f"--surface must be a name on one line, got {surface!r}")
    layout = None
    layout_path = common.layout if common.layout is not None else job.layout
    if layout_path is not None and px_per_mm is None:
        layout = read_layout(layout_path)
    spec = None
    target = _pick(common.target, job.target, None)
    spec_name = (
        common.spec
        if common.spec is not None
        else (None if common.target is not None else job.spec)
    )
    if target is not None and spec_name is None:
        from printcheck.spec import target_spec

        if not target > 0:
            raise OptionError(f"--target must be greater than zero, got {target:g}")
        spec = target_spec(target, basis_mm=MM_PER_IN if unit == "in" else 25.0)
    elif spec_name is not None:
        from printcheck.spec import find_spec

        spec = find_spec(spec_name)
    options = InspectOptions(
        layout=layout,
        px_per_mm=px_per_mm,
        unit=unit,
        cell=cell,
        compound=_pick(common.compound, job.compound, "auto"),
        compound_on=_pick(common.compound_on, job.compound_on, "reference"),
        spec=spec,
        surface=None if surface is None else surface.strip(),
        min_spot_mm2=min_spot,
        allow_partial=common.partial,
    )
    if cell is not None and px_per_mm is None:
        w = options.layout_in_use.window
        cell_mm = to_mm(cell, unit)
        if cell_mm > max(w.width_mm, w.height_mm) + 1e-9:
            k = MM_PER_IN if unit == "in" else 1.0
            raise OptionError(
                f"--cell {cell:g} {unit} is larger than the window "
                f"({w.width_mm / k:g} x {w.height_mm / k:g} {unit}); choose a smaller cell"
            )
    return options


def _fail(message: str) -> None:
    typer.echo(f"printcheck: {message}", err=True)


def _exit_for(results: Sequence[Result], failures: int) -> int:
    if not results:
        return EXIT_UNUSABLE
    if failures:
        return EXIT_UNUSABLE
    return EXIT_FAILS if any(r.meets is False for r in results) else EXIT_MEETS


# ---------------------------------------------------------------- inspect


@app.command()
def inspect(
    photos: Annotated[list[Path], typer.Argument(help="Photos of prints.", show_default=False)],
    layout: LayoutOpt = None,
    px_per_mm: ScaleOpt = None,
    unit: UnitOpt = None,
    cell: CellOpt = None,
    compound: CompoundOpt = None,
    compound_on: CompoundOnOpt = None,
    spec: SpecOpt = None,
    target: TargetOpt = None,
    surface: SurfaceOpt = None,
    out: OutOpt = None,
    json_out: JsonOpt = False,
    min_spot: MinSpotOpt = None,
    config: ConfigOpt = None,
    partial: PartialOpt = False,
) -> None:
    """Measure the print in each photo and judge it against a spec."""
    from printcheck.pipeline import inspect_photo
    from printcheck.result import result_to_dict

    common = _Common(
        layout,
        px_per_mm,
        unit,
        cell,
        compound,
        compound_on,
        spec,
        target,
        surface,
        min_spot,
        partial,
    )
    job = _job_settings(config, photos[0].parent if photos else None)
    options = _build_options(common, job)
    results: list[Result] = []
    failures = 0
    for path in photos:
        try:
            result = inspect_photo(path, options=options)
        except PrintcheckError as exc:
            failures += 1
            _fail(str(exc))
            continue
        results.append(result)
        data = result_to_dict(result)
        if out is not None:
            from printcheck.report.files import write_photo_outputs

            write_photo_outputs(result, data, out)
        if json_out:
            typer.echo(json.dumps(data, ensure_ascii=False, indent=None if len(photos) > 1 else 2))
        else:
            from printcheck.summary import summary_text

            typer.echo(summary_text(data))
    raise typer.Exit(_exit_for(results, failures))


# ---------------------------------------------------------------- batch


@app.command()
def batch(
    folder: Annotated[
        Path, typer.Argument(help="Folder of photos of one surface's passes.", show_default=False)
    ],
    layout: LayoutOpt = None,
    px_per_mm: ScaleOpt = None,
    unit: UnitOpt = None,
    cell: CellOpt = None,
    compound: CompoundOpt = None,
    compound_on: CompoundOnOpt = None,
    spec: SpecOpt = None,
    target: TargetOpt = None,
    surface: SurfaceOpt = None,
    out: OutOpt = None,
    json_out: JsonOpt = False,
    min_spot: MinSpotOpt = None,
    config: ConfigOpt = None,
    partial: PartialOpt = False,
    db: DbOpt = None,
    jobs: JobsOpt = None,
) -> None:
    """Process every photo in FOLDER in the order taken: results, history and one report."""
    from printcheck.batch import run_batch

    if not folder.is_dir():
        raise OptionError(f"batch {folder}: not a folder; give the folder that holds the photos")
    common = _Common(
        layout,
        px_per_mm,
        unit,
        cell,
        compound,
        compound_on,
        spec,
        target,
        surface,
        min_spot,
        partial,
    )
    job = _job_settings(config, folder)
    options = _build_options(common, job)
    if options.surface is None:
        options = _with_surface(options, folder)
    if jobs is not None and jobs < 1:
        raise OptionError(f"--jobs must be 1 or more, got {jobs}")
    out_dir = out if out is not None else folder / "printcheck-out"
    outcome = run_batch(
        folder,
        options=options,
        out=out_dir,
        db=_db_path(db),
        jobs=jobs,
        json_lines=json_out,
        echo=typer.echo,
        warn=_fail,
    )
    raise typer.Exit(outcome)


def _with_surface(options: InspectOptions, folder: Path) -> InspectOptions:
    from dataclasses import replace

    name = folder.resolve().name or "surface"
    return replace(options, surface=name)


def _db_path(db: Path | None) -> Path:
    from printcheck.history import default_db_path

    return db if db is not None else default_db_path(os.environ)


# ---------------------------------------------------------------- progress


@app.command()
def progress(
    surface: Annotated[str, typer.Argument(help="Name of the surface.", show_default=False)],
    json_out: JsonOpt = False,
    db: DbOpt = None,
) -> None:
    """Show a surface's passes so far, the trend, and how many passes it may still need."""
    from printcheck.history import open_history
    from printcheck.progress import build_progress, progress_text

    path = _db_path(db)
    if not path.exists():
        raise OptionError(f"history {path}: no history yet; run 'printcheck batch' first")
    with open_history(path, readonly=True) as history:
        passes = history.passes(surface)
        if not passes:
            known = ", ".join(history.surfaces()) or "none"
            raise OptionError(
                f"progress: no passes recorded for surface {surface!r} (recorded: {known})"
            )
    data = build_progress(passes, surface=surface)
    if json_out:
        typer.echo(json.dumps(data, ensure_ascii=False, indent=2))
    else:
        typer.echo(progress_text(data))
    last = data["passes"][-1]["meets"]
    raise typer.Exit(EXIT_FAILS if last is False else EXIT_MEETS)


# ---------------------------------------------------------------- card, specs, demo


@app.command()
def card(
    window: Annotated[
        str, typer.Option("--window", help="Side of the square window: 2in, 50mm, 1in ...")
    ] = "2in",
    out: Annotated[
        Path, typer.Option("--out", help="Card file: .pdf, .png or .svg (layout .toml beside it).")
    ] = Path("printcheck-card.pdf"),
    dpi: Annotated[int, typer.Option("--dpi", help="Resolution of a PNG card.")] = 600,
) -> None:
    """Write a printable marker card and its layout file."""
    from printcheck.card import write_card
    from printcheck.units import parse_length

    window_mm = parse_length(window, default_unit="in", what="--window")
    if not 10.0 <= window_mm <= 200.0:
        raise OptionError(
            f"--window must be between 10 mm and 200 mm to print on one sheet, got {window}"
        )
    if dpi < 150 or dpi > 2400:
        raise OptionError(f"--dpi must be between 150 and 2400, got {dpi}")
    card_path, layout_path = write_card(out, window_mm=window_mm, dpi=dpi)
    typer.echo(f"card:   {card_path}")
    typer.echo(f"layout: {layout_path}")
    typer.echo("Print at 100% (no 'fit to page'), then measure the scale bar before use.")


@app.command()
def specs() -> None:
    """List the built-in specs and where each one's numbers come from."""
    from printcheck.spec import describe_specs

    typer.echo(describe_specs())


@app.command()
def demo(
    folder: Annotated[Path, typer.Argument(help="Where to render the demo job.")] = Path(
        "printcheck-demo"
    ),
    passes: Annotated[int, typer.Option("--passes", help="Spotting passes to render.")] = 6,
    seed: Annotated[int, typer.Option("--seed", help="Random seed of the rendered job.")] = 7,
) -> None:
    """Render a demo job (photos after each pass) and run batch on it, offline."""
    from printcheck.demo import run_demo

    if not 2 <= passes <= 12:
        raise OptionError(f"--passes must be between 2 and 12, got {passes}")
    raise typer.Exit(run_demo(folder, passes=passes, seed=seed, echo=typer.echo, warn=_fail))


# ---------------------------------------------------------------- entry point


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line; return the exit status (also the console-script entry)."""
    try:  # recent typer versions carry their own copy of click
        from typer._click import exceptions as click_errors
    except ImportError:  # pragma: no cover - older typer uses click itself
        from click import exceptions as click_errors  # type: ignore[no-redef]

    args = list(sys.argv[1:] if argv is None else argv)
    try:
        code = app(args=args, prog_name="printcheck", standalone_mode=False)
    except typer.Exit as exc:
        return _exit(int(exc.exit_code or 0), argv)
    except typer.Abort:
        _fail("interrupted")
        return _exit(130, argv)
    except click_errors.UsageError as exc:
        command = exc.ctx.command_path if exc.ctx is not None else "printcheck"
        _fail(f"{exc.format_message()} (see '{command} --help')")
        return _exit(EXIT_UNUSABLE, argv)
    except click_errors.ClickException as exc:
        _fail(exc.format_message())
        return _exit(EXIT_UNUSABLE, argv)
    except PrintcheckError as exc:
        _fail(str(exc))
        return _exit(EXIT_UNUSABLE, argv)
    except KeyboardInterrupt:
        _fail("interrupted; the history holds only whole passes")
        return _exit(130, argv)
    except BrokenPipeError:
        return _exit(EXIT_UNUSABLE, argv)
    except Exception as exc:  # a bug: still one line, but say how to see more
        if os.environ.get("PRINTCHECK_DEBUG"):
            raise
        _fail(f"internal error: {type(exc).__name__}: {exc} (set PRINTCHECK_DEBUG=1 for details)")
        return _exit(EXIT_UNUSABLE, argv)
    return _exit(code if isinstance(code, int) else 0, argv)


def _exit(code: int, argv: Sequence[str] | None) -> int:
    if argv is None:
        sys.exit(code)
    return code
