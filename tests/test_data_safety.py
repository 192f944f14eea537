"""Data safety of ``printcheck batch`` under interruption, damage and odd files.

Every case runs the real command (``python -m printcheck``) as a child process and judges
it by what lies outside printcheck: the file's bytes (SHA-256), SQLite's own
``PRAGMA integrity_check``, the process table (``/proc``), the exit status the OS reports
and what reached stderr.  Ctrl-C is sent as a terminal sends it: SIGINT to the whole
process group.

Twenty runs end early on purpose -- a full disk (a small tmpfs where the test may mount
one, else a per-file size limit, RLIMIT_FSIZE), a damaged history, and Ctrl-C at random
moments -- and none may abort (SIGABRT, "terminate called ...") or print a traceback.

Photos are drawn here, small (about 600 px square): the built-in card's ArUco markers
(cv2.aruco.generateImageMarker) around a grey window with blue discs.
"""

from __future__ import annotations

import hashlib
import html.parser
import json
import os
import random
import resource
import shutil
import signal
import sqlite3
import stat
import subprocess
import sys
import textwrap
import threading
import time
from collections.abc import Callable
from functools import partial
from pathlib import Path
from typing import Any

import cv2
import numpy as np
import pytest

from printcheck.layout import card_layout
from printcheck.report.files import output_name, output_stem

PX_PER_MM = 6.0
BORDER_MM = 24.0
SURFACE = "safety-way"

needs_proc = pytest.mark.skipif(not Path("/proc/self/stat").exists(), reason="needs /proc")


# --------------------------------------------------------------------------- photos


def _card_photo(seed: int) -> np.ndarray:
    """A square-on photo of the built-in 2 in card with 16 blue discs: (M, N, 3) uint8 BGR."""
    card = card_layout()
    side = card.window.width_mm
    n = round((side + 2 * BORDER_MM) * PX_PER_MM)
    img = np.full((n, n, 3), 235.0, np.float32)

    def px(v: float) -> int:
        return round((v + BORDER_MM) * PX_PER_MM)

    img[px(0) : px(side), px(0) : px(side)] = (150, 150, 150)
    rng = np.random.default_rng(seed)
    for x, y in rng.uniform(3.0, side - 3.0, (16, 2)):
        centre = (round((x + BORDER_MM) * PX_PER_MM * 16), round((y + BORDER_MM) * PX_PER_MM * 16))
        cv2.circle(img, centre, round(PX_PER_MM * 16), (120, 45, 20), -1, cv2.LINE_AA, 4)
    dictionary = cv2.aruco.getPredefinedDictionary(cv2.aruco.DICT_4X4_50)
    m_px = round(12.0 * PX_PER_MM)
    for marker in card.markers:
        x0, y0 = marker.corners_mm[0]
        img[px(y0) : px(y0) + m_px, px(x0) : px(x0) + m_px] = cv2.aruco.generateImageMarker(
            dictionary, marker.id, m_px
        )[..., None]
    img += rng.normal(0.0, 2.0, img.shape)
    return np.clip(img, 0, 255).astype(np.uint8)


def _write_photos(folder: Path, count: int, *, first_seed: int = 0) -> list[str]:
    """``count`` photos IMG_0000.jpg ... in ``folder``, one hour apart by camera time
    (EXIF, as a phone writes it) and by file time."""
    from datetime import datetime, timedelta

    from printcheck.synth.job import add_exif_time

    folder.mkdir(parents=True, exist_ok=True)
    names = []
    for i in range(count):
        name = f"IMG_{first_seed + i:04d}.jpg"
        path = folder / name
        ok, jpeg = cv2.imencode(".jpg", _card_photo(first_seed + i), [cv2.IMWRITE_JPEG_QUALITY, 92])
        assert ok
        taken = datetime(2027, 1, 15, 8, 0) + timedelta(hours=first_seed + i)
        path.write_bytes(add_exif_time(jpeg.tobytes(), taken))
        os.utime(path, (1_800_000_000 + i * 3600, 1_800_000_000 + i * 3600))
        names.append(name)
    return names


@pytest.fixture(scope="session")
def job(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, list[str]]:
    """A folder of 8 good photos (never written into: tests give --out elsewhere)."""
    folder = tmp_path_factory.mktemp("photos") / SURFACE
    return folder, _write_photos(folder, 8)


@pytest.fixture(scope="session")
def seeded_db(tmp_path_factory: pytest.TempPathFactory, job: tuple[Path, list[str]]) -> Path:
    """A whole history of the job (the first two photos), made by the real command."""
    folder, names = job
    two = tmp_path_factory.mktemp("two") / SURFACE
    two.mkdir()
    for name in names[:2]:
        shutil.copy2(folder / name, two / name)
    db = tmp_path_factory.mktemp("seed") / "history.sqlite"
    proc = _batch(two, db, tmp_path_factory.mktemp("seed-out"), jobs=1)
    assert proc.returncode == 0, proc.stderr
    return db


# --------------------------------------------------------------------------- helpers


def _command(folder: Path, db: Path, out: Path, *extra: Any, jobs: int = 2) -> list[str]:
    return [
        sys.executable,
        "-m",
        "printcheck",
        "batch",
        str(folder),
        "--db",
        str(db),
        "--out",
        str(out),
        "--jobs",
        str(jobs),
        "--surface",
        SURFACE,
        *map(str, extra),
    ]


def _batch(
    folder: Path, db: Path, out: Path, *extra: Any, jobs: int = 2, **kwargs: Any
) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        _command(folder, db, out, *extra, jobs=jobs),
        capture_output=True,
        text=True,
        timeout=120,
        check=False,
        **kwargs,
    )


def _ended_cleanly(returncode: int, err: str) -> list[str]:
    """The stderr lines, checked: no signal death (SIGABRT above all), no traceback, no
    C++ runtime abort message, every line printcheck's own."""
    assert returncode >= 0, f"died of signal {-returncode}: {err}"
    assert returncode != 134, err  # 128 + SIGABRT, as a shell reports it
    assert "Traceback" not in err and "terminate called" not in err, err
    lines = err.splitlines()
    assert all(line.startswith("printcheck: ") for line in lines), err
    return lines


def _integrity(db: Path) -> list[tuple[str, str]]:
    """SQLite's own integrity check of ``db`` must say ok; its passes (photo, JSON photo).

    Opened read-only: the check itself must not change what it checks.
    """
    con = sqlite3.connect(f"file:{db}?mode=ro", uri=True)
    try:
        assert con.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
        tables = {r[0] for r in con.execute("SELECT name FROM sqlite_master WHERE type='table'")}
        if "passes" not in tables:
            return []
        rows = con.execute("SELECT photo, result_json FROM passes ORDER BY photo").fetchall()
    finally:
        con.close()
    import json

    return [(photo, json.loads(text)["photo"]) for photo, text in rows]


def _sha(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def _proc_table() -> dict[int, tuple[int, int, str]]:
    """Every process: pid -> (parent pid, process group, state letter), from /proc."""
    table = {}
    for entry in os.listdir("/proc"):
        if not entry.isdigit():
            continue
        try:
            text = Path(f"/proc/{entry}/stat").read_text()
        except OSError:
            continue
        fields = text.rsplit(")", 1)[1].split()
        table[int(entry)] = (int(fields[1]), int(fields[2]), fields[0])
    return table


def _group(pgid: int) -> set[int]:
    """The living processes of process group ``pgid`` (a zombie has ended).

    The batch is started in a group of its own; every process it starts stays in it
    (the resource tracker, the fork server, the workers), orphaned or not.
    """
    return {p for p, (_, group, state) in _proc_table().items() if group == pgid and state != "Z"}


def _group_ended(pgid: int) -> bool:
    return not _group(pgid)


def _workers(pgid: int) -> list[int]:
    """The busy (running, state R) worker processes of the batch that leads ``pgid``:
    the children of its fork server."""
    table = _proc_table()
    servers = {p for p, (ppid, _, _) in table.items() if ppid == pgid}
    return [
        p
        for p, (ppid, group, state) in table.items()
        if group == pgid and ppid in servers and state == "R"
    ]


def _wait_for(condition: Callable[[], bool], timeout: float, what: str) -> None:
    deadline = time.monotonic() + timeout
    while not condition():
        if time.monotonic() > deadline:
            pytest.fail(f"timed out waiting for {what}")
        time.sleep(0.02)


def _passes_in(db: Path) -> int:
    try:
        con = sqlite3.connect(f"file:{db}?mode=ro", uri=True, timeout=0.5)
        try:
            return int(con.execute("SELECT count(*) FROM passes").fetchone()[0])
        finally:
            con.close()
    except sqlite3.Error:
        return 0


class _Skipped(html.parser.HTMLParser):
    """The items of the report's list of photos not measured (``<section id="skipped">``)."""

    def __init__(self) -> None:
        super().__init__()
        self.items: list[str] = []
        self._depth = 0
        self._in_li = False

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        if tag == "section" and ("id", "skipped") in attrs:
            self._depth = 1
        elif self._depth and tag == "section":
            self._depth += 1
        elif self._depth and tag == "li":
            self._in_li = True
            self.items.append("")

    def handle_endtag(self, tag: str) -> None:
        if self._depth and tag == "section":
            self._depth -= 1
        elif tag == "li":
            self._in_li = False

    def handle_data(self, data: str) -> None:
        if self._in_li:
            self.items[-1] += data


def _skipped_in_report(report: Path) -> list[str]:
    parser = _Skipped()
    parser.feed(report.read_text(encoding="utf-8"))
    return parser.items


# --------------------------------------------------------------------------- 1. another's file


def _other_apps_files(folder: Path) -> list[Path]:
    """SQLite files of other programs, and one of a newer printcheck."""
    rollback = folder / "inventory.sqlite"
    con = sqlite3.connect(rollback)
    con.execute("CREATE TABLE parts (id INTEGER PRIMARY KEY, name TEXT, qty INTEGER)")
    con.executemany("INSERT INTO parts (name, qty) VALUES (?, ?)", [("gib", 2), ("way", 1)])
    con.execute("PRAGMA user_version = 7")  # other programs use user_version too
    con.commit()
    con.close()
    wal = folder / "notes.db"
    con = sqlite3.connect(wal)
    con.execute("PRAGMA journal_mode = WAL")
    con.execute("CREATE TABLE notes (day TEXT, text TEXT)")
    con.execute("INSERT INTO notes VALUES ('mon', 'spot the bed')")
    con.commit()
    con.close()
    # same tables as a printcheck history, but written by a printcheck from the future
    newer = folder / "newer.sqlite"
    con = sqlite3.connect(newer)
    for table in ("surfaces", "passes", "migrations"):
        con.execute(f"CREATE TABLE {table} (id INTEGER PRIMARY KEY)")
    con.execute("PRAGMA user_version = 99")
    con.commit()
    con.close()
    return [rollback, wal, newer]


def test_another_programs_database_comes_out_byte_for_byte(
    tmp_path: Path, job: tuple[Path, list[str]]
) -> None:
    folder, _ = job
    files = _other_apps_files(tmp_path)
    before = {p: _sha(p) for p in files}
    listing = sorted(os.listdir(tmp_path))
    for db in files:
        out = tmp_path / f"out-{db.stem}"
        proc = _batch(folder, db, out)
        assert proc.returncode == 2
        (line,) = _ended_cleanly(proc.returncode, proc.stderr)
        assert str(db) in line and ("another program" in line or "newer" in line), line
        assert not out.exists()  # refused before anything was made
        progress = subprocess.run(
            [sys.executable, "-m", "printcheck", "progress", SURFACE, "--db", str(db)],
            capture_output=True,
            text=True,
            timeout=60,
            check=False,
        )
        assert progress.returncode == 2
        (line,) = _ended_cleanly(progress.returncode, progress.stderr)
        assert str(db) in line
    assert {p: _sha(p) for p in files} == before
    assert sorted(os.listdir(tmp_path)) == listing  # no -wal, -shm or -journal beside them


# --------------------------------------------------------------------------- 2. early endings


def _mount_small_disk(folder: Path, size: str) -> bool:
    """Mount a tmpfs of ``size`` at ``folder`` if this test may (root); True if it did."""
    folder.mkdir()
    if os.geteuid() != 0 or not shutil.which("mount") or os.environ.get("PRINTCHECK_TEST_NO_MOUNT"):
        return False
    proc = subprocess.run(
        ["mount", "-t", "tmpfs", "-o", f"size={size},mode=0755", "tmpfs", str(folder)],
        capture_output=True,
        check=False,
    )
    return proc.returncode == 0


def _unmount(folder: Path) -> None:
    subprocess.run(["umount", str(folder)], check=False, capture_output=True)


def _file_size_limit(limit: int) -> Callable[[], None]:
    """For ``preexec_fn``: no file of the child may grow past ``limit`` bytes (writes
    beyond it fail with EFBIG, as on a full disk)."""

    def apply() -> None:
        resource.setrlimit(resource.RLIMIT_FSIZE, (limit, resource.RLIM_INFINITY))

    return apply


def _two_at_a_time(run: Callable[[int], None], count: int) -> None:
    """``run(0) ... run(count - 1)``, two at once (as two runs may be); the first failure
    is raised here."""
    from concurrent.futures import ThreadPoolExecutor

    with ThreadPoolExecutor(max_workers=2) as lanes:
        for future in [lanes.submit(run, i) for i in range(count)]:
            future.result()


FULL_DISKS = [
    ("db", "96k"),
    ("db", "128k"),
    ("db", "160k"),
    ("db", "128k"),
    ("db", "96k"),
    ("out", "560k"),  # two overlays fit, then the report does not (was 700k: the
    # overlays lost their burnt-in key and shrank, so the report fitted)
    ("out", "1600k"),
    ("out", "1m"),
]


def test_full_disk_ends_the_batch_cleanly(tmp_path: Path, job: tuple[Path, list[str]]) -> None:
    """Eight runs on a full disk: the history's (it holds a pass or two, then no more), or
    the output folder's.  Without the right to mount one, a per-file size limit instead
    (RLIMIT_FSIZE: every output, the overlays or the report, stops growing at 64 kB to
    500 kB, which the report of eight photos outgrows)."""
    folder, names = job

    def run(i: int) -> None:
        where, size = FULL_DISKS[i]
        disk = tmp_path / f"disk{i}"
        mounted = _mount_small_disk(disk, size)
        db = (disk if where == "db" else tmp_path) / f"h{i}.sqlite"
        out = (disk if where == "out" else tmp_path) / f"out{i}"
        try:
            if mounted:
                proc = _batch(folder, db, out)
            else:
                limit = [65_536, 300_000, 500_000][i % 3]
                proc = _batch(folder, db, out, preexec_fn=_file_size_limit(limit))
            lines = _ended_cleanly(proc.returncode, proc.stderr)
            assert proc.returncode == 2, proc.stderr
            assert any("full" in line for line in lines), proc.stderr
            if db.exists():
                recorded = _integrity(db)
                assert all(photo == inner for photo, inner in recorded)
                if mounted and where == "db":
                    assert len(recorded) < len(names)
        finally:
            if mounted:
                _unmount(disk)

    _two_at_a_time(run, len(FULL_DISKS))


def _damage(db: Path) -> None:
    """Overwrite one index page of the history with garbage (the schema stays readable)."""
    con = sqlite3.connect(db)
    try:
        page = con.execute("PRAGMA page_size").fetchone()[0]
        (root,) = con.execute(
            "SELECT rootpage FROM sqlite_master WHERE name = 'passes_by_photo'"
        ).fetchone()
    finally:
        con.close()
    with open(db, "r+b") as fh:
        fh.seek((root - 1) * page)
        fh.write(bytes([0xA5]) * page)


def test_damaged_history_ends_the_batch_cleanly(
    tmp_path: Path, job: tuple[Path, list[str]], seeded_db: Path
) -> None:
    """Six runs into a history damaged inside: it opens, then the first record fails."""
    folder, _ = job

    def run(i: int) -> None:
        db = tmp_path / f"damaged{i}.sqlite"
        shutil.copy(seeded_db, db)
        _damage(db)
        before = _sha(db)
        proc = _batch(folder, db, tmp_path / f"out{i}")
        (line,) = _ended_cleanly(proc.returncode, proc.stderr)
        assert proc.returncode == 2 and str(db) in line and "damaged" in line, line
        assert _sha(db) == before  # made no worse

    _two_at_a_time(run, 6)


# --------------------------------------------------------------------------- 3. Ctrl-C


def test_ctrl_c_at_random_moments(tmp_path: Path, job: tuple[Path, list[str]]) -> None:
    """Eight runs stopped by Ctrl-C (SIGINT to the process group) at random moments: one
    line saying what the history holds, exit 130, the history whole; then a run to the
    end records every photo once."""
    folder, names = job
    db = tmp_path / "history.sqlite"
    start = time.monotonic()
    baseline = _batch(folder, tmp_path / "baseline.sqlite", tmp_path / "baseline")
    took = time.monotonic() - start
    assert baseline.returncode == 0, baseline.stderr
    rng = random.Random(20260314)
    interrupted = 0
    moments = []
    for i in range(8):
        # from once Python has started (its own start-up is not printcheck's code) to
        # half a whole run: the history fills as runs are stopped, so a later run has
        # fewer photos left to measure and ends sooner
        moment = rng.uniform(0.15, 0.5 * took)
        moments.append(round(moment, 2))
        proc = subprocess.Popen(
            _command(folder, db, tmp_path / f"out{i}"),
            stdout=subprocess.PIPE,
            stderr=subprocess.PIPE,
            text=True,
            start_new_session=True,  # its own process group: the "terminal" of this test
        )
        time.sleep(moment)
        os.killpg(proc.pid, signal.SIGINT)
        _, err = proc.communicate(timeout=60)
        lines = _ended_cleanly(proc.returncode, err)
        recorded = _integrity(db) if db.exists() else []
        assert all(photo == inner for photo, inner in recorded)
        if proc.returncode == 0:  # the run had ended before the signal came
            continue
        interrupted += 1
        assert proc.returncode == 130, (moment, err)
        assert len(lines) == 1 and "interrupted" in lines[0], (moment, err)
        line = lines[0]
        if f"of the {len(names)} photos are in the history" in line:
            # the count it gives is what SQLite holds
            said = int(line.split("interrupted; ")[1].split(" of the")[0])
            assert said == len(recorded), (line, recorded)
        assert "run the same command again" in line, line
        if Path("/proc/self/stat").exists():  # no worker or helper process left behind
            _wait_for(partial(_group_ended, proc.pid), 3.0, "the batch's processes to end")
    assert interrupted >= 5, moments
    proc = _batch(folder, db, tmp_path / "rerun")
    _ended_cleanly(proc.returncode, proc.stderr)
    assert proc.returncode == 0, proc.stderr
    assert [photo for photo, _ in _integrity(db)] == sorted(names)  # each once


# --------------------------------------------------------------------------- 4. kill


@needs_proc
@pytest.mark.parametrize("sig", [signal.SIGKILL, signal.SIGTERM], ids=["kill-9", "kill"])
def test_killed_batch_leaves_no_process_behind(
    tmp_path: Path, job: tuple[Path, list[str]], sig: signal.Signals
) -> None:
    folder, _ = job
    db = tmp_path / "history.sqlite"
    proc = subprocess.Popen(
        _command(folder, db, tmp_path / "out"),
        stdout=subprocess.DEVNULL,
        stderr=subprocess.PIPE,
        text=True,
        start_new_session=True,
    )
    got: dict[str, str] = {}
    try:
        # the pool at work: its helper processes and workers exist, a pass is recorded
        _wait_for(lambda: _passes_in(db) >= 1, 60, "the first pass")
        family = _group(proc.pid) - {proc.pid}
        assert len(family) >= 3, family  # resource tracker, fork server, workers
        os.kill(proc.pid, sig)
        # stderr reaches its end only when every process holding it has ended
        reader = threading.Thread(target=lambda: got.update(err=proc.stderr.read()))
        reader.start()
        deadline = time.monotonic() + 5.0
        while _group(proc.pid) and time.monotonic() < deadline:
            time.sleep(0.05)
        left = _group(proc.pid)
        assert left == set(), [Path(f"/proc/{p}/cmdline").read_bytes() for p in left]
        reader.join(5)
        assert not reader.is_alive()
        proc.wait(5)
    finally:
        if proc.poll() is None or _group(proc.pid):
            os.killpg(proc.pid, signal.SIGKILL)
        proc.wait()
        proc.stderr.close()
    err = got["err"]
    if sig == signal.SIGKILL:
        # nothing at all: no traceback, no warning of leaked semaphores, later either
        assert proc.returncode == -signal.SIGKILL and err == ""
    else:
        assert proc.returncode == 128 + signal.SIGTERM
        (line,) = _ended_cleanly(proc.returncode, err)
        assert "interrupted" in line and "run the same command again" in line
    _integrity(db)


# --------------------------------------------------------------------------- 5. named pipe


def test_named_pipe_named_like_a_photo_is_skipped_at_once(
    tmp_path: Path, job: tuple[Path, list[str]]
) -> None:
    folder, names = job
    photos = tmp_path / "way"
    photos.mkdir()
    for name in names[:2]:
        shutil.copy2(folder / name, photos / name)
    pipe = photos / "IMG_0001 pipe.jpg"
    os.mkfifo(pipe)
    # the library: the folder is listed and the pipe refused, each within a second
    from printcheck.errors import PhotoError
    from printcheck.load import load_photo

    found: dict[str, Any] = {}

    def library() -> None:
        from printcheck.batch import list_photos

        found["listing"] = list_photos(photos)
        try:
            load_photo(pipe)
        except PhotoError as exc:
            found["error"] = str(exc)

    worker = threading.Thread(target=library, daemon=True)
    start = time.monotonic()
    worker.start()
    worker.join(5.0)
    if worker.is_alive():  # blocked opening the pipe: let it go, and fail
        with open(pipe, "wb"):
            pass
        pytest.fail("reading the folder or the named pipe blocked")
    assert time.monotonic() - start < 1.0
    items, skipped = found["listing"]
    assert [i.path.name for i in items] == names[:2]
    assert [s.path for s in skipped] == [pipe] and "named pipe" in skipped[0].error
    assert found["error"] == f"photo {pipe}: is a named pipe, not a photo"
    # the command: the pipe reported and skipped, the photos measured
    out = tmp_path / "out"
    proc = _batch(photos, tmp_path / "h.sqlite", out, jobs=1)
    lines = _ended_cleanly(proc.returncode, proc.stderr)
    assert proc.returncode == 0
    assert lines == [f"printcheck: photo {pipe}: is a named pipe, not a photo; skipped"]
    assert "2 of 3 photos measured, 1 skipped" in proc.stdout
    assert stat.S_ISFIFO(os.stat(pipe).st_mode)  # left as it was
    proc = subprocess.run(
        [sys.executable, "-m", "printcheck", "inspect", str(pipe)],
        capture_output=True,
        text=True,
        timeout=60,
        check=False,
    )
    assert proc.returncode == 2
    assert _ended_cleanly(proc.returncode, proc.stderr) == [
        f"printcheck: photo {pipe}: is a named pipe, not a photo"
    ]


# --------------------------------------------------------------------------- 6. killed worker


@needs_proc
def test_a_killed_worker_costs_only_its_photo(tmp_path: Path, job: tuple[Path, list[str]]) -> None:
    """SIGKILL to one busy worker, as the out-of-memory killer sends it: that photo is
    named as not measured, the rest are measured and recorded, the report written, and
    the exit status (3) says that not everything was measured."""
    folder, names = job
    db = tmp_path / "history.sqlite"
    out = tmp_path / "out"
    proc = subprocess.Popen(
        _command(folder, db, out),
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
        start_new_session=True,
    )
    killed = None
    try:
        deadline = time.monotonic() + 60
        while killed is None and proc.poll() is None and time.monotonic() < deadline:
            busy = _workers(proc.pid) if _passes_in(db) >= 1 else []
            if busy:
                time.sleep(0.02)  # still running a moment later: inside a photo
                still = [p for p in _workers(proc.pid) if p in busy]
                if still:
                    killed = still[0]
                    os.kill(killed, signal.SIGKILL)
            time.sleep(0.01)
        assert killed is not None, "no busy worker was found"
        out_text, err = proc.communicate(timeout=120)
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGKILL)
    lines = _ended_cleanly(proc.returncode, err)
    assert proc.returncode == 3, err
    assert len(lines) == 1 and "worker process measuring it was killed" in lines[0], err
    lost = lines[0].split("printcheck: photo ")[1].split(": not measured")[0]
    assert Path(lost).name in names
    recorded = [photo for photo, _ in _integrity(db)]
    assert recorded == sorted(set(names) - {Path(lost).name})
    assert f"{len(names) - 1} of {len(names)} photos measured" in out_text
    report = out / "report.html"
    assert report.is_file()
    (item,) = _skipped_in_report(report)
    assert item.startswith(Path(lost).name) and "killed" in item


# --------------------------------------------------------------------------- 7. odd files


def test_summary_and_report_count_every_skipped_file(
    tmp_path: Path, job: tuple[Path, list[str]]
) -> None:
    folder, names = job
    photos = tmp_path / "way"
    photos.mkdir()
    for name in names[:3]:
        shutil.copy2(folder / name, photos / name)
    (photos / "IMG_0100.jpg").mkdir()  # a folder named like a photo
    (photos / "IMG_0101.jpg").symlink_to(tmp_path / "gone.jpg")  # a link to nothing
    (photos / "IMG_0102.jpg").symlink_to(photos / "IMG_0100.jpg")  # a link to a folder
    (photos / "IMG_0103 <b>.jpg").write_bytes(b"")  # an empty file: measured and refused
    (photos / "notes.txt").write_text("not named like a photo: not counted\n")
    skipped = ["IMG_0100.jpg", "IMG_0101.jpg", "IMG_0102.jpg", "IMG_0103 <b>.jpg"]
    out = tmp_path / "out"
    proc = _batch(photos, tmp_path / "h.sqlite", out, jobs=1)
    lines = _ended_cleanly(proc.returncode, proc.stderr)
    assert proc.returncode == 0, proc.stderr
    assert len(lines) == len(skipped)
    for name in skipped:
        assert sum(f"{photos / name}:" in line for line in lines) == 1, (name, lines)
    assert "3 of 7 photos measured, 4 skipped" in proc.stdout
    items = _skipped_in_report(out / "report.html")
    assert sorted(item.split(":")[0] for item in items) == sorted(skipped)
    assert "<b>.jpg" not in (out / "report.html").read_text(encoding="utf-8")  # escaped


def test_out_in_the_photo_folder_is_not_taken_for_photos(
    tmp_path: Path, job: tuple[Path, list[str]]
) -> None:
    folder, names = job
    photos = tmp_path / "way"
    photos.mkdir()
    for name in names[:3]:
        shutil.copy2(folder / name, photos / name)
    db = tmp_path / "h.sqlite"
    first = _batch(photos, db, photos, jobs=1)
    assert first.returncode == 0, first.stderr
    assert (photos / "IMG_0000.overlay.png").is_file()
    before = {p.name: _sha(p) for p in photos.iterdir() if p.name in names}
    second = _batch(photos, db, photos, jobs=1)
    assert _ended_cleanly(second.returncode, second.stderr) == []
    assert second.returncode == 0
    # the 3 photos and no overlay; unchanged since the first run, so none measured again
    assert "0 of 3 photos measured, 3 unchanged" in second.stdout
    assert [photo for photo, _ in _integrity(db)] == names[:3]
    csv = (photos / "results.csv").read_text(encoding="utf-8").splitlines()
    assert [row.split(",")[0] for row in csv[1:]] == names[:3]
    assert {p.name: _sha(p) for p in photos.iterdir() if p.name in names} == before


def test_photos_that_would_share_their_output_files_are_not_written_over(
    tmp_path: Path, job: tuple[Path, list[str]]
) -> None:
    """A phone's HEIC and its JPEG copy (``IMG_0000.jpg`` and ``img_0000.png`` here: an
    output folder on a memory card folds case), or photos whose paths differ only where
    the output names have ``_`` (``pass2/IMG_0001.jpg`` and ``pass2_IMG/0001.jpg``),
    would write one ``<stem>.json`` and overlay: the first taken keeps them, the other
    is skipped with the reason, and every result written is its own photo's."""
    folder, names = job
    photos = tmp_path / "way"
    for sub in ("pass1", "pass2", "pass2_IMG"):
        (photos / sub).mkdir(parents=True)
    shutil.copy2(folder / names[0], photos / "pass1" / names[0])
    ok, png = cv2.imencode(".png", cv2.imread(str(folder / names[0])))
    assert ok
    later = photos / "pass1" / "img_0000.png"
    later.write_bytes(png.tobytes())
    os.utime(later, (1_900_000_000, 1_900_000_000))  # no camera time: its file time, later
    shutil.copy2(folder / names[1], photos / "pass2" / names[1])
    shutil.copy2(folder / names[2], photos / "pass2_IMG" / "0001.jpg")  # taken an hour later
    out = tmp_path / "out"
    proc = _batch(photos, tmp_path / "h.sqlite", out, "--group", "folder", jobs=1)
    lines = _ended_cleanly(proc.returncode, proc.stderr)
    assert proc.returncode == 0, proc.stderr
    said = [line for line in lines if "written over" in line]
    assert sorted(said) == [
        f"printcheck: photo {later}: its results would be written over those of "
        f"pass1/{names[0]} (pass1_IMG_0000.json and its overlay); rename one of the two; "
        "skipped",
        f"printcheck: photo {photos / 'pass2_IMG' / '0001.jpg'}: its results would be "
        f"written over those of pass2/{names[1]} (pass2_IMG_0001.json and its overlay); "
        "rename one of the two; skipped",
    ]
    assert "2 of 4 photos measured, 2 skipped" in proc.stdout
    written = sorted(p.name for p in out.glob("*.json"))
    assert written == ["pass1_IMG_0000.json", "pass2_IMG_0001.json"]
    for name in written:
        photo = json.loads((out / name).read_text(encoding="utf-8"))["photo"]
        assert output_name(photo, ".json") == name
    assert sorted(item.split(":")[0] for item in _skipped_in_report(out / "report.html")) == [
        "pass1/img_0000.png",
        "pass2_IMG/0001.jpg",
    ]


def test_a_name_used_again_for_a_new_photo_keeps_the_earlier_photos_files(
    tmp_path: Path, job: tuple[Path, list[str]]
) -> None:
    """A phone that numbers afresh (or a retake saved over the first) brings a new photo
    under a name already measured: its results go beside the earlier ones
    (``IMG_0000~<hash>.json``), not over them, and each pass of the report shows its own
    overlay and result JSON."""
    folder, names = job
    photos = tmp_path / "way"
    photos.mkdir()
    shutil.copy2(folder / names[0], photos / names[0])
    out, db = tmp_path / "out", tmp_path / "h.sqlite"
    first = _batch(photos, db, out, jobs=1)
    assert first.returncode == 0, first.stderr
    before = (out / "IMG_0000.json").read_bytes(), (out / "IMG_0000.overlay.png").read_bytes()
    shutil.copy2(folder / names[1], photos / names[0])  # another photo, the same name
    os.utime(photos / names[0], (1_900_000_000, 1_900_000_000))
    second = _batch(photos, db, out, jobs=1)
    assert second.returncode == 0, second.stderr
    new_sha = _sha(photos / names[0])
    stem = f"IMG_0000~{new_sha[:10]}"
    old_sha = _sha(folder / names[0])
    assert json.loads(before[0])["sha256"] == old_sha
    assert (
        (out / "IMG_0000.json").read_bytes(),
        (out / "IMG_0000.overlay.png").read_bytes(),
    ) == before
    assert json.loads((out / f"{stem}.json").read_text(encoding="utf-8"))["sha256"] == new_sha
    assert (out / f"{stem}.overlay.png").read_bytes() != before[1]
    # each photo's own files, as the report, the sheet and the web pages look them up
    assert output_stem(out, names[0], old_sha) == "IMG_0000"
    assert output_stem(out, names[0], new_sha) == stem
    report = (out / "report.html").read_text(encoding="utf-8")
    assert f'href="{stem}.json"' in report and 'href="IMG_0000.json"' not in report


def test_ctrl_c_while_the_native_libraries_load_waits_until_they_are_whole() -> None:
    # A Ctrl-C in the middle of OpenCV's start-up left it half made ("ImportError:
    # initialization failed"), reported as an internal error, and the interpreter then
    # aborted on its way out (signal 6).  Here the Ctrl-C comes exactly as cv2 begins to
    # load: it must take effect only once cv2 is whole, as an ordinary interrupt.
    script = textwrap.dedent(
        """
        import builtins, os, signal, sys
        from printcheck import __main__ as entry
        real = builtins.__import__
        def hooked(name, *args, **kwargs):
            if name == "cv2" and "cv2" not in sys.modules:
                os.kill(os.getpid(), signal.SIGINT)
            return real(name, *args, **kwargs)
        builtins.__import__ = hooked
        try:
            entry._load_native_libraries()
        except KeyboardInterrupt:
            cv2 = sys.modules.get("cv2")
            print("interrupted; cv2 whole:", cv2 is not None and hasattr(cv2, "imread"))
        """
    )
    proc = subprocess.run(
        [sys.executable, "-c", script], capture_output=True, text=True, timeout=120
    )
    assert proc.returncode == 0, proc.stderr
    assert proc.stdout.strip() == "interrupted; cv2 whole: True", proc.stdout


def test_a_worker_killed_half_way_through_its_result_does_not_hang_the_batch() -> None:
    # Found by the random Ctrl-C test (1 run in 10 hung for ever): Ctrl-C kills the
    # workers, and one killed while sending its result left half a message in the pool's
    # result pipe; the pool's own thread then waited for the rest for ever, and the batch
    # with it (its stack: ProcessPoolExecutor.shutdown -> join -> the thread in recv).
    # Here half a message is put into the pipe by hand (the length header of the
    # multiprocessing connection protocol, then 10 of the 1000 bytes it promises) while a
    # worker is busy; ending the pool must still end.
    import multiprocessing as mp
    import struct
    import threading
    from concurrent.futures import CancelledError, ProcessPoolExecutor
    from concurrent.futures.process import BrokenProcessPool

    from printcheck.batch import end_pool_now

    before = set(mp.active_children())
    pool = ProcessPoolExecutor(max_workers=1, mp_context=mp.get_context("spawn"))
    future = pool.submit(time.sleep, 60)
    _wait_for(lambda: bool(set(mp.active_children()) - before), 30.0, "the worker to start")
    workers = set(mp.active_children()) - before
    writer = pool._result_queue._writer  # type: ignore[attr-defined]
    os.write(writer.fileno(), struct.pack("!i", 1000) + b"x" * 10)
    time.sleep(0.3)  # the pool's thread is reading it now, and waits for the rest
    ended = threading.Thread(target=end_pool_now, args=(pool, workers), daemon=True)
    ended.start()
    ended.join(30.0)
    assert not ended.is_alive(), "ending the pool hung"
    assert all(not w.is_alive() for w in workers)
    with pytest.raises((BrokenProcessPool, CancelledError)):
        future.result(timeout=5)


def test_ctrl_c_in_a_finalizer_as_the_run_ends_does_not_reach_past_it() -> None:
    # The interrupt of a finalizer is sent again a moment later; if the run has put its
    # handlers back by then, it came too late for the run and must not surface after it
    # (as a KeyboardInterrupt in whatever the caller does next).
    script = textwrap.dedent(
        """
        import os, signal, time
        from printcheck import cli
        from printcheck.cli import _InterruptsOnce

        cli._AGAIN_AFTER_S = 0.5  # surely after the run below has ended, on a busy machine

        class Finalized:
            def __del__(self):
                os.kill(os.getpid(), signal.SIGINT)
                for _ in range(1000):
                    pass

        with _InterruptsOnce(last_word=False):
            Finalized()
        time.sleep(1.5)  # past the moment the signal would be sent again
        print("quiet")
        """
    )
    proc = subprocess.run(
        [sys.executable, "-c", script], capture_output=True, text=True, timeout=60
    )
    assert proc.stdout.strip() == "quiet", (proc.stdout, proc.stderr)
    assert "Traceback" not in proc.stderr, proc.stderr


def test_a_pool_stuck_on_half_a_result_is_ended_and_its_photos_fail(
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    # A worker killed half-way through sending its result (the out-of-memory killer, a
    # kill -9) leaves half a message in the pool's result pipe.  The pool's own thread
    # then waits for the rest and never sees that the worker died, so no photo of the
    # pool ever finished and the batch waited for ever.  Here half a message is put into
    # the pipe by hand while two workers are busy, and one of them is killed: every
    # photo must come out as failed, and the dead worker be the one reported.
    import multiprocessing as mp
    import signal as sig
    import struct
    import threading
    from concurrent.futures import CancelledError, ProcessPoolExecutor
    from concurrent.futures.process import BrokenProcessPool

    from printcheck import batch

    monkeypatch.setattr(batch, "STUCK_AFTER_S", 2.0)
    before = set(mp.active_children())
    pool = ProcessPoolExecutor(max_workers=2, mp_context=mp.get_context("spawn"))
    futures = {pool.submit(time.sleep, 60): i for i in range(3)}
    _wait_for(lambda: len(set(mp.active_children()) - before) == 2, 30.0, "the workers to start")
    workers = set(mp.active_children()) - before
    writer = pool._result_queue._writer  # type: ignore[attr-defined]
    os.write(writer.fileno(), struct.pack("!i", 1000) + b"x" * 10)
    time.sleep(0.3)  # the pool's thread is reading it now, and waits for the rest
    victim = min(workers, key=lambda w: w.pid or 0)
    assert victim.pid is not None
    os.kill(victim.pid, sig.SIGKILL)
    stuck = batch._Stuck()
    out: list[object] = []
    # none of the pool's workers had died when it started (the batch reads them then);
    # read now, the victim might already be among them, and the pool never looks stuck
    reading = threading.Thread(
        target=lambda: out.extend(batch.finished(futures, pool, workers, stuck, earlier=set())),
        daemon=True,
    )
    reading.start()
    reading.join(60.0)
    assert not reading.is_alive(), "waiting for the photos of a stuck pool hung"
    assert set(out) == set(futures)
    for future in futures:
        with pytest.raises((BrokenProcessPool, CancelledError)):
            future.result(timeout=0)
    assert stuck.died == {victim.pid}
    assert all(not w.is_alive() for w in workers)


def test_a_pool_is_not_taken_as_stuck_for_a_worker_of_an_earlier_pool(
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    # After a worker was killed, the batch measures the rest in a new pool; the dead
    # worker of the first pool must not make the second look stuck while its photos
    # take their time.
    import multiprocessing as mp
    import signal as sig
    from concurrent.futures import ProcessPoolExecutor

    from printcheck import batch

    monkeypatch.setattr(batch, "STUCK_AFTER_S", 1.0)
    ctx = mp.get_context("spawn")
    dead = ctx.Process(target=time.sleep, args=(60,))
    dead.start()
    assert dead.pid is not None
    os.kill(dead.pid, sig.SIGKILL)
    dead.join(30.0)
    assert dead.exitcode == -sig.SIGKILL
    before = set(mp.active_children())
    with ProcessPoolExecutor(max_workers=1, mp_context=ctx) as pool:
        futures = {pool.submit(time.sleep, 3.5): 0}
        _wait_for(lambda: bool(set(mp.active_children()) - before), 30.0, "the worker")
        workers = (set(mp.active_children()) - before) | {dead}
        stuck = batch._Stuck()
        assert list(batch.finished(futures, pool, workers, stuck)) == list(futures)
        assert next(iter(futures)).result(timeout=0) is None
        assert stuck.died is None


def test_ctrl_c_that_lands_in_a_finalizer_reaches_the_run() -> None:
    # Found by the random Ctrl-C test (1 run in 8): an interrupt that landed in a
    # finalizer was sent again from inside the unraisable hook, where Python ran its
    # handler at once; the exception was printed ("Exception ignored in
    # sys.unraisablehook", a traceback) and the run never heard of it.  Here an object's
    # finalizer is interrupted: the run must be interrupted after, and nothing printed.
    script = textwrap.dedent(
        """
        import os, signal, sys, time
        from printcheck.cli import _InterruptsOnce
        from printcheck.errors import Interrupted

        class Finalized:
            def __del__(self):
                os.kill(os.getpid(), signal.SIGINT)
                for _ in range(1000):  # the handler runs here, in the finalizer
                    pass

        try:
            with _InterruptsOnce(last_word=False):
                Finalized()
                deadline = time.monotonic() + 10
                while time.monotonic() < deadline:
                    time.sleep(0.01)
                print("never interrupted")
        except Interrupted:
            print("interrupted")
        """
    )
    proc = subprocess.run(
        [sys.executable, "-c", script], capture_output=True, text=True, timeout=60
    )
    assert proc.stdout.strip() == "interrupted", (proc.stdout, proc.stderr)
    assert proc.stderr == "", proc.stderr


def test_a_batch_whose_pool_sticks_on_half_a_result_measures_the_rest(
    tmp_path: Path, job: tuple[Path, list[str]], monkeypatch: pytest.MonkeyPatch
) -> None:
    # The whole batch, in this process: while a worker is inside a photo, that worker is
    # killed as if half-way through sending its result (the pipe's lock held, half a
    # message in the pipe; no other worker can then send).  The batch must end, not wait
    # for ever, name that photo as not measured (exit 3), and measure and record every
    # other photo.
    import signal as sig
    import struct
    import threading

    from printcheck import batch
    from printcheck.options import InspectOptions

    monkeypatch.setattr(batch, "STUCK_AFTER_S", 2.0)
    folder, names = job
    runners: list[Any] = []

    class Watched(batch._Runner):
        def __enter__(self) -> Any:
            runners.append(super().__enter__())
            return runners[-1]

    monkeypatch.setattr(batch, "_Runner", Watched)
    victim: list[int] = []

    def stick() -> None:
        deadline = time.monotonic() + 60
        while time.monotonic() < deadline:
            runner = runners[0] if runners else None
            if runner is not None and any(p > 0 for p in runner._slots):
                queue = runner._pool._result_queue
                # as a worker killed while sending leaves them: the pipe's lock held (taken
                # first, so that no result goes out meanwhile), half a message sent
                queue._wlock.acquire()
                busy = [p for p in runner._slots if p > 0]
                if not busy:  # the photo was done meanwhile: try again
                    queue._wlock.release()
                    continue
                os.write(queue._writer.fileno(), struct.pack("!i", 1000) + b"x")
                os.kill(busy[0], sig.SIGKILL)
                victim.append(busy[0])
                return
            time.sleep(0.005)

    sticking = threading.Thread(target=stick, daemon=True)
    sticking.start()
    said: list[str] = []
    db = tmp_path / "history.sqlite"
    status: list[int] = []
    running = threading.Thread(
        target=lambda: status.append(
            batch.run_batch(
                folder,
                options=InspectOptions(surface=SURFACE),
                out=tmp_path / "out",
                db=db,
                jobs=2,
                echo=said.append,
                warn=said.append,
                show_progress=False,
            )
        ),
        daemon=True,
    )
    running.start()
    running.join(120.0)
    assert not running.is_alive(), "the batch waited for ever on a stuck pool"
    sticking.join(5.0)
    assert victim, "no busy worker was found"
    assert status == [3], said
    lost = [line for line in said if "worker process measuring it was killed" in line]
    assert len(lost) == 1, said
    recorded = [photo for photo, _ in _integrity(db)]
    assert len(recorded) == len(names) - 1 and set(recorded) < set(names)
