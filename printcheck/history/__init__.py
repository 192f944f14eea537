"""History: the SQLite store of surfaces, their passes and each pass's result.

This is the only package that touches SQLite.  A *pass* is one photo's result recorded
for one surface; a photo is identified by the SHA-256 of its bytes, so recording the same
photo for the same surface twice stores it once (re-running a batch records nothing twice).

Data safety
-----------
- A file that is not a printcheck history (another program's database, a history of a
  newer printcheck, not a database at all) is refused before anything could write to it:
  its schema is first read through a read-only connection, so it comes out byte for byte
  as it went in.
- The database runs in WAL mode with ``synchronous=FULL``: a committed pass survives a crash
  of the program (and of the machine), and readers never block the writer.
- Each pass is written in ONE transaction (``BEGIN IMMEDIATE`` ... ``COMMIT``), so a
  SIGKILL or Ctrl-C at any moment leaves only whole passes.
- Two runs may write at once: SQLite's busy timeout waits for the other writer, and a retry
  loop on "database is locked" bounds the total wait (``max_wait_s``).
- The schema carries its version in ``PRAGMA user_version``; schema changes are the named
  migrations in :data:`MIGRATIONS`, run in order, each in its own transaction.  A database
  written by a newer printcheck is refused rather than guessed at.

Each pass is stored as its result JSON (``printcheck-result/1``, docs/formats.md) and read
back as a typed :class:`printcheck.records.StoredPass`.  Every failure is a
:class:`printcheck.errors.HistoryError` with a one-line message naming the file and what
to do.

The package: :mod:`.store` (the :class:`History` API), :mod:`.schema` (the migrations)
and :mod:`.sqlite` (connecting, transactions, waiting out locks, errors).
"""

from printcheck.history.schema import MIGRATIONS, SCHEMA_VERSION, Migration
from printcheck.history.sqlite import ENV_VAR
from printcheck.history.store import History, default_db_path, open_history

__all__ = [
    "ENV_VAR",
    "MIGRATIONS",
    "SCHEMA_VERSION",
    "Migration",
    "History",
    "default_db_path",
    "open_history",
]
