"""Watch a folder: photos a phone's sync client drops in are measured once complete.

A file is taken only when it is complete: its size and modification time have not
changed over ``settle_s`` (seen on two looks at least that far apart), and its bytes pass
the checks of :func:`printcheck.web.uploads.check_photo_bytes` (whole header, not
truncated).  A file still being written is therefore never read half.  Each file is
measured once per content (the photo's hash; the history refuses it a second time).
Photos are read in place and never modified; results go to the output folder.
"""

from __future__ import annotations

import threading
import time
from pathlib import Path

from printcheck.errors import PhotoError, PrintcheckError
from printcheck.stations import pass_token, station_token
from printcheck.web.measurer import Job, Measurer

__all__ = ["Watcher"]


class Watcher:
    """Look at ``folder`` every ``interval_s`` and submit each complete new photo."""

    def __init__(
        self,
        folder: Path,
        measurer: Measurer,
        *,
        surface: str,
        interval_s: float = 1.0,
        settle_s: float = 2.0,
    ) -> None:
        self.folder = folder
        self.measurer = measurer
        self.surface = surface
        self.interval_s = interval_s
        self.settle_s = settle_s
        self.jobs: list[Job] = []
        self.refused: dict[Path, str] = {}
        self._seen: dict[Path, tuple[int, int, float]] = {}  # size, mtime_ns, first seen so
        self._taken: dict[Path, tuple[int, int]] = {}
        self._hashes: set[str] = set()
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._loop, name="printcheck-watch", daemon=True)

    def start(self) -> None:
        self._thread.start()

    def stop(self) -> None:
        self._stop.set()
        if self._thread.ident is not None:
            self._thread.join()

    def _loop(self) -> None:
        while not self._stop.is_set():
            try:
                self.look()
            except PrintcheckError:
                pass  # the folder is gone for a moment (a sync client): look again
            self._stop.wait(self.interval_s)

    def look(self, now: float | None = None) -> list[Job]:
        """One look at the folder; the jobs it started."""
        from printcheck.batch import list_photos

        now = time.monotonic() if now is None else now
        items, _ = list_photos(self.folder)
        started: list[Job] = []
        for item in items:
            path = item.path
            try:
                info = path.stat()
            except OSError:
                continue
            state = (info.st_size, info.st_mtime_ns)
            if self._taken.get(path) == state:
                continue  # measured already, unchanged since
            seen = self._seen.get(path)
            if seen is None or seen[:2] != state:
                self._seen[path] = (*state, now)  # new or still changing: wait
                continue
            if now - seen[2] < self.settle_s:
                continue
            job = self._take(path, state)
            if job is not None:
                started.append(job)
        self.jobs.extend(started)
        return started

    def _take(self, path: Path, state: tuple[int, int]) -> Job | None:
        from printcheck.web.uploads import check_photo_bytes

        try:
            data = path.read_bytes()
            checked = check_photo_bytes(data, label=f"photo {path}")
        except (OSError, PhotoError) as exc:
            # a truncated file may yet be completed (a paused copy): look again later
            self.refused[path] = str(exc)
            self._seen.pop(path, None)
            return None
        if (len(data), path.stat().st_mtime_ns) != state:
            return None  # written to while being read: wait for it to settle again
        self._taken[path] = state
        self.refused.pop(path, None)
        if checked.sha256 in self._hashes:
            return None  # the same photo under another name
        self._hashes.add(checked.sha256)
        # the station and pass the name gives, by batch's rule (p3-st2.jpg, pass3-station-
        # tailstock.jpg); stations without a pass number group as the phone's do
        number = pass_token(path.name)
        return self.measurer.submit(
            path,
            surface=self.surface,
            sha256=checked.sha256,
            sent_name=path.name,
            station=station_token(path.name),
            pass_key=None if number is None else f"pass {number}",
        )
