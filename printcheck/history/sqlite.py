"""The SQLite plumbing of the history: connecting, one transaction, waiting out a lock,
and one-line errors.

Only the history package uses SQLite; this module holds what every part of it needs.
Another run holding the database locked is waited for (:func:`retrying`, up to
``max_wait_s``); any other failure becomes one :class:`printcheck.errors.HistoryError`
line naming the file and what to do (:func:`explain`).
"""

from __future__ import annotations

import errno
import sqlite3
import time
from collections.abc import Callable
from datetime import UTC, datetime
from pathlib import Path
from typing import TypeVar

from printcheck.errors import HistoryError

__all__ = ["ENV_VAR", "now", "explain", "retrying", "transaction", "connect", "too_new"]

ENV_VAR = "PRINTCHECK_DB"

T = TypeVar("T")

_RETRY_SLEEP_S = 0.05


def now() -> str:
    return datetime.now(UTC).isoformat(timespec="seconds")


def _is_locked(exc: BaseException) -> bool:
    text = str(exc).lower()
    return isinstance(exc, sqlite3.OperationalError) and ("locked" in text or "busy" in text)


def explain(path: Path, exc: BaseException) -> HistoryError:
    """Turn a sqlite3/OS error into a one-line HistoryError naming the file and the fix."""
    text = str(exc).lower()
    code = getattr(exc, "sqlite_errorcode", None)
    err = getattr(exc, "errno", None)
    if "not a database" in text or code == getattr(sqlite3, "SQLITE_NOTADB", 26):
        msg = "is not a printcheck history (not an SQLite database); give another --db path"
    elif "full" in text or err in (errno.ENOSPC, errno.EDQUOT, errno.EFBIG) or code == 13:
        msg = "the disk is full; free some space or give a --db path on another disk"
    elif (
        "readonly" in text
        or "read-only" in text
        or "unable to open" in text
        or err in (errno.EROFS, errno.EACCES, errno.EPERM)
    ):
        msg = (
            "cannot be written there (read-only or no permission); give a writable "
            f"--db path or set {ENV_VAR}"
        )
    elif _is_locked(exc):
        msg = "another printcheck run kept the history locked too long; try again when it ends"
    elif "malformed" in text or "corrupt" in text:
        msg = "the database is damaged; restore a backup or give a new --db path"
    elif "disk i/o" in text:
        msg = (
            "writing to the disk failed (disk full, a file size limit, or a disk fault); "
            "free some space or give another --db path"
        )
    else:
        msg = f"{exc}".strip() or type(exc).__name__
    return HistoryError(f"history {path}: {msg}")


def transaction(con: sqlite3.Connection, work: Callable[[sqlite3.Connection], T]) -> T:
    """Run ``work`` between BEGIN IMMEDIATE and COMMIT; roll back on any failure."""
    con.execute("BEGIN IMMEDIATE")
    try:
        value = work(con)
        con.execute("COMMIT")
    except BaseException:
        if con.in_transaction:
            try:
                con.execute("ROLLBACK")
            except sqlite3.Error:
                pass
        raise
    return value


def retrying(path: Path, max_wait_s: float, action: Callable[[], T]) -> T:
    """Run ``action``; while another run holds the database locked, again, for up to
    ``max_wait_s`` seconds.

    Any other SQLite or OS failure becomes one HistoryError line naming ``path`` and the
    fix; a HistoryError from ``action`` passes as it is.
    """
    deadline = time.monotonic() + max_wait_s
    while True:
        try:
            return action()
        except HistoryError:
            raise
        except (sqlite3.Error, OSError) as exc:
            if _is_locked(exc) and time.monotonic() < deadline:
                time.sleep(_RETRY_SLEEP_S)
                continue
            raise explain(path, exc) from None


def connect(
    db: Path,
    target: str,
    *,
    uri: bool,
    timeout_s: float,
    max_wait_s: float,
    prepare: Callable[[sqlite3.Connection], int],
) -> tuple[sqlite3.Connection, int]:
    """Connect and run ``prepare`` (returns the schema version), retrying while locked.

    A half-opened connection is closed before the next try or the error.
    """

    def attempt() -> tuple[sqlite3.Connection, int]:
        con = sqlite3.connect(
            target, uri=uri, timeout=timeout_s, isolation_level=None, check_same_thread=True
        )
        try:
            con.row_factory = sqlite3.Row
            con.execute(f"PRAGMA busy_timeout = {int(timeout_s * 1000):d}")
            return con, prepare(con)
        except BaseException:
            con.close()
            raise

    return retrying(db, max_wait_s, attempt)


def too_new(path: Path, version: int, known: int) -> HistoryError:
    """The error for a database whose schema ``version`` is newer than the ``known`` one."""
    return HistoryError(
        f"history {path}: schema version {version} is newer than this printcheck "
        f"knows ({known}); upgrade printcheck or give another --db path"
    )
