"""Batch: every photo of a folder, in the order taken, on all cores, into one report.

One bad photo is reported and skipped; the rest go on.  Each photo's pass is recorded in
the history in one transaction as soon as it is measured, so an interrupted batch leaves
only whole passes, and re-running it records nothing twice.
"""

from __future__ import annotations

from collections.abc import Callable, Iterator, Sequence
from concurrent.futures import Future, ProcessPoolExecutor
from dataclasses import dataclass
from datetime import datetime
from pathlib import Path
from typing import Any

from printcheck.errors import OptionError, PrintcheckError, ReportError
from printcheck.options import InspectOptions
from printcheck.pipeline import cores_available
from printcheck.records import PassSummary, Progress
from printcheck.spec import Spec

__all__ = ["BatchItem", "Measured", "Skipped", "list_photos", "run_batch"]

EXIT_MEETS, EXIT_FAILS, EXIT_UNUSABLE = 0, 1, 2

_WORKER_MODULES = (
    "printcheck.pipeline",
    "printcheck.locate",
    "printcheck.segment",
    "printcheck.measure",
    "printcheck.judge",
    "printcheck.report.overlay",
    "printcheck.report.files",
    "skimage.segmentation",
    "scipy.ndimage",
)


@dataclass(frozen=True)
class Measured:
    """A photo a worker measured: its summary and a JPEG preview of its overlay."""

    path: Path
    summary: PassSummary
    preview: bytes


@dataclass(frozen=True)
class Skipped:
    """A photo a worker could not measure, and the one-line reason."""

    path: Path
    error: str


Outcome = Measured | Skipped


@dataclass(frozen=True)
class BatchItem:
    """One photo of a batch, with the time it sorts by."""

    path: Path
    taken: datetime | None
    file_time: datetime

    @property
    def sort_key(self) -> tuple[datetime, datetime, str]:
        return (self.taken or self.file_time, self.file_time, self.path.name)


def list_photos(folder: Path) -> tuple[list[BatchItem], list[str]]:
    """The photos in ``folder`` in the order taken, and one-line notes on what was skipped.

    Order: EXIF DateTimeOriginal, then the file time, then the name.  Folders named like
    photos and hidden files are skipped with a note.
    """
    from printcheck.load import is_photo_name, photo_taken

    items: list[BatchItem] = []
    notes: list[str] = []
    try:
        entries = sorted(folder.iterdir(), key=lambda p: p.name)
    except OSError as exc:
        raise ReportError(f"batch {folder}: cannot list the folder ({exc.strerror})") from None
    for path in entries:
        if path.name.startswith(".") or not is_photo_name(path):
            continue
        if path.is_dir():
            notes.append(f"photo {path}: is a folder, not a photo; skipped")
            continue
        try:
            mtime = datetime.fromtimestamp(path.stat().st_mtime).replace(microsecond=0)
        except OSError as exc:
            notes.append(f"photo {path}: cannot be read ({exc.strerror}); skipped")
            continue
        items.append(BatchItem(path, photo_taken(path), mtime))
    items.sort(key=lambda item: item.sort_key)
    return items, notes


def _work(path: Path, options: InspectOptions, out: Path, single_thread: bool) -> Outcome:
    """Inspect one photo and write its JSON and overlay (runs in a worker process)."""
    if single_thread:  # one worker per core: the cores are busy
        import cv2

        cv2.setNumThreads(1)
    from printcheck.pipeline import inspect_photo
    from printcheck.report.files import encode_image, output_name, write_bytes, write_json
    from printcheck.report.overlay import draw_overlay
    from printcheck.serde import summarize, summary_to_dict

    try:
        result = inspect_photo(path, options=options)
        summary = summarize(result)
        overlay = draw_overlay(result)
        write_json(out, output_name(result.photo, ".json"), summary_to_dict(summary))
        write_bytes(out, output_name(result.photo, ".overlay.png"), encode_image(overlay, ".png"))
        preview = encode_image(_shrink(overlay, 1400), ".jpg", jpeg_quality=85)
    except PrintcheckError as exc:
        return Skipped(path, str(exc))
    except Exception as exc:  # a bug or out of memory on one photo must not stop the batch
        return Skipped(path, f"photo {path}: internal error: {type(exc).__name__}: {exc}")
    return Measured(path, summary, preview)


def _shrink(image: Any, longest: int) -> Any:
    import cv2

    h, w = image.shape[:2]
    scale = longest / max(h, w)
    if scale >= 1:
        return image
    return cv2.resize(image, (round(w * scale), round(h * scale)), interpolation=cv2.INTER_AREA)


def run_batch(
    folder: Path,
    *,
    options: InspectOptions,
    out: Path,
    db: Path,
    jobs: int | None = None,
    json_lines: bool = False,
    echo: Callable[[str], None] = print,
    warn: Callable[[str], None] = print,
    show_progress: bool | None = None,
) -> int:
    """Process ``folder``; return the exit status (0 meets, 1 does not, 2 nothing usable).

    Writes ``<stem>.json`` and ``<stem>.overlay.png`` per photo, ``results.csv`` and
    ``report.html`` to ``out``, and records every pass in the history at ``db``.

    Raises
    ------
    OptionError
        ``jobs`` is less than 1.
    ReportError
        The folder holds no photos, or ``out`` cannot be created.
    """
    if jobs is not None and jobs < 1:
        raise OptionError(
            f"jobs must be 1 or more, got {jobs}; leave it out to use every core",
            parameter="jobs",
        )
    items, notes = list_photos(folder)
    for note in notes:
        warn(note)
    if not items:
        raise ReportError(f"batch {folder}: no photos found (JPEG, PNG, TIFF, HEIC)")
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise ReportError(f"output folder {out}: cannot be created ({exc.strerror})") from None
    surface = options.surface or folder.resolve().name
    workers = max(1, min(jobs or cores_available(), len(items)))
    if show_progress is None:
        show_progress = _stderr_is_terminal()
    done, progress = _measure_and_record(
        items,
        options,
        out,
        db,
        surface=surface,
        workers=workers,
        json_lines=json_lines,
        echo=echo,
        warn=warn,
        show_progress=show_progress,
    )
    if not done:
        warn(f"batch {folder}: none of the {len(items)} photos could be measured")
        return EXIT_UNUSABLE
    _write_outputs(out, surface=surface, spec=options.spec, done=done, progress=progress)
    if not json_lines:
        from printcheck.progress import progress_text

        echo(progress_text(progress))
        failed = len(items) - len(done)
        extra = f", {failed} skipped" if failed else ""
        echo(f"{len(done)} photos measured{extra}; report: {out / 'report.html'}")
    return EXIT_FAILS if done[-1].summary.meets is False else EXIT_MEETS


def _measure_and_record(
    items: list[BatchItem],
    options: InspectOptions,
    out: Path,
    db: Path,
    *,
    surface: str,
    workers: int,
    json_lines: bool,
    echo: Callable[[str], None],
    warn: Callable[[str], None],
    show_progress: bool,
) -> tuple[list[Measured], Progress]:
    """Measure every photo, record each pass as it comes; the measured photos in the
    order taken, and the surface's progress over its whole history."""
    import json
    import threading

    from printcheck.history import open_history
    from printcheck.progress import build_progress, surface_spec
    from printcheck.report.plots import warm_up
    from printcheck.serde import summary_to_dict

    # matplotlib's import and first drawing (~1 s) are needed only for the report at the
    # end: a thread does them while the photos are measured (from the first result on,
    # so that it does not hold up the start)
    warming = threading.Thread(target=warm_up, name="printcheck-plots", daemon=True)
    outcomes: dict[int, Outcome] = {}
    with open_history(db) as history, _Runner(items, options, out, workers) as finished:
        with _Progress(len(items), enabled=show_progress) as bar:
            for index, outcome in finished:
                outcomes[index] = outcome
                if warming.ident is None and cores_available() > 1:
                    warming.start()
                if isinstance(outcome, Skipped):
                    warn(f"{outcome.error}; skipped")
                else:
                    history.record(outcome.summary, surface=surface, spec=options.spec)
                    if json_lines:
                        echo(json.dumps(summary_to_dict(outcome.summary), ensure_ascii=False))
                bar.advance(items[index].path.name)
        stored = history.passes(surface)
    if warming.ident is not None:
        warming.join()
    done = [o for _, o in sorted(outcomes.items()) if isinstance(o, Measured)]
    spec = options.spec if options.spec is not None else surface_spec(stored)
    progress = build_progress(surface, [p.summary for p in stored], spec=spec)
    return done, progress


def _write_outputs(
    out: Path, *, surface: str, spec: Spec | None, done: Sequence[Measured], progress: Progress
) -> None:
    """``results.csv`` and ``report.html`` of the measured photos."""
    from printcheck.report.files import CSV_NAME, write_csv
    from printcheck.report.html import write_report

    write_csv(out, CSV_NAME, [m.summary for m in done])
    write_report(
        out / "report.html",
        surface=surface,
        spec=spec,
        passes=[(m.summary, m.preview) for m in done],
        progress=progress,
    )


class _Runner:
    """Runs ``_work`` over the photos; iterate it for (index, outcome) as photos finish.

    With more than one worker the process pool is started and every photo submitted on
    entry, before the progress bar starts its thread.
    """

    def __init__(
        self, items: list[BatchItem], options: InspectOptions, out: Path, workers: int
    ) -> None:
        self._items = items
        self._options = options
        self._out = out
        self._workers = workers
        self._pool: ProcessPoolExecutor | None = None
        self._futures: dict[Future[Outcome], int] = {}

    def __enter__(self) -> _Runner:
        if self._workers > 1:
            import multiprocessing as mp

            # Not "fork": a forked child inherits OpenCV's thread pool in an unusable
            # state and can hang; the fork server starts clean children cheaply.
            methods = mp.get_all_start_methods()
            context = mp.get_context("forkserver" if "forkserver" in methods else "spawn")
            if context.get_start_method() == "forkserver":
                # the server imports the stages once; each worker forks from it ready to
                # run (OpenCV starts no threads on import, so forking it is safe)
                context.set_forkserver_preload(list(_WORKER_MODULES))
            self._pool = ProcessPoolExecutor(max_workers=self._workers, mp_context=context)
            self._futures = {
                self._pool.submit(_work, item.path, self._options, self._out, True): index
                for index, item in enumerate(self._items)
            }
        return self

    def __iter__(self) -> Iterator[tuple[int, Outcome]]:
        if self._pool is None:
            for index, item in enumerate(self._items):
                yield index, _work(item.path, self._options, self._out, False)
            return
        from concurrent.futures import as_completed

        for future in as_completed(self._futures):
            yield self._futures[future], future.result()

    def __exit__(self, *exc: object) -> None:
        if self._pool is not None:
            self._pool.shutdown(wait=True, cancel_futures=True)


def _stderr_is_terminal() -> bool:
    import sys

    try:
        return sys.stderr.isatty()
    except (AttributeError, ValueError):
        return False


class _Progress:
    """A rich progress bar on stderr, or nothing when stderr is not a terminal."""

    def __init__(self, total: int, *, enabled: bool) -> None:
        self._total = total
        self._enabled = enabled
        self._bar: Any = None
        self._task: Any = None

    def __enter__(self) -> _Progress:
        if self._enabled:
            from rich.console import Console
            from rich.progress import (
                BarColumn,
                MofNCompleteColumn,
                Progress,
                TextColumn,
                TimeRemainingColumn,
            )

            self._bar = Progress(
                TextColumn("measuring"),
                BarColumn(),
                MofNCompleteColumn(),
                TimeRemainingColumn(),
                TextColumn("{task.description}"),
                console=Console(stderr=True),
                transient=True,
            )
            self._bar.__enter__()
            self._task = self._bar.add_task("", total=self._total)
        return self

    def advance(self, name: str) -> None:
        if self._bar is not None:
            self._bar.update(self._task, advance=1, description=name)

    def __exit__(self, *exc: object) -> None:
        if self._bar is not None:
            self._bar.__exit__(None, None, None)
