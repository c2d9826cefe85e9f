"""The app and the command line at once: readers keep working during an import; a second writer waits or is told
clearly that the database is in use, and no write is lost.

Real subprocesses and real DuckDB files in tmp_path.
"""

from __future__ import annotations

import subprocess
import sys
import textwrap
import time

import duckdb
import pytest
from support import write_campaign

from catalog import store
from catalog.datasets import bulk
from catalog.ingest.sources import read_source

# Every test here runs real subprocesses that hold locks for seconds.
pytestmark = pytest.mark.slow


def _holder(db, seconds: float | None) -> subprocess.Popen:
    """Another program holding the database open for writing, for ``seconds`` or (None) until its stdin closes."""
    wait = f"time.sleep({seconds})" if seconds is not None else "sys.stdin.read()"
    code = textwrap.dedent(f"""
        import sys, time, duckdb
        con = duckdb.connect({str(db)!r})
        print("holding", flush=True)
        {wait}
        con.close()
    """)
    proc = subprocess.Popen([sys.executable, "-c", code], stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True)
    assert proc.stdout.readline().strip() == "holding"
    return proc


def _cli(*args) -> subprocess.Popen:
    return subprocess.Popen([sys.executable, "-m", "catalog.cli", *map(str, args)],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)


def test_readers_keep_working_while_an_import_writes(tmp_path):
    db = tmp_path / "store.duckdb"
    store.import_campaign(db, read_source(write_campaign(tmp_path / "small")))
    bulk.write_bulk_campaign(tmp_path / "bulk", n_trials=1500, n_points=150, seed=1)
    writer = _cli("import", tmp_path / "bulk", "--db", db, "--quiet")
    seen = []
    while writer.poll() is None:
        counts = store.table_counts(db)  # retries while the import holds the file for its final write
        seen.append((counts["trials"], counts["trace_points"]))
        time.sleep(0.05)
    assert writer.returncode == 0, writer.stderr.read()
    seen.append(tuple(store.table_counts(db)[k] for k in ("trials", "trace_points")))
    # Every read saw the store before the import or after it, never part of it.
    assert set(seen) <= {(4, 40), (1504, 40 + 1500 * 150)}
    assert seen[-1] == (1504, 40 + 1500 * 150)
    assert len(seen) > 2


def test_a_second_writer_waits_for_a_short_hold(tmp_path):
    db = tmp_path / "store.duckdb"
    store.import_campaign(db, read_source(write_campaign(tmp_path / "small")))
    holder = _holder(db, 1.5)
    proc = _cli("correct", "trial", "R1", "notes", "written while another program held the file", "--db", db)
    out, err = proc.communicate(timeout=60)
    holder.wait(timeout=30)
    assert proc.returncode == 0, err
    assert store.history(db, "R1")["new_value"].tolist() == ["written while another program held the file"]


def test_a_long_hold_gives_a_clear_busy_message(tmp_path):
    db = tmp_path / "store.duckdb"
    store.import_campaign(db, read_source(write_campaign(tmp_path / "small")))
    write_campaign(tmp_path / "other", trials=open(tmp_path / "small" / "trials.csv").read().replace("R4", "R5"),
                   traces=open(tmp_path / "small" / "traces.csv").read().replace("R4", "R5"))
    holder = _holder(db, None)
    writers = [_cli("exclude", "trial", "R2", "--db", db), _cli("import", tmp_path / "other", "--db", db, "--quiet")]
    results = [w.communicate(timeout=120) for w in writers]
    holder.communicate(timeout=30)  # let go only after both writers gave up
    for proc, (_out, err) in zip(writers, results, strict=True):
        assert proc.returncode == 2
        assert "in use by another program" in err
        assert "Traceback" not in err
    assert store.history(db).empty
    assert store.table_counts(db)["trials"] == 4


def test_concurrent_writers_lose_nothing(tmp_path):
    db = tmp_path / "store.duckdb"
    store.import_campaign(db, read_source(write_campaign(tmp_path / "small")))
    script = textwrap.dedent("""
        import sys
        from catalog import store
        db, trial, tag = sys.argv[1:]
        for i in range(8):
            store.correct(db, "trials", trial, "notes", f"{tag} {i}", who=tag)
    """)
    procs = [subprocess.Popen([sys.executable, "-c", script, str(db), trial, tag], stderr=subprocess.PIPE, text=True)
             for trial, tag in (("R1", "one"), ("R2", "two"), ("R3", "three"))]
    for proc in procs:
        assert proc.wait(timeout=120) == 0, proc.stderr.read()
    log = store.history(db)
    assert len(log) == 24
    assert sorted(log["change_id"]) == list(range(1, 25))
    assert log.groupby("changed_by").size().to_dict() == {"one": 8, "three": 8, "two": 8}
    con = duckdb.connect(str(db), read_only=True)
    notes = dict(con.execute("SELECT trial_id, notes FROM trials WHERE notes IS NOT NULL").fetchall())
    con.close()
    assert notes == {"R1": "one 7", "R2": "two 7", "R3": "three 7"}
