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
    **given: Any,
) -> None:
    """Process every photo in FOLDER in the order taken: results, history and one report."""
    from printcheck.batch import run_batch

    if not folder.is_dir():
        raise OptionError(f"batch {folder}: not a folder; give the folder that holds the photos")
    options = _inspect_options(ctx.params, folder)
    if options.surface is None:
        options = _with_surface(options, folder)
    out: Path | None = ctx.params["out"]
    outcome = run_batch(
        folder,
        options=options,
        out=out if out is not None else folder / "printcheck-out",
        db=_db_path(db),
        jobs=jobs,
        json_lines=ctx.params["json_out"],
        echo=typer.echo,
        warn=_fail,
    )
    if not ctx.params["json_out"]:
        _echo_latest_advice(_db_path(db), options.surface)
    raise typer.Exit(outcome)


def _echo_latest_advice(db: Path, surface: str | None) -> None:
    """Where to scrape next on the surface's latest pass (nothing when there is none)."""
    from printcheck.history import open_history
    from printcheck.summary import advice_lines

    if surface is None or not db.is_file():
        return
    with open_history(db, readonly=True) as history:
        stored = history.passes(surface)
    if stored:
        latest = stored[-1]
        lines = advice_lines(latest.summary, indent="")
        if lines:
            typer.echo(f"pass {latest.number}, " + "\n".join(lines))


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
    from printcheck.progress import build_progress, progress_text, surface_spec
    from printcheck.serde import progress_to_dict

    path = _db_path(db)
    if not path.exists():
        raise OptionError(f"history {path}: no history yet; run 'printcheck batch' first")
    with open_history(path, readonly=True) as history:
        stored = history.passes(surface)
        if not stored:
            known = ", ".join(history.surfaces()) or "none"
            raise OptionError(
                f"progress: no passes recorded for surface {surface!r} (recorded: {known})"
            )
    report = build_progress(surface, [p.summary for p in stored], spec=surface_spec(stored))
    if json_out:
        typer.echo(json.dumps(progress_to_dict(report), ensure_ascii=False, indent=2))
    else:
        typer.echo(progress_text(report))
    raise typer.Exit(EXIT_FAILS if report.passes[-1].meets is False else EXIT_MEETS)


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
            signal.raise_signal(value.signum)
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
