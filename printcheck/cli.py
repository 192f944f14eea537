"""The printcheck command line.

Commands only parse options, build configs, call the pipeline and pick a writer.
Heavy modules (cv2, skimage, matplotlib) are imported inside the commands that use them,
so ``printcheck --help`` is instant.

Exit status: 0 the surface meets its spec (or no spec was asked for), 1 it does not,
2 the input could not be used (one line on stderr, never a traceback); ``batch`` only: 3
some photos were not measured because their worker process was killed (the rest were).
Ctrl-C: 130 (SIGTERM: 143), with one line saying what was kept.
"""

from __future__ import annotations

import contextlib
import json
import os
import signal
import sys
from collections.abc import Callable, Mapping, Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Annotated, Any, Literal, TypeVar

import typer

from printcheck.errors import OptionError, PrintcheckError

if TYPE_CHECKING:
    from printcheck.jobconfig import JobSettings
    from printcheck.options import InspectOptions

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

# The library's parameter names and the flags that set them (see _in_flags).
FLAGS = {
    "px_per_mm": "--px-per-mm",
    "unit": "--unit",
    "cell": "--cell",
    "compound": "--compound",
    "compound_on": "--compound-on",
    "target": "--target",
    "surface": "--surface",
    "min_spot_mm2": "--min-spot",
    "jobs": "--jobs",
}


def _show_version(value: bool) -> None:
    if value:
        from printcheck import __version__

        typer.echo(f"printcheck {__version__}")
        raise typer.Exit(0)


@app.callback()
def _root(
    version: Annotated[
        bool,
        typer.Option(
            "--version",
            help="Show printcheck's version and exit.",
            callback=_show_version,
            is_eager=True,
        ),
    ] = False,
) -> None:
    """Count and judge scraping prints (points per square inch, bearing) from photos."""


# ---------------------------------------------------------------- shared options


def _option(kind: Any, flag: str, text: str) -> Any:
    """A command-line option of type ``kind``: its flag and its help text."""
    return Annotated[kind, typer.Option(flag, help=text)]


JsonOpt = Annotated[bool, typer.Option("--json", help="Print only the result JSON on stdout.")]
DbOpt = Annotated[
    Path | None,
    typer.Option(
        "--db", help="History database (default: PRINTCHECK_DB, else the user's data folder)."
    ),
]
JobsOpt = Annotated[
    int | None, typer.Option("--jobs", help="Photos processed at once (default: all cores).")
]
SurfaceArg = Annotated[str, typer.Argument(help="Name of the surface.", show_default=False)]

# The options inspect and batch share, defined once, in the order --help lists them:
# (parameter, type with its option, default).
INSPECT_OPTIONS: tuple[tuple[str, Any, Any], ...] = (
    (
        "layout",
        _option(
            Path | None,
            "--layout",
            "Layout TOML: where the markers sit (default: the built-in 2 in card).",
        ),
        None,
    ),
    (
        "px_per_mm",
        _option(
            float | None,
            "--px-per-mm",
            "Explicit scale for square-on photos (a rig or a scan); no markers.",
        ),
        None,
    ),
    (
        "unit",
        _option(
            Literal["in", "mm"] | None,
            "--unit",
            "Units of results: in (points per square inch) or mm (per 25 mm square).",
        ),
        None,
    ),
    (
        "cell",
        _option(
            float | None, "--cell", "Side of the counting cell in --unit (default 1 in, or 25 mm)."
        ),
        None,
    ),
    (
        "compound",
        _option(
            Literal["blue", "red", "auto"] | None,
            "--compound",
            "Colour of the marking compound (default auto: read from the photo).",
        ),
        None,
    ),
    (
        "compound_on",
        _option(
            Literal["reference", "work"] | None,
            "--compound-on",
            "reference: the spots carry compound (default); work: the work was coated "
            "and the spots are where the reference rubbed it through.",
        ),
        None,
    ),
    (
        "spec",
        _option(
            str | None,
            "--spec",
            "A built-in spec name (see 'printcheck specs') or a spec TOML file.",
        ),
        None,
    ),
    (
        "target",
        _option(
            float | None,
            "--target",
            "Quick density target in points per --unit cell, instead of --spec.",
        ),
        None,
    ),
    ("surface", _option(str | None, "--surface", "Name of the surface, e.g. bed-front-way."), None),
    ("out", _option(Path | None, "--out", "Folder for result JSON, overlays and reports."), None),
    ("json_out", JsonOpt, False),
    (
        "min_spot",
        _option(
            float | None,
            "--min-spot",
            "Smallest spot in mm²; smaller specks are not spots (default 0.1).",
        ),
        None,
    ),
    (
        "config",
        _option(
            Path | None,
            "--config",
            "Job settings file (default: printcheck.toml beside the photos).",
        ),
        None,
    ),
    (
        "partial",
        _option(
            bool, "--partial", "Measure what is visible when the window runs out of the photo."
        ),
        False,
    ),
)

Command = TypeVar("Command", bound=Callable[..., None])


def _with_inspect_options(command: Command) -> Command:
    """Give ``command`` the :data:`INSPECT_OPTIONS` after its arguments.

    Typer reads a command's options from its signature; the command takes the shared
    ones as keyword arguments (``**given``) and finds them in ``ctx.params``.
    """
    import inspect as python_inspect

    keyword = python_inspect.Parameter.KEYWORD_ONLY
    sig = python_inspect.signature(command, eval_str=True)
    own = [p for p in sig.parameters.values() if p.kind is not p.VAR_KEYWORD]
    arguments = [p for p in own if p.default is p.empty]
    extra = [p.replace(kind=keyword) for p in own if p.default is not p.empty]
    shared = [
        python_inspect.Parameter(name, keyword, default=default, annotation=kind)
        for name, kind, default in INSPECT_OPTIONS
    ]
    command.__signature__ = sig.replace(  # type: ignore[attr-defined]
        parameters=[*arguments, *shared, *extra]
    )
    return command


def _job_settings(config: Path | None, folder: Path | None) -> JobSettings:
    from printcheck.jobconfig import JobSettings, find_job_file, read_job_settings

    if config is not None:
        return read_job_settings(config)
    found = find_job_file(folder) if folder is not None else None
    return read_job_settings(found) if found is not None else JobSettings()


def _inspect_options(params: Mapping[str, Any], folder: Path | None) -> InspectOptions:
    """The inspect options of a command: its options over the job file over the defaults.

    ``params`` are the command's parsed parameters (``ctx.params``); the job file is
    ``--config``, else ``printcheck.toml`` in ``folder``.
    """
    from printcheck.jobconfig import JobSettings, resolve_settings
    from printcheck.options import options_from_settings

    layout = params["layout"]
    given = JobSettings(
        surface=params["surface"],
        layout=None if layout is None else str(layout),
        px_per_mm=params["px_per_mm"],
        spec=params["spec"],
        target=params["target"],
        unit=params["unit"],
        cell=params["cell"],
        compound=params["compound"],
        compound_on=params["compound_on"],
        min_spot=params["min_spot"],
    )
    settings = resolve_settings(given, _job_settings(params["config"], folder))
    return options_from_settings(settings, allow_partial=params["partial"])


def _in_flags(exc: PrintcheckError) -> str:
    """The error's message, a leading library parameter name said as its flag."""
    text = str(exc)
    parameter = getattr(exc, "parameter", None)
    flag = FLAGS.get(parameter or "")
    if parameter and flag and text.startswith(parameter):
        return flag + text[len(parameter) :]
    return text


def _fail(message: str) -> None:
    typer.echo(f"printcheck: {message}", err=True)


def _exit_for(verdicts: Sequence[bool | None], failures: int) -> int:
    if not verdicts or failures:
        return EXIT_UNUSABLE
    return EXIT_FAILS if any(meets is False for meets in verdicts) else EXIT_MEETS


# ---------------------------------------------------------------- inspect


@app.command()
@_with_inspect_options
def inspect(
    ctx: typer.Context,
    photos: Annotated[list[Path], typer.Argument(help="Photos of prints.", show_default=False)],
    **given: Any,
) -> None:
    """Measure the print in each photo and judge it against a spec."""
    from printcheck.pipeline import inspect_photo
    from printcheck.serde import summarize, summary_to_dict

    options = _inspect_options(ctx.params, photos[0].parent if photos else None)
    out: Path | None = ctx.params["out"]
    json_out: bool = ctx.params["json_out"]
    verdicts: list[bool | None] = []
    failures = 0
    for path in photos:
        try:
            result = inspect_photo(path, options=options)
        except PrintcheckError as exc:
            failures += 1
            _fail(_in_flags(exc))
            continue
        summary = summarize(result)
        verdicts.append(summary.meets)
        if out is not None:
            from printcheck.report.files import write_photo_outputs

            write_photo_outputs(result, out)
        if json_out:
            data = summary_to_dict(summary)
            typer.echo(json.dumps(data, ensure_ascii=False, indent=None if len(photos) > 1 else 2))
        else:
            from printcheck.summary import summary_text

            typer.echo(summary_text(summary))
    raise typer.Exit(_exit_for(verdicts, failures))


# ---------------------------------------------------------------- batch


@app.command()
@_with_inspect_options
def batch(
    ctx: typer.Context,
    folder: Annotated[
        Path, typer.Argument(help="Folder of photos of one surface's passes.", show_default=False)
    ],
    db: DbOpt = None,
    jobs: JobsOpt = None,
    group: Annotated[
        str | None,
        typer.Option(
            "--group",
            help="How photos form passes: auto (default), folder (a subfolder per pass), "
            "name (p2-st1.jpg), stations (the job file's list, in order), photo (one each).",
        ),
    ] = None,
    order: Annotated[
        str | None,
        typer.Option("--order", help="Order of the photos: time (camera time, default) or name."),
    ] = None,
    machine: Annotated[
        str | None,
        typer.Option("--machine", help="Machine the surface belongs to: MACHINE/SURFACE."),
    ] = None,
    same_surface: Annotated[
        bool,
        typer.Option(
            "--same-surface", help="Add to a surface whose passes came from another folder."
        ),
    ] = False,
    remeasure: Annotated[
        bool,
        typer.Option("--remeasure", help="Measure every photo again, even unchanged ones."),
    ] = False,
    note: Annotated[
        str | None,
        typer.Option(
            "--note", help="Note kept with the passes measured now (who scraped, compound...)."
        ),
    ] = None,
    **given: Any,
) -> None:
    """Process every photo in FOLDER in the order taken: results, history and one report."""
    from printcheck.batch import run_batch
    from printcheck.stations import GROUPS, ORDERS

    if not folder.is_dir():
        raise OptionError(f"batch {folder}: not a folder; give the folder that holds the photos")
    options = _inspect_options(ctx.params, folder)
    job = _job_settings(ctx.params["config"], folder)
    if options.surface is None:
        options = _with_surface(options, folder)
    group = group or job.group or "auto"
    order = order or job.order or "time"
    if group not in GROUPS:
        raise OptionError(f"--group must be one of {', '.join(GROUPS)}, got {group!r}")
    if order not in ORDERS:
        raise OptionError(f"--order must be one of {', '.join(ORDERS)}, got {order!r}")
    machine = machine if machine is not None else job.machine
    if machine is not None:
        options = _on_machine(options, machine)
    out: Path | None = ctx.params["out"]
    history = db if db is not None else (Path(job.history) if job.history else None)
    outcome = run_batch(
        folder,
        options=options,
        out=out if out is not None else folder / "printcheck-out",
        db=_db_path(history),
        jobs=jobs,
        json_lines=ctx.params["json_out"],
        echo=typer.echo,
        warn=_fail,
        group=group,
        order=order,
        stations=job.stations or (),
        same_surface=same_surface,
        remeasure=remeasure,
        note=note,
    )
    raise typer.Exit(outcome)


def _on_machine(options: InspectOptions, machine: str) -> InspectOptions:
    """The options with the surface named ``MACHINE/SURFACE`` (unless it names one)."""
    from dataclasses import replace

    name = machine.strip().strip("/")
    if not name or any(ord(ch) < 32 for ch in name):
        raise OptionError(f"--machine must be a name on one line, got {machine!r}")
    surface = options.surface or "surface"
    if "/" in surface:
        return options
    return replace(options, surface=f"{name}/{surface}")


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
    surface: SurfaceArg,
    json_out: JsonOpt = False,
    db: DbOpt = None,
) -> None:
    """Show a surface's passes so far, the trend, and how many passes it may still need."""
    from printcheck.history import open_history
    from printcheck.progress import progress_text, recorded_progress
    from printcheck.serde import progress_to_dict

    with open_history(_existing_history(db), readonly=True) as history:
        _, _, report = recorded_progress(history, surface, command="progress")
    if json_out:
        typer.echo(json.dumps(progress_to_dict(report), ensure_ascii=False, indent=2))
    else:
        typer.echo(progress_text(report))
    raise typer.Exit(EXIT_FAILS if report.passes[-1].meets is False else EXIT_MEETS)


# ---------------------------------------------------------------- surfaces and passes

surface_app = typer.Typer(
    help="List, rename and remove the surfaces in the history.", no_args_is_help=True
)
pass_app = typer.Typer(
    help="Remove or restore a pass or a photo, or keep a note with a pass.", no_args_is_help=True
)
app.add_typer(surface_app, name="surface")
app.add_typer(pass_app, name="pass")


def _existing_history(db: Path | None) -> Path:
    path = _db_path(db)
    if not path.exists():
        raise OptionError(f"history {path}: no history yet; run 'printcheck batch' first")
    return path


@surface_app.command("list")
def surface_list(db: DbOpt = None, json_out: JsonOpt = False) -> None:
    """List the surfaces: passes, photos, the folder they came from, the latest photo."""
    from printcheck.history import open_history

    with open_history(_existing_history(db), readonly=True) as history:
        rows = history.surface_list()
    if json_out:
        import dataclasses

        typer.echo(json.dumps([dataclasses.asdict(r) for r in rows], ensure_ascii=False, indent=2))
        return
    if not rows:
        typer.echo("no surfaces recorded")
        return
    for r in rows:
        typer.echo(
            f"{r.name}: {r.passes} pass{'es' if r.passes != 1 else ''}, {r.photos} photo"
            f"{'s' if r.photos != 1 else ''}, latest {r.latest or '-'}"
            + (f", from {r.folder}" if r.folder else "")
        )


@surface_app.command("rename")
def surface_rename(
    old: Annotated[str, typer.Argument(help="The surface's name now.", show_default=False)],
    new: Annotated[str, typer.Argument(help="Its new name.", show_default=False)],
    db: DbOpt = None,
) -> None:
    """Rename a surface (its passes go with it)."""
    from printcheck.history import open_history

    with open_history(_existing_history(db)) as history:
        history.rename_surface(old, new)
    typer.echo(f"renamed {old!r} to {new!r}")


@surface_app.command("remove")
def surface_remove(
    surface: Annotated[str, typer.Argument(help="The surface to remove.", show_default=False)],
    yes: Annotated[
        bool, typer.Option("--yes", help="Really remove it and all its passes.")
    ] = False,
    db: DbOpt = None,
) -> None:
    """Remove a surface and all its passes from the history (asks for --yes)."""
    from printcheck.history import open_history

    with open_history(_existing_history(db)) as history:
        known = {r.name: r for r in history.surface_list()}
        if surface.strip() not in known:
            raise OptionError(
                f"surface remove: no surface {surface!r} (recorded: {', '.join(known) or 'none'})"
            )
        info = known[surface.strip()]
        if not yes:
            raise OptionError(
                f"surface remove: {surface!r} has {info.passes} passes ({info.photos} photos); "
                "give --yes to remove them from the history (the photos stay on disk)"
            )
        count = history.remove_surface(surface)
    typer.echo(f"removed {surface!r} and its {count} photo records")


@pass_app.command("remove")
def pass_remove(
    surface: SurfaceArg,
    number: Annotated[
        int | None, typer.Option("--pass", help="Pass number (as progress shows it).")
    ] = None,
    photo: Annotated[
        str | None, typer.Option("--photo", help="A photo's file name (one station).")
    ] = None,
    db: DbOpt = None,
) -> None:
    """Take a pass (all its stations) or one photo out of a surface's passes.

    The record is kept, marked removed: it no longer counts in progress or reports, and
    a batch of the folder does not record it again.
    """
    from printcheck.history import open_history

    if (number is None) == (photo is None):
        raise OptionError("pass remove: give either --pass N or --photo NAME")
    with open_history(_existing_history(db)) as history:
        photos = history.remove_pass(surface, number=number, photo=photo)
    what = f"pass {number}" if number is not None else f"photo {photo}"
    typer.echo(f"removed {what} of {surface!r}: {', '.join(photos)}")


@pass_app.command("restore")
def pass_restore(
    surface: SurfaceArg,
    photo: Annotated[
        str | None, typer.Option("--photo", help="One removed photo (default: every one).")
    ] = None,
    db: DbOpt = None,
) -> None:
    """Put removed photos back among a surface's passes (undoes 'pass remove')."""
    from printcheck.history import open_history

    with open_history(_existing_history(db)) as history:
        photos = history.restore(surface, photo)
    typer.echo(f"restored to {surface!r}: {', '.join(photos)}")


@pass_app.command("note")
def pass_note(
    surface: SurfaceArg,
    number: Annotated[int, typer.Argument(help="Pass number.", show_default=False)],
    text: Annotated[
        str,
        typer.Argument(
            help="Who scraped, compound, reference; empty to clear.", show_default=False
        ),
    ],
    db: DbOpt = None,
) -> None:
    """Keep a short note with a pass (shown by progress and in the report)."""
    from printcheck.history import open_history

    with open_history(_existing_history(db)) as history:
        history.set_note(surface, number, text)
    typer.echo(f"note kept with pass {number} of {surface!r}")


@app.command()
def report(
    surface: SurfaceArg,
    out: Annotated[
        Path, typer.Option("--out", help="Folder for report.html (overlays found there are shown).")
    ] = Path("printcheck-out"),
    db: DbOpt = None,
) -> None:
    """Write a surface's report from the history alone (after a pass was removed, say)."""
    from printcheck.report.history_report import write_history_report

    path = write_history_report(_existing_history(db), surface, out)
    typer.echo(f"report: {path}")


@app.command()
def sheet(
    surface: SurfaceArg,
    db: DbOpt = None,
    out: Annotated[
        Path,
        typer.Option("--out", help="Folder for the sheet (overlays found there are shown)."),
    ] = Path("printcheck-out"),
    pdf: Annotated[
        bool, typer.Option("--pdf/--no-pdf", help="Also print it to PDF with a Chromium.")
    ] = True,
    paper: Annotated[
        Literal["a4", "letter"], typer.Option("--paper", help="Paper size of the printed sheet.")
    ] = "a4",
    chromium: Annotated[
        str | None,
        typer.Option(
            "--chromium",
            help="The Chromium to print the PDF with (default: PRINTCHECK_CHROMIUM, else "
            "chromium, chromium-browser or google-chrome on PATH).",
        ),
    ] = None,
) -> None:
    """Write a surface's job sheet (one or two printed pages) from the history, and its PDF."""
    from printcheck.report.sheet import find_chromium, write_sheet

    history = _existing_history(db)
    browser = find_chromium(chromium) if pdf else None
    files = write_sheet(history, surface, out, paper=paper, chromium=browser)
    typer.echo(f"sheet: {files.html}")
    if files.pdf is not None:
        typer.echo(f"pdf:   {files.pdf}")
    elif pdf:
        typer.echo(
            "no PDF: printing it needs a Chromium (chromium, chromium-browser or google-chrome "
            "on PATH, or --chromium / PRINTCHECK_CHROMIUM); print the sheet from a browser"
        )


@app.command()
def overview(
    machine: Annotated[
        str,
        typer.Argument(help="Machine: its surfaces are named MACHINE/SURFACE.", show_default=False),
    ],
    out: Annotated[Path, typer.Option("--out", help="Folder for overview.html.")] = Path(
        "printcheck-out"
    ),
    db: DbOpt = None,
) -> None:
    """One page of all surfaces of a machine: latest state, verdict and projection."""
    from printcheck.report.overview import write_overview

    path = write_overview(_existing_history(db), machine, out)
    typer.echo(f"overview: {path}")


# ---------------------------------------------------------------- serve, watch


def _serve_paths(ctx: typer.Context, db: Path | None, folder: Path | None) -> tuple[Path, Path]:
    out: Path | None = ctx.params["out"]
    if out is None:
        out = (folder if folder is not None else Path.cwd()) / "printcheck-out"
    return _db_path(db), out


@app.command()
@_with_inspect_options
def serve(
    ctx: typer.Context,
    db: DbOpt = None,
    jobs: JobsOpt = None,
    lan: Annotated[
        bool, typer.Option("--lan", help="Listen on the shop network (needs the access code).")
    ] = False,
    host: Annotated[
        str | None, typer.Option("--host", help="Address to listen on (default 127.0.0.1).")
    ] = None,
    port: Annotated[int, typer.Option("--port", help="Port to listen on.")] = 8765,
    max_upload_mb: Annotated[
        int, typer.Option("--max-upload-mb", help="Largest photo accepted, in MB.")
    ] = 40,
    watch: Annotated[
        Path | None, typer.Option("--watch", help="Also measure photos dropped into this folder.")
    ] = None,
    **given: Any,
) -> None:
    """Serve the pages for a phone: send a photo, see its count, verdict and guidance."""
    from printcheck.pipeline import cores_available
    from printcheck.web.server import serve as run_server

    if lan and host is not None:
        raise OptionError("give --lan or --host, not both")
    if not 1 <= port <= 65535:
        raise OptionError(f"--port must be between 1 and 65535, got {port}")
    if not 1 <= max_upload_mb <= 500:
        raise OptionError(f"--max-upload-mb must be between 1 and 500, got {max_upload_mb}")
    if jobs is not None and jobs < 1:
        raise OptionError(f"--jobs must be 1 or more, got {jobs}")
    if watch is not None and not watch.is_dir():
        raise OptionError(f"--watch {watch}: not a folder")
    options = _inspect_options(
        ctx.params, ctx.params["config"].parent if ctx.params["config"] else None
    )
    db_path, out = _serve_paths(ctx, db, None)
    raise typer.Exit(
        run_server(
            options=options,
            db=db_path,
            out=out,
            host=host or ("0.0.0.0" if lan else "127.0.0.1"),
            port=port,
            workers=jobs or cores_available(),
            max_upload_mb=max_upload_mb,
            watch=watch,
            echo=typer.echo,
        )
    )


@app.command()
@_with_inspect_options
def watch(
    ctx: typer.Context,
    folder: Annotated[
        Path, typer.Argument(help="Folder the phone's photos arrive in.", show_default=False)
    ],
    db: DbOpt = None,
    jobs: JobsOpt = None,
    **given: Any,
) -> None:
    """Measure photos as they arrive in FOLDER (once each is complete) and record them."""
    import time

    from printcheck.pipeline import cores_available
    from printcheck.web.measurer import DONE, FAILED, Measurer
    from printcheck.web.watch import Watcher

    if not folder.is_dir():
        raise OptionError(f"watch {folder}: not a folder; give the folder the photos arrive in")
    options = _inspect_options(ctx.params, folder)
    if options.surface is None:
        options = _with_surface(options, folder)
    assert options.surface is not None
    db_path, out = _serve_paths(ctx, db, folder)
    with Measurer(options=options, out=out, db=db_path, workers=jobs or cores_available()) as m:
        watcher = Watcher(folder, m, surface=options.surface)
        typer.echo(f"watching {folder} for photos of {options.surface}; Ctrl-C stops")
        told: set[str] = set()
        while True:
            watcher.look()
            for job in watcher.jobs:
                if job.id in told or job.state not in (DONE, FAILED):
                    continue
                told.add(job.id)
                if job.state == DONE:
                    again = "" if job.recorded else " (already in the history)"
                    typer.echo(f"{job.sent_name}: {job.spot_count} points{again}")
                else:
                    _fail(f"{job.sent_name}: {job.message}")
            time.sleep(watcher.interval_s)


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
    from printcheck.builtin_specs import describe_specs

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
    # as this process's own entry point, the run's end is its end: once its work is done
    # and its status decided, a late Ctrl-C no longer matters; a caller in the same
    # process (argv given) gets its own handlers back
    with _InterruptsOnce(last_word=argv is None):
        return _main(argv)


#: How long after a hook has returned a signal is sent again (s).
_AGAIN_AFTER_S = 0.05


def _signal_main_thread_soon(signum: int, handler: Callable[[int, Any], None]) -> None:
    """Send ``signum`` to the main thread a moment from now, from another thread, if
    ``handler`` still handles it then.

    Not from here and now: Python runs a signal's handler at the next step of the main
    thread, which would be inside the caller (an unraisable hook, whose exceptions are
    printed and lost).  Not once the run has put its handlers back (the signal then
    came too late for it).  At the interpreter's exit no thread can be started: the
    process is ending anyway, with the status it chose.
    """
    import threading

    main = threading.main_thread().ident
    if main is None:
        return

    def again() -> None:
        if signal.getsignal(signum) == handler:
            signal.pthread_kill(main, signum)

    timer = threading.Timer(_AGAIN_AFTER_S, again)
    timer.daemon = True
    with contextlib.suppress(RuntimeError):  # "can't create new thread at interpreter shutdown"
        timer.start()


class _InterruptsOnce:
    """Ctrl-C (SIGINT) and SIGTERM raise KeyboardInterrupt once; further ones are ignored
    while the run cleans up (stops its workers, closes the history) and says what it kept.

    Only in the main thread (where Python runs signal handlers).  On leaving, the previous
    handlers come back; with ``last_word`` the signals stay ignored instead, so that the
    process, its work done, exits with the status it chose (without, Python's exit would
    put the default handlers back and a late Ctrl-C would kill it by the signal).
    """

    _SIGNALS = (signal.SIGINT, signal.SIGTERM)

    def __init__(self, *, last_word: bool) -> None:
        self._old: dict[int, Any] = {}
        self._old_hook: Any = None
        self._last_word = last_word

    def _handler(self, signum: int, frame: object) -> None:
        for sig in self._SIGNALS:
            signal.signal(sig, signal.SIG_IGN)
        from printcheck.errors import Interrupted

        raise Interrupted(signum=signum)

    def _unraisable(self, unraisable: Any) -> None:
        """An interrupt that landed in a finalizer (a semaphore's clean-up, say) would be
        printed as "Exception ignored" and lost: deliver it again, to the code that runs
        next.  Anything else goes to the previous hook."""
        from printcheck.errors import Interrupted

        value = unraisable.exc_value
        if isinstance(value, Interrupted) and value.signum in self._old:
            signal.signal(value.signum, self._handler)
            _signal_main_thread_soon(value.signum, self._handler)
            return
        self._old_hook(unraisable)

    def __enter__(self) -> None:
        import threading

        if threading.current_thread() is not threading.main_thread():
            return
        for sig in self._SIGNALS:
            if signal.getsignal(sig) is signal.SIG_IGN:
                continue  # started with it ignored (nohup, a background job): keep it so
            self._old[sig] = signal.signal(sig, self._handler)
        self._old_hook = sys.unraisablehook
        sys.unraisablehook = self._unraisable

    def __exit__(self, *exc: object) -> None:
        for sig, old in self._old.items():
            signal.signal(sig, signal.SIG_IGN if self._last_word else old)
        if self._old_hook is not None:
            sys.unraisablehook = self._old_hook


def _main(argv: Sequence[str] | None) -> int:
    try:  # recent typer versions carry their own copy of click
        from typer._click import exceptions as click_errors
    except ImportError:  # pragma: no cover - older typer uses click itself
        from click import exceptions as click_errors  # type: ignore[no-redef]

    args = list(sys.argv[1:] if argv is None else argv)
    try:
        # the command is made and run here rather than by ``app(...)``: the CLI library
        # turns Ctrl-C into a silent exit 130 before printcheck could say what was kept
        cli = typer.main.get_command(app)
        with cli.make_context("printcheck", args) as ctx:
            code = cli.invoke(ctx)
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
        _fail(_in_flags(exc))
        return _exit(EXIT_UNUSABLE, argv)
    except KeyboardInterrupt as exc:
        _fail(str(exc) or "interrupted; nothing was left half-written; run the same command again")
        return _exit(128 + getattr(exc, "signum", signal.SIGINT), argv)
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
