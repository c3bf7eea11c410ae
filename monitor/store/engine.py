"""Opening the database, migrating it, and checking that it is current.

SQLite (the default) is opened with WAL journaling, foreign keys on and a busy timeout; a new
database file is created with owner-only permissions (0600). PostgreSQL URLs are accepted the way
people type them (``postgresql://user@host/db`` or ``postgres://...``) and use the psycopg 3
driver. Schema changes happen only through the Alembic revisions in ``migrations/``.

Failures of the database itself (locked, disk full, read-only, cannot be opened or reached) are
turned into one :class:`~monitor.errors.DatabaseError` that says what to do, in one place: the
``handle_error`` hook every engine opened here carries (:func:`database_error`).
"""

from __future__ import annotations

import logging
import os
import sqlite3
from collections.abc import Iterable, Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

from sqlalchemy import Connection, Engine, create_engine, event, inspect, text
from sqlalchemy.engine import URL, ExceptionContext, make_url
from sqlalchemy.exc import ArgumentError, NoSuchModuleError, SQLAlchemyError

from monitor.errors import DatabaseError
from monitor.migrations import HEAD_REVISION, VERSION_TABLE

log = logging.getLogger(__name__)

SQLITE_BUSY_TIMEOUT_MS = 30_000
SQLITE_CACHE_KIB = 65_536  # page cache per connection; bulk inserts into big indexes need it
_IMMEDIATE = "fitwatch_immediate"


# URLs -------------------------------------------------------------------------------------------
def normalize_url(url: str) -> URL:
    """The SQLAlchemy URL for what a user typed; PostgreSQL URLs get the psycopg 3 driver."""
    text = url.strip()
    if not text:
        raise DatabaseError("the database URL is empty; use e.g. sqlite:///fitwatch.db")
    try:
        parsed = make_url(text)
    except ArgumentError as exc:
        raise DatabaseError(f"'{_redact_text(text)}' is not a database URL; use e.g. "
                            "sqlite:///fitwatch.db or postgresql://user@host/dbname") from exc
    backend, _, driver = parsed.drivername.partition("+")
    if backend in ("postgres", "postgresql"):
        return parsed.set(drivername="postgresql+" + (driver or "psycopg"))
    if backend != "sqlite":
        raise DatabaseError(f"unsupported database '{backend}' in "
                            f"{parsed.render_as_string(hide_password=True)}; fitwatch works "
                            "with sqlite:/// files and postgresql:// servers")
    return parsed


def describe_url(url: str | URL) -> str:
    """Where the data lives, in words and without any password."""
    parsed = url if isinstance(url, URL) else normalize_url(url)
    if parsed.get_backend_name() == "sqlite":
        path = sqlite_path(parsed)
        return f"sqlite file {path}" if path else "sqlite in memory"
    host = parsed.host or "localhost"
    where = f"{host}:{parsed.port}" if parsed.port else host
    user = f" as {parsed.username}" if parsed.username else ""
    return f"postgresql database {parsed.database or '(default)'} on {where}{user}"


def sqlite_path(url: URL) -> Path | None:
    """The absolute file path of an SQLite URL, or None for an in-memory database."""
    database = url.database
    if not database or database == ":memory:" or database.startswith("file::memory:"):
        return None
    if database.startswith("file:"):
        database = database[5:].split("?", 1)[0]
    return Path(database).expanduser().resolve()


def _redact_text(text: str) -> str:
    if "@" in text and "://" in text:
        scheme, rest = text.split("://", 1)
        creds, host = rest.rsplit("@", 1)
        return f"{scheme}://{creds.split(':', 1)[0]}:***@{host}" if ":" in creds else text
    return text


# engines ----------------------------------------------------------------------------------------
def open_engine(url: str, *, create: bool = True) -> Engine:
    """An engine for ``url``; with ``create=False`` a missing SQLite file is an error."""
    parsed = normalize_url(url)
    if parsed.get_backend_name() == "sqlite":
        engine = _sqlite_engine(parsed, create)
    else:
        try:
            engine = create_engine(parsed, pool_pre_ping=True)
        except (NoSuchModuleError, ImportError) as exc:
            raise DatabaseError(f"no driver for {describe_url(parsed)}: {exc}") from exc
    where = describe_url(parsed)

    @event.listens_for(engine, "handle_error")
    def _on_error(context: ExceptionContext) -> None:
        if context.is_pre_ping:  # the pool reconnects by itself; never stand in its way
            return
        error = database_error(context.original_exception, where)
        if error is not None:
            raise error from context.original_exception

    return engine


def _sqlite_engine(url: URL, create: bool) -> Engine:
    path = sqlite_path(url)
    if path is not None:
        if not create and not path.exists():
            raise DatabaseError(f"no database at {path}; run 'fitwatch init' first")
        if not path.parent.is_dir():
            raise DatabaseError(f"cannot create the database {path}: folder {path.parent} "
                                "does not exist")
        if path.is_dir():
            raise DatabaseError(f"the database path {path} is a folder, not a file")
        if not path.exists():
            if not create:
                raise DatabaseError(f"no database at {path}; run 'fitwatch init' first")
            try:  # owner-only before SQLite ever opens it; SQLite gives -wal/-shm the same mode
                os.close(os.open(path, os.O_CREAT | os.O_EXCL | os.O_WRONLY, 0o600))
            except FileExistsError:
                pass
            except OSError as exc:
                raise DatabaseError(f"cannot create the database {path}: {exc.strerror}") \
                    from exc
        # a URI (``file:...?mode=ro&uri=true``) must stay one, or its options name a new file
        uri = str(url.query.get("uri", "")).lower() in ("true", "1")
        url = url.set(database=f"file:{path}" if uri else str(path))
    engine = create_engine(url)

    @event.listens_for(engine, "connect")
    def _on_connect(dbapi_connection: Any, _record: Any) -> None:
        # Let SQLAlchemy, not the sqlite3 module, decide where transactions begin (the
        # documented recipe for correct SAVEPOINT and transactional DDL support).
        dbapi_connection.isolation_level = None
        cursor = dbapi_connection.cursor()
        cursor.execute("PRAGMA foreign_keys = ON")
        cursor.execute(f"PRAGMA busy_timeout = {SQLITE_BUSY_TIMEOUT_MS}")
        cursor.execute(f"PRAGMA cache_size = -{SQLITE_CACHE_KIB}")
        if path is not None:
            cursor.execute("PRAGMA journal_mode = WAL")
        cursor.close()

    @event.listens_for(engine, "begin")
    def _on_begin(conn: Connection) -> None:
        immediate = conn.get_execution_options().get(_IMMEDIATE, False)
        conn.exec_driver_sql("BEGIN IMMEDIATE" if immediate else "BEGIN")

    return engine


@contextmanager
def write_transaction(engine: Engine, *, foreign_keys: bool = True,
                      snapshot: bool = False) -> Iterator[Connection]:
    """A connection in a transaction meant to write; committed on success, rolled back on error.

    On SQLite the transaction takes the write lock at once (``BEGIN IMMEDIATE``), so two
    writers queue on the busy timeout instead of failing when one upgrades a read lock; every
    read in it sees one state of the database. ``snapshot=True`` gives PostgreSQL the same:
    REPEATABLE READ, so all statements read the snapshot of the first one (under the default
    READ COMMITTED, each statement sees what committed before it began).
    ``foreign_keys=False`` skips SQLite's per-row reference checks for bulk writes whose
    parents the caller has verified inside the transaction (the write lock keeps them there).
    """
    with engine.connect() as conn:
        conn.execution_options(**{_IMMEDIATE: True})
        if snapshot and conn.dialect.name == "postgresql":
            conn.execution_options(isolation_level="REPEATABLE READ")
        relax = not foreign_keys and conn.dialect.name == "sqlite"
        if relax:
            driver_connection(conn).execute("PRAGMA foreign_keys = OFF")
        try:
            with conn.begin():
                yield conn
        finally:
            if relax:
                driver_connection(conn).execute("PRAGMA foreign_keys = ON")


def driver_connection(conn: Connection) -> Any:
    """The driver's own connection under ``conn`` (for PRAGMAs outside a transaction)."""
    driver = conn.connection.driver_connection
    assert driver is not None, "the connection was closed"
    return driver


@contextmanager
def driver_cursor(conn: Connection) -> Iterator[Any]:
    """The driver's own cursor, for bulk paths that bypass SQLAlchemy; closed afterwards.

    A failure of the database itself becomes the same :class:`DatabaseError` as on any other
    path (the ``handle_error`` hook does not see this cursor).
    """
    cursor = driver_connection(conn).cursor()
    try:
        yield cursor
    except Exception as exc:
        error = database_error(exc, describe_url(conn.engine.url))
        if error is None:
            raise
        raise error from exc
    finally:
        cursor.close()


def warn_if_shared(engine: Engine) -> None:
    """Log a warning when the SQLite database file can be read or written by other users.

    fitwatch creates the file owner-only (0600); a file that existed before, or was copied,
    keeps its mode, and the database holds the observations and the audit log. Not changed
    behind the user's back: a group may share it on purpose.
    """
    path = sqlite_path(engine.url) if engine.dialect.name == "sqlite" else None
    if path is None:
        return
    try:
        mode = path.stat().st_mode & 0o777
    except OSError:
        return
    if mode & 0o077:
        log.warning("the database file %s can be read by other users (mode %04o); unless that "
                    "is intended, make it owner-only: chmod 600 %s", path, mode, path)


# the schema revision ---------------------------------------------------------------------------
def current_revision(engine: Engine) -> str | None:
    """The revision the database is at (None when it has never been initialised).

    Read with plain SQL from Alembic's version table, so that commands which only read never
    load Alembic (:mod:`monitor.store.migrate` does everything else about revisions).
    """
    try:
        with engine.connect() as conn:
            if not inspect(conn).has_table(VERSION_TABLE):
                return None
            heads = conn.execute(text(f"SELECT version_num FROM {VERSION_TABLE}")).scalars().all()
    except SQLAlchemyError as exc:
        raise db_error(engine, exc) from exc
    if len(heads) > 1:
        raise DatabaseError(f"the database ({describe_url(engine.url)}) records several schema "
                            f"revisions ({', '.join(sorted(heads))}); fitwatch keeps one line of "
                            "revisions: restore it from a backup")
    return heads[0] if heads else None


def require_current(engine: Engine) -> None:
    """Raise :class:`DatabaseError` unless the schema is at the revision this program needs."""
    if current_revision(engine) == HEAD_REVISION:
        return
    from monitor.store.migrate import explain_not_current  # Alembic only when there is news

    raise explain_not_current(engine)


# database failures ----------------------------------------------------------------------------
_SQLITE_LOCKED = {sqlite3.SQLITE_BUSY, sqlite3.SQLITE_LOCKED}
_SQLITE_CANNOT_OPEN = {sqlite3.SQLITE_CANTOPEN, sqlite3.SQLITE_PERM}
_SQLITE_DAMAGED = {sqlite3.SQLITE_CORRUPT, sqlite3.SQLITE_NOTADB}
_PG_DISK_FULL = "53100"  # PostgreSQL's SQLSTATE disk_full
_PG_READ_ONLY = "25006"  # read_only_sql_transaction (a standby, or a read-only default)
_PG_UNREACHABLE = ("08", "57P", "53300")  # connection exceptions, shutdown, too many connections


def database_error(exc: BaseException, where: str) -> DatabaseError | None:
    """The :class:`DatabaseError` for a driver error that is about the database itself (locked,
    full, read-only, damaged, unreachable), naming it and saying what to do; None for the rest
    (a constraint, a bad statement: those are the caller's to handle or a bug)."""
    first = _first_line(exc)
    if isinstance(exc, sqlite3.Error) and not isinstance(exc, sqlite3.IntegrityError):
        code = getattr(exc, "sqlite_errorcode", -1) & 0xFF  # the primary code of an extended one
        if code in _SQLITE_LOCKED:
            return DatabaseError(
                f"the database ({where}) is locked by another process (another fitwatch "
                "command, the daemon, or a program holding it open; fitwatch waits up to "
                f"{SQLITE_BUSY_TIMEOUT_MS / 1000:g} s); run the command again when it is done")
        if code == sqlite3.SQLITE_READONLY:
            return DatabaseError(
                f"the database ({where}) is read-only ({first}); fitwatch needs to write to it: "
                "give the user running fitwatch write access to the file and its folder (SQLite "
                "keeps -wal and -shm files beside it) and do not open it with mode=ro")
        if code == sqlite3.SQLITE_FULL:
            return _disk_full(where)
        if code in _SQLITE_CANNOT_OPEN:
            return DatabaseError(
                f"cannot open the database ({where}): {first}; check that the file and its "
                "folder exist and that the user running fitwatch may read and write them")
        if code == sqlite3.SQLITE_IOERR:
            return DatabaseError(
                f"the database ({where}) could not be read or written ({first}); check the "
                "disk and the file system, then run the command again")
        if code in _SQLITE_DAMAGED:
            return DatabaseError(
                f"the database ({where}) is damaged or not an SQLite database ({first}); "
                "restore it from a backup, or point --db at the right file")
        return None
    import psycopg  # here, not at the top: SQLite users never load the PostgreSQL driver

    if isinstance(exc, psycopg.Error):
        state = exc.sqlstate or ""
        if state == _PG_DISK_FULL:
            return _disk_full(where)
        if state == _PG_READ_ONLY:
            return DatabaseError(
                f"the database ({where}) is read-only ({first}); connect to the primary server "
                "as a user that may write")
        if isinstance(exc, psycopg.OperationalError) and (
                not state or state.startswith(_PG_UNREACHABLE)):  # no SQLSTATE: no server
            return DatabaseError(
                f"cannot reach the database ({where}): {first}; check that the server is "
                "running and that the URL's host, port, user and database name are right")
    return None


def _disk_full(where: str) -> DatabaseError:
    return DatabaseError(f"the disk holding the database ({where}) is full; the interrupted "
                         "write was rolled back: free some space, then run the command again")


def _first_line(exc: BaseException) -> str:
    text = str(exc).strip()
    return text.splitlines()[0] if text else type(exc).__name__


def db_error(engine: Engine, exc: SQLAlchemyError) -> DatabaseError:
    cause = getattr(exc, "orig", None) or exc
    return DatabaseError(f"database error ({describe_url(engine.url)}): {_first_line(cause)}")


IN_CHUNK = 5000  # ids per IN list: well inside SQLite's and PostgreSQL's parameter limits


def id_chunks(ids: Iterable[int]) -> Iterator[list[int]]:
    """The distinct ``ids``, sorted, in lists of at most :data:`IN_CHUNK` (an IN list each)."""
    wanted = sorted(set(ids))
    for i in range(0, len(wanted), IN_CHUNK):
        yield wanted[i:i + IN_CHUNK]
