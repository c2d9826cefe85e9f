"""Where the store lives and how it is opened: path, connection, lock waits, transactions, migrations.

DuckDB lets one process write a file at a time, and while a writer holds it other processes cannot open it, so
every store function opens the file, does its work and closes it again; a lock is retried briefly and then
reported as :class:`~catalog.errors.DatabaseBusyError`.
"""

from __future__ import annotations

import contextlib
import getpass
import os
import re
import time
from collections.abc import Iterator
from datetime import datetime, timezone
from pathlib import Path

import duckdb

from catalog.errors import CatalogError, DatabaseBusyError
from catalog.store.schema import MIGRATIONS

DEFAULT_DB = "catalog.duckdb"
ENV_DB = "CATALOG_DB"
#: How long a command waits for another process to release the database before saying it is busy.
LOCK_WAIT_S = 10.0
#: DuckDB settings for every connection: the store never fetches or loads extensions behind the user's back.
OFFLINE = {"autoinstall_known_extensions": False, "autoload_known_extensions": False}


def resolve_path(db: str | os.PathLike | None) -> Path:
    """Database location: the explicit path, else ``$CATALOG_DB``, else ``catalog.duckdb`` here."""
    if db:
        return Path(db)
    return Path(os.environ.get(ENV_DB) or DEFAULT_DB)


def is_lock_error(exc: Exception) -> bool:
    text = str(exc).lower()
    return "lock" in text and ("conflicting" in text or "could not set lock" in text or "in use" in text)


def holder(exc: Exception) -> str:
    match = re.search(r"PID (\d+)", str(exc))
    return f" (process {match.group(1)})" if match else ""


@contextlib.contextmanager
def connect(db: str | os.PathLike | None = None, *, read_only: bool = False, wait: float = LOCK_WAIT_S,
            create: bool = False) -> Iterator[duckdb.DuckDBPyConnection]:
    """Open the store, apply pending migrations, and close it afterwards.

    Only ``create=True`` (an import's final write) makes a new file, so a mistyped path or a failed command never
    leaves an empty database behind. A lock held by another process is retried for ``wait`` seconds, then reported
    as busy. A read-only open of a file made by an older version first brings its schema up to date.
    """
    path = resolve_path(db)
    if not create and not path.exists():
        raise CatalogError(f"{path}: no database here yet; import a campaign first (catalog import FOLDER --db {path})")
    con = _open(path, read_only, wait)
    if read_only and _pending_migrations(con):
        # A file from an older version: bring its schema up to date once, then read as asked.
        con.close()
        with connect(path, wait=wait):
            pass
        con = _open(path, read_only, wait)
    try:
        if not read_only:
            migrate(con)
        yield con
    finally:
        con.close()


def _open(path: Path, read_only: bool, wait: float) -> duckdb.DuckDBPyConnection:
    deadline = time.monotonic() + wait
    delay = 0.05
    while True:
        try:
            return duckdb.connect(str(path), read_only=read_only, config=OFFLINE)
        except duckdb.IOException as exc:
            if not is_lock_error(exc):
                raise CatalogError(f"{path}: cannot open the database: {exc}") from exc
            if time.monotonic() >= deadline:
                raise DatabaseBusyError(
                    f"{path} is in use by another program{holder(exc)}; try again when it has finished"
                ) from exc
            time.sleep(delay)
            delay = min(delay * 2, 0.5)
        except duckdb.Error as exc:
            raise CatalogError(f"{path}: not a catalog database or damaged: {exc}") from exc


def _pending_migrations(con: duckdb.DuckDBPyConnection) -> bool:
    # fetchall, not fetchone: DuckDB 2.0 keeps a half-read result open and refuses the caller's next statement.
    done = con.execute(
        "SELECT count(*) FROM information_schema.tables WHERE table_name = 'schema_migrations'").fetchall()[0][0]
    latest = con.execute("SELECT max(version) FROM schema_migrations").fetchall()[0][0] if done else None
    return latest is None or latest < MIGRATIONS[-1][0]


def migrate(con: duckdb.DuckDBPyConnection, upto: int | None = None) -> list[int]:
    """Apply every migration not yet recorded (up to version ``upto``, if given); return the versions applied now."""
    con.execute(
        "CREATE TABLE IF NOT EXISTS schema_migrations (version INTEGER PRIMARY KEY, name VARCHAR, applied_at TIMESTAMP)"
    )
    done = {row[0] for row in con.execute("SELECT version FROM schema_migrations").fetchall()}
    applied = []
    for version, name, sql in MIGRATIONS:
        if version in done or (upto is not None and version > upto):
            continue
        with transaction(con):
            con.execute(sql)
            con.execute("INSERT INTO schema_migrations VALUES (?, ?, ?)", [version, name, now()])
        applied.append(version)
    return applied


@contextlib.contextmanager
def transaction(con: duckdb.DuckDBPyConnection) -> Iterator[None]:
    """BEGIN ... COMMIT, with an explicit ROLLBACK on any error.

    DuckDB 2.0 silently rolls back a COMMIT issued after a failed statement, so the failure must be caught and
    rolled back here rather than trusting COMMIT to report it.
    """
    con.execute("BEGIN TRANSACTION")
    try:
        yield
    except BaseException:
        con.execute("ROLLBACK")
        raise
    con.execute("COMMIT")


def now() -> datetime:
    return datetime.now(timezone.utc).replace(tzinfo=None)


def user() -> str:
    try:
        return getpass.getuser()
    except Exception:  # no login name in some containers
        return "unknown"



def first_line(exc: Exception) -> str:
    """The first line of a DuckDB message, which names the fault without the internals that follow."""
    return str(exc).strip().splitlines()[0]
