"""The history store: record a pass, read a surface's passes, open a database.

Each pass is stored as its result JSON (``printcheck-result/1``, docs/formats.md) in one
transaction, plus indexed columns, and read back as a typed
:class:`printcheck.records.StoredPass`.
"""

from __future__ import annotations

import json
import os
import sqlite3
from collections.abc import Callable, Mapping
from pathlib import Path
from typing import Any, TypeVar

from printcheck.errors import HistoryError
from printcheck.history.schema import MIGRATIONS, Migration, migrate
from printcheck.history.sqlite import (
    ENV_VAR,
    connect,
    explain,
    now,
    retrying,
    too_new,
    transaction,
)
from printcheck.records import PassSummary, StoredPass
from printcheck.serde import spec_from_dict, spec_to_dict, summary_from_dict, summary_to_dict
from printcheck.spec import Spec

__all__ = ["History", "default_db_path", "open_history"]

T = TypeVar("T")


def default_db_path(env: Mapping[str, str] = os.environ) -> Path:
    """The history database to use when no ``--db`` is given.

    Parameters
    ----------
    env : mapping
        The environment; ``PRINTCHECK_DB`` in it, when set and not empty, wins.

    Returns
    -------
    Path
        ``$PRINTCHECK_DB``, else ``history.sqlite`` in the user's data folder
        (``platformdirs.user_data_path("printcheck")``).
    """
    value = env.get(ENV_VAR, "").strip()
    if value:
        return Path(value).expanduser()
    import platformdirs

    return Path(platformdirs.user_data_path("printcheck")) / "history.sqlite"


class History:
    """An open history database.  Use :func:`open_history` to get one.

    Methods take and return records (:class:`printcheck.records.PassSummary`,
    :class:`printcheck.records.StoredPass`), strings and numbers; none of them expose
    SQLite objects.
    """

    def __init__(
        self,
        connection: sqlite3.Connection,
        path: Path,
        *,
        max_wait_s: float,
        version: int,
        readonly: bool = False,
    ) -> None:
        self._con = connection
        self.path = path
        self.max_wait_s = max_wait_s
        self.readonly = readonly
        self._version = version

    # ------------------------------------------------------------------ plumbing

    def _retry(self, work: Callable[[sqlite3.Connection], T]) -> T:
        """Run ``work`` in one IMMEDIATE transaction, retrying while the database is locked."""
        return retrying(self.path, self.max_wait_s, lambda: transaction(self._con, work))

    def _read(self, sql: str, params: tuple[Any, ...] = ()) -> list[sqlite3.Row]:
        """The rows of one query, retrying while the database is locked."""
        return retrying(
            self.path, self.max_wait_s, lambda: list(self._con.execute(sql, params).fetchall())
        )

    def close(self) -> None:
        """Close the database (idempotent)."""
        self._con.close()

    def __enter__(self) -> History:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    # ------------------------------------------------------------------ writing

    def record(self, summary: PassSummary, *, surface: str, spec: Spec | None = None) -> bool:
        """Record one photo's result as a pass of ``surface``.

        Parameters
        ----------
        summary : PassSummary
            The photo's result; it must carry ``photo`` and ``sha256``.  It is stored
            whole, as its result JSON, plus indexed columns (photo, sha256, taken,
            density, bearing_percent, spot_count, meets, spec).
        surface : str
            The surface's name (created on first use).
        spec : Spec or None
            The spec judged against: its name and targets are kept with the pass, so the
            progress of a surface judged against a spec file or a quick target can be
            projected later.  Without one, the verdict's spec name is kept.

        Returns
        -------
        bool
            True if the pass was recorded; False if that photo (same SHA-256) is already
            recorded for this surface.

        Raises
        ------
        HistoryError
            A missing surface name or sha256, or the database could not be written.
        """
        if self.readonly:
            raise HistoryError(f"history {self.path}: opened read-only; cannot record a pass")
        if not isinstance(surface, str) or not surface.strip():
            raise HistoryError(
                f"history {self.path}: surface name must be a non-empty text, got {surface!r}; "
                "give --surface NAME"
            )
        row = self._row(summary, spec)

        def work(con: sqlite3.Connection) -> bool:
            con.execute(
                "INSERT OR IGNORE INTO surfaces (name, created) VALUES (?, ?)",
                (surface.strip(), now()),
            )
            (surface_id,) = con.execute(
                "SELECT id FROM surfaces WHERE name = ?", (surface.strip(),)
            ).fetchone()
            values = (surface_id, *row) if self._version >= 2 else (surface_id, *row[:-1])
            columns = (
                "surface_id, sha256, photo, taken, spec, density, bearing_percent, "
                "spot_count, meets, recorded, result_json"
                + (", spec_json" if self._version >= 2 else "")
            )
            marks = ", ".join("?" * len(values))
            cur = con.execute(f"INSERT OR IGNORE INTO passes ({columns}) VALUES ({marks})", values)
            return cur.rowcount == 1

        return self._retry(work)

    def _row(self, summary: PassSummary, spec: Spec | None) -> tuple[Any, ...]:
        """The passes row of ``summary`` (without its surface id), its JSON checked."""
        photo, sha = summary.photo, summary.sha256
        if not sha:
            raise HistoryError(
                f"history {self.path}: result for photo {photo!r} has no sha256; "
                "only results of photo files can be recorded"
            )
        if not photo:
            raise HistoryError(f"history {self.path}: result has no photo name; got {photo!r}")
        spec_json = None
        if spec is not None:
            try:
                spec_json = json.dumps(spec_to_dict(spec), ensure_ascii=False, allow_nan=False)
            except (TypeError, ValueError):
                spec_json = None
        try:
            text = json.dumps(summary_to_dict(summary), ensure_ascii=False, allow_nan=False)
        except (TypeError, ValueError) as exc:
            raise HistoryError(
                f"history {self.path}: result for photo {photo!r} is not plain JSON data "
                f"({exc}); its figures must be finite numbers"
            ) from None
        verdict = summary.verdict
        spec_name = spec.name if spec is not None else (None if verdict is None else verdict.name)
        meets = summary.meets
        return (
            sha,
            photo,
            None if summary.taken is None else summary.taken.isoformat(timespec="seconds"),
            spec_name,
            summary.density,
            summary.bearing_percent,
            summary.spot_count,
            None if meets is None else int(meets),
            now(),
            text,
            spec_json,
        )

    # ------------------------------------------------------------------ reading

    def surfaces(self) -> list[str]:
        """Names of every surface with at least one pass, sorted."""
        if self._version < 1:
            return []
        rows = self._read(
            """SELECT s.name FROM surfaces s
               WHERE EXISTS (SELECT 1 FROM passes p WHERE p.surface_id = s.id)
               ORDER BY s.name"""
        )
        return [r[0] for r in rows]

    def passes(self, surface: str) -> list[StoredPass]:
        """Every pass of ``surface`` in the order the photos were taken.

        Ordered by ``taken`` (passes without a time last), then by photo name, then by
        the order they were recorded; numbered from 1 in that order.  Empty for an
        unknown surface.

        Raises
        ------
        HistoryError
            A pass's stored JSON is damaged, or the database could not be read.
        """
        if self._version < 1:
            return []
        spec_col = "p.spec_json" if self._version >= 2 else "NULL"
        rows = self._read(
            f"""SELECT p.photo, p.spec, p.recorded, p.result_json, {spec_col} AS spec_json
               FROM passes p JOIN surfaces s ON s.id = p.surface_id
               WHERE s.name = ?
               ORDER BY p.taken IS NULL, p.taken, p.photo, p.id""",
            (surface.strip(),),
        )
        out = []
        for n, r in enumerate(rows, start=1):
            try:
                summary = summary_from_dict(json.loads(r["result_json"]))
                kept = None if r["spec_json"] is None else json.loads(r["spec_json"])
            except ValueError:
                raise HistoryError(
                    f"history {self.path}: pass {r['photo']!r} of {surface!r} holds damaged "
                    "JSON; restore a backup or give a new --db path"
                ) from None
            spec = spec_from_dict(kept) if isinstance(kept, Mapping) else None
            out.append(StoredPass(n, summary, r["spec"], spec, r["recorded"]))
        return out

    def schema_version(self) -> int:
        """The schema version of the open database (``PRAGMA user_version``)."""
        return int(self._read("PRAGMA user_version")[0][0])


def open_history(
    path: str | os.PathLike[str] | None = None,
    *,
    readonly: bool = False,
    timeout_s: float = 10.0,
    max_wait_s: float = 60.0,
    migrations: tuple[Migration, ...] = MIGRATIONS,
) -> History:
    """Open (creating if needed) the history database at ``path``.

    Parameters
    ----------
    path : path or None
        The database file; ``None`` uses :func:`default_db_path`.  Missing parent
        folders are created (not with ``readonly``).
    readonly : bool
        Open an existing history for reading only: nothing is created or migrated, and
        :meth:`History.record` is refused.  A history of an older schema is read as it is.
    timeout_s : float
        SQLite's busy timeout for one statement, in seconds.
    max_wait_s : float
        Upper bound on the total time one write keeps retrying while another run
        holds the database locked.
    migrations : tuple of Migration
        The schema's migrations (tests pass longer tuples to exercise upgrades).

    Returns
    -------
    History
        Usable as a context manager (``with open_history(p) as h: ...``).

    Raises
    ------
    HistoryError
        The location is read-only or full, the file is not a database, or its schema is
        newer than this program knows.
    """
    db = Path(path).expanduser() if path is not None else default_db_path()
    if db.is_dir():
        raise HistoryError(f"history {db}: is a folder; give the path of a .sqlite file")
    # before anything that could write (a journal mode, a migration): a file that is not
    # a printcheck history must come out byte for byte as it went in
    _refuse_if_not_ours(db, known=len(migrations), max_wait_s=max_wait_s)
    if readonly:
        return _open_readonly(db, timeout_s=timeout_s, max_wait_s=max_wait_s, known=len(migrations))
    try:
        db.parent.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise explain(db, exc) from None

    def prepare(con: sqlite3.Connection) -> int:
        mode = con.execute("PRAGMA journal_mode = WAL").fetchone()[0]
        if str(mode).lower() != "wal":
            raise sqlite3.OperationalError(f"cannot switch to WAL mode (got {mode})")
        con.execute("PRAGMA synchronous = FULL")
        con.execute("PRAGMA foreign_keys = ON")
        migrate(con, db, migrations)
        return int(con.execute("PRAGMA user_version").fetchone()[0])

    con, version = connect(
        db, str(db), uri=False, timeout_s=timeout_s, max_wait_s=max_wait_s, prepare=prepare
    )
    return History(con, db, max_wait_s=max_wait_s, version=version)


#: The tables every printcheck history has from its first migration on.
_OUR_TABLES = frozenset({"surfaces", "passes", "migrations"})


def _refuse_if_not_ours(db: Path, *, known: int, max_wait_s: float) -> None:
    """Refuse ``db`` unless it is missing, empty, or a history this printcheck can open.

    The schema is read through a read-only connection, so the file is never changed: no
    journal mode is set and nothing is written.  When no other connection has the file
    open (no ``-wal`` or ``-journal`` file beside it) the connection is also
    ``immutable``, so that reading a file in WAL mode leaves no ``-wal``/``-shm`` files
    behind either.

    Raises
    ------
    HistoryError
        ``db`` is not a regular file, not an SQLite database, a database of another
        program, or a history of a newer schema than ``known``.
    """
    import stat

    try:
        info = db.stat()
    except FileNotFoundError:
        return
    except OSError as exc:
        raise explain(db, exc) from None
    if not stat.S_ISREG(info.st_mode):
        raise HistoryError(f"history {db}: is not a regular file; give the path of a .sqlite file")
    if info.st_size == 0:
        return  # SQLite's empty database: a new history
    from urllib.parse import quote

    ro = "file:" + quote(str(db.resolve())) + "?mode=ro"
    in_use = any(db.with_name(db.name + side).exists() for side in ("-wal", "-journal"))

    def read(immutable: bool) -> tuple[int, set[str]]:
        con = sqlite3.connect(ro + ("&immutable=1" if immutable else ""), uri=True)
        try:
            version = int(con.execute("PRAGMA user_version").fetchone()[0])
            names = {
                str(r[0])
                for r in con.execute(
                    "SELECT name FROM sqlite_master "
                    "WHERE type = 'table' AND name NOT LIKE 'sqlite_%'"
                )
            }
        finally:
            con.close()
        return version, names

    try:
        version, names = retrying(db, max_wait_s, lambda: read(not in_use))
    except HistoryError:
        if in_use:
            raise
        # an immutable read takes no lock: a run that began writing meanwhile can make it
        # fail; the ordinary read-only connection then has the last word
        version, names = retrying(db, max_wait_s, lambda: read(False))
    if version == 0 and not names:
        return  # a database with nothing in it yet: a new history
    if version < 1 or not _OUR_TABLES <= names:
        raise HistoryError(
            f"history {db}: is an SQLite database of another program (no printcheck "
            "schema); give another --db path"
        )
    if version > known:
        raise too_new(db, version, known)


def _open_readonly(db: Path, *, timeout_s: float, max_wait_s: float, known: int) -> History:
    if not db.is_file():
        raise HistoryError(f"history {db}: no such file; run 'printcheck batch' first or give --db")
    from urllib.parse import quote

    uri = "file:" + quote(str(db.resolve())) + "?mode=ro"

    def prepare(con: sqlite3.Connection) -> int:
        return int(con.execute("PRAGMA user_version").fetchone()[0])

    con, version = connect(
        db, uri, uri=True, timeout_s=timeout_s, max_wait_s=max_wait_s, prepare=prepare
    )
    if version > known:
        con.close()
        raise too_new(db, version, known)
    return History(con, db, max_wait_s=max_wait_s, version=version, readonly=True)
