"""Hostile input and faults at the store: each attack reproduced, each outcome a plain message and an unchanged store.

Real DuckDB files in tmp_path; the CLI is called in-process and must exit 2 with no traceback.
"""

from __future__ import annotations

import contextlib
import hashlib
import os
import shutil
import subprocess
import sys
from pathlib import Path

import duckdb
import numpy as np
import pandas as pd
import pytest
from support import TRIALS, trace_rows, write_campaign

from catalog import store
from catalog.analysis.results import get_results
from catalog.analysis.settings import Settings
from catalog.cli import main
from catalog.errors import CatalogError, ValidationError
from catalog.ingest.sources import read_source
from catalog.store.db import RESTORING, ReadOnlyDatabase
from catalog.store.schema import MIGRATIONS


def _digest(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def _clean_exit_2(argv, capsys) -> str:
    """Run the CLI; assert exit 2 and a message without traceback; return stderr."""
    assert main(argv) == 2
    err = capsys.readouterr().err
    assert err.startswith("error: ") and "Traceback" not in err and "internal error" not in err
    return err


@pytest.fixture
def db(tmp_path) -> Path:
    path = tmp_path / "store.duckdb"
    store.import_campaign(path, read_source(write_campaign(tmp_path / "camp")))
    return path


# --------------------------------------------------------------------------------------------------- item 6


def test_a_database_from_a_newer_schema_is_refused_and_not_written(db, capsys):
    con = duckdb.connect(str(db))
    con.execute("INSERT INTO schema_migrations VALUES (?, 'from the future', now())", [MIGRATIONS[-1][0] + 1])
    con.execute("CHECKPOINT")
    con.close()
    before = _digest(db)
    for read_only in (True, False):
        with pytest.raises(CatalogError, match="made by a newer catalog"), store.connect(db, read_only=read_only):
            pass
    err = _clean_exit_2(["correct", "trial", "R1", "operator", "eve", "--db", str(db)], capsys)
    assert "newer catalog" in err and "upgrade" in err
    _clean_exit_2(["trials", "--db", str(db)], capsys)
    assert _digest(db) == before


def test_a_foreign_duckdb_file_is_not_turned_into_a_catalog(tmp_path, capsys):
    foreign = tmp_path / "other.duckdb"
    con = duckdb.connect(str(foreign))
    con.execute("CREATE TABLE invoices (n INTEGER)")
    con.close()
    before = _digest(foreign)
    err = _clean_exit_2(["import", str(write_campaign(tmp_path / "camp")), "--db", str(foreign)], capsys)
    assert "not a catalog database" in err
    assert _digest(foreign) == before


@contextlib.contextmanager
def _read_only(*paths: Path):
    """Make files or folders unwritable even for root (chmod, plus chattr +i where root ignores modes)."""
    modes = {p: p.stat().st_mode for p in paths}
    immutable = []
    try:
        for p in paths:
            p.chmod(0o555 if p.is_dir() else 0o444)
        if os.geteuid() == 0:
            for p in paths:
                if subprocess.run(["chattr", "+i", str(p)], capture_output=True).returncode != 0:
                    pytest.skip("running as root without chattr: cannot make a file read-only")
                immutable.append(p)
        yield
    finally:
        for p in immutable:
            subprocess.run(["chattr", "-i", str(p)], capture_output=True)
        for p, mode in modes.items():
            p.chmod(mode)


@pytest.mark.parametrize("what", ["file", "folder"])
def test_a_read_only_database_is_ranked_without_caching(db, capsys, what):
    with _read_only(*([db] if what == "file" else [db, db.parent])):
        before = _digest(db)
        results = get_results(db, Settings())
        assert results.computed and not results.cached and len(results.catalysts) == 3
        assert "tof_ref" in results.catalysts.columns and results.trials.index.name == "trial_id"
        assert main(["rank", "--db", str(db)]) == 0
        captured = capsys.readouterr()
        assert "read-only" in captured.err and "PdC-A" in captured.out
        err = _clean_exit_2(["exclude", "trial", "R1", "--db", str(db)], capsys)
        assert "cannot be written" in err or "read-only" in err
        assert _digest(db) == before
    # The same figures as a writable copy computes and caches.
    writable = get_results(db, Settings())
    assert writable.cached
    pd.testing.assert_series_equal(results.catalysts["tof_ref"], writable.catalysts["tof_ref"], check_dtype=False)


def test_a_read_only_database_of_an_older_version_says_it_cannot_be_upgraded(db):
    con = duckdb.connect(str(db))
    con.execute("DELETE FROM schema_migrations WHERE version = ?", [MIGRATIONS[-1][0]])
    con.close()
    with _read_only(db), pytest.raises(ReadOnlyDatabase, match="older version and is read-only"):
        store.table_counts(db)


# --------------------------------------------------------------------------------------------------- item 10


def test_the_data_stamp_follows_content_not_bookkeeping(db):
    stamp = store.data_stamp(db)
    con = duckdb.connect(str(db))
    # An edit behind the store's back: same ids, same counts, one value changed.
    con.execute("UPDATE trace_points SET value = value * 1.5 WHERE trial_id = 'R1' AND t = 60")
    con.close()
    assert store.data_stamp(db) != stamp
    con = duckdb.connect(str(db))
    con.execute("UPDATE trace_points SET value = value / 1.5 WHERE trial_id = 'R1' AND t = 60")
    con.execute("UPDATE trials SET temperature = temperature + 1 WHERE trial_id = 'R2'")
    con.close()
    changed = store.data_stamp(db)
    assert changed != stamp
    store.correct(db, "trials", "R2", "operator", "zoe")
    assert store.data_stamp(db) != changed


def _tamper(folder: Path, table: str, sql: str) -> None:
    con = duckdb.connect()
    file = folder / f"{table}.parquet"
    con.execute(f"CREATE TABLE x AS SELECT * FROM read_parquet('{file}')")
    con.execute(sql)
    con.execute(f"COPY x TO '{file}' (FORMAT parquet)")
    con.close()


@pytest.mark.parametrize(("table", "sql", "message"), [
    ("trials", "UPDATE x SET temperature = -5 WHERE trial_id = 'R1'", "trials.temperature not finite or not above 0"),
    ("trace_points", "UPDATE x SET trial_id = 'ghost' WHERE trial_id = 'R2'", "orphans"),
    ("trace_points", "UPDATE x SET value = 'inf'::DOUBLE WHERE t = 60", "not finite"),
    ("trials", "UPDATE x SET catalyst_id = 'nobody' WHERE trial_id = 'R1'", "names no stored catalyst"),
    ("catalysts", "UPDATE x SET dispersion = 7 WHERE catalyst_id = 'PdC-A'", "catalysts.dispersion"),
])
def test_restore_refuses_a_tampered_backup(db, tmp_path, capsys, table, sql, message):
    store.backup(db, tmp_path / "bk")
    _tamper(tmp_path / "bk", table, sql)
    target = tmp_path / "target.duckdb"
    shutil.copy(db, target)
    before = _digest(target)
    err = _clean_exit_2(["restore", str(tmp_path / "bk"), "--db", str(target), "--force"], capsys)
    assert message in err and "altered or damaged" in err
    assert _digest(target) == before
    assert not [n for n in os.listdir(tmp_path) if RESTORING in n]


# --------------------------------------------------------------------------------------------------- item 11


def test_a_killed_restore_leaves_no_side_file(db, tmp_path):
    store.backup(db, tmp_path / "bk")
    target = tmp_path / "target.duckdb"
    shutil.copy(db, target)
    # A restore killed mid-way leaves its side file named with its (now dead) process id.
    dead = subprocess.Popen([sys.executable, "-c", "pass"])
    dead.wait()
    side = tmp_path / f"target.duckdb{RESTORING}{dead.pid}"
    shutil.copy(db, side)
    mine = tmp_path / f"target.duckdb{RESTORING}{os.getpid()}"  # a live process's restore is left alone
    mine.write_bytes(b"in progress")
    store.table_counts(target)
    assert not side.exists() and mine.exists()
    mine.unlink()
    store.restore(tmp_path / "bk", target, force=True)
    assert sorted(os.listdir(tmp_path)) == sorted(["bk", "camp", "store.duckdb", "target.duckdb"])


@pytest.mark.parametrize("name", ["*", "[ab]", "c?mp", "{x,y}"])
def test_a_folder_named_like_a_glob_is_read_literally(tmp_path, name):
    # A sibling folder the glob would also match, with a trace for an unknown trial.
    write_campaign(tmp_path / "ab", traces=trace_rows() + "INTRUDER,0,1\n")
    write_campaign(tmp_path / "camp", traces=trace_rows() + "INTRUDER,0,1\n")
    folder = write_campaign(tmp_path / name)
    db = tmp_path / "x.duckdb"
    report = store.import_campaign(db, read_source(folder))
    assert report.n_trials == 4 and report.n_points == 40
    # And a faulty file in such a folder is located in that file, not its neighbours.
    bad = write_campaign(tmp_path / f"bad{name}", traces=trace_rows().replace("R1,60,", "R1,sixty,"))
    with pytest.raises(ValidationError, match="traces.csv, row 3, column 'time"):
        store.import_campaign(tmp_path / "y.duckdb", read_source(bad))
    # Backups into and out of such folders.
    store.backup(db, tmp_path / f"bk{name}")
    store.restore(tmp_path / f"bk{name}", tmp_path / "z.duckdb")
    assert store.table_counts(tmp_path / "z.duckdb") == store.table_counts(db)


@pytest.mark.parametrize("name", [":memory:", ":memory:extra", "md:catalog", "s3://bucket/x.duckdb"])
def test_a_database_name_that_is_not_a_file_is_refused(tmp_path, capsys, name, monkeypatch):
    monkeypatch.chdir(tmp_path)
    err = _clean_exit_2(["import", str(write_campaign(tmp_path / "camp")), "--db", name], capsys)
    assert "is not a database file" in err
    _clean_exit_2(["rank", "--db", name], capsys)
    assert sorted(os.listdir(tmp_path)) == ["camp"]


@pytest.mark.parametrize("cut", [0, 100, 5000, 0.3, 0.6])
def test_a_truncated_or_garbage_database_gives_a_plain_message(db, tmp_path, capsys, cut):
    data = db.read_bytes()
    broken = tmp_path / "broken.duckdb"
    broken.write_bytes(data[: int(cut * len(data)) if isinstance(cut, float) else cut])
    before = _digest(broken)
    # A command that never reads the damaged part may still work; none may fail with an internal error.
    for command in (["trials"], ["history"], ["imports"]):
        code = main([*command, "--db", str(broken)])
        err = capsys.readouterr().err
        assert code in (0, 2) and "internal error" not in err and "Traceback" not in err
    _clean_exit_2(["rank", "--db", str(broken)], capsys)
    assert _digest(broken) == before
    broken.write_bytes(os.urandom(20_000))
    _clean_exit_2(["rank", "--db", str(broken)], capsys)


def test_header_only_files_write_no_import_record(tmp_path, db, capsys):
    header_only = write_campaign(tmp_path / "empty", catalysts="catalyst_id,metal\n",
                                 trials=TRIALS.splitlines()[0] + "\n", traces="trial_id,time [s],value\n")
    with pytest.raises(ValidationError, match="trials.csv: has a header but no data rows"):
        store.import_campaign(tmp_path / "new.duckdb", read_source(header_only))
    assert not (tmp_path / "new.duckdb").exists()
    before = store.list_imports(db)
    err = _clean_exit_2(["import", str(header_only), "--db", str(db), "--quiet"], capsys)
    assert "trials.csv: has a header but no data rows" in err
    pd.testing.assert_frame_equal(store.list_imports(db), before)


@pytest.mark.parametrize("value", ["", "   "])
def test_clearing_a_catalyst_id_does_not_turn_a_trial_into_a_blank(db, capsys, value):
    before = store.list_trials(db)
    err = _clean_exit_2(["correct", "trial", "R1", "catalyst_id", value, "--db", str(db)], capsys)
    assert "uncatalysed blank" in err and "new trial id" in err
    pd.testing.assert_frame_equal(store.list_trials(db), before)
    assert store.history(db).empty
    # Re-assigning to another catalyst stays a correction.
    assert store.correct(db, "trials", "R1", "catalyst_id", "RuAl-B").new_value == "RuAl-B"


# --------------------------------------------------------------------------------------------------- item 9


def test_fit_blocks_are_bounded_by_points_not_trials(tmp_path):
    # Trials of very different lengths: 10 long ones and 40 short ones.
    rows = ["trial_id,time [s],value"]
    trials = [TRIALS.splitlines()[0]]
    lengths = {f"L{i}": 400 for i in range(10)} | {f"S{i}": 5 for i in range(40)}
    for trial, n in lengths.items():
        trials.append(f"{trial},,30,concentration,mmol/L,,0.8,1,,,25,ben,")
        rows += [f"{trial},{t},{t * 0.01}" for t in range(n)]
    folder = write_campaign(tmp_path / "c", trials="\n".join(trials) + "\n", traces="\n".join(rows) + "\n")
    db = tmp_path / "x.duckdb"
    store.import_campaign(db, read_source(folder))
    order = list(lengths)
    blocks = store.point_blocks(db, order, 1000)
    assert [t for block in blocks for t in block.trial_ids] == order  # storage order, here the file's
    sizes = [sum(lengths[t] for t in block.trial_ids) for block in blocks]
    assert sizes == [800, 800, 800, 800, 1000] and [block.points for block in blocks] == sizes
    # Each block knows the span of storage rows holding its points: the file's rows, 0-based, here.
    assert [block.rows for block in blocks] == [(0, 799), (800, 1599), (1600, 2399), (2400, 3199), (3200, 4199)]
    # A trial longer than the bound is a block of its own, in storage order; unknown ids come last, cost nothing.
    assert [block.trial_ids for block in store.point_blocks(db, ["L0", "S0", "nope", "L1"], 100)] == [
        ["L0"], ["L1"], ["S0", "nope"]]
    # When every stored point fits in one block, the trials asked for are one block, as the count would give.
    assert store.point_blocks(db, order, 4200) == [store.PointBlock(order)] and store.point_blocks(db, [], 4200) == []
    # A block read scans its span only, and gives what the whole-table read gives.
    for block in blocks:
        narrow, whole = store.load_block(db, block), store.load_point_arrays(db, block.trial_ids)
        assert narrow.trial_ids == whole.trial_ids and np.array_equal(narrow.t, whole.t)
        assert np.array_equal(narrow.value, whole.value) and np.array_equal(narrow.counts, whole.counts)
    # A plan whose rows no longer match (a rewritten table) falls back to the whole-table read.
    stale = store.PointBlock(blocks[0].trial_ids, blocks[0].points, (3200, 4199))
    assert store.load_block(db, stale).counts.sum() == blocks[0].points
    # A block is read as arrays in the order asked, each trial's points in time order; unknown ids are left out.
    block = store.load_point_arrays(db, ["S3", "nope", "L1", "S0"])
    assert block.trial_ids == ["S3", "L1", "S0"]
    assert block.counts.tolist() == [5, 400, 5]
    long = store.load_campaign(db)[2].set_index("trial_id")
    for code, trial in enumerate(block.trial_ids):
        assert np.array_equal(block.t[block.codes == code], long.loc[trial, "t"].to_numpy())
        assert np.array_equal(block.value[block.codes == code], long.loc[trial, "value"].to_numpy())


def test_point_arrays_come_in_trial_and_time_order_whatever_the_file_order(tmp_path):
    # A trace file that interleaves its trials (rows by reading, not by trial) is stored in file order; the arrays
    # still come trial by trial, each in time order, equal to the ordered long table.
    lines = trace_rows().splitlines()
    header, rows = lines[0], lines[1:]
    interleaved = [rows[i + 10 * k] for i in range(10) for k in range(4)]
    folder = write_campaign(tmp_path / "c", traces="\n".join([header, *interleaved]) + "\n")
    db = tmp_path / "x.duckdb"
    store.import_campaign(db, read_source(folder))
    block = store.load_point_arrays(db, ["R4", "R1", "R3", "R2"])
    assert block.trial_ids == ["R4", "R1", "R3", "R2"] and block.counts.tolist() == [10, 10, 10, 10]
    long = store.load_campaign(db)[2].set_index("trial_id")
    for code, trial in enumerate(block.trial_ids):
        assert np.array_equal(block.t[block.codes == code], long.loc[trial, "t"].to_numpy())
        assert np.array_equal(block.value[block.codes == code], long.loc[trial, "value"].to_numpy())
    # The read runs on one thread; an open session gets its own setting back.
    with store.session(db) as con:
        con.execute("SET threads = 2")
        store.load_point_arrays(con, ["R1"])
        assert con.execute("SELECT current_setting('threads')").fetchall()[0][0] == 2


# --------------------------------------------------------------------------------------------------- issue 10 item 3


def test_corrections_check_typed_values_not_a_text_round_trip(db):
    # A mass that does not survive kg -> mg text -> kg (checked: 2.3855787612557447e-05 comes back ...45e-05).
    mass = 2.3855787612557447e-05
    con = duckdb.connect(str(db))
    con.execute("UPDATE trials SET catalyst_mass = ? WHERE trial_id = 'R1'", [mass])
    con.close()
    store.correct(db, "trials", "R1", "operator", "dee")
    store.correct(db, "trials", "R1", "temperature", "35 degC")
    with store.connect(db, read_only=True) as con:
        temperature, stored_mass = con.execute(
            "SELECT temperature, catalyst_mass FROM trials WHERE trial_id = 'R1'").fetchall()[0]
    assert stored_mass == mass  # the record was checked as typed values; nothing drifted
    assert temperature == 35 + 273.15
    # The corrected cell is read with the import's cell rules, the record with its cross-column rules.
    with pytest.raises(ValidationError, match="a catalysed trial needs the catalyst mass"):
        store.correct(db, "trials", "R1", "catalyst_mass", "")
    with pytest.raises(ValidationError, match="must be above absolute zero"):
        store.correct(db, "trials", "R1", "temperature", "-300 degC")
    with pytest.raises(ValidationError, match="is not a finite number"):
        store.correct(db, "trials", "R1", "catalyst_mass", "lots mg")


@pytest.mark.parametrize("what", ["file", "folder"])
def test_an_import_into_a_read_only_database_is_refused_cleanly(db, tmp_path, capsys, what):
    more = write_campaign(tmp_path / "more", trials=TRIALS.replace("\nR", "\nQ"),
                          traces=trace_rows().replace("\nR", "\nQ"))
    with _read_only(*([db] if what == "file" else [db, db.parent])):
        before = _digest(db)
        err = _clean_exit_2(["import", str(more), "--db", str(db), "--quiet"], capsys)
        assert "read-only" in err and "not changed" in err
        assert _digest(db) == before
