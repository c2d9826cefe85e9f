"""Backup to a folder of Parquet files with a manifest, and restore from one into a database file."""

from __future__ import annotations

import json
import os
import re
from pathlib import Path

import duckdb

from catalog.errors import CatalogError, DatabaseBusyError
from catalog.store.db import (
    RESTORING,
    connect,
    first_line,
    literal_path,
    migrate,
    now,
    open_duckdb,
    remove_stale_restores,
    resolve_path,
    transaction,
)
from catalog.store.schema import MIGRATIONS

BACKUP_MANIFEST = "catalog-backup.json"
BACKUP_FORMAT = 1
_IDENTIFIER = re.compile(r"^[a-z_][a-z0-9_]*$")


def _all_tables(con) -> list[str]:
    names = [r[0] for r in con.execute(
        "SELECT table_name FROM information_schema.tables WHERE table_schema = 'main' AND table_type = 'BASE TABLE' "
        "ORDER BY table_name").fetchall()]
    # Table names go into SQL text, so only plain lower-case identifiers are accepted.
    odd = [n for n in names if not _IDENTIFIER.match(n)]
    if odd:
        raise CatalogError(f"unexpected table names in the database: {', '.join(map(repr, odd))}")
    return names


def backup(db: str | os.PathLike | None, directory: str | os.PathLike) -> dict:
    """Write a consistent copy of every table as Parquet into a new folder, with a manifest written last.

    All tables are read in one transaction, so the copy is one moment of the store even if a writer is waiting.
    The manifest (``catalog-backup.json``) holds the format, the catalog version, the time (UTC), the migrations and
    every table's row count; a folder without it is an unfinished backup and :func:`restore` refuses it.

    Returns
    -------
    dict
        The manifest.
    """
    out = Path(directory)
    if out.exists() and (not out.is_dir() or any(out.iterdir())):
        raise CatalogError(f"{out}: not an empty folder; choose a new folder for the backup")
    path = resolve_path(db)
    with connect(path, read_only=True) as con, transaction(con):
        out.mkdir(parents=True, exist_ok=True)
        counts = {}
        for name in _all_tables(con):
            # Writing takes the path literally; only DuckDB's readers expand glob characters.
            con.execute(f"COPY (SELECT * FROM {name}) TO ? (FORMAT parquet)", [str(out / f"{name}.parquet")])
            counts[name] = int(con.execute(f"SELECT count(*) FROM {name}").fetchone()[0])
        migrations = [r[0] for r in con.execute("SELECT version FROM schema_migrations ORDER BY version").fetchall()]
    from catalog import __version__  # deferred: the version lookup is start-up cost for every other command

    manifest = {"format": BACKUP_FORMAT, "catalog_version": __version__, "created_at": now().isoformat(),
                "source": str(path), "migrations": migrations, "tables": counts}
    partial = out / (BACKUP_MANIFEST + ".partial")
    partial.write_text(json.dumps(manifest, indent=2), encoding="utf-8")
    os.replace(partial, out / BACKUP_MANIFEST)
    return manifest


def _read_manifest(folder: Path) -> dict:
    try:
        manifest = json.loads((folder / BACKUP_MANIFEST).read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise CatalogError(f"{folder}: no {BACKUP_MANIFEST}; not a backup, or an unfinished one") from None
    except (OSError, ValueError) as exc:
        raise CatalogError(f"{folder / BACKUP_MANIFEST}: cannot be read: {exc}") from exc
    if not isinstance(manifest, dict) or manifest.get("format") != BACKUP_FORMAT:
        raise CatalogError(f"{folder / BACKUP_MANIFEST}: not a backup format this version reads")
    known = {version for version, _, _ in MIGRATIONS}
    versions = manifest.get("migrations")
    if not isinstance(versions, list) or not versions or not set(versions) <= known:
        raise CatalogError(f"{folder}: made by a newer catalog (schema versions {versions}); upgrade to restore it")
    if not isinstance(manifest.get("tables"), dict):
        raise CatalogError(f"{folder / BACKUP_MANIFEST}: the table list is missing")
    return manifest


def _holds_data(path: Path) -> bool:
    with connect(path, read_only=True) as con:
        return any(con.execute(f"SELECT count(*) > 0 FROM {name}").fetchone()[0]
                   for name in _all_tables(con) if name != "schema_migrations")


def _remove_database(path: Path) -> None:
    for leftover in (path, path.with_name(path.name + ".wal")):
        leftover.unlink(missing_ok=True)


def restore(directory: str | os.PathLike, db: str | os.PathLike | None, *, force: bool = False) -> dict:
    """Rebuild a database file from a :func:`backup` folder.

    The copy is built in a side file, checked against the manifest's row counts and only then moved over the
    target, so a failed restore leaves the target as it was. The schema comes from this version's own migrations
    (up to the backup's), never from SQL text found in the folder.

    Parameters
    ----------
    directory : path-like
        The backup folder.
    db : path-like or None
        Target database file.
    force : bool, default False
        Replace a target that already holds data.

    Returns
    -------
    dict
        The manifest of the restored backup.

    Raises
    ------
    CatalogError
        Not a backup, unreadable or incomplete files, counts that disagree, or a target holding data without force.
    """
    folder = Path(directory)
    manifest = _read_manifest(folder)
    target = resolve_path(db)
    if target.exists() and not force and _holds_data(target):
        raise CatalogError(f"{target} already holds data; restore into a new file, or use force to replace it")
    # The side file carries this process's id: if the restore is killed, the next open of the target removes it.
    remove_stale_restores(target)
    partial = target.with_name(f"{target.name}{RESTORING}{os.getpid()}")
    _remove_database(partial)
    con = open_duckdb(str(partial))
    try:
        migrate(con, upto=max(manifest["migrations"]))
        tables = _all_tables(con)
        wanted = set(manifest["tables"])
        if wanted != set(tables):
            raise CatalogError(f"{folder}: its tables ({', '.join(sorted(wanted))}) do not match schema version "
                               f"{max(manifest['migrations'])}")
        with transaction(con):
            con.execute("DELETE FROM schema_migrations")
            for name in tables:
                file = folder / f"{name}.parquet"
                if not file.is_file():
                    raise CatalogError(f"{file}: missing; the backup is incomplete")
                with literal_path(file) as literal:
                    con.execute(f"INSERT INTO {name} BY NAME SELECT * FROM read_parquet(?)", [literal])
                count = con.execute(f"SELECT count(*) FROM {name}").fetchone()[0]
                if count != manifest["tables"][name]:
                    raise CatalogError(f"{file}: {count} rows, but the manifest says {manifest['tables'][name]}; "
                                       "the backup is damaged")
            # Deferred: the import rules it checks against are start-up cost for every command but restore.
            from catalog.store.integrity import restored_problems

            problems = restored_problems(con)
            if problems:
                raise CatalogError(f"{folder}: not restored, the backup holds data an import would refuse (altered "
                                   "or damaged):\n  " + "\n  ".join(problems))
        con.execute("CHECKPOINT")
    except duckdb.Error as exc:
        con.close()
        _remove_database(partial)
        raise CatalogError(f"{folder}: cannot be restored: {first_line(exc)}") from exc
    except BaseException:
        con.close()
        _remove_database(partial)
        raise
    con.close()
    if target.exists():
        try:
            # Waits for any other user of the target to finish, and folds its log into the file so no stale
            # write-ahead log is replayed over the restored copy.
            with connect(target) as old:
                old.execute("CHECKPOINT")
        except DatabaseBusyError:
            _remove_database(partial)
            raise
        except CatalogError:
            pass  # a damaged target is being replaced on purpose
    target.with_name(target.name + ".wal").unlink(missing_ok=True)
    os.replace(partial, target)
    return manifest
