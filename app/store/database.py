"""Opening the portfolio database, and the pieces every store module shares.

One SQLite file holds a portfolio. Every connection is made by :func:`open_database`, which
turns on write-ahead logging (readers never block the writer, so the dashboard stays usable
during an analysis run), a busy timeout (a second writer waits instead of failing at once),
and foreign keys, then applies any pending schema migrations, so a user who upgrades Lagdesk
never runs a manual step.

The first time a process opens a file, SQLite's ``PRAGMA quick_check`` reads all of it, so a
damaged file is reported in one line naming it when a command or the server starts, not as
the odd error of whichever request reaches a damaged page first. Later connections of the same
process (one per request in the server) skip it: it reads the whole file (about 0.25 s for
2,000 series x 1,000 points, measured here).
"""

from __future__ import annotations

import os
import sqlite3
from collections.abc import Iterator
from contextlib import contextmanager
from datetime import UTC, datetime
from pathlib import Path

import sqlite_utils

from app.core.errors import LagdeskError
from app.store.migrations import MIGRATIONS, STEPS

DEFAULT_DB_NAME = "lagdesk.db"
DB_ENV_VAR = "LAGDESK_DB"
BUSY_TIMEOUT_S = 10
# What SQLite says of a file whose pages are damaged (SQLITE_CORRUPT). A file that is not
# SQLite at all ("file is not a database") is told apart: it was never a portfolio.
DAMAGE_WORDS = ("malformed", "corrupt")
RECOVERY_HINT = "restore it from a backup (sqlite3's .recover command can save what is still readable)"

# Files this process has found sound, by (device, inode): a replaced file is checked again.
_checked_files: set[tuple[int, int]] = set()


class UnknownSeries(LagdeskError):
    """A series id that the database does not hold."""

    http_status = 404

    def __init__(self, series_id: str, because: str | None = None) -> None:
        self.series_id = series_id
        super().__init__(f"no series {series_id!r} in the database" + (f": {because}" if because else ""))


class StorageUnavailable(LagdeskError):
    """The database exists but cannot be written here (read-only file or folder)."""

    http_status = 503


class DamagedDatabase(LagdeskError):
    """The database file has damaged pages (``PRAGMA quick_check`` finds problems)."""

    http_status = 503


def insert_row(db: sqlite_utils.Database, table: str, row: dict) -> int:
    """Insert ``row`` into ``table`` and return the rowid SQLite gave it."""
    pk = db.table(table).insert(row).last_pk
    if pk is None:
        raise sqlite3.DatabaseError(f"the insert into {table} returned no row id")
    return int(pk)


def resolve_db_path(explicit: str | None) -> Path:
    """The database file to use: ``--db``, else ``$LAGDESK_DB``, else ``./lagdesk.db``."""
    if explicit:
        return Path(explicit)
    from_env = os.environ.get(DB_ENV_VAR)
    if from_env:
        return Path(from_env)
    return Path.cwd() / DEFAULT_DB_NAME


def open_database(path: str | Path) -> sqlite_utils.Database:
    """Open (creating if needed) the database at ``path`` and bring its schema up to date.

    Raises
    ------
    LagdeskError
        When the folder does not exist, the file is not a SQLite database, or it was
        written by a newer Lagdesk whose schema this version does not know.
    """
    path = Path(path)
    if not path.parent.is_dir():
        raise LagdeskError(f"{path}: the folder {str(path.parent)!r} does not exist")
    # check_same_thread=False: FastAPI runs a request's dependencies and its endpoint in
    # worker threads that may differ; the connection is still used by one thread at a time.
    try:
        conn = sqlite3.connect(path, timeout=BUSY_TIMEOUT_S, check_same_thread=False)
    except sqlite3.Error as exc:
        raise LagdeskError(f"{path}: cannot be opened ({exc})") from None
    # No sqlite-utils plugins: whatever happens to be installed beside Lagdesk must not change
    # its connection (their discovery also costs a scan of every installed package).
    db = sqlite_utils.Database(conn, execute_plugins=False)
    try:
        db.execute(f"PRAGMA busy_timeout = {BUSY_TIMEOUT_S * 1000}")
        db.execute("PRAGMA foreign_keys = ON")
        db.enable_wal()
        _check_once(db, path)
        _migrate(db, path)
    except sqlite3.DatabaseError as exc:
        db.close()
        if is_damage(exc):
            raise DamagedDatabase(damage_text(exc, path)) from None
        if not os.access(path.parent, os.W_OK) or (path.exists() and not os.access(path, os.W_OK)):
            raise StorageUnavailable(
                f"{path}: the database file (or its folder) is read-only; Lagdesk keeps its journal "
                f"beside the file and needs to write there ({exc})"
            ) from None
        raise LagdeskError(f"{path}: cannot be used as a Lagdesk database ({exc})") from None
    except BaseException:
        db.close()
        raise
    return db


def _check_once(db: sqlite_utils.Database, path: Path) -> None:
    """``PRAGMA quick_check`` the first time this process opens the file (see the module notes).

    Raises
    ------
    DamagedDatabase
        When SQLite finds damage, naming the file and the first problem.
    """
    stat = path.stat()
    key = (stat.st_dev, stat.st_ino)
    if key in _checked_files:
        return
    problems = [row[0] for row in db.execute("PRAGMA quick_check").fetchall()]  # may raise: see open_database
    if problems != ["ok"]:
        raise DamagedDatabase(damage_text(problems[0], path))
    _checked_files.add(key)


def is_damage(exc: sqlite3.Error) -> bool:
    """Whether SQLite reports damaged pages."""
    return any(word in str(exc).lower() for word in DAMAGE_WORDS)


def damage_text(problem: sqlite3.Error | str, path: str | Path | None = None) -> str:
    """One line saying the file is damaged, with SQLite's first problem and what to do."""
    where = f"{path}: " if path is not None else ""
    detail = " ".join(str(problem).split())  # quick_check's report may span lines
    return f"{where}the database file is damaged ({detail}); {RECOVERY_HINT}"


def _migrate(db: sqlite_utils.Database, path: Path) -> None:
    known = {step.__name__ for step in STEPS}
    newer = [m.name for m in MIGRATIONS.applied(db) if m.name not in known]
    if newer:
        raise LagdeskError(
            f"{path}: written by a newer Lagdesk (schema steps {', '.join(newer)} are unknown to this "
            "version); upgrade Lagdesk to open it"
        )
    if MIGRATIONS.pending(db):
        # Under the write lock, so two processes opening a new file at once migrate it in turn;
        # apply() re-reads what is pending once it holds the lock.
        with write_transaction(db):
            MIGRATIONS.apply(db)


def schema_version(db: sqlite_utils.Database) -> int:
    """How many schema migrations the database has had (0 for an empty file)."""
    return len(MIGRATIONS.applied(db))


@contextmanager
def write_transaction(db: sqlite_utils.Database) -> Iterator[sqlite_utils.Database]:
    """Group writes in one transaction that takes the write lock at its start.

    ``BEGIN IMMEDIATE`` rather than a deferred ``BEGIN``: a transaction that reads before it
    writes would otherwise fail at once (without waiting out the busy timeout) when another
    connection commits in between. Inside an open transaction this is a savepoint
    (``db.atomic()``), so store functions compose: a caller may wrap several of them.
    """
    if db.conn.in_transaction:
        with db.atomic():
            yield db
        return
    with db.conn:  # commits on success, rolls back on any exception
        db.conn.execute("BEGIN IMMEDIATE")
        yield db


def prefix_match(column: str, prefix: str | None) -> tuple[str, list]:
    """The SQL condition that ``column`` (a series id) starts with ``prefix``, and its parameters;
    a condition every row meets when there is no prefix. substr, not LIKE: an id may hold % or
    _, and a prefix is matched exactly (case too)."""
    if not prefix:
        return "1", []
    return f"substr({column}, 1, ?) = ?", [len(prefix), prefix]


def require_series(db: sqlite_utils.Database, series_id: str) -> None:
    """Raise :class:`UnknownSeries` unless the database holds ``series_id``."""
    if db.execute("SELECT 1 FROM series WHERE series_id = ?", [series_id]).fetchone() is None:
        raise UnknownSeries(series_id)


def storage_error_text(exc: sqlite3.Error, path: str | Path | None = None, writing: bool = True) -> str:
    """One line on a database failure for a person: what happened and, for a write, that nothing
    half-done was kept (every write happens in a transaction, which SQLite rolls back on failure).
    ``writing`` False: the failure came while only reading."""
    if is_damage(exc):
        return damage_text(exc, path)
    detail = str(exc).strip() or type(exc).__name__
    lowered = detail.lower()
    where = f"{path}: " if path is not None else ""
    if "full" in lowered:
        cause = "the disk is full"
    elif "readonly" in lowered or "read-only" in lowered:
        cause = "the database file (or its folder) is read-only"
    elif "locked" in lowered or "busy" in lowered:
        cause = f"another process kept the database busy for more than {BUSY_TIMEOUT_S} s"
    else:
        cause = "the database could not be written" if writing else "the database could not be read"
    if not writing:
        return f"{where}{cause} ({detail})"
    return f"{where}{cause} ({detail}); the change was rolled back, the database is as it was before"


def utc_now() -> str:
    """The current time as an ISO-8601 UTC string with milliseconds."""
    return datetime.now(UTC).isoformat(timespec="milliseconds")
