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
from dataclasses import replace
from datetime import datetime
from pathlib import Path

import pytest
from _hand_results import make_summary

from printcheck.errors import HistoryError
from printcheck.history import (
    ENV_VAR,
    MIGRATIONS,
    SCHEMA_VERSION,
    Migration,
    default_db_path,
    open_history,
)
from printcheck.judge import Check, Verdict
from printcheck.records import PassSummary
from printcheck.serde import summary_from_dict, summary_to_dict
from printcheck.spec import Spec

FORK = mp.get_context("fork")


_DEFAULT = datetime(2000, 1, 1)


def _result(
    i: int, *, taken: datetime | None = _DEFAULT, photo: str | None = None, pad: int = 0
) -> PassSummary:
    """A small pass summary; ``pad`` characters of warning make its JSON as large as wanted."""
    summary = make_summary(
        i,
        2.5 + i,
        photo=photo,
        taken=datetime(2026, 11, 30, 10, i // 60 % 60, i % 60) if taken is _DEFAULT else taken,
        bearing_percent=20.0 + i / 10,
        verdict=Verdict("slideway", i % 2 == 0, ()),
        warnings=("x" * pad,) if pad else (),
    )
    return replace(summary, spot_count=10 + i, taken=None if taken is None else summary.taken)


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
    assert p.summary == data  # read back typed, every figure as recorded
    assert p.number == 1 and p.spec_name == "slideway" and p.spec == spec
    con = sqlite3.connect(tmp_path / "h.sqlite")
    row = con.execute(
        "SELECT photo, sha256, taken, density, bearing_percent, spot_count, meets, result_json "
        "FROM passes"
    ).fetchone()
    con.close()
    assert row[:7] == ("IMG_0003.jpg", f"{3:064x}", "2026-11-30T10:00:03", 5.5, 20.3, 13, 0)
    assert json.loads(row[7]) == summary_to_dict(data)  # the result JSON, as written


# A pass as an earlier printcheck stored it (schema 1, before the typed records): the
# result JSON of result_to_dict, key for key.
_OLD_RESULT_JSON = """{"format": "printcheck-result/1", "photo": "lathe-bed-front-flat-pass3.jpg",
"surface": "lathe-bed-front-flat", "taken": "2026-11-30T09:39:12", "unit": "in", "cell": 1.0,
"calibration": {"method": "layout", "layout": "slideway-station", "markers": [0, 1, 2, 3],
"px_per_mm": 9.449, "residual_mm": 0.0141, "photo_px_per_mm": 9.463},
"window": {"width": 7.874, "height": 5.9055, "area": 46.4994}, "spot_count": 57,
"density": 1.23, "bearing_percent": 2.81, "largest_bare": 2.0567,
"cells": [{"row": 0, "col": 0, "complete": true, "spot_count": 2, "density": 2.0,
"bearing_percent": 3.11, "area": 1.0}], "spec": {"name": "slideway-precision", "meets": false,
"checks": [{"name": "density", "target": ">= 16.5", "value": 1.226, "ok": false,
"reason": "1.2 points per square inch over the window, below the 16.5 needed"}]},
"sha256": "ab12", "confidence": {"spot_count_low": 56, "spot_count_high": 58,
"bearing_percent_low": 2.5, "bearing_percent_high": 3.12, "doubtful": false, "reason": ""},
"spot_sizes": {"median_area_mm2": 1.2, "p90_area_mm2": null},
"segmentation": {"compound": "blue", "threshold": 0.2915},
"guidance": {"high": [{"x": 1.5, "y": 2.25, "size": 0.4, "reason": "large spot"}],
"bare": [{"x": 6.25, "y": 1.62, "diameter": 2.0567}]}, "warnings": ["glare"]}"""


def test_a_history_written_before_the_typed_records_still_reads(tmp_path: Path) -> None:
    db = tmp_path / "h.sqlite"
    with open_history(db, migrations=MIGRATIONS[:1]):
        pass
    con = sqlite3.connect(db)
    con.execute("INSERT INTO surfaces (name, created) VALUES ('way', '2026-11-30T10:00:00')")
    con.execute(
        "INSERT INTO passes (surface_id, sha256, photo, taken, spec, density, bearing_percent, "
        "spot_count, meets, recorded, result_json) VALUES (1, 'ab12', "
        "'lathe-bed-front-flat-pass3.jpg', '2026-11-30T09:39:12', 'slideway-precision', 1.23, "
        "2.81, 57, 0, '2026-11-30T10:00:00+00:00', ?)",
        (_OLD_RESULT_JSON,),
    )
    con.commit()
    con.close()
    with open_history(db, readonly=True) as h:
        (p,) = h.passes("way")
    s = p.summary
    assert (s.photo, s.spot_count, s.density, s.meets) == (
        "lathe-bed-front-flat-pass3.jpg",
        57,
        1.23,
        False,
    )
    reason = "1.2 points per square inch over the window, below the 16.5 needed"
    check = Check("density", ">= 16.5", 1.226, False, reason)
    assert s.verdict == Verdict("slideway-precision", False, (check,))
    assert p.spec is None and p.spec_name == "slideway-precision"
    # and it writes back to the very text it was read from, key order included
    old = json.loads(_OLD_RESULT_JSON)
    assert json.dumps(summary_to_dict(s)) == json.dumps(old)
    assert summary_from_dict(summary_to_dict(s)) == s


def test_passes_in_time_order_then_photo_name(tmp_path: Path) -> None:
    with open_history(tmp_path / "h.sqlite") as h:
        h.record(_result(1, taken=datetime(2026, 12, 1, 9), photo="b.jpg"), surface="s")
        h.record(_result(2, taken=None, photo="a.jpg"), surface="s")  # no time: last
        h.record(_result(3, taken=datetime(2026, 11, 30, 9), photo="z.jpg"), surface="s")
        h.record(_result(4, taken=datetime(2026, 12, 1, 9), photo="a.jpg"), surface="s")
        order = [p.summary.photo for p in h.passes("s")]
        numbers = [p.number for p in h.passes("s")]
    assert order == ["z.jpg", "a.jpg", "b.jpg", "a.jpg"]
    assert numbers == [1, 2, 3, 4]
    with open_history(tmp_path / "h.sqlite") as h:
        assert h.passes("unknown") == []


def test_record_refuses_a_result_without_sha256(tmp_path: Path) -> None:
    data = replace(_result(1), sha256=None)
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
        assert h.passes("bed")[0].spec is None
    extra = MIGRATIONS + (
        Migration("test: add a note column", ("ALTER TABLE passes ADD COLUMN note TEXT",)),
    )
    with open_history(db, migrations=extra) as h:
        assert h.schema_version() == len(extra)
        (p,) = h.passes("bed")
        assert p.summary == _result(1) and p.spec is None
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
        assert [p.summary.photo for p in h.passes("bed")] == ["IMG_0001.jpg"]
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
        assert [x.summary.photo for x in h.passes("bed")] == ["IMG_0001.jpg"]


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
        photos = {p.summary.photo for p in h.passes("bed")}
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
        assert len(data["warnings"][0]) == 150_000
    with open_history(db) as h:
        assert len(h.passes("bed")) == len(rows)


def test_a_database_of_another_program_is_not_touched(tmp_path: Path) -> None:
    """Refused before anything could write: the same bytes, no file made beside it."""
    import hashlib

    files = []
    for name, mode in (("inventory.sqlite", "DELETE"), ("notes.db", "WAL")):
        other = tmp_path / name
        con = sqlite3.connect(other)
        con.execute(f"PRAGMA journal_mode = {mode}")
        con.execute("CREATE TABLE parts (id INTEGER PRIMARY KEY, name TEXT)")
        con.execute("INSERT INTO parts (name) VALUES ('gib')")
        con.execute("PRAGMA user_version = 7")
        con.commit()
        con.close()
        files.append(other)
    newer = tmp_path / "newer.sqlite"  # our tables, a printcheck from the future
    con = sqlite3.connect(newer)
    for table in ("surfaces", "passes", "migrations"):
        con.execute(f"CREATE TABLE {table} (id INTEGER PRIMARY KEY)")
    con.execute("PRAGMA user_version = 99")
    con.commit()
    con.close()
    files.append(newer)
    before = {p: hashlib.sha256(p.read_bytes()).hexdigest() for p in files}
    listing = sorted(os.listdir(tmp_path))
    for path in files:
        for readonly in (False, True):
            with pytest.raises(HistoryError, match="another program|newer"):
                open_history(path, readonly=readonly)
    assert {p: hashlib.sha256(p.read_bytes()).hexdigest() for p in files} == before
    assert sorted(os.listdir(tmp_path)) == listing
