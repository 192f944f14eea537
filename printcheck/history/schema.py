"""The history's schema: named migrations, run in order, each in its own transaction.

The schema carries its version in ``PRAGMA user_version``; version ``n`` is what the
first ``n`` :data:`MIGRATIONS` make.  A database written by a newer printcheck is refused
rather than guessed at.
"""

from __future__ import annotations

import sqlite3
from dataclasses import dataclass
from pathlib import Path

from printcheck.errors import HistoryError
from printcheck.history.sqlite import now, too_new, transaction

__all__ = ["MIGRATIONS", "SCHEMA_VERSION", "Migration", "migrate"]


@dataclass(frozen=True)
class Migration:
    """One named schema change: the SQL statements that take version ``n - 1`` to ``n``."""

    name: str
    statements: tuple[str, ...]


MIGRATIONS: tuple[Migration, ...] = (
    Migration(
        "create surfaces and passes",
        (
            """CREATE TABLE surfaces (
                id INTEGER PRIMARY KEY,
                name TEXT NOT NULL UNIQUE,
                created TEXT NOT NULL
            )""",
            """CREATE TABLE passes (
                id INTEGER PRIMARY KEY,
                surface_id INTEGER NOT NULL REFERENCES surfaces(id),
                sha256 TEXT NOT NULL,
                photo TEXT NOT NULL,
                taken TEXT,
                spec TEXT,
                density REAL,
                bearing_percent REAL,
                spot_count INTEGER,
                meets INTEGER,
                recorded TEXT NOT NULL,
                result_json TEXT NOT NULL,
                UNIQUE (surface_id, sha256)
            )""",
            "CREATE INDEX passes_by_time ON passes (surface_id, taken, photo)",
            "CREATE INDEX passes_by_photo ON passes (photo)",
            "CREATE INDEX passes_by_spec ON passes (spec)",
            """CREATE TABLE migrations (
                version INTEGER PRIMARY KEY,
                name TEXT NOT NULL,
                applied TEXT NOT NULL
            )""",
        ),
    ),
    Migration(
        "keep each pass's spec targets",
        ("ALTER TABLE passes ADD COLUMN spec_json TEXT",),
    ),
    Migration(
        "stations in passes, re-measures, pass notes and surface folders",
        (
            # the folder whose batch first recorded the surface (NULL: recorded before
            # folders were kept)
            "ALTER TABLE surfaces ADD COLUMN folder TEXT",
            # the pass a photo belongs to (NULL: the photo is a pass of its own) and its
            # station within that pass (NULL: the only one)
            "ALTER TABLE passes ADD COLUMN pass_key TEXT",
            "ALTER TABLE passes ADD COLUMN station TEXT",
            # what measured it: the settings (JSON) and the method version (NULL: before
            # either was recorded, i.e. method 0)
            "ALTER TABLE passes ADD COLUMN settings TEXT",
            "ALTER TABLE passes ADD COLUMN method INTEGER",
            # when the photo was taken out of the surface's passes (kept, not deleted)
            "ALTER TABLE passes ADD COLUMN removed TEXT",
            # the time the history orders the photo by, when the batch ordered it
            # otherwise than by its own time (by name, say)
            "ALTER TABLE passes ADD COLUMN sort_time TEXT",
            """CREATE TABLE earlier_results (
                id INTEGER PRIMARY KEY,
                pass_id INTEGER NOT NULL REFERENCES passes(id),
                result_json TEXT NOT NULL,
                settings TEXT,
                method INTEGER,
                recorded TEXT NOT NULL,
                replaced TEXT NOT NULL,
                why TEXT NOT NULL
            )""",
            "CREATE INDEX earlier_by_pass ON earlier_results (pass_id)",
            """CREATE TABLE pass_notes (
                surface_id INTEGER NOT NULL REFERENCES surfaces(id),
                pass_key TEXT NOT NULL,
                note TEXT NOT NULL,
                updated TEXT NOT NULL,
                PRIMARY KEY (surface_id, pass_key)
            )""",
        ),
    ),
)

SCHEMA_VERSION = len(MIGRATIONS)


def migrate(con: sqlite3.Connection, path: Path, migrations: tuple[Migration, ...]) -> None:
    """Bring the schema up to ``len(migrations)``, one transaction per migration."""
    known = len(migrations)
    for target in range(1, known + 1):

        def step(c: sqlite3.Connection, target: int = target) -> None:
            # re-read inside the write lock: another process may have migrated meanwhile
            version = int(c.execute("PRAGMA user_version").fetchone()[0])
            if version >= target:
                return
            if version == 0:
                tables = c.execute(
                    "SELECT count(*) FROM sqlite_master WHERE name NOT LIKE 'sqlite_%'"
                ).fetchone()[0]
                if tables:
                    raise HistoryError(
                        f"history {path}: is an SQLite database of another program (no "
                        "printcheck schema); give another --db path"
                    )
            if version != target - 1:
                raise HistoryError(
                    f"history {path}: schema version {version} skipped a step; give a new --db path"
                )
            for sql in migrations[target - 1].statements:
                c.execute(sql)
            c.execute(
                "INSERT INTO migrations (version, name, applied) VALUES (?, ?, ?)",
                (target, migrations[target - 1].name, now()),
            )
            c.execute(f"PRAGMA user_version = {target:d}")

        version = int(con.execute("PRAGMA user_version").fetchone()[0])
        if version > known:
            raise too_new(path, version, known)
        if version < target:
            transaction(con, step)
