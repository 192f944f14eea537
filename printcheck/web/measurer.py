"""The measurer: photos measured in worker processes, each pass recorded in the history.

The workers are ``batch``'s: the same pool (:func:`printcheck.batch.photo_pool`, a fork
server with the stages preloaded), the same work function
(:func:`printcheck.batch.measure_photo`: inspect, write the result JSON and overlay into
the output folder), so a photo sent from a phone is measured, written and recorded exactly
as ``batch`` would.  Recording happens in this process, one
pass at a time under a lock; the history itself refuses a photo (by its SHA-256) it
already holds for the surface, and the job table recognises a photo that is still being
measured, so a photo sent twice is measured and recorded once.
"""

from __future__ import annotations

import contextlib
import hashlib
import threading
import time
from concurrent.futures import Future, ProcessPoolExecutor
from dataclasses import dataclass, field, replace
from functools import partial
from pathlib import Path
from typing import Any

from printcheck.options import InspectOptions

__all__ = ["Job", "Measurer", "job_id"]

QUEUED, DONE, FAILED = "queued", "done", "failed"


def job_id(surface: str, sha256: str) -> str:
    """The job's id: the photo's hash and the surface it is for (one job per pair)."""
    return hashlib.sha256(f"{surface}\x00{sha256}".encode()).hexdigest()[:24]


@dataclass
class Job:
    """One photo to measure for one surface, and how far it has got."""

    id: str
    surface: str
    sha256: str
    path: Path
    sent_name: str
    station: str | None
    new_pass: bool = False  # the fitter asked for a new pass (not a station of the last)
    pass_key: str | None = None  # the pass the photo's name gives ("pass 3"), as batch has it
    submitted: float = field(default_factory=time.monotonic)
    state: str = QUEUED
    finished: float | None = None
    message: str | None = None
    spot_count: int | None = None
    recorded: bool | None = None  # False: the history already held this photo

    @property
    def seconds(self) -> float:
        """Seconds from submission to the result (or until now)."""
        return (self.finished or time.monotonic()) - self.submitted


class Measurer:
    """A pool of worker processes and the table of jobs.

    Parameters
    ----------
    options : InspectOptions
        The job settings (from the command line and the job file); each job sets only
        its surface.
    out : Path
        The output folder (results, overlays, uploads).
    db : Path
        The history.
    workers : int
        Worker processes.
    """

    def __init__(self, *, options: InspectOptions, out: Path, db: Path, workers: int) -> None:
        self.options = options
        self.out = out
        self.db = db
        self.workers = max(1, workers)
        self._jobs: dict[str, Job] = {}
        self._lock = threading.Lock()
        self._record_lock = threading.Lock()
        self._pool: ProcessPoolExecutor | None = None

    # ------------------------------------------------------------ life-cycle

    def start(self) -> None:
        """Start the worker pool (and check the history can be opened and written)."""
        from printcheck.batch import photo_pool
        from printcheck.history import open_history

        with open_history(self.db):
            pass  # a file that is not a history is refused now, not at the first photo
        self.out.mkdir(parents=True, exist_ok=True)
        # workers ignore Ctrl-C (the server answers it) and end when the server ends
        self._pool = photo_pool(self.workers)

    def stop(self) -> None:
        """Stop the workers (photos still queued are dropped; none is half-recorded)."""
        if self._pool is not None:
            self._pool.shutdown(wait=True, cancel_futures=True)
            self._pool = None

    def __enter__(self) -> Measurer:
        self.start()
        return self

    def __exit__(self, *exc: object) -> None:
        self.stop()

    # ------------------------------------------------------------ jobs

    def submit(
        self,
        path: Path,
        *,
        surface: str,
        sha256: str,
        sent_name: str,
        station: str | None,
        new_pass: bool = False,
        pass_key: str | None = None,
    ) -> Job:
        """Measure the photo at ``path`` for ``surface``; the job (an existing one when the
        same photo was already sent for the surface and did not fail)."""
        jid = job_id(surface, sha256)
        with self._lock:
            known = self._jobs.get(jid)
            if known is not None and known.state != FAILED:
                return known
            job = Job(jid, surface, sha256, path, sent_name, station, new_pass, pass_key)
            self._jobs[jid] = job
        self._run(job)
        return job

    def _run(self, job: Job) -> None:
        from concurrent.futures.process import BrokenProcessPool

        from printcheck.batch import measure_photo

        options = replace(self.options, surface=job.surface)
        for _ in range(2):
            pool = self._pool
            if pool is None:
                raise RuntimeError("the measurer is not started")
            try:
                future = pool.submit(measure_photo, job.path, options, self.out, preview=False)
            except BrokenProcessPool:  # a worker was killed: a fresh pool, then again
                self._restart(pool)
                continue
            future.add_done_callback(partial(self._finish, job, options, pool=pool))
            return
        self._fail(job, "not measured: the worker processes could not be started again")

    def _restart(self, broken: ProcessPoolExecutor) -> None:
        """A worker was killed (out of memory?): a fresh pool for the photos to come.

        Only the broken pool is replaced, once, however many of its photos report it.
        """
        with self._lock:
            if self._pool is not broken:
                return
            with contextlib.suppress(Exception):
                broken.shutdown(wait=False, cancel_futures=True)
            self._pool = None
            self.start()

    def _finish(
        self, job: Job, options: InspectOptions, future: Future[Any], *, pool: ProcessPoolExecutor
    ) -> None:
        from printcheck.batch import Measured

        try:
            outcome = future.result()
        except Exception as exc:  # the worker died, or the pool was shut down
            self._fail(job, f"not measured: the worker process stopped ({type(exc).__name__})")
            if getattr(pool, "_broken", False):
                threading.Thread(target=self._restart, args=(pool,), daemon=True).start()
            return
        if not isinstance(outcome, Measured):
            self._fail(job, _without_path(outcome.error, job.path))
            return
        try:
            recorded = self._record(outcome.summary, job, options)
        except Exception as exc:  # the history could not be written: say so on the page
            self._fail(job, str(exc))
            return
        with self._lock:
            job.spot_count = outcome.summary.spot_count
            job.recorded = recorded
            job.finished = time.monotonic()
            job.state = DONE

    def _record(self, summary: Any, job: Job, options: InspectOptions) -> bool:
        """Record the photo for ``job.surface`` (at ``job.station``, in the pass
        :func:`web_pass` gives), with the settings and method it was measured by, as
        ``batch`` records a photo."""
        from printcheck.compare import place_contacts
        from printcheck.history import open_history
        from printcheck.method import METHOD_VERSION
        from printcheck.stations import settings_key

        with self._record_lock, open_history(self.db) as history:
            key = web_pass(history.passes(job.surface), job, time.time())
            recorded = history.record(
                summary,
                surface=job.surface,
                spec=options.spec,
                station=job.station,
                pass_key=key,
                settings=settings_key(options),
                method=METHOD_VERSION,
            )
        if summary.sha256:
            # where the photo stands, in its contact map as batch keeps it: a photo sent
            # from the phone at a station is compared with that station's pass before,
            # whether batch or the phone recorded it
            place_contacts(self.out, summary.sha256, station=job.station, pass_key=key)
        return recorded

    def _fail(self, job: Job, message: str) -> None:
        with self._lock:
            job.message = message
            job.finished = time.monotonic()
            job.state = FAILED

    def job(self, jid: str) -> Job | None:
        """The job with id ``jid``, or None."""
        with self._lock:
            return self._jobs.get(jid)

    def ahead_of(self, job: Job) -> int:
        """Photos sent before ``job`` and not yet finished, beyond those being measured."""
        with self._lock:
            waiting = [
                j for j in self._jobs.values() if j.state == QUEUED and j.submitted < job.submitted
            ]
        return max(0, len(waiting) - self.workers + 1)

    def pending(self) -> int:
        """Jobs not finished yet."""
        with self._lock:
            return sum(j.state == QUEUED for j in self._jobs.values())


def _without_path(error: str, path: Path) -> str:
    """The error without the stored file's path (the phone's user never saw that name)."""
    head = f"photo {path}: "
    return "the photo " + error[len(head) :] if error.startswith(head) else error


#: Photos of one pass's stations are taken within minutes of each other; a scraping pass
#: between two prints takes longer (common practice).
SAME_PASS_S = 20 * 60
_WEB_PASS = "web "


def web_pass(stored: list[Any], job: Job, now: float) -> str | None:
    """The pass a photo sent from the phone belongs to (its history pass key).

    A pass its name gives (``job.pass_key``, a watched folder's ``p3-st2.jpg``) is kept,
    as a batch keeps it.  A photo without a station is a pass of its own (None).  A photo
    at a station joins the surface's latest pass sent from the phone when that pass has
    no photo at the station yet and its last photo was recorded under
    :data:`SAME_PASS_S` ago, unless the fitter asked for a new pass; otherwise it starts
    a pass.  So walking the bed after a pass, station by station, makes one pass; the
    same stations again after scraping, the next.  (A batch's passes are never joined.)
    """
    from datetime import datetime

    if job.pass_key is not None:
        return job.pass_key
    if job.station is None:
        return None
    if not job.new_pass:
        web = [p for p in stored if (p.pass_key or "").startswith(_WEB_PASS)]
        if web:
            latest = max(web, key=lambda p: p.recorded).pass_key
            members = [p for p in web if p.pass_key == latest]
            last = max(datetime.fromisoformat(p.recorded).timestamp() for p in members)
            if job.station not in {p.station for p in members} and now - last < SAME_PASS_S:
                return str(latest)
    return f"{_WEB_PASS}{job.sha256[:16]}"
