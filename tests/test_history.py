"""Tests of the history store (printcheck.history).

Crash safety and concurrency are tested with real child processes (multiprocessing with
the fork start method, SIGKILL); read-only and full locations with a child that drops
root privileges (os.setuid to "nobody") or sets RLIMIT_FSIZE.  Reference for the storage
guarantees: SQLite's documented behaviour of WAL mode and transactions (sqlite.org,
"Write-Ahead Logging", "Atomic Commit In SQLite") -- from memory.
"""

from __future__ import annotations

import json
import multiprocessing as mp
import os
import resource
import signal
import sqlite3
import tempfile
import time
from pathlib import Path

import pytest

from printcheck.errors import HistoryError
from printcheck.history import (
    ENV_VAR,
    MIGRATIONS,
    SCHEMA_VERSION,
    Migration,
    default_db_path,
    open_history,
)
from printcheck.spec import Spec

FORK = mp.get_context("fork")


_DEFAULT = "default"


def _result(
    i: int, *, taken: str | None = _DEFAULT, photo: str | None = None, pad: int = 0
) -> dict:
    """A small plain result dict, shaped like result_to_dict output."""
    return {
        "format": "printcheck-result/1",
        "photo": photo or f"IMG_{i:04d}.jpg",
        "surface": "bed",
        "taken": f"2026-11-30T10:{i // 60:02d}:{i % 60:02d}" if taken is _DEFAULT else taken,
        "unit": "in",
        "cell": 1.0,
        "spot_count": 10 + i,
        "density": 2.5 + i,
        "bearing_percent": 20.0 + i / 10,
        "cells": [],
        "spec": {"name": "slideway", "meets": i % 2 == 0, "checks": []},
        "sha256": f"{i:064x}",
        "warnings": [],
        "pad": "x" * pad,
    }


# ------------------------------------------------------------------ paths


def test_default_db_path_env_wins_else_user_data_folder() -> None:
    import platformdirs

    assert default_db_path({ENV_VAR: "/somewhere/h.sqlite"}) == Path("/somewhere/h.sqlite")
    expected = Path(platformdirs.user_data_path("printcheck")) / "history.sqlite"
    assert default_db_path({}) == expected
    assert default_db_path({ENV_VAR: "  "}) == expected


# ------------------------------------------------------------------ records


def test_record_twice_stores_one_row(tmp_path: Path) -> None:
    db = tmp_path / "sub" / "h.sqlite"  # missing folder is created
    with open_history(db) as h:
        assert h.record(_result(1), surface="bed") is True
        assert h.record(_result(1), surface="bed") is False
        # the same photo for another surface is another pass
        assert h.record(_result(1), surface="gib") is True
    with open_history(db) as h:
        assert h.record(_result(1), surface="bed") is False
        assert len(h.passes("bed")) == 1
        assert h.surfaces() == ["bed", "gib"]
    con = sqlite3.connect(db)
    assert con.execute("SELECT count(*) FROM passes").fetchone()[0] == 2
    con.close()


def test_passes_keep_the_whole_result_and_indexed_columns(tmp_path: Path) -> None:
    spec = Spec("slideway", "slideway", 25.4, min_density=20.0, bearing_min=25.0)
    data = _result(3)
    with open_history(tmp_path / "h.sqlite") as h:
        h.record(data, surface="bed", spec=spec)
        (p,) = h.passes("bed")
    assert p["result"] == data
    assert (p["photo"], p["sha256"], p["taken"]) == (data["photo"], data["sha256"], data["taken"])
    assert (p["density"], p["bearing_percent"], p["spot_count"]) == (5.5, 20.3, 13)
    assert p["meets"] is False and p["spec"] == "slideway" and p["pass"] == 1
    assert p["spec_targets"]["min_density"] == 20.0
    assert p["spec_targets"]["bearing_min"] == 25.0


def test_passes_in_time_order_then_photo_name(tmp_path: Path) -> None:
    with open_history(tmp_path / "h.sqlite") as h:
        h.record(_result(1, taken="2026-12-01T09:00:00", photo="b.jpg"), surface="s")
        h.record(_result(2, taken=None, photo="a.jpg"), surface="s")  # no time: last
        h.record(_result(3, taken="2026-11-30T09:00:00", photo="z.jpg"), surface="s")
        h.record(_result(4, taken="2026-12-01T09:00:00", photo="a.jpg"), surface="s")
        order = [p["photo"] for p in h.passes("s")]
        numbers = [p["pass"] for p in h.passes("s")]
    assert order == ["z.jpg", "a.jpg", "b.jpg", "a.jpg"]
    assert numbers == [1, 2, 3, 4]
    with open_history(tmp_path / "h.sqlite") as h:
        assert h.passes("unknown") == []


def test_record_refuses_a_result_without_sha256(tmp_path: Path) -> None:
    data = _result(1)
    data["sha256"] = None
    with open_history(tmp_path / "h.sqlite") as h:
        with pytest.raises(HistoryError, match="no sha256"):
            h.record(data, surface="bed")
        with pytest.raises(HistoryError, match="surface name"):
            h.record(_result(1), surface="  ")


# ------------------------------------------------------------------ schema


def test_schema_version_and_named_migrations(tmp_path: Path) -> None:
    db = tmp_path / "h.sqlite"
    with open_history(db) as h:
        assert h.schema_version() == SCHEMA_VERSION == len(MIGRATIONS)
    con = sqlite3.connect(db)
    names = [r[0] for r in con.execute("SELECT name FROM migrations ORDER BY version")]
    mode = con.execute("PRAGMA journal_mode").fetchone()[0]
    con.close()
    assert names == [m.name for m in MIGRATIONS]
    assert mode == "wal"


def test_old_schema_is_migrated_in_order_and_keeps_its_passes(tmp_path: Path) -> None:
    db = tmp_path / "h.sqlite"
    with open_history(db, migrations=MIGRATIONS[:1]) as h:
        assert h.schema_version() == 1
        h.record(_result(1), surface="bed")
    with open_history(db, readonly=True) as h:  # an old schema reads as it is
        assert h.passes("bed")[0]["spec_targets"] is None
    extra = MIGRATIONS + (
        Migration("test: add a note column", ("ALTER TABLE passes ADD COLUMN note TEXT",)),
    )
    with open_history(db, migrations=extra) as h:
        assert h.schema_version() == len(extra)
        (p,) = h.passes("bed")
        assert p["result"] == _result(1) and p["spec_targets"] is None
    con = sqlite3.connect(db)
    cols = [r[1] for r in con.execute("PRAGMA table_info(passes)")]
    con.close()
    assert "spec_json" in cols and "note" in cols


def test_a_failing_migration_leaves_the_old_version(tmp_path: Path) -> None:
    db = tmp_path / "h.sqlite"
    open_history(db).close()
    bad = MIGRATIONS + (Migration("broken", ("ALTER TABLE passes ADD COLUMN x TEXT", "NOT SQL")),)
    with pytest.raises(HistoryError, match="syntax error"):
        open_history(db, migrations=bad)
    con = sqlite3.connect(db)
    cols = [r[1] for r in con.execute("PRAGMA table_info(passes)")]
    version = con.execute("PRAGMA user_version").fetchone()[0]
    con.close()
    assert version == SCHEMA_VERSION and "x" not in cols  # the whole step rolled back


def test_newer_schema_is_refused(tmp_path: Path) -> None:
    db = tmp_path / "h.sqlite"
    open_history(db).close()
    con = sqlite3.connect(db)
    con.execute("PRAGMA user_version = 99")
    con.close()
    with pytest.raises(HistoryError, match=r"schema version 99 is newer .*upgrade printcheck"):
        open_history(db)
    with pytest.raises(HistoryError, match="newer"):
        open_history(db, readonly=True)


def test_not_a_database_is_refused(tmp_path: Path) -> None:
    junk = tmp_path / "junk.sqlite"
    junk.write_bytes(b"this is a text file, not a database\n" * 200)
    with pytest.raises(HistoryError, match=r"junk\.sqlite: is not a printcheck history"):
        open_history(junk)
    other = tmp_path / "other.sqlite"
    con = sqlite3.connect(other)
    con.execute("CREATE TABLE customers (id INTEGER)")
    con.commit()
    con.close()
    with pytest.raises(HistoryError, match="database of another program"):
        open_history(other)
    with pytest.raises(HistoryError, match="is a folder"):
        open_history(tmp_path)
    with pytest.raises(HistoryError, match="no such file"):
        open_history(tmp_path / "missing.sqlite", readonly=True)


def test_readonly_open_refuses_to_record(tmp_path: Path) -> None:
    db = tmp_path / "h.sqlite"
    with open_history(db) as h:
        h.record(_result(1), surface="bed")
    with open_history(db, readonly=True) as h:
        assert [p["photo"] for p in h.passes("bed")] == ["IMG_0001.jpg"]
        with pytest.raises(HistoryError, match="read-only"):
            h.record(_result(2), surface="bed")


# ------------------------------------------------------------------ unwritable / full


def _as_nobody(target, *args) -> None:  # runs in a forked child
    if os.geteuid() == 0:
        os.setgid(65534)
        os.setuid(65534)
    target(*args)


def _child_open(db: str, q) -> None:
    try:
        with open_history(db) as h:
            h.record(_result(9), surface="bed")
        q.put("no error")
    except HistoryError as exc:
        q.put(f"HistoryError: {exc}")
    except BaseException as exc:  # noqa: BLE001 - report anything else to the parent
        q.put(f"{type(exc).__name__}: {exc}")


def _run_child(target, *args) -> str:
    q = FORK.Queue()
    p = FORK.Process(target=_as_nobody, args=(target, *args, q))
    p.start()
    p.join(30)
    assert p.exitcode == 0
    return q.get(timeout=5)


@pytest.fixture
def readonly_folder():
    # /tmp itself, not pytest's tmp_path: that one is private to root and "nobody" could
    # not even look inside it.
    folder = Path(tempfile.mkdtemp(prefix="printcheck-ro-", dir="/tmp"))
    yield folder
    folder.chmod(0o755)
    for f in folder.iterdir():
        f.unlink()
    folder.rmdir()


def test_readonly_folder_gives_history_error(readonly_folder: Path) -> None:
    folder = readonly_folder
    folder.chmod(0o555)
    msg = _run_child(_child_open, str(folder / "h.sqlite"))
    assert msg.startswith("HistoryError: history ") and "read-only" in msg and "--db" in msg
    assert "\n" not in msg
    # an existing history in a read-only folder
    folder.chmod(0o755)
    with open_history(folder / "h.sqlite") as h:
        h.record(_result(1), surface="bed")
    (folder / "h.sqlite").chmod(0o644)
    folder.chmod(0o555)
    msg = _run_child(_child_open, str(folder / "h.sqlite"))
    assert msg.startswith("HistoryError: history ") and "read-only" in msg


def _child_full(db: str, q) -> None:
    signal.signal(signal.SIGXFSZ, signal.SIG_IGN)
    resource.setrlimit(resource.RLIMIT_FSIZE, (300_000, 300_000))
    try:
        with open_history(db) as h:
            h.record(_result(2, pad=2_000_000), surface="bed")
        q.put("no error")
    except HistoryError as exc:
        q.put(f"HistoryError: {exc}")


def test_full_disk_gives_history_error_and_keeps_whole_passes(tmp_path: Path) -> None:
    db = tmp_path / "h.sqlite"
    with open_history(db) as h:
        h.record(_result(1), surface="bed")
    q = FORK.Queue()
    p = FORK.Process(target=_child_full, args=(str(db), q))
    p.start()
    p.join(30)
    msg = q.get(timeout=5)
    assert msg.startswith("HistoryError: history ") and "free some space" in msg
    with open_history(db) as h:
        assert [x["photo"] for x in h.passes("bed")] == ["IMG_0001.jpg"]


def test_database_full_message(tmp_path: Path) -> None:
    # PRAGMA max_page_count makes SQLite report SQLITE_FULL, as on a full disk
    with open_history(tmp_path / "h.sqlite") as h:
        pages = h._con.execute("PRAGMA page_count").fetchone()[0]
        h._con.execute(f"PRAGMA max_page_count = {pages + 12}")
        with pytest.raises(HistoryError, match="disk is full"):
            for i in range(50):
                h.record(_result(i, pad=20_000), surface="bed")
        n = len(h.passes("bed"))
    assert 0 < n < 50


# ------------------------------------------------------------------ concurrency and crashes


def _writer(db: str, start: int, count: int, barrier, q) -> None:
    try:
        with open_history(db, timeout_s=2.0, max_wait_s=30.0) as h:
            barrier.wait(10)  # both writers start together
            for i in range(start, start + count):
                h.record(_result(i, pad=2_000), surface="bed")
                time.sleep(0.002)  # a batch measures between records
        q.put("ok")
    except BaseException as exc:  # noqa: BLE001
        q.put(f"{type(exc).__name__}: {exc}")


def test_two_processes_writing_at_once_lose_nothing(tmp_path: Path) -> None:
    db = str(tmp_path / "h.sqlite")
    open_history(db).close()
    q = FORK.Queue()
    barrier = FORK.Barrier(2)
    procs = [FORK.Process(target=_writer, args=(db, k * 1000, 60, barrier, q)) for k in range(2)]
    for p in procs:
        p.start()
    for p in procs:
        p.join(60)
    assert sorted(q.get(timeout=5) for _ in procs) == ["ok", "ok"]
    with open_history(db) as h:
        photos = {p["photo"] for p in h.passes("bed")}
    assert len(photos) == 120
    # the writes really overlapped: the two writers' rows interleave in commit order
    con = sqlite3.connect(db)
    who = [int(r[0], 16) >= 1000 for r in con.execute("SELECT sha256 FROM passes ORDER BY id")]
    con.close()
    switches = sum(a != b for a, b in zip(who, who[1:], strict=False))
    assert switches >= 3


def test_lock_held_too_long_is_a_clear_error_not_a_hang(tmp_path: Path) -> None:
    db = tmp_path / "h.sqlite"
    open_history(db).close()
    blocker = sqlite3.connect(db, isolation_level=None)
    blocker.execute("BEGIN IMMEDIATE")
    try:
        with open_history(db, timeout_s=0.1, max_wait_s=0.5) as h:
            t0 = time.monotonic()
            with pytest.raises(HistoryError, match="locked"):
                h.record(_result(1), surface="bed")
            waited = time.monotonic() - t0
    finally:
        blocker.execute("ROLLBACK")
        blocker.close()
    assert 0.4 < waited < 3.0


def _endless_writer(db: str) -> None:
    with open_history(db) as h:
        i = 0
        while True:
            h.record(_result(i, pad=150_000), surface="bed")
            i += 1


def test_sigkill_mid_write_leaves_only_whole_passes(tmp_path: Path) -> None:
    db = tmp_path / "h.sqlite"
    open_history(db).close()
    for round_ in range(3):
        p = FORK.Process(target=_endless_writer, args=(str(db),))
        p.start()
        time.sleep(0.25 + 0.13 * round_)  # a different moment of the write each round
        os.kill(p.pid, signal.SIGKILL)
        p.join(10)
        assert p.exitcode == -signal.SIGKILL
    con = sqlite3.connect(db)
    assert con.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
    rows = con.execute("SELECT photo, density, spot_count, result_json FROM passes").fetchall()
    con.close()
    assert rows, "the writer never committed a pass"
    for photo, density, spot_count, text in rows:
        data = json.loads(text)  # never half a JSON
        assert (data["photo"], data["density"], data["spot_count"]) == (photo, density, spot_count)
        assert len(data["pad"]) == 150_000
    with open_history(db) as h:
        assert len(h.passes("bed")) == len(rows)
