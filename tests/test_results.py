"""Results after a cold analysis are the figures the store keeps: returned from memory, equal to a warm read.

Real DuckDB files in tmp_path holding the demo campaign (invented data).
"""

from __future__ import annotations

import shutil

import pandas as pd
import pytest
from support import import_demo

from catalog.analysis import results
from catalog.analysis.settings import Settings


@pytest.fixture(scope="module")
def fresh_db(tmp_path_factory):
    """A demo campaign imported but never analysed (the session's demo_db may already hold cached results)."""
    return import_demo(tmp_path_factory.mktemp("fresh"), "fresh.duckdb")


def test_cold_results_from_memory_equal_the_cached_read(fresh_db, tmp_path):
    db = tmp_path / "copy.duckdb"
    shutil.copy(fresh_db, db)
    cold = results.get_results(db, Settings())
    warm = results.get_results(db, Settings())
    assert cold.computed and not warm.computed
    assert (cold.run_key, cold.data_stamp) == (warm.run_key, warm.data_stamp)
    # Same rows, columns (in the store's layout) and values; integer widths and string dtypes may differ between
    # pandas and DuckDB.
    pd.testing.assert_frame_equal(cold.trials, warm.trials, check_dtype=False)
    pd.testing.assert_frame_equal(cold.catalysts, warm.catalysts, check_dtype=False)
    pd.testing.assert_frame_equal(cold.flags, warm.flags, check_dtype=False)
    assert cold.blank.keys() == warm.blank.keys()
    assert all(cold.blank[k] == warm.blank[k] for k in cold.blank)



def test_a_command_opens_the_database_once_to_read_and_once_to_store(fresh_db, tmp_path, monkeypatch):
    """Warm: one open for the fingerprint and the cached run. Cold: that one (which also reads the first block of
    points), one per further block, one to store."""
    from catalog.store import db as store_db

    db = tmp_path / "copy.duckdb"
    shutil.copy(fresh_db, db)
    opened = []
    real_open = store_db._open
    monkeypatch.setattr(store_db, "_open", lambda *args: opened.append(args[1]) or real_open(*args))
    results.get_results(db, Settings())
    assert opened == [True, False]  # the reads with the one block of points, then the write
    opened.clear()
    results.get_results(db, Settings())
    assert opened == [True]


def test_fitting_in_several_blocks_gives_the_figures_of_one_block(fresh_db, tmp_path, monkeypatch):
    # Memory is bounded by cutting the traces into blocks of points; the cut must change no figure and no flag.
    whole, cut = tmp_path / "whole.duckdb", tmp_path / "cut.duckdb"
    shutil.copy(fresh_db, whole)
    shutil.copy(fresh_db, cut)
    one = results.get_results(whole, Settings())
    from catalog.store import db as store_db

    opened = []
    real_open = store_db._open
    monkeypatch.setattr(store_db, "_open", lambda *args: opened.append(args[1]) or real_open(*args))
    monkeypatch.setattr(results, "FIT_BLOCK_POINTS", 2_000)
    several = results.get_results(cut, Settings())
    n_blocks = len(opened) - 1  # the first block is read with the records, then one open per further block
    assert n_blocks > 2 and opened == [True] * n_blocks + [False]
    pd.testing.assert_frame_equal(one.trials, several.trials)
    pd.testing.assert_frame_equal(one.catalysts, several.catalysts)
    pd.testing.assert_frame_equal(one.flags, several.flags)


def test_a_run_that_fails_while_its_figures_are_derived_stores_nothing(fresh_db, tmp_path, monkeypatch):
    # The fits go to the store on a thread while the figures are derived: an error on this side must roll the
    # write back whole (no fits, no run) and leave the file free for the next command.
    from catalog import store
    from catalog.analysis import diagnostics

    db = tmp_path / "copy.duckdb"
    shutil.copy(fresh_db, db)

    def broken(*args, **kwargs):
        raise RuntimeError("a diagnostic that breaks")

    monkeypatch.setattr(diagnostics, "evaluate", broken)
    with pytest.raises(RuntimeError, match="a diagnostic that breaks"):
        results.get_results(db, Settings())
    with store.connect(db) as con:  # a write open: the writer's connection is closed
        assert con.execute("SELECT count(*) FROM trial_fits").fetchall()[0][0] == 0
        assert con.execute("SELECT count(*) FROM analysis_runs").fetchall()[0][0] == 0
    monkeypatch.undo()
    assert results.get_results(db, Settings()).computed
    assert not results.get_results(db, Settings()).computed
