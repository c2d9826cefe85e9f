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
    """Warm: one open for the fingerprint and the cached run. Cold: that one, one per block of points, one to store."""
    from catalog.store import db as store_db

    db = tmp_path / "copy.duckdb"
    shutil.copy(fresh_db, db)
    opened = []
    real_open = store_db._open
    monkeypatch.setattr(store_db, "_open", lambda *args: opened.append(args[1]) or real_open(*args))
    results.get_results(db, Settings())
    assert opened == [True, True, False]  # the reads, the one block of points, then the write
    opened.clear()
    results.get_results(db, Settings())
    assert opened == [True]
