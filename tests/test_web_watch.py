"""``printcheck watch``: photos copied into a folder slowly are read only when complete.

The Watcher and the Measurer (batch's worker processes) run in this process; the history
is a real SQLite file.  Truth: the bytes copied in (a file is taken only once its
size equals the source's), and the history's rows (each photo once).
"""

from __future__ import annotations

import os
import shutil
import sqlite3
import threading
import time
from pathlib import Path
from typing import Any

import pytest

from printcheck.options import InspectOptions
from printcheck.web.measurer import DONE, Measurer
from printcheck.web.watch import Watcher


def _copy_slowly(source: Path, target: Path, *, chunks: int, pause_s: float) -> None:
    """Copy ``source`` to ``target`` in ``chunks`` pieces, ``pause_s`` apart (a sync client)."""
    data = source.read_bytes()
    step = -(-len(data) // chunks)
    with open(target, "wb") as fh:
        for start in range(0, len(data), step):
            fh.write(data[start : start + step])
            fh.flush()
            os.fsync(fh.fileno())
            time.sleep(pause_s)


def _wait_done(jobs: list[Any], limit_s: float = 120) -> None:
    deadline = time.monotonic() + limit_s
    while any(j.state not in (DONE, "failed") for j in jobs):
        assert time.monotonic() < deadline, "not measured in time"
        time.sleep(0.1)


def _rows(db: Path) -> list[tuple[str, str]]:
    with sqlite3.connect(f"file:{db}?mode=ro", uri=True) as con:
        return con.execute("SELECT sha256, photo FROM passes ORDER BY photo").fetchall()


@pytest.fixture
def measurer(tmp_path: Path) -> Any:
    with Measurer(
        options=InspectOptions(surface="watched-way"),
        out=tmp_path / "out",
        db=tmp_path / "history.sqlite",
        workers=2,
    ) as m:
        yield m


def test_slow_copies_are_read_only_when_complete_and_recorded_once(
    tmp_path: Path, measurer: Measurer, small_job: Any
) -> None:
    source_folder, photos = small_job
    inbox = tmp_path / "inbox"
    inbox.mkdir()
    watcher = Watcher(inbox, measurer, surface="watched-way", interval_s=0.1, settle_s=0.8)
    sources = [source_folder / photos[0].file, source_folder / photos[1].file]
    # one copy trickles in steadily; the other stalls half-way for longer than the settle
    # time (a sync client waiting on the network), then finishes
    steady = threading.Thread(
        target=_copy_slowly,
        args=(sources[0], inbox / "a.jpg"),
        kwargs={"chunks": 8, "pause_s": 0.3},
    )

    def stalled() -> None:
        data = sources[1].read_bytes()
        with open(inbox / "b.jpg", "wb") as fh:
            fh.write(data[: len(data) // 2])
            fh.flush()
            time.sleep(2.5)
            fh.write(data[len(data) // 2 :])

    stall = threading.Thread(target=stalled)
    steady.start()
    stall.start()
    taken_sizes: dict[str, int] = {}
    refused_while_stalled: set[str] = set()
    while steady.is_alive() or stall.is_alive():
        for job in watcher.look():
            taken_sizes[job.path.name] = job.path.stat().st_size
        refused_while_stalled |= {
            p.name for p, why in watcher.refused.items() if "truncated" in why
        }
        time.sleep(0.1)
    steady.join()
    stall.join()
    deadline = time.monotonic() + 10
    while len(taken_sizes) < 2 and time.monotonic() < deadline:
        for job in watcher.look():
            taken_sizes[job.path.name] = job.path.stat().st_size
        time.sleep(0.1)
    # each file taken once, at its full size; the stalled one was seen as incomplete first
    assert taken_sizes == {"a.jpg": sources[0].stat().st_size, "b.jpg": sources[1].stat().st_size}
    assert "b.jpg" in refused_while_stalled
    _wait_done(watcher.jobs)
    assert [j.state for j in watcher.jobs] == [DONE, DONE]
    # later looks, and the same photo under another name, add nothing
    (inbox / "a-copy.jpg").write_bytes(sources[0].read_bytes())
    time.sleep(1.0)
    for _ in range(3):
        assert watcher.look() == []
        time.sleep(0.5)
    assert sorted(photo for _, photo in _rows(measurer.db)) == ["a.jpg", "b.jpg"]
    assert sources[0].read_bytes() == (inbox / "a.jpg").read_bytes()  # photos not modified


def test_a_killed_worker_costs_only_its_photo(measurer: Measurer, small_job: Any) -> None:
    """The out-of-memory killer takes a worker: its photo is reported, the next is measured."""
    import signal

    folder, photos = small_job
    path = folder / photos[0].file
    first = measurer.submit(
        path, surface="killed-way", sha256="a" * 64, sent_name="a", station=None
    )
    deadline = time.monotonic() + 30
    pool = measurer._pool
    assert pool is not None
    while not pool._processes and time.monotonic() < deadline:  # the pool starts its workers
        time.sleep(0.01)
    for pid in list(pool._processes):
        os.kill(pid, signal.SIGKILL)
    _wait_done([first])
    assert first.state == "failed" and "worker process stopped" in (first.message or "")
    second = measurer.submit(
        folder / photos[1].file, surface="killed-way", sha256="b" * 64, sent_name="b", station=None
    )
    _wait_done([second])
    assert second.state == DONE, second.message


def test_names_give_the_pass_and_station_as_batch_reads_them(
    tmp_path: Path, measurer: Measurer, small_job: Any
) -> None:
    # a sync client drops p1-st1.jpg, p1-st2.jpg, p2-st1.jpg: stations 1 and 2 of pass
    # 1, then station 1 of pass 2 (the name rule of `printcheck batch`, docs/guide.md)
    source_folder, photos = small_job
    inbox = tmp_path / "inbox"
    inbox.mkdir()
    for photo, name in zip(photos, ("p1-st1.jpg", "p1-st2.jpg", "p2-st1.jpg"), strict=True):
        shutil.copy2(source_folder / photo.file, inbox / name)
    watcher = Watcher(inbox, measurer, surface="watched-way", interval_s=0.1, settle_s=0.3)
    deadline = time.monotonic() + 10
    while len(watcher.jobs) < 3 and time.monotonic() < deadline:
        watcher.look()
        time.sleep(0.1)
    _wait_done(watcher.jobs)
    with sqlite3.connect(f"file:{measurer.db}?mode=ro", uri=True) as con:
        rows = con.execute("SELECT photo, station, pass_key FROM passes ORDER BY photo").fetchall()
    assert rows == [
        ("p1-st1.jpg", "1", "pass 1"),
        ("p1-st2.jpg", "2", "pass 1"),
        ("p2-st1.jpg", "1", "pass 2"),
    ]
