"""The one result schema: DDL generated from the declarations, undeclared columns refused, old files upgraded.

Real DuckDB files in tmp_path.
"""

from __future__ import annotations

import duckdb
import pandas as pd
import pytest

from catalog import store
from catalog.analysis.results import get_results
from catalog.analysis.settings import TRIAL_FIT_COLUMNS, Settings
from catalog.store import schema
from catalog.store.db import migrate


def _columns(con, table: str) -> list[str]:
    return [r[0] for r in con.execute(
        "SELECT column_name FROM information_schema.columns WHERE table_name = ? ORDER BY ordinal_position", [table]
    ).fetchall()]


def test_cache_tables_are_exactly_the_declarations(demo_db):
    with store.connect(demo_db, read_only=True) as con:
        for table in schema.CACHE_TABLES:
            assert _columns(con, table) == schema.cache_columns(table), table


def test_analysis_fit_columns_derive_from_the_store_declaration():
    assert TRIAL_FIT_COLUMNS == tuple(name for name, _ in schema.TRIAL_FIT)


def test_an_undeclared_figure_is_refused_and_nothing_is_stored(tmp_path, demo_db):
    db = tmp_path / "copy.duckdb"
    db.write_bytes(demo_db.read_bytes())
    results = get_results(db, Settings())
    fits = results.trials[list(TRIAL_FIT_COLUMNS)]
    before = store.table_counts(db)
    with store.connect(db, read_only=True) as con:
        runs_before = con.execute("SELECT count(*) FROM analysis_runs").fetchone()[0]
    catalysts = results.catalysts.drop(columns="flags").assign(brand_new_figure=1.0, flags="")
    with pytest.raises(schema.SchemaMismatch, match="brand_new_figure"):
        store.save_run(db, "other-key", "{}", "other-stamp", fits, "fit-1", {}, results.trials.drop(columns="flags")
                       .assign(flags=""), catalysts, results.flags)
    assert store.table_counts(db) == before
    with store.connect(db, read_only=True) as con:
        assert con.execute("SELECT count(*) FROM analysis_runs").fetchone()[0] == runs_before
        assert con.execute("SELECT count(*) FROM analysis_runs WHERE run_key = 'other-key'").fetchone()[0] == 0


def test_every_figure_of_a_run_comes_back_from_the_cache(tmp_path, demo_db):
    """What the analysis computed per catalyst is what the cache returns (tof_ref_log_se used to vanish)."""
    db = tmp_path / "copy.duckdb"
    db.write_bytes(demo_db.read_bytes())
    con = duckdb.connect(str(db))
    con.execute("DELETE FROM analysis_runs")  # other tests may have cached a run in the shared demo file
    con.close()
    fresh = get_results(db, Settings())
    cached = get_results(db, Settings())
    assert fresh.computed and not cached.computed
    assert "tof_ref_log_se" in cached.catalysts.columns
    assert cached.catalysts["tof_ref_log_se"].notna().any()


def test_the_declarations_match_the_layout_released_migrations_built(tmp_path):
    """Files made before migration 5 hold the same cache columns, in the same order, as the declarations."""
    con = duckdb.connect(str(tmp_path / "v4.duckdb"))
    migrate(con, upto=4)
    for table in schema.CACHE_TABLES:
        assert _columns(con, table) == schema.cache_columns(table), table
    con.close()


def test_a_version_4_file_has_its_cache_rebuilt_by_migration_5(tmp_path):
    db = tmp_path / "old.duckdb"
    con = duckdb.connect(str(db))
    migrate(con, upto=4)
    con.execute("INSERT INTO analysis_runs (run_key, data_stamp) VALUES ('old', 'old')")
    con.close()
    with store.connect(db) as con:
        assert con.execute("SELECT count(*) FROM analysis_runs").fetchone()[0] == 0
        assert [r[0] for r in con.execute("SELECT version FROM schema_migrations ORDER BY 1").fetchall()] == [
            v for v, _, _ in schema.MIGRATIONS]
        for table in schema.CACHE_TABLES:
            assert _columns(con, table) == schema.cache_columns(table), table


def test_ddl_quotes_sql_words():
    # "order" and "offset" are SQL keywords and column names here; the generated DDL must still run.
    con = duckdb.connect()
    con.execute(schema.create_cache_tables())
    assert "order" in _columns(con, "catalyst_results") and "offset" in _columns(con, "trial_fits")
    frame = pd.DataFrame({"trial_id": ["a"], "fit_version": ["v"], "offset": [1.0]})
    con.register("f", frame)
    con.execute('INSERT INTO trial_fits ("trial_id", "fit_version", "offset") SELECT * FROM f')
