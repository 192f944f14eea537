"""Batch: every photo of a folder, in the order taken, on all cores, into one report.

One bad photo is reported and skipped; the rest go on.  Each photo's pass is recorded in
the history in one transaction as soon as it is measured, so an interrupted batch leaves
only whole passes, and re-running it records nothing twice.

Only regular files named like photos are photos: folders, links to nothing, named pipes
and devices so named are reported and skipped without being opened, and printcheck's own
overlays are never taken for photos.

The worker processes belong to the batch: they ignore Ctrl-C (the batch alone answers
it), and they end as soon as the batch process ends, however it ends (``kill -9`` too).
A worker killed from outside (as the out-of-memory killer does) costs only the photo it
was measuring: that photo is reported as not measured, a new pool measures the rest, and
the exit status is :data:`EXIT_INCOMPLETE`.
"""

from __future__ import annotations

import contextlib
import os
import signal
from collections.abc import Callable, Iterator, Mapping, Sequence
from concurrent.futures import Future, ProcessPoolExecutor
from dataclasses import dataclass, field
from datetime import datetime
from pathlib import Path
from typing import Any

from printcheck.errors import Interrupted, OptionError, PrintcheckError, ReportError
from printcheck.options import InspectOptions
from printcheck.pipeline import cores_available
from printcheck.records import PassSummary, Progress, StoredPass
from printcheck.signalmask import signals_blocked
from printcheck.spec import Spec

__all__ = [
    "EXIT_INCOMPLETE",
    "BatchItem",
    "Measured",
    "Skipped",
    "list_photos",
    "measure_photo",
    "photo_pool",
    "run_batch",
]

EXIT_MEETS, EXIT_FAILS, EXIT_UNUSABLE = 0, 1, 2
#: Some photos were not measured for a reason that is not theirs (a worker process was
#: killed); the others were measured, recorded and reported.
EXIT_INCOMPLETE = 3

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

# A photo's state in the pool, shared with the workers (one int64 per photo):
_WAITING, _DONE = 0, -1  # ... and a worker's pid while that worker measures it


@dataclass(frozen=True)
class Measured:
    """A photo a worker measured: its summary and a JPEG preview of its overlay (None
    where none was asked for)."""

    path: Path
    summary: PassSummary
    preview: bytes | None


@dataclass(frozen=True)
class Skipped:
    """A photo that was not measured, and the one-line reason (which names it).

    ``killed``: the process measuring it was killed from outside; the photo itself may
    be fine.
    """

    path: Path
    error: str
    killed: bool = False

    @property
    def reason(self) -> str:
        """The reason without the leading ``photo <path>: ``."""
        head = f"photo {self.path}: "
        return self.error[len(head) :] if self.error.startswith(head) else self.error


Outcome = Measured | Skipped


@dataclass(frozen=True)
class BatchItem:
    """One photo of a batch, with the time it sorts by."""

    path: Path
    taken: datetime | None
    file_time: datetime
    name: str = ""  # the photo's name in the job (default: its file name)

    @property
    def photo(self) -> str:
        """The photo's name in its results and the history (see :func:`photo_name`)."""
        return self.name or self.path.name

    @property
    def sort_key(self) -> tuple[datetime, datetime, str]:
        return (self.taken or self.file_time, self.file_time, self.path.name)


def photo_name(path: Path, folder: Path) -> str:
    """A batch photo's name in its results and the history: its path from the batch's
    folder (``pass2/IMG_0042.jpg`` for a photo in a pass's subfolder, where names repeat
    from pass to pass), or its file name when it is not under ``folder``."""
    try:
        return path.relative_to(folder).as_posix()
    except ValueError:
        return path.name


def list_photos(folder: Path) -> tuple[list[BatchItem], list[Skipped]]:
    """The photos in ``folder`` in the order taken, and the files named like photos that
    are not photos, each with its one-line reason.

    Order: EXIF DateTimeOriginal, then the file time, then the name.  Only regular files
    (or links to them) are photos; a folder, a link to nothing, a named pipe, a socket or a
    device named like a photo is skipped without being opened.  Hidden files and
    printcheck's own overlays (``*.overlay.png``, when ``--out`` is the photo folder) are
    not looked at.

    Raises
    ------
    ReportError
        The folder cannot be listed.
    """
    import stat

    from printcheck.load import is_photo_name, not_a_photo_file, photo_taken
    from printcheck.report.files import is_output_name

    items: list[BatchItem] = []
    skipped: list[Skipped] = []
    try:
        names = sorted(os.listdir(folder))
    except OSError as exc:
        raise ReportError(f"batch {folder}: cannot list the folder ({exc.strerror})") from None
    for name in names:
        if name.startswith(".") or not is_photo_name(name) or is_output_name(name):
            continue
        path = folder / name
        try:
            info = path.stat()  # follows a link to the file it names
        except FileNotFoundError:
            why = "is a link to a file that does not exist" if path.is_symlink() else "is gone"
            skipped.append(Skipped(path, f"photo {path}: {why}"))
            continue
        except OSError as exc:
            skipped.append(Skipped(path, f"photo {path}: cannot be read ({exc.strerror})"))
            continue
        why_not = not_a_photo_file(info.st_mode)
        if why_not is not None:
            skipped.append(Skipped(path, f"photo {path}: {why_not}"))
            continue
        assert stat.S_ISREG(info.st_mode)
        mtime = datetime.fromtimestamp(info.st_mtime).replace(microsecond=0)
        items.append(BatchItem(path, photo_taken(path), mtime))
    items.sort(key=lambda item: item.sort_key)
    return items, skipped


def _work(
    path: Path,
    options: InspectOptions,
    out: Path,
    single_thread: bool,
    preview: bool = True,
    name: str | None = None,
) -> Outcome:
    """Inspect one photo and write its JSON and overlay (and make a report's preview);
    ``name``: the photo's name in its results (default: its file name)."""
    if single_thread:  # one worker per core: the cores are busy
        import cv2

        cv2.setNumThreads(1)
    from printcheck.pipeline import inspect_photo
    from printcheck.report.files import (
        OVERLAY_SUFFIX,
        encode_image,
        output_stem,
        write_bytes,
        write_json,
    )
    from printcheck.report.overlay import draw_overlay
    from printcheck.serde import summarize, summary_to_dict

    try:
        result = inspect_photo(path, options=options, name=name)
        summary = summarize(result)
        overlay = draw_overlay(result)
        stem = output_stem(out, result.photo, result.sha256)
        write_json(out, stem + ".json", summary_to_dict(summary))
        write_bytes(out, stem + OVERLAY_SUFFIX, encode_image(overlay, ".png"))
        shown = encode_image(_shrink(overlay, 1400), ".jpg", jpeg_quality=85) if preview else None
        _keep_contacts(result, out)
    except PrintcheckError as exc:
        return Skipped(path, str(exc))
    except Exception as exc:  # a bug or out of memory on one photo must not stop the batch
        return Skipped(path, f"photo {path}: internal error: {type(exc).__name__}: {exc}")
    return Measured(path, summary, shown)


def measure_photo(
    path: Path, options: InspectOptions, out: Path, *, preview: bool = True
) -> Outcome:
    """Measure one photo for the history, exactly as a batch's worker does.

    Inspects the photo, writes its result JSON and full-size overlay into ``out`` and
    makes a JPEG preview of the overlay (at most 1400 px on its longest side) for a
    report.  OpenCV is held to one thread: the caller runs one of these per core
    (in :func:`photo_pool`).  Nothing is recorded; the caller records
    ``Measured.summary`` in the history.

    Parameters
    ----------
    path : Path
        The photo (read, never modified).
    options : InspectOptions
        The job's settings, its surface set.
    out : Path
        The output folder (it must exist).
    preview : bool
        Make the report's JPEG preview (the web app, which serves the overlay itself,
        asks for none).

    Returns
    -------
    Measured or Skipped
        The summary and preview; or, for a photo that cannot be used (or an internal
        error on it), the one-line reason, which names the photo.  Never raises for the
        photo's own faults.
    """
    return _work(path, options, out, True, preview)


def photo_pool(workers: int) -> ProcessPoolExecutor:
    """A pool of ``workers`` processes to run :func:`measure_photo` in, as a batch's are.

    The same process context as a batch's (a fork server with the stages preloaded,
    where there is one); its workers ignore Ctrl-C (the calling process answers it) and
    end as soon as the calling process ends, however it ends.  The caller shuts it down.
    """
    context = _pool_context()
    _start_helpers(context)
    return ProcessPoolExecutor(
        max_workers=max(1, workers),
        mp_context=context,
        initializer=_start_pool_worker,
        initargs=(os.getpid(),),
    )


def _start_pool_worker(parent_pid: int) -> None:
    """Initializer of a :func:`photo_pool` worker: ignore Ctrl-C, end with the parent."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    _end_with(parent_pid)


def _keep_contacts(result: Any, out: Path) -> None:
    """Keep the photo's contact map for the change since the pass before (best effort:
    the report only leaves the change image out where a map is missing)."""
    from printcheck.compare import CONTACTS_FOLDER, contact_map_of, contacts_name, encode_contacts
    from printcheck.report.files import write_bytes

    if not result.sha256:
        return
    data = encode_contacts(contact_map_of(result), photo=result.photo, sha256=result.sha256)
    try:
        write_bytes(out / CONTACTS_FOLDER, contacts_name(result.sha256), data)
    except PrintcheckError:
        pass


def _shrink(image: Any, longest: int) -> Any:
    import cv2

    h, w = image.shape[:2]
    scale = longest / max(h, w)
    if scale >= 1:
        return image
    return cv2.resize(image, (round(w * scale), round(h * scale)), interpolation=cv2.INTER_AREA)


@dataclass
class _Tally:
    """What a batch has done so far, for its closing lines (and an interrupted one's)."""

    total: int
    measured: list[Measured] = field(default_factory=list)
    skipped: list[Skipped] = field(default_factory=list)
    in_history: int | None = None  # photos of this batch whose pass is in the history
    unchanged: int = 0  # photos recorded before with the same settings: not measured
    remeasured: int = 0


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
    group: str = "auto",
    order: str = "time",
    stations: Sequence[str] = (),
    same_surface: bool = False,
    remeasure: bool = False,
    note: str | None = None,
) -> int:
    """Process ``folder``; return the exit status.

    0 the latest measured pass meets the spec (or no spec), 1 it does not, 2 no photo
    could be measured, :data:`EXIT_INCOMPLETE` (3) a worker process was killed and the
    photo it measured was not measured (the rest were, and the report names it).

    Writes ``<stem>.json`` and ``<stem>.overlay.png`` per photo, ``results.csv`` and
    ``report.html`` to ``out``, and records every pass in the history at ``db``.

    Photos are grouped into passes of stations by :func:`printcheck.stations.plan_passes`
    (``group``, ``order``, ``stations``).  Only what is new or changed is measured: a
    photo already recorded for the surface (same SHA-256) with the same settings and
    measuring method is not measured again; one recorded with other settings or an
    older method (or any, with ``remeasure``) is measured again, its new figures become
    the pass's and the old ones stay in the history's record, one line per photo saying
    so.  A surface whose passes came from another folder is refused unless
    ``same_surface``.  ``note`` is kept with each pass this batch records.

    Raises
    ------
    OptionError
        ``jobs`` is less than 1.
    ReportError
        The folder holds no photos, or ``out`` cannot be created.
    HistoryError
        The history cannot be opened or written.
    Interrupted
        Ctrl-C (SIGINT) or SIGTERM: its message says how many photos are in the history
        and how to finish.
    """
    if jobs is not None and jobs < 1:
        raise OptionError(
            f"jobs must be 1 or more, got {jobs}; leave it out to use every core",
            parameter="jobs",
        )
    from printcheck.stations import plan_passes

    surface = options.surface or folder.resolve().name
    tally: _Tally | None = None
    say = warn if json_lines else echo  # lines for people stay off a JSON stdout
    try:
        top, sub, not_photos = _list_job(folder, out, group)
        for skipped_note in not_photos:
            warn(f"{skipped_note.error}; skipped")
        if not top and not any(sub.values()):
            raise ReportError(f"batch {folder}: no photos found (JPEG, PNG, TIFF, HEIC)")
        rule, planned = plan_passes(top, sub, group=group, order=order, stations=stations)
        count = len(planned)
        tally = _Tally(total=count + len(not_photos), skipped=list(not_photos))
        if show_progress is None:
            show_progress = _stderr_is_terminal()
        progress, shown, stored = _measure_and_record(
            planned,
            options,
            out,
            db,
            folder=folder,
            tally=tally,
            surface=surface,
            jobs=jobs,
            json_lines=json_lines,
            echo=echo,
            say=say,
            warn=warn,
            show_progress=show_progress,
            announce=lambda skipped: _say_order(planned, order, skipped, folder, warn=warn),
            announce_groups=lambda: _say_groups(planned, rule, order, say=say),
            same_surface=same_surface,
            remeasure=remeasure,
            note=note,
        )
        done = tally.measured
        if not done and not tally.unchanged:
            warn(f"batch {folder}: none of the {tally.total} photos could be measured")
            return EXIT_UNUSABLE
        _write_outputs(
            out,
            surface=surface,
            spec=options.spec,
            tally=tally,
            progress=progress,
            shown=shown,
            folder=folder,
        )
    except KeyboardInterrupt as exc:
        raise Interrupted(
            _interrupted_words(tally, db, surface), signum=getattr(exc, "signum", signal.SIGINT)
        ) from None
    killed = [s for s in tally.skipped if s.killed]
    if not json_lines:
        from printcheck.progress import progress_text

        echo(progress_text(progress))
        echo(_summary_words(tally, out))
        for line in _latest_advice(stored):
            echo(line)
    if killed:
        return EXIT_INCOMPLETE
    latest = progress.passes[-1].meets if progress.passes else None
    return EXIT_FAILS if latest is False else EXIT_MEETS


def _latest_advice(stored: list[StoredPass]) -> list[str]:
    """Where to scrape next on each station of the surface's latest pass, as lines."""
    from printcheck.summary import advice_lines

    if not stored:
        return []
    number = stored[-1].number
    out = []
    for photo in (p for p in stored if p.number == number):
        lines = advice_lines(photo.summary, indent="")
        if lines:
            where = f"pass {number}" + (f", station {photo.station}" if photo.station else "")
            out.append(f"{where}, " + "\n".join(lines))
    return out


def _list_job(
    folder: Path, out: Path, group: str
) -> tuple[list[BatchItem], dict[str, list[BatchItem]], list[Skipped]]:
    """The photos of the folder and, where passes may be subfolders, of its subfolders.

    Subfolders are looked into when ``group`` is ``folder``, or ``auto`` and the folder
    holds no photos of its own; hidden ones and the output folder are not.
    """
    top, skipped = list_photos(folder)
    sub: dict[str, list[BatchItem]] = {}
    if group == "folder" or (group == "auto" and not top):
        try:
            names = sorted(os.listdir(folder))
        except OSError:
            names = []
        out_resolved = out.resolve()
        for name in names:
            path = folder / name
            if name.startswith(".") or not path.is_dir() or path.resolve() == out_resolved:
                continue
            items, not_photos = list_photos(path)
            if items:
                sub[name] = items
            skipped += not_photos
    return _apart_in_outputs(top, sub, skipped, folder)


def _apart_in_outputs(
    top: list[BatchItem], sub: dict[str, list[BatchItem]], skipped: list[Skipped], folder: Path
) -> tuple[list[BatchItem], dict[str, list[BatchItem]], list[Skipped]]:
    """The photos less those whose results would be written over another's: two photos
    named alike but for the extension (a phone's HEIC and its JPEG copy) or for the
    folder (``pass2/a.jpg`` and ``pass2_a.jpg``) share their output files.  The first
    taken keeps them; the others are skipped with the reason, nothing is overwritten."""
    from printcheck.report.files import output_name

    owner: dict[str, tuple[Path, str]] = {}
    dropped: set[Path] = set()
    every = top + [item for items in sub.values() for item in items]
    for item in sorted(every, key=lambda i: i.sort_key):
        stem = output_name(photo_name(item.path, folder), "")
        # the output folder may fold case (a memory card, Windows, macOS)
        first, first_stem = owner.setdefault(stem.casefold(), (item.path, stem))
        if first != item.path:
            dropped.add(item.path)
            skipped.append(
                Skipped(
                    item.path,
                    f"photo {item.path}: its results would be written over those of "
                    f"{photo_name(first, folder)} ({first_stem}.json and its overlay); "
                    "rename one of the two",
                )
            )
    if not dropped:
        return top, sub, skipped
    kept = {name: [i for i in items if i.path not in dropped] for name, items in sub.items()}
    return (
        [i for i in top if i.path not in dropped],
        {name: items for name, items in kept.items() if items},
        skipped,
    )


def _say_groups(
    planned: Sequence[Any], rule: str, order: str, *, say: Callable[[str], None]
) -> None:
    """Say how the photos were grouped, when passes hold stations."""
    if rule != "photo":
        passes = len({p.pass_key for p in planned})
        what = {
            "folder": "a subfolder per pass",
            "name": "pass and station in the photo names",
            "stations": "the job file's stations, in order",
        }[rule]
        say(f"{len(planned)} photos in {passes} passes ({what}); order by {order}")


def _say_order(
    planned: Sequence[Any],
    order: str,
    skipped: set[Path],
    folder: Path,
    *,
    warn: Callable[[str], None],
) -> None:
    """Name the photos without a camera time (not the skipped ones) and the order used."""
    untimed = [
        photo_name(p.path, folder) for p in planned if p.taken is None and p.path not in skipped
    ]
    if untimed and order == "time":
        shown = ", ".join(untimed[:12]) + (
            f" and {len(untimed) - 12} more" if len(untimed) > 12 else ""
        )
        how = (
            "ordered by file time, then name (a copy or a sync may have changed the file "
            "times: if the order is wrong, give --order name, or put the pass number in "
            "the names, p1, p2 ...)"
        )
        plural = "s" if len(untimed) != 1 else ""
        warn(f"{len(untimed)} photo{plural} without a camera time (EXIF): {shown}; {how}")


def _summary_words(tally: _Tally, out: Path) -> str:
    """The closing line: photos measured, skipped (and why, briefly), the report."""
    parts = [f"{len(tally.measured)} of {tally.total} photos measured"]
    if tally.unchanged:
        parts.append(f"{tally.unchanged} unchanged (recorded before with the same settings)")
    if tally.remeasured:
        parts.append(f"{tally.remeasured} re-measured")
    killed = sum(s.killed for s in tally.skipped)
    if killed:
        its, was, it = ("its", "was", "it") if killed == 1 else ("their", "were", "them")
        parts.append(
            f"{killed} not measured because {its} worker process {was} killed "
            f"(out of memory?); run the batch again to measure {it}"
        )
    if len(tally.skipped) > killed:
        parts.append(f"{len(tally.skipped) - killed} skipped")
    return ", ".join(parts) + f"; report: {out / 'report.html'}"


def _interrupted_words(tally: _Tally | None, db: Path, surface: str) -> str:
    """The one line an interrupted batch leaves: what the history holds, how to go on."""
    if tally is None or (tally.in_history is None and not tally.measured and not tally.unchanged):
        return (
            "interrupted before any photo was measured; the history is as it was; "
            "run the same command again to start"
        )
    kept = len(tally.measured) + tally.unchanged if tally.in_history is None else tally.in_history
    if kept == 0:
        return (
            f"interrupted; none of the {tally.total} photos is in the history yet; "
            "run the same command again to start over"
        )
    return (
        f"interrupted; {kept} of the {tally.total} photos are in the history {db} as "
        f"passes of {surface!r}, each whole; run the same command again to finish "
        "(passes already recorded are not recorded twice)"
    )


def _measure_and_record(
    planned: list[Any],
    options: InspectOptions,
    out: Path,
    db: Path,
    *,
    folder: Path,
    tally: _Tally,
    surface: str,
    jobs: int | None,
    json_lines: bool,
    echo: Callable[[str], None],
    say: Callable[[str], None],
    warn: Callable[[str], None],
    show_progress: bool,
    announce: Callable[[set[Path]], None],
    announce_groups: Callable[[], None],
    same_surface: bool,
    remeasure: bool,
    note: str | None,
) -> tuple[Progress, list[tuple[PassSummary, bytes | None]], list[StoredPass]]:
    """Measure what is new or changed, record each pass as it comes (into ``tally``, in
    the batch's order); the surface's progress over its whole history, the batch's
    photos for the report (their current figures, and the overlay where there is one),
    and the surface's recorded photos."""
    import json

    from printcheck.compare import place_contacts
    from printcheck.history import open_history
    from printcheck.method import METHOD_VERSION
    from printcheck.progress import history_progress, surface_spec
    from printcheck.report.history_report import stored_preview
    from printcheck.serde import summary_to_dict
    from printcheck.stations import settings_changes, settings_key

    settings = settings_key(options)
    # the history first: a file that is not a history is refused before any work is done
    # or any folder made
    with open_history(db) as history:
        hashes = {p.path: _sha256(p.path) for p in planned}
        known = history.known(surface)
        _check_folder(
            history, surface, folder, set(hashes.values()), known, same_surface=same_surface
        )
        try:
            out.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise ReportError(f"output folder {out}: cannot be created ({exc.strerror})") from None
        announce_groups()
        to_measure: list[Any] = []
        reasons: dict[Path, str] = {}
        for p in planned:
            sha = hashes[p.path]
            seen = known.get(sha) if sha is not None else None
            if seen is None or sha is None:
                to_measure.append(p)
                continue
            was_settings, was_method, removed = seen
            if removed:
                say(
                    f"{photo_name(p.path, folder)}: removed from {surface!r} earlier; "
                    "not recorded again"
                )
                continue
            changes = settings_changes(was_settings, settings)
            if was_method < METHOD_VERSION:
                reasons[p.path] = f"measured by an older method ({was_method} < {METHOD_VERSION})"
            elif was_settings is None:
                reasons[p.path] = "its settings were not recorded"
            elif changes:
                reasons[p.path] = "settings changed: " + ", ".join(changes)
            elif remeasure:
                reasons[p.path] = "asked to re-measure (--remeasure)"
            else:
                tally.unchanged += 1
                history.place(
                    surface, sha, station=p.station, pass_key=p.pass_key, sort_time=_iso(p)
                )
                place_contacts(out, sha, station=p.station, pass_key=p.pass_key)
                continue
            to_measure.append(p)
        if not to_measure:
            say(
                f"nothing new or changed in {folder}: all {tally.unchanged} photos are "
                "recorded with the same settings and method; nothing measured "
                "(--remeasure measures them again)"
            )
        elif tally.unchanged:
            say(f"{tally.unchanged} photos unchanged since recorded; not measured again")
        items = [
            BatchItem(p.path, p.taken, p.file_time, photo_name(p.path, folder)) for p in to_measure
        ]
        workers = max(1, min(jobs or cores_available(), max(1, len(items))))
        warming = _Warming()
        outcomes: dict[int, Outcome] = {}
        try:
            if items:
                with _Runner(items, options, out, workers) as runner:
                    with _Progress(len(items), enabled=show_progress) as bar:
                        for index, outcome in runner:
                            outcomes[index] = outcome
                            if cores_available() > 1:
                                warming.start()
                            if isinstance(outcome, Skipped):
                                warn(
                                    outcome.error if outcome.killed else f"{outcome.error}; skipped"
                                )
                                tally.skipped.append(outcome)
                            else:
                                plan = to_measure[index]
                                done = history.put(
                                    outcome.summary,
                                    surface=surface,
                                    spec=options.spec,
                                    station=plan.station,
                                    pass_key=plan.pass_key,
                                    settings=settings,
                                    method=METHOD_VERSION,
                                    sort_time=_iso(plan),
                                    replace=plan.path in reasons,
                                    why=reasons.get(plan.path, "re-measured"),
                                )
                                if done.state == "replaced" and done.earlier is not None:
                                    tally.remeasured += 1
                                    say(
                                        _remeasured_words(
                                            outcome.summary, done.earlier, reasons[plan.path]
                                        )
                                    )
                                if outcome.summary.sha256:
                                    place_contacts(
                                        out,
                                        outcome.summary.sha256,
                                        station=plan.station,
                                        pass_key=plan.pass_key,
                                    )
                                tally.measured.append(outcome)
                                if json_lines:
                                    echo(
                                        json.dumps(
                                            summary_to_dict(outcome.summary), ensure_ascii=False
                                        )
                                    )
                            bar.advance(items[index].photo)
        except KeyboardInterrupt:
            tally.in_history = _photos_in_history(
                history, surface, [hashes[p.path] for p in planned]
            )
            raise
        finally:
            warming.wait()
        announce({o.path for o in outcomes.values() if isinstance(o, Skipped)})
        if tally.measured and history.schema_version() >= 3:
            history.claim_folder(surface, str(folder.resolve()))
        if note:
            fresh_shas = {o.summary.sha256 for o in outcomes.values() if isinstance(o, Measured)}
            numbers = {p.number for p in history.passes(surface) if p.summary.sha256 in fresh_shas}
            for number in sorted(numbers):
                history.set_note(surface, number, note)
        stored = history.passes(surface)
    tally.measured[:] = [o for _, o in sorted(outcomes.items()) if isinstance(o, Measured)]
    spec = options.spec if options.spec is not None else surface_spec(stored)
    progress = history_progress(surface, stored, spec=spec)
    fresh = {m.path: m for m in tally.measured}
    by_sha = {p.summary.sha256: p.summary for p in stored}
    shown: list[tuple[PassSummary, bytes | None]] = []
    for p in planned:
        if p.path in fresh:
            shown.append((fresh[p.path].summary, fresh[p.path].preview))
        elif hashes[p.path] in by_sha:
            summary = by_sha[hashes[p.path]]
            shown.append((summary, stored_preview(out, summary.photo, summary.sha256)))
    return progress, shown, stored


def _iso(plan: Any) -> str:
    return str(plan.sort_time.isoformat(timespec="seconds"))


def _sha256(path: Path) -> str | None:
    """SHA-256 of the file's bytes (the history's identity of a photo), or None."""
    import hashlib

    try:
        with open(path, "rb") as fh:
            return hashlib.file_digest(fh, "sha256").hexdigest()
    except OSError:
        return None  # the worker says what is wrong with it


def _check_folder(
    history: Any,
    surface: str,
    folder: Path,
    shas: set[str | None],
    known: Mapping[str, Any],
    *,
    same_surface: bool,
) -> None:
    """Refuse to add to a surface whose passes came from another folder (unless asked);
    note this folder as the surface's when it has none.

    A folder that holds any photo already recorded for the surface is the same job (moved,
    or copied from the phone again); one that holds none of them is another job.
    """
    here = str(folder.resolve())
    if history.schema_version() < 3:
        return
    there = history.surface_folder(surface)
    ours = any(sha in known for sha in shas if sha is not None)
    if there is not None and there != here and not same_surface and not ours:
        count = len({p.number for p in history.passes(surface)})
        if count:
            raise OptionError(
                f"batch {folder}: surface {surface!r} already has {count} passes from "
                f"another folder ({there}); give this job its own name (--surface NAME, or "
                f'machine = "..." in printcheck.toml), or --same-surface to add to it'
            )


def _remeasured_words(new: PassSummary, old: PassSummary, why: str) -> str:
    def fig(value: float | None) -> str:
        return "-" if value is None else f"{value:.1f}"

    return (
        f"re-measured {new.photo}: {why}; density {fig(old.density)} -> {fig(new.density)}, "
        f"bearing {fig(old.bearing_percent)} -> {fig(new.bearing_percent)} % "
        "(the earlier figures stay in the history)"
    )


class _Warming:
    """:func:`printcheck.report.plots.warm_up` on a thread of its own, waited for however
    the batch ends.

    The thread must have ended before the interpreter does: one still inside matplotlib's
    C++ code when Python exits is torn down there, and the process aborts ("terminate
    called without an active exception", SIGABRT).  So it is no daemon, and it is waited
    for on an event rather than by ``Thread.join`` alone: a Ctrl-C that lands inside
    ``join`` makes Python (3.11) mark the thread as ended while it still runs, and the
    interpreter would then exit under it.
    """

    def __init__(self) -> None:
        import threading

        self._done = threading.Event()
        self._thread = threading.Thread(target=self._run, name="printcheck-plots")

    def _run(self) -> None:
        from printcheck.report.plots import warm_up

        try:
            warm_up()
        finally:
            self._done.set()

    def start(self) -> None:
        """Start the warm-up (once; later calls do nothing)."""
        if self._thread.ident is None:
            self._thread.start()

    def wait(self) -> None:
        """Wait until the warm-up has ended (at once if it never started); an interrupt
        meanwhile is raised once it has."""
        if self._thread.ident is None:
            return
        interrupt: BaseException | None = None
        while not self._done.is_set():
            try:
                self._done.wait()
            except KeyboardInterrupt as exc:
                interrupt = exc
        self._thread.join()
        if interrupt is not None:
            raise interrupt


def _photos_in_history(history: Any, surface: str, shas: Sequence[str | None]) -> int | None:
    """How many photos of the batch (by their hashes: names repeat across the subfolders
    of a job) have a pass of ``surface`` in the history."""
    try:
        recorded = {p.summary.sha256 for p in history.passes(surface)}
    except (PrintcheckError, KeyboardInterrupt):
        return None
    return sum(sha is not None and sha in recorded for sha in shas)


def _write_outputs(
    out: Path,
    *,
    surface: str,
    spec: Spec | None,
    tally: _Tally,
    progress: Progress,
    shown: Sequence[tuple[PassSummary, bytes | None]],
    folder: Path,
) -> None:
    """``results.csv`` and ``report.html`` of the batch's photos with their current
    figures (naming the skipped), the surface's stations and notes under the header."""
    from printcheck.report.files import CSV_NAME, write_csv
    from printcheck.report.html import write_report
    from printcheck.report.stations import stations_section

    write_csv(out, CSV_NAME, [summary for summary, _ in shown])
    write_report(
        out / "report.html",
        surface=surface,
        spec=spec,
        passes=list(shown),
        progress=progress,
        skipped=[(photo_name(s.path, folder), s.reason) for s in tally.skipped],
        extra_html=stations_section(progress),
    )


# ---------------------------------------------------------------- the worker processes


class _InWorker:
    """What a worker process knows of its batch; set once per worker by :func:`_start_worker`.

    Lives only in the worker processes (a process pool hands its initializer's results to
    the tasks through the worker's module state); the batch process never sets it.
    """

    slots: Any = None  # the shared per-photo states (see _WAITING, _DONE)


def _start_worker(batch_pid: int, slots: Any) -> None:
    """Initializer of each worker process: ignore Ctrl-C, end with the batch process."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # the batch alone answers Ctrl-C
    _InWorker.slots = slots
    _end_with(batch_pid)


def _end_with(batch_pid: int) -> None:
    """End this process as soon as process ``batch_pid`` ends, however it ends.

    A worker's parent is the fork server, not the batch, so a parent-death signal would
    not fire; a thread waits on a pidfd of the batch process instead (Linux), or looks
    twice a second where there is none.
    """
    import threading

    try:
        fd: int | None = os.pidfd_open(batch_pid)
    except ProcessLookupError:
        os._exit(1)  # the batch is already gone
    except (AttributeError, OSError):
        fd = None

    def watch() -> None:
        import select
        import time

        if fd is not None:
            select.select([fd], [], [])  # readable when the process has ended
        else:
            while _alive(batch_pid):
                time.sleep(0.5)
        os._exit(1)

    threading.Thread(target=watch, name="printcheck-batch-watch", daemon=True).start()


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def _work_in_pool(index: int, path: Path, options: InspectOptions, out: Path, name: str) -> Outcome:
    """:func:`_work` in a worker process, its photo marked as being measured by this one."""
    slots = _InWorker.slots
    slots[index] = os.getpid()
    try:
        return _work(path, options, out, True, name=name)
    finally:
        slots[index] = _DONE


class _Runner:
    """Runs ``_work`` over the photos; iterate it for (index, outcome) as photos finish.

    With more than one worker the process pool is started and every photo submitted on
    entry, before the progress bar starts its thread.  If a worker is killed, the photo
    it was measuring comes out as a :class:`Skipped` with ``killed`` set, and a new pool
    measures the photos still to do.  On leaving with an exception (Ctrl-C, a history
    that cannot be written), the workers are stopped at once.
    """

    _MAX_FRUITLESS_RESTARTS = 2

    def __init__(
        self, items: list[BatchItem], options: InspectOptions, out: Path, workers: int
    ) -> None:
        self._items = items
        self._options = options
        self._out = out
        self._workers = workers
        self._context: Any = None
        self._slots: Any = None
        self._pool: ProcessPoolExecutor | None = None
        self._futures: dict[Future[Outcome], int] = {}
        self._processes: set[Any] = set()  # every worker process any pool of this run had
        self._others: set[Any] = set()  # child processes that are not the pools'
        self._dead_before: set[int] = set()  # workers of earlier pools that died

    def __enter__(self) -> _Runner:
        if self._workers > 1:
            import multiprocessing as mp

            self._others = set(mp.active_children())
            self._context = _pool_context()
            self._slots = self._context.RawArray("q", len(self._items))
            self._start(list(range(len(self._items))))
        return self

    def _start(self, indices: list[int]) -> None:
        """A new pool, measuring the photos at ``indices``."""
        self._dead_before = _died(self._processes)
        _start_helpers(self._context)
        for index in indices:
            self._slots[index] = _WAITING
        self._pool = ProcessPoolExecutor(
            max_workers=max(1, min(self._workers, len(indices))),
            mp_context=self._context,
            initializer=_start_worker,
            initargs=(os.getpid(), self._slots),
        )
        self._futures = {
            self._pool.submit(
                _work_in_pool,
                index,
                self._items[index].path,
                self._options,
                self._out,
                self._items[index].photo,
            ): index
            for index in indices
        }
        self._note_processes()

    def _note_processes(self) -> None:
        """Remember the pool's worker processes (it starts them as photos are submitted)."""
        import multiprocessing as mp

        self._processes |= set(mp.active_children()) - self._others

    def __iter__(self) -> Iterator[tuple[int, Outcome]]:
        if self._pool is None:
            for index, item in enumerate(self._items):
                yield index, _work(item.path, self._options, self._out, False, name=item.photo)
            return
        from concurrent.futures import CancelledError
        from concurrent.futures.process import BrokenProcessPool

        fruitless = 0
        while self._futures:
            broken: list[int] = []
            delivered = 0
            stuck = _Stuck()
            for future in finished(
                self._futures, self._pool, self._processes, stuck, earlier=self._dead_before
            ):
                index = self._futures[future]
                try:
                    outcome = future.result()
                except (BrokenProcessPool, CancelledError):  # cancelled: a stuck pool's
                    broken.append(index)
                    continue
                delivered += 1
                self._note_processes()
                yield index, outcome
            self._futures = {}
            if not broken:
                return
            killed = self._killed(broken, stuck.died)
            for index in killed:
                yield index, _killed_photo(self._items[index].path)
            rest = sorted(set(broken) - set(killed))
            fruitless = 0 if (killed or delivered) else fruitless + 1
            if fruitless > self._MAX_FRUITLESS_RESTARTS:  # workers die whatever they do
                for index in rest:
                    yield index, _killed_photo(self._items[index].path)
                return
            if rest:
                self._start(rest)

    def _killed(self, broken: list[int], died: set[int] | None = None) -> list[int]:
        """Of the photos a broken pool did not finish, those whose worker was killed.

        The pool ends every worker it has left with SIGTERM once one dies; a worker that
        died otherwise (SIGKILL from the out-of-memory killer, a crash) while its photo
        was marked as being measured by it, was killed measuring that photo.  ``died``:
        the workers found dead before a stuck pool was ended (which kills the rest).
        """
        assert self._pool is not None
        self._pool.shutdown(wait=True)  # the broken pool's own end: its workers joined
        if died is None:
            died = _died(self._processes)
        return [index for index in broken if self._slots[index] in died]

    def __exit__(self, exc_type: object, *exc: object) -> None:
        if self._pool is None:
            return
        if exc_type is None:
            self._pool.shutdown(wait=True)
            return
        # Ctrl-C or an error: stop now, without waiting for the photos being measured.
        end_pool_now(self._pool, self._processes)


def _died(processes: set[Any]) -> set[int]:
    """The ids of ``processes`` that ended otherwise than by finishing or by SIGTERM."""
    return {
        p.pid
        for p in processes
        if p.exitcode is not None and p.exitcode not in (0, -signal.SIGTERM)
    }


#: How long a pool may go without finishing a photo after one of its workers died before
#: it is taken as stuck (s).  The pool's own thread notices a dead worker at once and
#: fails its photos; it cannot when the worker died half-way through sending a result.
STUCK_AFTER_S = 10.0


@dataclass
class _Stuck:
    """What :func:`finished` found: the workers dead when it ended a stuck pool."""

    died: set[int] | None = None


def finished(
    futures: Mapping[Future[Any], int],
    pool: ProcessPoolExecutor,
    processes: set[Any],
    stuck: _Stuck,
    *,
    earlier: set[int] | None = None,
) -> Iterator[Future[Any]]:
    """``futures`` as they finish, like ``as_completed``, but never waiting for ever.

    A worker killed half-way through sending its result (the out-of-memory killer, a
    ``kill -9``) leaves half a message in the pool's result pipe: the pool's thread waits
    for the rest, never sees that the worker died, and no photo of the pool ever
    finishes.  When a worker of ``processes`` has died and nothing finished for
    :data:`STUCK_AFTER_S`, the pool is ended (:func:`end_pool_now`): its photos then
    finish as failed (broken or cancelled), and ``stuck.died`` holds the workers that
    had died before.  ``earlier``: the ids of workers of earlier pools that died, read
    when this pool started (default: those dead now).

    A worker marks its photo done before it sends the result, so the photo of one killed
    while sending is measured again, not reported as killed; a photo is reported only
    when its worker died inside it.
    """
    import time
    from concurrent.futures import FIRST_COMPLETED, InvalidStateError, wait
    from concurrent.futures.process import BrokenProcessPool

    earlier = _died(processes) if earlier is None else earlier
    pending = set(futures)
    dead_since: float | None = None
    while pending:
        done, pending = wait(pending, timeout=1.0, return_when=FIRST_COMPLETED)
        yield from done
        if done or not (_died(processes) - earlier):
            dead_since = None
            continue
        now = time.monotonic()
        dead_since = now if dead_since is None else dead_since
        if now - dead_since >= STUCK_AFTER_S:
            stuck.died = _died(processes) - earlier
            end_pool_now(pool, processes)
            done, pending = wait(pending, timeout=STUCK_AFTER_S)
            yield from done
            for future in pending:  # not once the pool's thread has ended, as it has
                if not future.cancel():
                    with contextlib.suppress(InvalidStateError):
                        future.set_exception(BrokenProcessPool("the pool was stuck"))
                yield future
            return


#: How long the pool's own thread is given to notice that its workers were killed (s).
_POOL_THREAD_GRACE_S = 2.0


def end_pool_now(pool: ProcessPoolExecutor, processes: set[Any]) -> None:
    """Kill the pool's worker ``processes`` and end the pool, without waiting for the
    photos being measured.

    No future is cancelled from here: the pool's own thread cancels the waiting ones
    (``cancel_futures``), and one cancelled from this thread while that thread fails the
    killed pool's futures makes it raise (InvalidStateError, Python 3.11).

    A worker killed half-way through sending its result leaves the rest of the message
    missing from the pool's result pipe, and the pool's thread waits for it for ever
    (then so would the batch, Ctrl-C or not).  When the thread has not ended within a
    moment, filler is written into the pipe until it has: the message is then whole but
    meaningless, the thread cannot read it, takes the pool as broken and ends.
    """
    for process in processes:
        with contextlib.suppress(OSError):
            process.kill()  # a no-op for one already ended
    thread = getattr(pool, "_executor_manager_thread", None)
    results = getattr(pool, "_result_queue", None)
    pool.shutdown(wait=False, cancel_futures=True)
    if thread is None:
        return
    thread.join(_POOL_THREAD_GRACE_S)
    if thread.is_alive() and results is not None:
        _fill_until_ended(results._writer.fileno(), thread)
    thread.join()


#: More than any result a worker sends (bytes): past it, the thread waits for something else.
_MOST_FILLER = 1 << 28


def _fill_until_ended(fd: int, thread: Any) -> None:
    """Write zeros into the pipe ``fd`` until ``thread`` ends (never blocking on a full
    pipe: it waits a moment and looks at the thread again)."""
    import time

    os.set_blocking(fd, False)
    chunk = bytes(65536)
    written = 0
    while thread.is_alive() and written < _MOST_FILLER:
        try:
            written += os.write(fd, chunk)
        except BlockingIOError:
            time.sleep(0.01)
        except OSError:  # the pipe is gone: nothing is left to wait for
            return
        thread.join(0.01)


def _killed_photo(path: Path) -> Skipped:
    return Skipped(
        path,
        f"photo {path}: not measured: the worker process measuring it was killed (out of "
        "memory?); run the batch again, or measure it alone with 'printcheck inspect'",
        killed=True,
    )


def _pool_context() -> Any:
    """The multiprocessing context of the pools.

    Not "fork": a forked child inherits OpenCV's thread pool in an unusable state and can
    hang; the fork server starts clean children cheaply.
    """
    import multiprocessing as mp

    methods = mp.get_all_start_methods()
    context = mp.get_context("forkserver" if "forkserver" in methods else "spawn")
    if context.get_start_method() == "forkserver":
        # the server imports the stages once; each worker forks from it ready to run
        # (OpenCV starts no threads on import, so forking it is safe)
        context.set_forkserver_preload(list(_WORKER_MODULES))
    return context


def _start_helpers(context: Any) -> None:
    """Start (or start again) the pool's helper processes so that they stay out of the
    way: with Ctrl-C blocked, and stderr on the null device.

    - The fork server: it and every worker forked from it never see the terminal's
      SIGINT, which the batch alone answers.  Nothing a worker might print reaches the
      terminal (a worker still being started when the batch stops would print a
      traceback from deep inside multiprocessing); a worker's errors come back to the
      batch as results, and a worker that dies is reported by the batch.
    - The resource tracker: after a ``kill -9`` of the batch it cleans up the pool's
      semaphores, and would otherwise print a warning about them into the terminal.

    Both are left running if they are (they serve every pool of the process).
    """
    from multiprocessing import resource_tracker

    with _stderr_to_null(), signals_blocked(signal.SIGINT):
        resource_tracker.ensure_running()
        if context.get_start_method() == "forkserver":
            from multiprocessing import forkserver

            forkserver.ensure_running()


@contextlib.contextmanager
def _stderr_to_null() -> Iterator[None]:
    """File descriptor 2 on the null device for the moment (for a helper process to inherit)."""
    import sys

    try:
        sys.stderr.flush()
        saved = os.dup(2)
    except (OSError, ValueError, AttributeError):  # no stderr at all: nothing to hide
        yield
        return
    null = os.open(os.devnull, os.O_WRONLY)
    try:
        os.dup2(null, 2)
        yield
    finally:
        os.dup2(saved, 2)
        os.close(saved)
        os.close(null)


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
