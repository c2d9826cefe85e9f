"""Where the store lives and how it is opened: path, connection, lock waits, transactions, migrations.

DuckDB lets one process write a file at a time, and while a writer holds it other processes cannot open it, so
every store function opens the file, does its work and closes it again (or works on a connection its caller
opened for a whole command, see :func:`session`); a lock is retried briefly and then reported as
:class:`~catalog.errors.DatabaseBusyError`.
"""

from __future__ import annotations

import contextlib
import getpass
import os
import re
import shutil
import tempfile
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


#: Memory a scratch (staging) database may use before spilling to disk; DuckDB's own accounting, so the process
#: adds its Python and library footprint on top.
SCRATCH_MEMORY = "256MB"


#: What a store function reads from: a database path (None: the default) or a connection already open on one.
Store = str | os.PathLike | duckdb.DuckDBPyConnection | None

#: Names DuckDB opens as something other than a local file (in-memory, remote, extension-backed databases).
#: (A one-letter prefix is a Windows drive, and stays a file.)
_NOT_A_FILE = re.compile(r"^(:|[a-z][a-z0-9+.-]+:)", re.IGNORECASE)
#: Words of an operating-system refusal to write, as DuckDB passes it on.
_READ_ONLY_WORDS = ("permission denied", "operation not permitted", "read-only file system")
#: Characters DuckDB's file readers take as a glob pattern.
_GLOB = re.compile(r"[*?\[\]{}]")
#: Prefix of a scratch database's spill folder in the temporary folder, followed by the process id.
_SCRATCH = "catalog-scratch-"
#: Suffix of the side file a restore builds (with its process id), removed when that process is gone.
RESTORING = ".restoring-"


class ReadOnlyDatabase(CatalogError):
    """The database file (or its folder) cannot be written: it can be read, not changed or cached into."""


def resolve_path(db: str | os.PathLike | None) -> Path:
    """Database location: the explicit path, else ``$CATALOG_DB``, else ``catalog.duckdb`` here.

    Raises
    ------
    CatalogError
        A name DuckDB would open as an in-memory or remote database (``:memory:``, ``md:...``, ``s3://...``): the
        store is always a file, so such a name would silently lose an import.
    """
    text = os.fspath(db) if db else (os.environ.get(ENV_DB) or DEFAULT_DB)
    if _NOT_A_FILE.match(str(text)):
        raise CatalogError(f"'{text}' is not a database file; give a file path, e.g. --db campaign.duckdb")
    return Path(text)


def is_lock_error(exc: Exception) -> bool:
    text = str(exc).lower()
    return "lock" in text and ("conflicting" in text or "could not set lock" in text or "in use" in text)


def is_read_only_error(exc: Exception) -> bool:
    text = str(exc).lower()
    return any(words in text for words in _READ_ONLY_WORDS)


def holder(exc: Exception) -> str:
    match = re.search(r"PID (\d+)", str(exc))
    return f" (process {match.group(1)})" if match else ""


@contextlib.contextmanager
def connect(db: str | os.PathLike | None = None, *, read_only: bool = False, wait: float = LOCK_WAIT_S,
            create: bool = False) -> Iterator[duckdb.DuckDBPyConnection]:
    """Open the store, apply pending migrations, and close it afterwards.

    Only ``create=True`` (an import's final write) makes a new file, so a mistyped path or a failed command never
    leaves an empty database behind. A lock held by another process is retried for ``wait`` seconds, then reported
    as busy. A read-only open of a file made by an older version first brings its schema up to date. A file made
    by a newer version, or a DuckDB file that is not a catalog, is refused before anything is written to it; a
    damaged or truncated file gives a plain :class:`~catalog.errors.CatalogError` whenever DuckDB trips on it.

    Raises
    ------
    ReadOnlyDatabase
        A write (or the schema upgrade a read needs) on a file or folder that cannot be written.
    """
    path = resolve_path(db)
    if not create and not path.exists():
        raise CatalogError(f"{path}: no database here yet; import a campaign first (catalog import FOLDER --db {path})")
    remove_stale_restores(path)
    con = _open(path, read_only, wait)
    try:
        with _store_errors(path):
            if read_only and _schema_version(con, path) != MIGRATIONS[-1][0]:
                # A file from an older version: bring its schema up to date once, then read as asked.
                con.close()
                try:
                    with connect(path, wait=wait):
                        pass
                except ReadOnlyDatabase:
                    raise ReadOnlyDatabase(f"{path} was made by an older version and is read-only, so its schema "
                                           "cannot be brought up to date; copy it to a folder you can write and use "
                                           "the copy") from None
                con = _open(path, read_only, wait)
            elif not read_only:
                _schema_version(con, path)
                migrate(con)
            yield con
    finally:
        con.close()


@contextlib.contextmanager
def attached(con: duckdb.DuckDBPyConnection, db: str | os.PathLike, *, wait: float = LOCK_WAIT_S) -> Iterator[None]:
    """The store at ``db`` attached to ``con`` (an in-memory database, e.g. :func:`scratch_database`) as ``store``
    for a write, its schema up to date; detached after.

    What ``connect(db, create=True)`` does (the file made on a first import, a lock waited for, newer and foreign
    files refused, pending migrations applied), through the caller's connection: a scratch database that writes
    into the store this way opens no second DuckDB instance (~30 ms with its close).
    """
    path = resolve_path(db)
    remove_stale_restores(path)
    _retried(path, False, wait, lambda: con.execute("ATTACH ? AS store", [str(path)]))
    try:
        with _store_errors(path):
            con.execute("USE store")  # the migrations name their tables unqualified
            try:
                _schema_version(con, path)
                migrate(con)
            finally:
                con.execute("USE memory")
            yield
    finally:
        con.execute("DETACH store")


@contextlib.contextmanager
def _store_errors(path: Path) -> Iterator[None]:
    """DuckDB's refusals while working on the store at ``path``, as messages a user can act on."""
    try:
        yield
    except duckdb.Error as exc:
        if is_read_only_error(exc):
            raise ReadOnlyDatabase(f"{path} cannot be written ({first_line(exc)}); nothing was changed") from exc
        if isinstance(exc, duckdb.IOException):
            raise CatalogError(f"{path}: cannot be read or written ({first_line(exc)}); if the file is damaged, "
                               "restore it from a backup (catalog restore)") from exc
        raise


@contextlib.contextmanager
def session(db: Store = None, *, read_only: bool = True) -> Iterator[duckdb.DuckDBPyConnection]:
    """A connection for one block: ``db`` itself when it is already open, else the store at ``db`` opened for it.

    Store functions take either, so a command opens the file once and passes the connection to every read it
    makes (each open costs ~20 ms: the file, its catalog and the schema check), and a lone call still just works.
    """
    if isinstance(db, duckdb.DuckDBPyConnection):
        yield db
        return
    with connect(db, read_only=read_only) as con:
        yield con


def open_duckdb(database: str = ":memory:", read_only: bool = False, **settings: str) -> duckdb.DuckDBPyConnection:
    """A DuckDB connection with the store's settings: no extension downloads, no progress bar on the terminal.

    ``settings`` are further DuckDB configuration options (e.g. ``memory_limit``, ``temp_directory``).
    """
    con = duckdb.connect(database, read_only=read_only, config={**OFFLINE, **settings})
    con.execute("SET enable_progress_bar = false")  # a session setting: DuckDB refuses it in the connect config
    return con


@contextlib.contextmanager
def scratch_database(memory_limit: str = SCRATCH_MEMORY) -> Iterator[duckdb.DuckDBPyConnection]:
    """An in-memory DuckDB database that spills to a private temporary folder beyond ``memory_limit``.

    Without a limit DuckDB holds everything staged in memory, so an import's peak grew with the campaign
    (10^5 trials x 200 points: 2.4 GB resident); with it, the peak is bounded and the rest goes to disk.
    The folder is removed on the way out, whatever happened; the folders of killed processes (named with their
    process id) are removed by the next scratch database, so no spilled data lingers on disk.
    """
    _remove_stale_scratch()
    with tempfile.TemporaryDirectory(prefix=f"{_SCRATCH}{os.getpid()}-") as folder:
        con = open_duckdb(memory_limit=memory_limit, temp_directory=folder)
        try:
            yield con
        finally:
            con.close()


def _remove_stale_scratch() -> None:
    root = Path(tempfile.gettempdir())
    for folder in root.glob(f"{_SCRATCH}*-*"):
        pid = folder.name[len(_SCRATCH):].split("-", 1)[0]
        if pid.isdigit() and not _alive(int(pid)):
            shutil.rmtree(folder, ignore_errors=True)


def _open(path: Path, read_only: bool, wait: float) -> duckdb.DuckDBPyConnection:
    return _retried(path, read_only, wait, lambda: open_duckdb(str(path), read_only))


def _retried(path: Path, read_only: bool, wait: float, how):
    """``how()`` (an open or an attach of ``path``), retried while another process holds the file, for ``wait`` s."""
    deadline = time.monotonic() + wait
    delay = 0.05
    while True:
        try:
            return how()
        except duckdb.IOException as exc:
            if not read_only and is_read_only_error(exc):
                raise ReadOnlyDatabase(f"{path} is read-only here ({first_line(exc)}); it can be ranked and "
                                       "reported, not changed") from exc
            if not is_lock_error(exc):
                raise CatalogError(f"{path}: cannot open the database: {first_line(exc)}") from exc
            if time.monotonic() >= deadline:
                raise DatabaseBusyError(
                    f"{path} is in use by another program{holder(exc)}; try again when it has finished"
                ) from exc
            time.sleep(delay)
            delay = min(delay * 2, 0.5)
        except duckdb.Error as exc:
            raise CatalogError(f"{path}: not a catalog database or damaged: {first_line(exc)}") from exc


def _schema_version(con: duckdb.DuckDBPyConnection, path: Path) -> int | None:
    """The file's schema version (None for a new, empty file); refuses newer versions and foreign DuckDB files."""
    # fetchall, not fetchone: DuckDB 2.0 keeps a half-read result open and refuses the caller's next statement.
    tables = {r[0] for r in con.execute(
        "SELECT table_name FROM information_schema.tables WHERE table_catalog = current_database() "
        "AND table_schema = 'main'").fetchall()}
    if "schema_migrations" not in tables:
        if tables:
            raise CatalogError(f"{path}: a DuckDB file, but not a catalog database (it has no schema_migrations "
                               "table); give the path of a catalog database or a new file")
        return None
    latest = con.execute("SELECT max(version) FROM schema_migrations").fetchall()[0][0]
    known = MIGRATIONS[-1][0]
    if latest is not None and latest > known:
        raise CatalogError(f"{path}: made by a newer catalog (schema version {latest}; this version knows up to "
                           f"{known}); upgrade catalog to use it. Nothing was changed")
    return latest


def remove_stale_restores(path: Path) -> None:
    """Delete side files of restores into ``path`` whose process is gone (killed), so none lingers on disk."""
    folder, prefix = path.parent, path.name + RESTORING
    try:
        names = [n for n in os.listdir(folder or ".") if n.startswith(prefix)]
    except OSError:
        return
    for name in names:
        pid = name[len(prefix):].removesuffix(".wal")
        if pid.isdigit() and not _alive(int(pid)):
            (folder / name).unlink(missing_ok=True)


def _alive(pid: int) -> bool:
    if pid == os.getpid():
        return True
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True  # another user's process
    return True


def migrate(con: duckdb.DuckDBPyConnection, upto: int | None = None) -> list[int]:
    """Apply every migration not yet recorded (up to version ``upto``, if given); return the versions applied now.

    The pending migrations go in one transaction: a file is never left between two versions, and a new file's
    schema costs one commit instead of one per migration (~15 ms less on a first import).
    """
    con.execute(
        "CREATE TABLE IF NOT EXISTS schema_migrations (version INTEGER PRIMARY KEY, name VARCHAR, applied_at TIMESTAMP)"
    )
    done = {row[0] for row in con.execute("SELECT version FROM schema_migrations").fetchall()}
    pending = [m for m in MIGRATIONS if m[0] not in done and (upto is None or m[0] <= upto)]
    if pending:
        with transaction(con):
            for version, name, sql in pending:
                con.execute(sql)
                con.execute("INSERT INTO schema_migrations VALUES (?, ?, ?)", [version, name, now()])
    return [version for version, _, _ in pending]


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


@contextlib.contextmanager
def literal_path(path: Path) -> Iterator[str]:
    """A name for ``path`` that DuckDB's file readers take literally.

    DuckDB reads ``*``, ``?`` and ``[...]`` in a path as a glob pattern, so a folder named ``*`` would read every
    sibling folder's file. Such a path is reached through a symbolic link in a fresh temporary folder instead.
    """
    if not _GLOB.search(str(path)):
        yield str(path)
        return
    with tempfile.TemporaryDirectory(prefix="catalog-") as folder:
        link = Path(folder) / ("file" + path.suffix)
        link.symlink_to(path.resolve())
        yield str(link)

