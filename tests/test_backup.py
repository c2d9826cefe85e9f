"""Backup and restore: every table, including history, imports and schema_migrations, comes back exactly.

Real DuckDB files in tmp_path.
"""

from __future__ import annotations

import json

import duckdb
import pandas as pd
import pytest
from support import write_campaign

from catalog import store
from catalog.cli import main
from catalog.errors import CatalogError
from catalog.ingest.sources import read_source


def _tables(db) -> dict[str, pd.DataFrame]:
    con = duckdb.connect(str(db), read_only=True)
    try:
        names = [r[0] for r in con.execute("SELECT table_name FROM information_schema.tables ORDER BY 1").fetchall()]
        return {n: con.execute(f"SELECT * FROM {n} ORDER BY ALL").df() for n in names}
    finally:
        con.close()


@pytest.fixture
def db(tmp_path):
    path = tmp_path / "store.duckdb"
    store.import_campaign(path, read_source(write_campaign(tmp_path / "camp")))
    store.correct(path, "trials", "R1", "notes", "it's 🧪; DROP TABLE history;--", who="ana", reason="typo")
    store.exclude(path, "trials", "R2", reason="leak")
    store.purge(path, "trials", "R3", reason="duplicate")
    con = duckdb.connect(str(path))
    con.execute("INSERT INTO trial_fits (trial_id, fit_version, k) VALUES ('R1', 'v1', 1.5e-3)")
    con.close()
    return path


def test_round_trip_reproduces_every_table(db, tmp_path):
    manifest = store.backup(db, tmp_path / "bk")
    on_disk = json.loads((tmp_path / "bk" / store.BACKUP_MANIFEST).read_text())
    assert on_disk == manifest
    assert manifest["tables"]["history"] == 3 and manifest["tables"]["trials"] == 3
    store.restore(tmp_path / "bk", tmp_path / "copy.duckdb")
    original, copy = _tables(db), _tables(tmp_path / "copy.duckdb")
    assert set(original) == set(copy) and {"history", "imports", "schema_migrations"} <= set(copy)
    for name in original:
        pd.testing.assert_frame_equal(original[name], copy[name], check_exact=True, obj=name)
    # The restored file is a working store: a further correction continues the history numbering.
    assert store.correct(tmp_path / "copy.duckdb", "trials", "R1", "operator", "dee").change_id == 4


def test_restore_refuses_to_overwrite_data_unless_forced(db, tmp_path):
    store.backup(db, tmp_path / "bk")
    store.correct(db, "trials", "R1", "operator", "after the backup")
    with pytest.raises(CatalogError, match="already holds data"):
        store.restore(tmp_path / "bk", db)
    assert store.history(db)["new_value"].iloc[-1] == "after the backup"
    store.restore(tmp_path / "bk", db, force=True)
    assert len(store.history(db)) == 3


def test_broken_backups_are_refused_and_leave_the_target_alone(db, tmp_path):
    store.backup(db, tmp_path / "bk")
    with pytest.raises(CatalogError, match="not an empty folder"):
        store.backup(db, tmp_path / "bk")
    (tmp_path / "bk" / "history.parquet").unlink()
    with pytest.raises(CatalogError, match="incomplete"):
        store.restore(tmp_path / "bk", tmp_path / "new.duckdb")
    assert not (tmp_path / "new.duckdb").exists()
    (tmp_path / "bk" / store.BACKUP_MANIFEST).unlink()
    with pytest.raises(CatalogError, match="unfinished"):
        store.restore(tmp_path / "bk", tmp_path / "new.duckdb")


def test_cli_backup_and_restore(db, tmp_path, capsys):
    assert main(["backup", str(tmp_path / "bk"), "--db", str(db)]) == 0
    assert main(["restore", str(tmp_path / "bk"), "--db", str(db)]) == 2
    assert "already holds data" in capsys.readouterr().err
    assert main(["restore", str(tmp_path / "bk"), "--db", str(tmp_path / "fresh.duckdb")]) == 0
    assert store.table_counts(tmp_path / "fresh.duckdb") == store.table_counts(db)
