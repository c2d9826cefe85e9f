"""Corrections, exclusions and purges: nothing is overwritten silently, and hostile text is stored verbatim.

Every test uses a real DuckDB file in tmp_path. Unit conversions are checked against the SI definitions: the
kelvin-Celsius offset 273.15 K (SI Brochure, 9th ed., 2019, section 2.3.1) and the milligram as 1e-6 kg (SI prefix
table, same brochure, table 7).
"""

from __future__ import annotations

import json
import re

import duckdb
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from support import TRIALS, snapshot, trace_rows, write_campaign

from catalog import store
from catalog.cli import main
from catalog.errors import CatalogError
from catalog.ingest.sources import read_source

#: Text a user might type that breaks naive SQL or CSV handling: quotes, separators, keywords, emoji, long text.
HOSTILE = (
    "Robert'); DROP TABLE trials;--",
    'say "hello", then; leave',
    "SELECT * FROM history WHERE 1=1 OR ''=''",
    "NULL",
    "🧪⚗️ Pd/C — 5 % (ümlaut, ß, 中文)",
    "line one\nline two",
)


@pytest.fixture
def db(tmp_path):
    path = tmp_path / "store.duckdb"
    store.import_campaign(path, read_source(write_campaign(tmp_path / "camp")))
    return path


def _value(db, table, key, record_id, column):
    con = duckdb.connect(str(db), read_only=True)
    try:
        return con.execute(f"SELECT {column} FROM {table} WHERE {key} = ?", [record_id]).fetchone()[0]
    finally:
        con.close()


def test_correction_converts_units_and_keeps_the_old_value(db):
    change = store.correct(db, "trials", "R1", "temperature", "35 degC", who="ana", reason="thermocouple offset")
    # SI Brochure 2019, 2.3.1: t/°C = T/K − 273.15 (exact by definition; tolerance 1e-9 K for float rounding).
    assert _value(db, "trials", "trial_id", "R1", "temperature") == pytest.approx(308.15, abs=1e-9)
    assert float(change.old_value) == pytest.approx(303.15, abs=1e-9)
    store.correct(db, "trials", "R1", "catalyst_mass", "0.013 g")
    # SI prefixes: 1 mg = 1e-6 kg, 1 g = 1e-3 kg (relative tolerance 1e-12).
    assert _value(db, "trials", "trial_id", "R1", "catalyst_mass") == pytest.approx(13e-6, rel=1e-12)
    store.correct(db, "trials", "R1", "catalyst_mass", "14")  # no unit: the column's reference unit, mg
    assert _value(db, "trials", "trial_id", "R1", "catalyst_mass") == pytest.approx(14e-6, rel=1e-12)
    log = store.history(db, "R1")
    assert list(log["column_name"]) == ["temperature", "catalyst_mass", "catalyst_mass"]
    assert log.loc[0, "changed_by"] == "ana" and log.loc[0, "reason"] == "thermocouple offset"
    assert float(log.loc[2, "old_value"]) == pytest.approx(13e-6, rel=1e-12)
    assert log["changed_at"].notna().all()


def test_catalyst_correction_and_listing_all_changes(db):
    store.correct(db, "catalysts", "PdC-A", "dispersion", "30 %")
    store.correct(db, "catalysts", "PdC-A", "metal", "Pt", reason="assay")
    assert _value(db, "catalysts", "catalyst_id", "PdC-A", "dispersion") == pytest.approx(0.30, rel=1e-12)
    assert _value(db, "catalysts", "catalyst_id", "PdC-A", "metal") == "Pt"
    store.correct(db, "trials", "R2", "operator", "cy")
    everything = store.history(db)
    assert list(everything["record_id"]) == ["PdC-A", "PdC-A", "R2"]
    assert list(everything["change_id"]) == [1, 2, 3]


def test_trial_correction_drops_the_cached_fit(db):
    con = duckdb.connect(str(db))
    con.execute("INSERT INTO trial_fits (trial_id, fit_version) VALUES ('R1', 'v'), ('R2', 'v')")
    con.close()
    store.correct(db, "trials", "R1", "limiting_amount", "0.9 mmol")
    con = duckdb.connect(str(db), read_only=True)
    assert [r[0] for r in con.execute("SELECT trial_id FROM trial_fits").fetchall()] == ["R2"]
    con.close()


@pytest.mark.parametrize(("table", "record", "column", "value", "words"), [
    ("trials", "R1", "trial_id", "R9", "cannot be changed"),
    ("catalysts", "PdC-A", "catalyst_id", "X", "cannot be changed"),
    ("trials", "R1", "excluded", "true", "not a correctable column"),
    ("trials", "R1", "measurement", "pressure", "cannot be corrected"),
    ("trials", "R1", "signal_unit", "L", "cannot be corrected"),
    ("trials", "R1", "no_such_column", "1", "not a correctable column"),
    ("trials", "R404", "notes", "x", "no trial 'R404'"),
    ("history", "1", "reason", "x", "takes no corrections"),
    ("trials", "R1", "temperature", "-300 degC", "absolute zero"),
    ("trials", "R1", "temperature", "35 mL", "needs dimension [temperature]"),
    ("trials", "R1", "temperature", "12,5", "not a finite number"),
    ("trials", "R1", "temperature", "", "required but empty"),
    ("trials", "R1", "temperature", "30 degC", "already has"),
    ("trials", "R1", "started_at", "last tuesday", "ISO 8601"),
    ("trials", "R1", "catalyst_id", "nowhere", "neither in the catalysts table"),
    ("trials", "R4", "catalyst_id", "PdC-A", "needs the catalyst mass"),
    ("trials", "R2", "gas_molar_mass", "", "required for a mass_loss trial"),
    ("catalysts", "PdC-A", "metal", "Qq", "not an element symbol"),
    ("catalysts", "PdC-A", "metal_loading", "150 wt%", "above"),
])
def test_bad_corrections_are_refused_and_change_nothing(db, table, record, column, value, words):
    before = snapshot(db)
    with pytest.raises(CatalogError, match=re.escape(words)):
        store.correct(db, table, record, column, value)
    after = snapshot(db)
    assert all(before[name].equals(after[name]) for name in before)
    assert store.history(db).empty


def test_exclude_include_are_reversible_and_recorded(db):
    store.exclude(db, "trials", "R2", who="ben", reason="leaking septum")
    assert "R2" not in set(store.load_campaign(db)[1]["trial_id"])
    with pytest.raises(CatalogError, match="already excluded"):
        store.exclude(db, "trials", "R2")
    store.include(db, "trials", "R2", who="ben", reason="septum was fine")
    assert "R2" in set(store.load_campaign(db)[1]["trial_id"])
    store.exclude(db, "catalysts", "PdC-A", reason="contaminated batch")
    assert "R1" not in set(store.load_campaign(db)[1]["trial_id"])  # a catalyst's exclusion hides its trials
    log = store.history(db)
    assert list(zip(log["record_id"], log["old_value"], log["new_value"], strict=True)) == [
        ("R2", "false", "true"), ("R2", "true", "false"), ("PdC-A", "false", "true")]
    assert store.table_counts(db)["trials"] == 4  # nothing deleted


def test_purge_deletes_for_good_but_leaves_the_record_in_the_history(db):
    with pytest.raises(CatalogError, match="still has 1 trial"):
        store.purge(db, "catalysts", "CoSi-C")
    change = store.purge(db, "trials", "R3", who="ana", reason="duplicate run")
    counts = store.table_counts(db)
    assert (counts["trials"], counts["trace_points"]) == (3, 30)
    kept = json.loads(change.old_value)
    assert kept["record"]["trial_id"] == "R3" and kept["trace_points"] == 10
    assert float(kept["record"]["temperature"]) == pytest.approx(323.15, abs=1e-9)
    store.purge(db, "catalysts", "CoSi-C")
    assert store.table_counts(db)["catalysts"] == 2
    assert list(store.history(db)["column_name"]) == [store.PURGED, store.PURGED]


def test_cli_commands(db, capsys, monkeypatch):
    assert main(["correct", "trial", "R1", "temperature", "31 degC", "--db", str(db), "--reason", "recalibrated"]) == 0
    # stored as 304.15 K, shown back in the column's display unit
    assert "temperature: 30 degC -> 31 degC" in capsys.readouterr().out
    assert main(["exclude", "catalyst", "RuAl-B", "--db", str(db)]) == 0
    assert main(["include", "catalyst", "RuAl-B", "--db", str(db)]) == 0
    assert main(["correct", "trial", "R1", "trial_id", "X", "--db", str(db)]) == 2
    assert "cannot be changed" in capsys.readouterr().err
    # pytest's stdin is not a terminal: without --yes the purge must refuse rather than guess.
    assert main(["purge", "trial", "R4", "--db", str(db)]) == 2
    assert "--yes" in capsys.readouterr().err
    assert store.table_counts(db)["trials"] == 4
    monkeypatch.setattr("sys.stdin.isatty", lambda: True)
    monkeypatch.setattr("builtins.input", lambda prompt: "R3")
    assert main(["purge", "trial", "R4", "--db", str(db)]) == 2  # typed the wrong id
    assert "does not match" in capsys.readouterr().err
    monkeypatch.setattr("builtins.input", lambda prompt: "R4")
    assert main(["purge", "trial", "R4", "--db", str(db)]) == 0
    assert main(["purge", "trial", "R2", "--yes", "--db", str(db)]) == 0
    capsys.readouterr()
    assert main(["history", "--db", str(db)]) == 0
    out = capsys.readouterr().out
    assert "recalibrated" in out and "(record)" in out
    assert main(["history", "R1", "--db", str(db)]) == 0
    assert "RuAl-B" not in capsys.readouterr().out


@pytest.mark.parametrize("text", [*HOSTILE, "x" * 100_000])
def test_hostile_text_round_trips_through_import_and_correct(tmp_path, text):
    cleaned = text.replace("\n", " ")  # one id per CSV line
    frame = pd.read_csv(pd.io.common.StringIO(TRIALS), dtype=str, keep_default_na=False)
    frame.loc[0, "trial_id"] = cleaned
    frame["notes"] = ["", text, "", ""]
    frame.loc[0, "operator"] = cleaned
    traces = trace_rows().replace("\nR1,", "\n" + '"' + cleaned.replace('"', '""') + '",')
    folder = write_campaign(tmp_path / "camp", trials=frame.to_csv(index=False), traces=traces)
    path = tmp_path / "hostile.duckdb"
    report = store.import_campaign(path, read_source(folder))
    assert (report.n_trials, report.n_points) == (4, 40)
    assert _value(path, "trials", "trial_id", cleaned, "operator") == cleaned
    assert _value(path, "trials", "trial_id", "R2", "notes") == text
    assert len(store.load_trace(path, cleaned)) == 10
    store.correct(path, "trials", cleaned, "notes", text, reason=text)
    assert _value(path, "trials", "trial_id", cleaned, "notes") == text
    log = store.history(path, cleaned)
    assert (log.loc[0, "record_id"], log.loc[0, "new_value"], log.loc[0, "reason"]) == (cleaned, text, text)
    assert store.table_counts(path)["trials"] == 4


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(text=st.text(st.characters(blacklist_categories=("Cs", "Cc")), min_size=1, max_size=200)
       .filter(lambda s: s.strip() == s and s.strip() != ""))
@pytest.mark.slow
def test_any_printable_note_is_stored_verbatim(db, text):
    """Any text without control characters or surrounding spaces comes back exactly (import cells are trimmed)."""
    if _value(db, "trials", "trial_id", "R3", "notes") != text:  # hypothesis may repeat a value; that is refused
        store.correct(db, "trials", "R3", "notes", text)
    assert _value(db, "trials", "trial_id", "R3", "notes") == text


def test_purge_import_removes_that_import_and_records_it(tmp_path):
    db = tmp_path / "demo.duckdb"
    report = store.import_campaign(db, read_source(write_campaign(tmp_path / "camp")), demo=True)
    assert len(store.list_catalysts(db)) == 3
    change = store.purge_import(db, report.import_id, who="tester", reason="demo no longer needed")
    assert store.table_counts(db) == {"imports": 0, "catalysts": 0, "trials": 0, "trace_points": 0}
    logged = store.history(db)
    assert list(logged["table_name"]) == ["imports"] and logged["changed_by"].iloc[0] == "tester"
    assert '"trials": 4' in change.old_value and '"trace_points": 40' in change.old_value
    with pytest.raises(CatalogError, match="no import #99"):
        store.purge_import(db, 99)
