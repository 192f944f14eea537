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
from printcheck.records import (
    EarlierResult,
    PassSummary,
    PutOutcome,
    StoredPass,
    SurfaceInfo,
)
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

    def record(
        self,
        summary: PassSummary,
        *,
        surface: str,
        spec: Spec | None = None,
        station: str | None = None,
        pass_key: str | None = None,
        settings: str | None = None,
        method: int | None = None,
    ) -> bool:
        """Record one photo's result as a pass (or a station of a pass) of ``surface``.

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
        station, pass_key : str or None
            The photo's station and the pass it belongs to (schema 3 on); None: the photo
            is a pass of its own.
        settings : str or None
            The measuring settings, as the text :func:`printcheck.history.settings_key`
            makes (schema 3 on).
        method : int or None
            The measuring method's version (:data:`printcheck.method.METHOD_VERSION`).

        Returns
        -------
        bool
            True if the pass was recorded; False if that photo (same SHA-256) is already
            recorded for this surface (see :meth:`put` to re-measure it).

        Raises
        ------
        HistoryError
            A missing surface name or sha256, or the database could not be written.
        """
        outcome = self.put(
            summary,
            surface=surface,
            spec=spec,
            station=station,
            pass_key=pass_key,
            settings=settings,
            method=method,
            replace=False,
        )
        return outcome.state == "new"

    def put(
        self,
        summary: PassSummary,
        *,
        surface: str,
        spec: Spec | None = None,
        station: str | None = None,
        pass_key: str | None = None,
        settings: str | None = None,
        method: int | None = None,
        replace: bool = True,
        why: str = "re-measured",
        sort_time: str | None = None,
    ) -> PutOutcome:
        """Record a photo's result; with ``replace``, re-measured figures replace the
        recorded ones and the recorded ones go to the record of earlier results.

        Returns
        -------
        PutOutcome
            ``state`` ``"new"`` (recorded), ``"same"`` (already recorded, nothing done),
            ``"replaced"`` (the new figures are the pass's; ``earlier`` holds the old
            summary) or ``"removed"`` (the photo was removed from the surface; nothing
            done).
        """
        if self.readonly:
            raise HistoryError(f"history {self.path}: opened read-only; cannot record a pass")
        name = self._surface_name(surface)
        row = self._row(summary, spec)
        v3 = self._version >= 3

        def work(con: sqlite3.Connection) -> PutOutcome:
            con.execute(
                "INSERT OR IGNORE INTO surfaces (name, created) VALUES (?, ?)", (name, now())
            )
            (surface_id,) = con.execute(
                "SELECT id FROM surfaces WHERE name = ?", (name,)
            ).fetchone()
            columns = [
                "sha256",
                "photo",
                "taken",
                "spec",
                "density",
                "bearing_percent",
                "spot_count",
                "meets",
                "recorded",
                "result_json",
            ]
            values = list(row[:-1])
            if self._version >= 2:
                columns.append("spec_json")
                values.append(row[-1])
            if v3:
                columns += ["station", "pass_key", "settings", "method", "sort_time"]
                values += [station, pass_key, settings, method, sort_time]
            old = con.execute(
                f"""SELECT id, result_json, recorded
                    {", settings, method, removed" if v3 else ""}
                    FROM passes WHERE surface_id = ? AND sha256 = ?""",
                (surface_id, summary.sha256),
            ).fetchone()
            if old is None:
                marks = ", ".join("?" * (len(values) + 1))
                con.execute(
                    f"INSERT INTO passes (surface_id, {', '.join(columns)}) VALUES ({marks})",
                    (surface_id, *values),
                )
                return PutOutcome("new")
            if v3 and old["removed"] is not None:
                return PutOutcome("removed")
            if not replace or not v3:
                return PutOutcome("same")
            con.execute(
                """INSERT INTO earlier_results
                   (pass_id, result_json, settings, method, recorded, replaced, why)
                   VALUES (?, ?, ?, ?, ?, ?, ?)""",
                (
                    old["id"],
                    old["result_json"],
                    old["settings"],
                    old["method"],
                    old["recorded"],
                    now(),
                    why,
                ),
            )
            sets = ", ".join(f"{c} = ?" for c in columns)
            con.execute(f"UPDATE passes SET {sets} WHERE id = ?", (*values, old["id"]))
            return PutOutcome("replaced", self._summary(old["result_json"], summary.photo, name))

        return self._retry(work)

    def _surface_name(self, surface: str) -> str:
        if not isinstance(surface, str) or not surface.strip():
            raise HistoryError(
                f"history {self.path}: surface name must be a non-empty text, got {surface!r}; "
                "give --surface NAME"
            )
        return surface.strip()

    def _summary(self, text: str, photo: str, surface: str) -> PassSummary:
        try:
            return summary_from_dict(json.loads(text))
        except ValueError:
            raise HistoryError(
                f"history {self.path}: pass {photo!r} of {surface!r} holds damaged "
                "JSON; restore a backup or give a new --db path"
            ) from None

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
        """Every photo recorded for ``surface`` (and not removed), pass by pass.

        A photo recorded without a pass key is a pass of its own; photos sharing a pass
        key are the stations of one pass.  Passes are ordered by the earliest time taken
        of their photos (passes without a time last), then by photo name, then by the
        order they were recorded, and numbered from 1 in that order; a pass's stations
        follow each other in the order taken.  Empty for an unknown surface.

        Raises
        ------
        HistoryError
            A pass's stored JSON is damaged, or the database could not be read.
        """
        if self._version < 1:
            return []
        name = surface.strip()
        spec_col = "p.spec_json" if self._version >= 2 else "NULL"
        extra = (
            "p.station, p.pass_key, p.settings, p.method, n.note"
            if self._version >= 3
            else "NULL AS station, NULL AS pass_key, NULL AS settings, NULL AS method, NULL AS note"
        )
        join = (
            """LEFT JOIN pass_notes n ON n.surface_id = p.surface_id
               AND n.pass_key = COALESCE(p.pass_key, p.sha256)"""
            if self._version >= 3
            else ""
        )
        where = "AND p.removed IS NULL" if self._version >= 3 else ""
        order = "COALESCE(p.sort_time, p.taken)" if self._version >= 3 else "p.taken"
        rows = self._read(
            f"""SELECT p.photo, p.sha256, p.taken, p.spec, p.recorded, p.result_json,
                   {spec_col} AS spec_json, {extra}
               FROM passes p JOIN surfaces s ON s.id = p.surface_id {join}
               WHERE s.name = ? {where}
               ORDER BY {order} IS NULL, {order}, p.photo, p.id""",
            (name,),
        )
        groups: dict[str, list[sqlite3.Row]] = {}
        for r in rows:  # in the order taken: a group's first row is its earliest photo
            groups.setdefault(r["pass_key"] or "\0" + r["sha256"], []).append(r)
        out = []
        for n, members in enumerate(groups.values(), start=1):
            for r in members:
                summary = self._summary(r["result_json"], r["photo"], name)
                try:
                    kept = None if r["spec_json"] is None else json.loads(r["spec_json"])
                except ValueError:
                    kept = None
                spec = spec_from_dict(kept) if isinstance(kept, Mapping) else None
                out.append(
                    StoredPass(
                        n,
                        summary,
                        r["spec"],
                        spec,
                        r["recorded"],
                        station=r["station"],
                        pass_key=r["pass_key"],
                        note=r["note"],
                        settings=r["settings"],
                        method=0 if r["method"] is None else int(r["method"]),
                    )
                )
        return out

    # ------------------------------------------------------------------ stations, surfaces

    def _need_v3(self, what: str) -> None:
        if self._version < 3:
            raise HistoryError(
                f"history {self.path}: schema version {self._version} cannot {what}; "
                "open it once for writing (any batch) to upgrade it"
            )
        if self.readonly and what != "read":
            raise HistoryError(f"history {self.path}: opened read-only; cannot {what}")

    def known(self, surface: str) -> dict[str, tuple[str | None, int, bool]]:
        """The photos recorded for ``surface``: sha256 -> (settings, method, removed)."""
        if self._version < 1:
            return {}
        if self._version < 3:
            rows = self._read(
                """SELECT p.sha256, NULL AS settings, NULL AS method, NULL AS removed
                   FROM passes p JOIN surfaces s ON s.id = p.surface_id WHERE s.name = ?""",
                (surface.strip(),),
            )
        else:
            rows = self._read(
                """SELECT p.sha256, p.settings, p.method, p.removed
                   FROM passes p JOIN surfaces s ON s.id = p.surface_id WHERE s.name = ?""",
                (surface.strip(),),
            )
        return {
            r["sha256"]: (
                r["settings"],
                0 if r["method"] is None else int(r["method"]),
                r["removed"] is not None,
            )
            for r in rows
        }

    def place(
        self,
        surface: str,
        sha256: str,
        *,
        station: str | None,
        pass_key: str | None,
        sort_time: str | None,
    ) -> bool:
        """Put a recorded photo at its pass and station (as a batch now groups it);
        True when that changed anything.  Its figures stay as they are."""
        self._need_v3("regroup a photo")
        name = self._surface_name(surface)

        def work(con: sqlite3.Connection) -> bool:
            cur = con.execute(
                """UPDATE passes SET station = ?, pass_key = ?, sort_time = ?
                   WHERE sha256 = ? AND surface_id = (SELECT id FROM surfaces WHERE name = ?)
                   AND (station IS NOT ? OR pass_key IS NOT ? OR sort_time IS NOT ?)""",
                (station, pass_key, sort_time, sha256, name, station, pass_key, sort_time),
            )
            return cur.rowcount > 0

        return self._retry(work)

    def surface_folder(self, surface: str) -> str | None:
        """The folder whose batch first recorded ``surface`` (None: unknown or not kept)."""
        if self._version < 3:
            return None
        rows = self._read("SELECT folder FROM surfaces WHERE name = ?", (surface.strip(),))
        return None if not rows else rows[0]["folder"]

    def claim_folder(self, surface: str, folder: str) -> None:
        """Create ``surface`` if needed and note ``folder`` as its folder, if none is noted."""
        self._need_v3("note a surface's folder")
        name = self._surface_name(surface)

        def work(con: sqlite3.Connection) -> None:
            con.execute(
                "INSERT OR IGNORE INTO surfaces (name, created) VALUES (?, ?)", (name, now())
            )
            con.execute(
                "UPDATE surfaces SET folder = ? WHERE name = ? AND folder IS NULL",
                (folder, name),
            )

        self._retry(work)

    def surface_list(self) -> list[SurfaceInfo]:
        """Every surface with at least one photo recorded (removed ones not counted)."""
        if self._version < 1:
            return []
        live = "AND p.removed IS NULL" if self._version >= 3 else ""
        key = "COALESCE(p.pass_key, p.sha256)" if self._version >= 3 else "p.sha256"
        folder = "s.folder" if self._version >= 3 else "NULL"
        rows = self._read(
            f"""SELECT s.name, count(DISTINCT {key}) AS passes, count(p.id) AS photos,
                   {folder} AS folder, max(p.taken) AS latest
               FROM surfaces s JOIN passes p ON p.surface_id = s.id {live}
               GROUP BY s.id ORDER BY s.name"""
        )
        return [
            SurfaceInfo(r["name"], r["passes"], r["photos"], r["folder"], r["latest"]) for r in rows
        ]

    def rename_surface(self, old: str, new: str) -> None:
        """Rename a surface (its passes go with it).

        Raises
        ------
        HistoryError
            No surface ``old``, or ``new`` is taken.
        """
        if self.readonly:
            raise HistoryError(f"history {self.path}: opened read-only; cannot rename")
        old_name, new_name = self._surface_name(old), self._surface_name(new)

        def work(con: sqlite3.Connection) -> None:
            if con.execute("SELECT 1 FROM surfaces WHERE name = ?", (old_name,)).fetchone() is None:
                raise HistoryError(f"history {self.path}: no surface {old_name!r} to rename")
            if con.execute("SELECT 1 FROM surfaces WHERE name = ?", (new_name,)).fetchone():
                raise HistoryError(
                    f"history {self.path}: surface {new_name!r} exists already; "
                    "pick another name or remove it first"
                )
            con.execute("UPDATE surfaces SET name = ? WHERE name = ?", (new_name, old_name))

        self._retry(work)

    def remove_surface(self, surface: str) -> int:
        """Delete a surface, its passes, notes and earlier results; return photos deleted.

        Raises
        ------
        HistoryError
            No such surface.
        """
        if self.readonly:
            raise HistoryError(f"history {self.path}: opened read-only; cannot remove")
        name = self._surface_name(surface)
        v3 = self._version >= 3

        def work(con: sqlite3.Connection) -> int:
            row = con.execute("SELECT id FROM surfaces WHERE name = ?", (name,)).fetchone()
            if row is None:
                raise HistoryError(f"history {self.path}: no surface {name!r} to remove")
            sid = row[0]
            if v3:
                con.execute(
                    "DELETE FROM earlier_results WHERE pass_id IN "
                    "(SELECT id FROM passes WHERE surface_id = ?)",
                    (sid,),
                )
                con.execute("DELETE FROM pass_notes WHERE surface_id = ?", (sid,))
            count = con.execute("DELETE FROM passes WHERE surface_id = ?", (sid,)).rowcount
            con.execute("DELETE FROM surfaces WHERE id = ?", (sid,))
            return int(count)

        return self._retry(work)

    def remove_pass(
        self, surface: str, *, number: int | None = None, photo: str | None = None
    ) -> list[str]:
        """Take pass ``number`` (all its stations) or one ``photo`` out of the surface.

        The rows are kept, marked removed: they no longer count in progress or the
        report, and a batch re-run does not record them again.  Returns the photos.

        Raises
        ------
        HistoryError
            No such pass or photo.
        """
        self._need_v3("remove a pass")
        name = self._surface_name(surface)
        stored = self.passes(name)
        if number is not None:
            chosen = [p.summary.sha256 for p in stored if p.number == number]
            what = f"pass {number}"
        else:
            chosen = [p.summary.sha256 for p in stored if p.summary.photo == photo]
            what = f"photo {photo!r}"
        if not chosen:
            count = len({p.number for p in stored})
            raise HistoryError(
                f"history {self.path}: surface {name!r} has no {what} "
                f"({count} passes recorded; see 'printcheck progress {name}')"
            )
        photos = [p.summary.photo for p in stored if p.summary.sha256 in chosen]

        def work(con: sqlite3.Connection) -> None:
            (sid,) = con.execute("SELECT id FROM surfaces WHERE name = ?", (name,)).fetchone()
            stamp = now()
            for sha in chosen:
                con.execute(
                    "UPDATE passes SET removed = ? WHERE surface_id = ? AND sha256 = ?",
                    (stamp, sid, sha),
                )

        self._retry(work)
        return photos

    def restore(self, surface: str, photo: str | None = None) -> list[str]:
        """Put removed photos of ``surface`` back among its passes (one ``photo``, or
        every removed one); returns the photos restored.

        Raises
        ------
        HistoryError
            Nothing removed matches.
        """
        self._need_v3("restore a pass")
        name = self._surface_name(surface)

        def work(con: sqlite3.Connection) -> list[str]:
            rows = con.execute(
                """SELECT p.id, p.photo FROM passes p JOIN surfaces s ON s.id = p.surface_id
                   WHERE s.name = ? AND p.removed IS NOT NULL AND (? IS NULL OR p.photo = ?)
                   ORDER BY p.id""",
                (name, photo, photo),
            ).fetchall()
            if not rows:
                what = f"photo {photo!r}" if photo is not None else "photo"
                raise HistoryError(
                    f"history {self.path}: surface {name!r} has no removed {what} to restore"
                )
            for r in rows:
                con.execute("UPDATE passes SET removed = NULL WHERE id = ?", (r["id"],))
            return [str(r["photo"]) for r in rows]

        return self._retry(work)

    def set_note(self, surface: str, number: int, note: str) -> None:
        """Keep ``note`` (who scraped, compound, reference) with pass ``number``."""
        self._need_v3("keep a note")
        name = self._surface_name(surface)
        stored = [p for p in self.passes(name) if p.number == number]
        if not stored:
            raise HistoryError(f"history {self.path}: surface {name!r} has no pass {number}")
        first = stored[0]
        key = first.pass_key or first.summary.sha256
        text = " ".join(note.split())

        def work(con: sqlite3.Connection) -> None:
            (sid,) = con.execute("SELECT id FROM surfaces WHERE name = ?", (name,)).fetchone()
            if text:
                con.execute(
                    """INSERT INTO pass_notes (surface_id, pass_key, note, updated)
                       VALUES (?, ?, ?, ?)
                       ON CONFLICT (surface_id, pass_key)
                       DO UPDATE SET note = excluded.note, updated = excluded.updated""",
                    (sid, key, text, now()),
                )
            else:
                con.execute(
                    "DELETE FROM pass_notes WHERE surface_id = ? AND pass_key = ?", (sid, key)
                )

        self._retry(work)

    def earlier_results(self, surface: str) -> list[EarlierResult]:
        """The figures the surface's photos had before they were re-measured, oldest first."""
        if self._version < 3:
            return []
        rows = self._read(
            """SELECT p.photo, e.result_json, e.settings, e.method, e.recorded, e.replaced,
                      e.why
               FROM earlier_results e JOIN passes p ON p.id = e.pass_id
               JOIN surfaces s ON s.id = p.surface_id
               WHERE s.name = ? ORDER BY e.id""",
            (surface.strip(),),
        )
        return [
            EarlierResult(
                r["photo"],
                self._summary(r["result_json"], r["photo"], surface),
                r["settings"],
                0 if r["method"] is None else int(r["method"]),
                r["recorded"],
                r["replaced"],
                r["why"],
            )
            for r in rows
        ]

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
    version = _refuse_if_not_ours(db, known=len(migrations), max_wait_s=max_wait_s)
    if readonly:
        return _open_readonly(db, timeout_s=timeout_s, max_wait_s=max_wait_s, known=len(migrations))
    try:
        db.parent.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise explain(db, exc) from None
    if 0 < version < len(migrations):
        keep_copy(db, version, max_wait_s=max_wait_s)

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


def copy_name(db: Path, version: int) -> Path:
    """Where the copy of ``db`` kept before upgrading it from schema ``version`` goes."""
    return db.with_name(f"{db.name}.schema{version}.bak")


def keep_copy(db: Path, version: int, *, max_wait_s: float) -> Path:
    """Copy the history ``db`` (schema ``version``) beside it before it is upgraded.

    The copy is made with SQLite's online backup (a consistent snapshot, whatever
    another run is doing), first to a temporary name and then renamed, so a copy by that
    name is always whole.  An existing copy is left as it is.
    """
    target = copy_name(db, version)
    if target.exists():
        return target
    from urllib.parse import quote

    partial = target.with_name(target.name + ".partial")

    def copy() -> None:
        src = sqlite3.connect("file:" + quote(str(db.resolve())) + "?mode=ro", uri=True)
        try:
            dst = sqlite3.connect(partial)
            try:
                src.backup(dst)
            finally:
                dst.close()
        finally:
            src.close()
        os.replace(partial, target)

    try:
        retrying(db, max_wait_s, copy)
    finally:
        partial.unlink(missing_ok=True)
    return target


def _refuse_if_not_ours(db: Path, *, known: int, max_wait_s: float) -> int:
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
        return 0
    except OSError as exc:
        raise explain(db, exc) from None
    if not stat.S_ISREG(info.st_mode):
        raise HistoryError(f"history {db}: is not a regular file; give the path of a .sqlite file")
    if info.st_size == 0:
        return 0  # SQLite's empty database: a new history
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
        return 0  # a database with nothing in it yet: a new history
    if version < 1 or not _OUR_TABLES <= names:
        raise HistoryError(
            f"history {db}: is an SQLite database of another program (no printcheck "
            "schema); give another --db path"
        )
    if version > known:
        raise too_new(db, version, known)
    return version


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
