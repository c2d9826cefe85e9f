"""Import: round trip, every bad-input case, all-or-nothing, re-import without duplicates, units to SI.

Every store test uses a real DuckDB file in tmp_path.
"""

from __future__ import annotations

import re
from pathlib import Path

import duckdb
import numpy as np
import pandas as pd
import periodictable
import pytest
from scipy import constants
from support import CATALYSTS, TRIALS, replace_cell, snapshot, trace_rows, write_campaign

from catalog import store
from catalog.cli import main
from catalog.datasets import bulk
from catalog.errors import DatabaseBusyError, ValidationError
from catalog.ingest.sources import read_source
from catalog.units import KNOWN_CONVERTERS, pint_converter, si_converter


@pytest.fixture
def campaign(tmp_path) -> Path:
    return write_campaign(tmp_path / "camp")


@pytest.fixture
def db(tmp_path) -> Path:
    return tmp_path / "store.duckdb"


def test_round_trip_counts_and_si(campaign, db):
    report = store.import_campaign(db, read_source(campaign))
    assert (report.n_catalysts, report.n_trials, report.n_points) == (3, 4, 40)
    tables = snapshot(db)
    trials = tables["trials"].set_index("trial_id")
    assert trials.loc["R1", "temperature"] == pytest.approx(303.15)  # ITS-90 offset 273.15 K (definition of °C)
    assert trials.loc["R1", "catalyst_mass"] == pytest.approx(12.5e-6)
    assert trials.loc["R2", "gas_molar_mass"] == pytest.approx(2.016e-3)
    assert trials.loc["R3", "headspace_volume"] == pytest.approx(60e-6)
    assert pd.isna(trials.loc["R4", "catalyst_id"])  # blank
    cats = tables["catalysts"].set_index("catalyst_id")
    assert cats.loc["PdC-A", "metal_loading"] == pytest.approx(0.05)
    assert cats.loc["CoSi-C", "site_density"] == pytest.approx(35e-3)  # 35 umol/g = 0.035 mol/kg
    assert cats.loc["PdC-A", "surface_area"] == pytest.approx(900e3)
    points = tables["trace_points"]
    r3 = points[points.trial_id == "R3"].sort_values("t")
    assert r3["value"].iloc[0] == pytest.approx(101300.0)  # kPa -> Pa
    imports = tables["imports"]
    assert len(imports) == 1 and len(imports.loc[0, "content_hash"]) == 64


def test_cli_import_twice_does_not_duplicate(campaign, db, capsys):
    assert main(["import", str(campaign), "--db", str(db), "--quiet"]) == 0
    first = snapshot(db)
    assert main(["import", str(campaign), "--db", str(db), "--quiet"]) == 0
    out = capsys.readouterr().out
    assert "nothing written" in out
    after = snapshot(db)
    for name in ("catalysts", "trials", "trace_points", "imports"):
        pd.testing.assert_frame_equal(first[name], after[name])


def test_reimport_edited_campaign_skips_identical_rows(campaign, db):
    store.import_campaign(db, read_source(campaign))
    (campaign / "trials.csv").write_text(TRIALS + "R5,PdC-A,30,gas_volume,mL,12.5,0.8,3,,,,ana,\n")
    (campaign / "traces.csv").write_text(trace_rows() + "R5,0,1.0\nR5,60,2.0\nR5,120,2.5\n")
    report = store.import_campaign(db, read_source(campaign))
    assert report.n_trials == 1 and report.n_points == 3
    assert sorted(report.skipped_trials) == ["R1", "R2", "R3", "R4"]
    assert len(report.skipped_catalysts) == 3
    assert len(snapshot(db)["trials"]) == 5


def test_reimport_converts_new_trials_of_mixed_units_and_keeps_their_file_order(campaign, db):
    """New trials whose units interleave with stored ones: each gets its own unit's factor, in file order."""
    store.import_campaign(db, read_source(campaign))
    lines = TRIALS.splitlines()
    extra = ["R5,PdC-A,30,gas_volume,mL,12.5,0.8,3,,,,ana,", "R6,CoSi-C,50,pressure,kPa,15,0.8,3,,60,,ana,"]
    (campaign / "trials.csv").write_text("\n".join([lines[0], extra[1], *lines[1:], extra[0]]) + "\n")
    new_rows = ["R6,0,100.5", "R6,30,101.0", "R5,0,1.5", "R5,30,2.5", "R5,90,3.0"]
    body = trace_rows().splitlines()
    (campaign / "traces.csv").write_text("\n".join([body[0], *new_rows[:2], *body[1:], *new_rows[2:]]) + "\n")
    report = store.import_campaign(db, read_source(campaign))
    assert report.n_trials == 2 and report.n_points == 5
    con = duckdb.connect(str(db), read_only=True)
    stored = con.execute("SELECT trial_id, t, value FROM trace_points WHERE trial_id IN ('R5', 'R6')").fetchall()
    con.close()
    # 1 mL = 1e-6 m^3 (the litre is 1 dm^3) and 1 kPa = 1e3 Pa: SI Brochure, 9th ed., table 8 and the SI prefixes.
    factor = {"R5": 1e-6, "R6": 1e3}
    expected = [(r.split(",")[0], float(r.split(",")[1]), float(r.split(",")[2]) * factor[r.split(",")[0]])
                for r in new_rows]
    assert [(trial, t) for trial, t, _ in stored] == [(trial, t) for trial, t, _ in expected]  # storage order
    assert [v for _, _, v in stored] == pytest.approx([v for _, _, v in expected], rel=1e-12)


def test_reimport_with_a_changed_trace_is_refused_and_keeps_old(campaign, db):
    """A stored trial whose points differ in the file is a conflict; the points read for the comparison are rolled
    back with everything else, and an identical re-import adds no second copy of any trace."""
    store.import_campaign(db, read_source(campaign))
    before = snapshot(db)
    write_campaign(campaign, traces=trace_rows().replace("R1,60,", "R1,61,", 1))
    with pytest.raises(ValidationError) as err:
        store.import_campaign(db, read_source(campaign))
    assert "'R1' is already stored with different trace points" in str(err.value)
    assert "'R2'" not in str(err.value)
    after = snapshot(db)
    for name in ("trials", "trace_points", "imports"):
        pd.testing.assert_frame_equal(before[name], after[name])
    write_campaign(campaign, trials=TRIALS + "R5,PdC-A,30,gas_volume,mL,12.5,0.8,3,,,,ana,\n",
                   traces=trace_rows() + "R5,0,1.0\nR5,60,2.0\n")
    assert store.import_campaign(db, read_source(campaign)).n_points == 2
    assert len(snapshot(db)["trace_points"]) == len(before["trace_points"]) + 2


def test_reimport_with_changed_values_is_refused_and_keeps_old(campaign, db):
    store.import_campaign(db, read_source(campaign))
    before = snapshot(db)
    write_campaign(campaign, trials=TRIALS.replace("R1,PdC-A,30", "R1,PdC-A,35"))
    with pytest.raises(ValidationError) as err:
        store.import_campaign(db, read_source(campaign))
    assert "'R1' is already stored with different temperature" in str(err.value)
    pd.testing.assert_frame_equal(before["trials"], snapshot(db)["trials"])


def test_hostile_id_is_stored_verbatim(tmp_path, db):
    evil = "K'); DROP TABLE trials;--"
    cats = CATALYSTS.replace("PdC-A", f'"{evil}"')
    trials = TRIALS.replace("PdC-A", f'"{evil}"')
    folder = write_campaign(tmp_path / "evil", catalysts=cats, trials=trials)
    store.import_campaign(db, read_source(folder))
    tables = snapshot(db)
    assert evil in set(tables["catalysts"]["catalyst_id"])
    assert len(tables["trials"]) == 4


def test_bom_and_crlf_are_valid(tmp_path, db):
    folder = tmp_path / "crlf"
    folder.mkdir()
    for name, text in (("catalysts.csv", CATALYSTS), ("trials.csv", TRIALS), ("traces.csv", trace_rows())):
        (folder / name).write_bytes(b"\xef\xbb\xbf" + text.replace("\n", "\r\n").encode())
    report = store.import_campaign(db, read_source(folder))
    assert (report.n_catalysts, report.n_trials, report.n_points) == (3, 4, 40)


def test_xlsx_workbook_imports_same_rows(campaign, tmp_path, db):
    book = tmp_path / "camp.xlsx"
    with pd.ExcelWriter(book, engine="openpyxl") as writer:
        for sheet in ("catalysts", "trials", "traces"):
            pd.read_csv(campaign / f"{sheet}.csv", dtype=str, keep_default_na=False).to_excel(writer, sheet_name=sheet, index=False)
    report = store.import_campaign(db, read_source(book))
    assert (report.n_catalysts, report.n_trials, report.n_points) == (3, 4, 40)


# (file, spreadsheet row, column, new text, expected words in the message)
BAD_CELLS = [
    ("trials", 2, "temperature", "warm", "not a finite number"),
    ("trials", 2, "temperature", "", "required but empty"),
    ("trials", 3, "temperature", "-300", "absolute zero"),
    ("trials", 2, "catalyst_mass", "-4", "must be above"),
    ("trials", 3, "headspace_volume", "-1", "must be above"),
    ("trials", 2, "limiting_amount", "-0.5", "must be above"),
    ("catalysts", 2, "dispersion", "140", "above"),
    ("catalysts", 3, "metal_loading", "-2", "must be above"),
    ("catalysts", 2, "dispersion", "0", "must be above"),
    ("trials", 2, "measurement", "colour_change", "not one of"),
    ("trials", 2, "signal_unit", "kPa", "needs dimension"),
    ("trials", 2, "signal_unit", "flurbs", "not a unit"),
    ("trials", 2, "catalyst_id", "NoSuchCat", "neither in the catalysts table nor in the database"),
    ("trials", 2, "catalyst_mass", "", "needs the catalyst mass"),
    ("trials", 3, "gas_molar_mass", "", "required for a mass_loss trial"),
    ("catalysts", 3, "catalyst_id", "PdC-X", "used more than once"),
    ("trials", 3, "trial_id", "S1", "used more than once"),
    ("catalysts", 2, "metal", "Xx", "not an element symbol"),
    ("trials", 2, "started_at", "last tuesday", "ISO 8601"),
]


@pytest.mark.parametrize("file,row,column,value,words", BAD_CELLS)
def test_bad_cell_is_located_and_changes_nothing(campaign, db, file, row, column, value, words):
    store.import_campaign(db, read_source(write_campaign(campaign.parent / "base")))  # earlier data must survive
    before = snapshot(db)
    texts = {"catalysts": CATALYSTS.replace("PdC-A", "PdC-X").replace("RuAl-B", "RuAl-Y").replace("CoSi-C", "CoSi-Z"),
             "trials": TRIALS.replace("PdC-A", "PdC-X").replace("RuAl-B", "RuAl-Y").replace("CoSi-C", "CoSi-Z")
             .replace("R1,", "S1,").replace("R2,", "S2,").replace("R3,", "S3,").replace("R4,", "S4,")}
    traces = trace_rows().replace("R", "S")
    texts[file] = replace_cell(texts[file], row, column, value)
    folder = write_campaign(campaign.parent / "bad", texts["catalysts"], texts["trials"], traces)
    with pytest.raises(ValidationError) as err:
        store.import_campaign(db, read_source(folder))
    problems = err.value.problems
    hit = [p for p in problems if p.file == f"{file}.csv" and p.row == row and words in p.message]
    assert hit, f"no located problem for {file} row {row} {column}: {[str(p) for p in problems]}"
    assert column in (hit[0].column or "")
    after = snapshot(db)
    for name in before:
        pd.testing.assert_frame_equal(before[name], after[name])


@pytest.mark.parametrize(
    "edit,row,words",
    [
        (lambda t: t.replace("R1,60,", "R1,sixty,", 1), 3, "time 'sixty' is not a finite number"),
        (lambda t: t.replace("R1,60,", "R1,0,", 1), 3, "does not increase"),
        (lambda t: t + "R9,0,1.0\n", 42, "not in the trials table"),
        (lambda t: "\n".join(line for line in t.splitlines() if not line.startswith("R4")) + "\n", 5, "has no trace points"),
        (lambda t: re.sub(r"^R2,0,.*$", "R2,0,", t, count=1, flags=re.M), 12, "value '' is not a finite number"),
    ],
)
def test_bad_trace_rows_are_located(campaign, db, edit, row, words):
    write_campaign(campaign, traces=edit(trace_rows()))
    with pytest.raises(ValidationError) as err:
        store.import_campaign(db, read_source(campaign))
    assert any(p.row == row and words in p.message for p in err.value.problems), [str(p) for p in err.value.problems]
    assert not db.exists()  # a failed first import leaves no file behind


def test_missing_required_column_and_every_problem_at_once(campaign, db):
    trials = TRIALS.replace("measurement,", "method,")
    write_campaign(campaign, trials=replace_cell(trials, 3, "temperature", "hot"))
    with pytest.raises(ValidationError) as err:
        store.import_campaign(db, read_source(campaign))
    text = str(err.value)
    assert "column 'measurement': required column is missing" in text
    assert "row 3, column 'temperature [degC]'" in text


def test_missing_file_is_reported(tmp_path, db):
    folder = write_campaign(tmp_path / "c")
    (folder / "traces.csv").unlink()
    with pytest.raises(ValidationError, match="traces.csv: file is missing"):
        read_source(folder)


def test_cli_bad_input_exit_code_and_no_traceback(campaign, db, capsys):
    write_campaign(campaign, trials=replace_cell(TRIALS, 2, "temperature", "warm"))
    assert main(["import", str(campaign), "--db", str(db), "--quiet"]) == 2
    err = capsys.readouterr().err
    assert "trials.csv, row 2, column 'temperature [degC]'" in err
    assert "Traceback" not in err


def test_cli_missing_folder(db, capsys):
    assert main(["import", "/nonexistent/folder", "--db", str(db)]) == 2
    assert "no such folder" in capsys.readouterr().err


def test_database_path_from_environment(campaign, tmp_path, monkeypatch):
    target = tmp_path / "env.duckdb"
    monkeypatch.setenv("CATALOG_DB", str(target))
    assert main(["import", str(campaign), "--quiet"]) == 0
    assert target.exists()


def test_second_writer_gets_busy_message(campaign, db):
    store.import_campaign(db, read_source(campaign))
    import subprocess
    import sys
    import textwrap

    holder = subprocess.Popen(
        [sys.executable, "-c", textwrap.dedent(f"""
            import duckdb, sys, time
            con = duckdb.connect({str(db)!r})
            print('held', flush=True)
            time.sleep(30)
        """)],
        stdout=subprocess.PIPE, text=True,
    )
    try:
        assert holder.stdout.readline().strip() == "held"
        with pytest.raises(DatabaseBusyError, match="in use by another program"):
            with store.connect(db, wait=0.5):
                pass
    finally:
        holder.kill()
        holder.wait()


# ----------------------------------------------------------------------------------------- unit conversions


def test_molar_mass_header_matches_periodictable():
    # IUPAC abridged standard atomic weight of H is 1.008 (CIAAW 2013+), as periodictable 2.1 ships it:
    # M(H2) = 2.016 g/mol, which a `gas_molar_mass [g/mol]` header must turn into 2.016e-3 kg/mol.
    scale, _, _ = si_converter("g/mol", "g/mol")
    assert 2 * periodictable.H.mass * scale == pytest.approx(2.016e-3, rel=1e-6)


def test_volume_units_against_codata_molar_volume():
    # CODATA molar volume of an ideal gas at 273.15 K, 101.325 kPa (scipy.constants): 22.413969545 L/mol.
    vm = constants.physical_constants["molar volume of ideal gas (273.15 K, 101.325 kPa)"][0]  # m^3/mol
    scale, _, _ = si_converter("L", "mL")
    assert 22.413969545 * scale == pytest.approx(vm, rel=1e-9)


@pytest.mark.parametrize(
    "spelling,reference,si_of_one",
    [
        ("degC", "degC", 274.15),   # definition of the Celsius scale: T/K = t/°C + 273.15
        ("degF", "degC", 255.9277777777778),  # T/K = (t/°F + 459.67) × 5/9 (NIST SP 811, appendix B)
        ("bar", "kPa", 1e5),        # 1 bar = 100 kPa exactly (SI brochure, 9th ed., table 8)
        ("atm", "kPa", 101325.0),   # standard atmosphere, scipy.constants.atm
        ("torr", "kPa", constants.torr),
        ("min", "s", 60.0),
        ("h", "s", 3600.0),
        ("wt%", "wt%", 0.01),
        ("umol/g", "umol/g", 1e-3),  # 1 µmol/g = 1e-6 mol / 1e-3 kg
        ("cm^3", "mL", 1e-6),
    ],
)
def test_header_units_convert_to_si(spelling, reference, si_of_one):
    scale, shift, _ = si_converter(spelling, reference)
    assert scale + shift == pytest.approx(si_of_one, rel=1e-12)


@pytest.mark.parametrize("pair", sorted(KNOWN_CONVERTERS))
def test_known_converters_are_pints_own_answers_to_the_last_bit(pair):
    # pint (the reference library for unit spellings) works each pair out afresh: the table must hold its floats
    # bit for bit and its unit name, so a stored value never depends on which of the two converted it.
    scale, shift, understood = KNOWN_CONVERTERS[pair]
    pint_scale, pint_shift, pint_understood = pint_converter(*pair)
    assert (scale.hex(), shift.hex(), understood) == (pint_scale.hex(), pint_shift.hex(), pint_understood)


@pytest.mark.parametrize("spelling,reference", [("C", "degC"), ("Ml", "mL"), ("bar(g)", "kPa")])
def test_misread_lab_spellings_are_refused(spelling, reference):
    from catalog.units import UnitProblem

    with pytest.raises(UnitProblem):
        si_converter(spelling, reference)


def test_gas_over_water_needs_liquid_water_and_a_pressure_above_its_vapour(campaign, db):
    # IAPWS-IF97: p_sat(25 °C) ≈ 3.17 kPa (iapws 1.5.5). A 2 kPa burette reading over water is impossible.
    trials = TRIALS.replace("operator,started_at", "operator,started_at,collected_over_water,gas_pressure [kPa]")
    lines = trials.splitlines()
    lines[1] += ",true,2"
    lines[2:] = [line + ",," for line in lines[2:]]
    write_campaign(campaign, trials="\n".join(lines) + "\n")
    with pytest.raises(ValidationError, match=r"2 kPa is not above the water vapour pressure at 25 °C \(3.17 kPa\)"):
        store.import_campaign(db, read_source(campaign))
    assert not db.exists()


def test_trace_problem_rows_are_file_lines_even_after_blank_lines(campaign, db):
    lines = trace_rows().splitlines()
    lines.insert(3, "")  # a blank line at file line 4
    lines[10] = lines[10].rsplit(",", 1)[0] + ",abc"  # file line 11
    write_campaign(campaign, traces="\n".join(lines) + "\n")
    with pytest.raises(ValidationError) as err:
        store.import_campaign(db, read_source(campaign))
    assert [p.row for p in err.value.problems] == [11]


def test_points_are_stored_in_file_order(tmp_path):
    """Storage order is the file's row order (a join alone reorders rows once DuckDB runs it in parallel)."""
    bulk.write_bulk_campaign(tmp_path / "bulk", n_trials=3000, n_points=150, seed=1)
    db = tmp_path / "x.duckdb"
    store.import_campaign(db, read_source(tmp_path / "bulk"))
    con = duckdb.connect(str(db), read_only=True)
    stored = con.execute("SELECT trial_id, t FROM trace_points").df()  # storage order: no ORDER BY
    con.close()
    written = pd.read_csv(tmp_path / "bulk" / "traces.csv")
    assert (stored["trial_id"].to_numpy() == written.iloc[:, 0].str.strip().to_numpy()).all()
    assert np.array_equal(stored["t"].to_numpy(), written.iloc[:, 1].to_numpy(float))


def test_import_beyond_the_staging_memory_spills_keeps_file_order_and_cleans_up(tmp_path, monkeypatch):
    """A campaign larger than the staging memory limit spills to a private folder, removed afterwards."""
    import functools
    import tempfile

    from catalog.store import db as store_db
    from catalog.store import importer

    scratch = tmp_path / "scratch"
    scratch.mkdir()
    monkeypatch.setattr(tempfile, "tempdir", str(scratch))
    monkeypatch.setattr(importer, "scratch_database", functools.partial(store_db.scratch_database, "48MB"))
    bulk.write_bulk_campaign(tmp_path / "bulk", n_trials=3000, n_points=200, seed=2)
    db = tmp_path / "x.duckdb"
    report = store.import_campaign(db, read_source(tmp_path / "bulk"))
    assert report.n_points == 3000 * 200
    con = duckdb.connect(str(db), read_only=True)
    stored = con.execute("SELECT trial_id FROM trace_points").df()  # storage order: no ORDER BY
    con.close()
    written = pd.read_csv(tmp_path / "bulk" / "traces.csv")
    assert (stored["trial_id"].to_numpy() == written.iloc[:, 0].str.strip().to_numpy()).all()
    assert list(scratch.iterdir()) == []


def test_a_killed_import_s_spill_folder_is_removed_by_the_next_one(tmp_path, monkeypatch):
    """Spill folders carry their process id; one whose process is gone is removed, a live one is kept."""
    import os
    import tempfile

    from catalog.store import db as store_db

    monkeypatch.setattr(tempfile, "tempdir", str(tmp_path))
    dead = tmp_path / f"catalog-scratch-{2**22 + 12345}-abc"  # above Linux's largest process id: never alive
    live = tmp_path / f"catalog-scratch-{os.getpid()}-def"
    for folder in (dead, live):
        folder.mkdir()
        (folder / "spill.tmp").write_bytes(b"x")
    with store_db.scratch_database() as con:
        assert con.execute("SELECT 1").fetchall() == [(1,)]
    assert not dead.exists() and live.exists()
