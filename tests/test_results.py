"""Results after a cold analysis are the figures the store keeps: returned from memory, equal to a warm read.

Real DuckDB files in tmp_path holding the demo campaign (invented data).
"""

from __future__ import annotations

import shutil
import subprocess
import sys

import pandas as pd
import pytest

from catalog import store
from catalog.analysis import results
from catalog.analysis.settings import Settings
from catalog.datasets.synth import demo_campaign, write_campaign
from catalog.ingest import campaign


@pytest.fixture(scope="module")
def fresh_db(tmp_path_factory):
    """A demo campaign imported but never analysed (the session's demo_db may already hold cached results)."""
    folder = tmp_path_factory.mktemp("fresh")
    write_campaign(demo_campaign(), folder)
    db = folder / "fresh.duckdb"
    store.import_campaign(db, campaign.read_source(folder))
    return db


def test_cold_results_from_memory_equal_the_cached_read(fresh_db, tmp_path):
    db = tmp_path / "copy.duckdb"
    shutil.copy(fresh_db, db)
    cold = results.get_results(db, Settings())
    warm = results.get_results(db, Settings())
    assert cold.computed and not warm.computed
    assert (cold.run_key, cold.data_stamp) == (warm.run_key, warm.data_stamp)
    # Same rows, columns and values; integer widths and string dtypes may differ between pandas and DuckDB.
    pd.testing.assert_frame_equal(cold.trials, warm.trials, check_dtype=False)
    pd.testing.assert_frame_equal(cold.catalysts[warm.catalysts.columns], warm.catalysts, check_dtype=False)
    pd.testing.assert_frame_equal(cold.flags, warm.flags, check_dtype=False)
    assert cold.blank.keys() == warm.blank.keys()
    assert all(cold.blank[k] == warm.blank[k] for k in cold.blank)


def test_a_warm_read_does_not_load_the_fitting_code(demo_db, tmp_path):
    # The point of the deferred imports: a cached ranking starts without scipy's optimisers and statistics.
    db = tmp_path / "copy.duckdb"
    shutil.copy(demo_db, db)
    results.get_results(db, Settings())
    code = ("import sys; from catalog.analysis import results, ranking; "
            "from catalog.analysis.settings import Settings; "
            f"r = results.get_results({str(db)!r}, Settings()); ranking.rank(r.catalysts); assert not r.computed; "
            "print(sorted(m for m in ('scipy.stats', 'scipy.optimize', 'altair', 'openpyxl', 'streamlit') "
            "if m in sys.modules))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "[]"
