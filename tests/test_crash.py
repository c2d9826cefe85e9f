"""Crash safety: an import killed with SIGKILL at any moment leaves all of it or none of it.

Real subprocesses, real DuckDB files in tmp_path. The kill moments are spread over a measured clean run, plus
kills right after the importer announces its final write, the moment a torn write would show.
"""

from __future__ import annotations

import os
import shutil
import signal
import subprocess
import sys
import time

import duckdb
import pytest
from support import write_campaign

from catalog import store
from catalog.datasets.bulk import write_bulk_campaign
from catalog.ingest.sources import read_source

N_TRIALS = 2500
N_POINTS = 150


@pytest.fixture(scope="module")
def bulk(tmp_path_factory):
    """A campaign big enough that the import takes a second or two, and a store already holding a small import."""
    root = tmp_path_factory.mktemp("crash")
    # seed 1 gives every trial strictly increasing rounded times (some seeds give a short trial repeated times).
    write_bulk_campaign(root / "bulk", n_trials=N_TRIALS, n_points=N_POINTS, seed=1)
    seeded = root / "seeded.duckdb"
    store.import_campaign(seeded, read_source(write_campaign(root / "small")))
    return root


def _start(folder, db, quiet=True):
    args = [sys.executable, "-m", "catalog.cli", "import", str(folder), "--db", str(db)]
    return subprocess.Popen(args + (["--quiet"] if quiet else []), stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                            text=True, env={**os.environ, "PYTHONUNBUFFERED": "1"})


def _check_all_or_nothing(db, before: dict[str, int]) -> bool:
    """Open the killed store and return whether the bulk import is in it, asserting it is wholly in or out."""
    if not db.exists():
        return False
    con = duckdb.connect(str(db), read_only=True)
    try:
        n_trials = con.execute("SELECT count(*) FROM trials WHERE trial_id LIKE 'B%'").fetchone()[0]
        n_points = con.execute("SELECT count(*) FROM trace_points WHERE trial_id LIKE 'B%'").fetchone()[0]
        n_imports = con.execute("SELECT count(*) FROM imports WHERE n_trials = ?", [N_TRIALS]).fetchone()[0]
        orphans = con.execute(
            "SELECT count(*) FROM trace_points WHERE trial_id NOT IN (SELECT trial_id FROM trials)").fetchone()[0]
        earlier = con.execute("SELECT count(*) FROM trials WHERE trial_id NOT LIKE 'B%'").fetchone()[0]
    finally:
        con.close()
    assert n_trials in (0, N_TRIALS)
    assert n_points == n_trials * N_POINTS
    assert n_imports == (1 if n_trials else 0)
    assert orphans == 0
    assert earlier == before.get("trials", 0)
    return n_trials == N_TRIALS


def _then_import_again(bulk, db, done: bool) -> None:
    report = store.import_campaign(db, read_source(bulk / "bulk"))
    if done:
        assert report.duplicate_of is not None
    else:
        assert report.n_trials == N_TRIALS
    assert store.table_counts(db)["trace_points"] >= N_TRIALS * N_POINTS


def _clean_duration(bulk) -> float:
    db = bulk / "timing.duckdb"
    shutil.copy(bulk / "seeded.duckdb", db)
    began = time.monotonic()
    proc = _start(bulk / "bulk", db)
    proc.communicate(timeout=120)
    assert proc.returncode == 0
    return time.monotonic() - began


@pytest.mark.slow
def test_kill_at_spread_moments(bulk):
    duration = _clean_duration(bulk)
    for i, fraction in enumerate((0.1, 0.3, 0.5, 0.65, 0.8, 0.9, 0.97)):
        db = bulk / f"spread{i}.duckdb"
        # Alternate a store with earlier data and no store at all, so file creation is killed too.
        if i % 2 == 0:
            shutil.copy(bulk / "seeded.duckdb", db)
        before = store.table_counts(db) if db.exists() else {}
        proc = _start(bulk / "bulk", db)
        time.sleep(fraction * duration)
        proc.send_signal(signal.SIGKILL)
        proc.communicate(timeout=60)
        _then_import_again(bulk, db, _check_all_or_nothing(db, before))


@pytest.mark.slow
@pytest.mark.parametrize("delay", [0.0, 0.02, 0.05, 0.1, 0.2])
def test_kill_during_the_final_write(bulk, delay):
    db = bulk / f"write{delay}.duckdb"
    shutil.copy(bulk / "seeded.duckdb", db)
    before = store.table_counts(db)
    proc = _start(bulk / "bulk", db, quiet=False)
    for line in proc.stderr:
        if "writing" in line:
            break
    time.sleep(delay)
    proc.send_signal(signal.SIGKILL)
    proc.communicate(timeout=60)
    _then_import_again(bulk, db, _check_all_or_nothing(db, before))
