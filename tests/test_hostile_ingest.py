"""Hostile input at the importer: every attack ends in a located message, exit 2, no traceback, the store unchanged.

Each case edits a valid campaign (tests/test_import.py) the way a careless or hostile user could, imports it with the
CLI into a real DuckDB file that already holds a campaign, and checks the message names the file, row and column.
"""

from __future__ import annotations

import io
import re
import shutil
import struct
import zipfile
from pathlib import Path

import openpyxl
import pandas as pd
import pytest
from support import CATALYSTS, TRIALS, replace_cell, snapshot, trace_rows, write_campaign

from catalog import store
from catalog.cli import main
from catalog.ingest import archive
from catalog.ingest.sources import read_source


@pytest.fixture(scope="module")
def seeded(tmp_path_factory) -> tuple[Path, dict]:
    root = tmp_path_factory.mktemp("hostile")
    db = root / "seeded.duckdb"
    store.import_campaign(db, read_source(write_campaign(root / "base")))
    return db, snapshot(db)


def _attack(seeded, tmp_path: Path, target: Path, capsys) -> str:
    """Import ``target`` into a copy of the seeded store with the CLI; assert the clean refusal, return stderr."""
    db = tmp_path / "store.duckdb"
    shutil.copy(seeded[0], db)
    code = main(["import", str(target), "--db", str(db), "--quiet"])
    err = capsys.readouterr().err
    assert code == 2, err
    assert "Traceback" not in err and "internal error" not in err, err
    after = snapshot(db)
    assert all(seeded[1][name].equals(after[name]) for name in seeded[1]), "the store changed"
    return err


def _trials_header() -> str:
    return TRIALS.splitlines()[0]


def _csv(header: str, *rows: str) -> str:
    return "\n".join((header, *rows)) + "\n"


def _add_column(text: str, header: str, value: str) -> str:
    lines = text.splitlines()
    return "\n".join([lines[0] + "," + header] + [line + "," + value for line in lines[1:]]) + "\n"


#: (case id, files to write over the valid campaign, text the message must contain)
CSV_ATTACKS = [
    ("temperature 5000 degC", {"trials": replace_cell(TRIALS, 2, "temperature", "5000")},
     ["trials.csv, row 2, column 'temperature [degC]'", "plausible range"]),
    ("temperature 1e308 degC", {"trials": replace_cell(TRIALS, 3, "temperature", "1e308")},
     ["trials.csv, row 3, column 'temperature [degC]'", "plausible range"]),
    ("temperature 1e400 (inf as text)", {"trials": replace_cell(TRIALS, 2, "temperature", "1e400")},
     ["trials.csv, row 2, column 'temperature [degC]'", "not a finite number"]),
    ("temperature in K far too low", {"trials": TRIALS.replace("temperature [degC]", "temperature [K]")},
     ["column 'temperature [K]'", "plausible range for temperature, 150 K to 1000 K"]),
    ("catalyst mass 1e308 mg", {"trials": replace_cell(TRIALS, 2, "catalyst_mass", "1e308")},
     ["trials.csv, row 2, column 'catalyst_mass [mg]'", "plausible"]),
    ("gas pressure overflows in SI", {"trials": _add_column(TRIALS, "gas_pressure [kPa]", "1.7e308")},
     ["trials.csv, row 2, column 'gas_pressure [kPa]'", "too large to hold once converted to SI"]),
    ("product ratio 1e308", {"trials": replace_cell(TRIALS, 2, "product_ratio", "1e308")},
     ["trials.csv, row 2, column 'product_ratio'", "plausible"]),
    ("time 1e308 h", {"traces": trace_rows().replace("time [s]", "time [h]").replace("R1,60,", "R1,1e308,")},
     ["traces.csv, row 3, column 'time [h]'", "plausible range"]),
    ("time -1e308 s", {"traces": trace_rows().replace("R1,0,", "R1,-1e308,")},
     ["traces.csv, row 2, column 'time [s]'", "plausible range"]),
    ("value overflows in SI", {"traces": re.sub(r"^R3,60,.*$", "R3,60,1e306", trace_rows(), count=1, flags=re.M)},
     ["traces.csv", "column 'value'", "too large to hold once converted to SI"]),
    ("duplicate column in trials, different units",
     {"trials": _add_column(TRIALS, "temperature [K]", "300")},
     ["trials.csv, row 1, column 'temperature [K]'", "column 'temperature' appears twice"]),
    ("duplicate column in catalysts", {"catalysts": _add_column(CATALYSTS, "metal", "Pt")},
     ["catalysts.csv, row 1, column 'metal'", "appears twice"]),
    ("duplicate column in traces", {"traces": _add_column(trace_rows(), "value", "1")},
     ["traces.csv, row 1, column 'value'", "appears twice"]),
    ("semicolon trials", {"trials": TRIALS.replace(",", ";")},
     ["trials.csv, row 1", "separated by ';'", "comma-separated"]),
    ("semicolon traces", {"traces": trace_rows().replace(",", ";")},
     ["traces.csv, row 1", "separated by ';'"]),
    ("tab catalysts", {"catalysts": CATALYSTS.replace(",", "\t")},
     ["catalysts.csv, row 1", "separated by tab"]),
    ("blank trial with a catalyst mass", {"trials": replace_cell(TRIALS, 5, "catalyst_mass", "10")},
     ["trials.csv, row 5, column 'catalyst_mass [mg]'", "blank trial"]),
    ("header-only files", {"catalysts": CATALYSTS.splitlines()[0] + "\n", "trials": _trials_header() + "\n",
                           "traces": "trial_id,time [s],value\n"},
     ["trials.csv: has a header but no data rows"]),
    ("empty trials file", {"trials": ""}, ["trials.csv: is empty"]),
    ("BOM only catalysts", {"catalysts": "\ufeff"}, ["catalysts.csv: is empty"]),
    ("metal 'nan'", {"catalysts": CATALYSTS.replace("PdC-A,Pd,", "PdC-A,nan,")},
     ["catalysts.csv, row 2, column 'metal'", "'nan' is not an element symbol"]),
    ("metal 'NaN'", {"catalysts": CATALYSTS.replace("PdC-A,Pd,", "PdC-A,NaN,")},
     ["catalysts.csv, row 2, column 'metal'", "not an element symbol"]),
    ("empty traces file", {"traces": ""}, ["traces.csv, column 'trial_id': required column is missing"]),
    ("traces header only", {"traces": "trial_id,time [s],value\n"},
     ["trials.csv, row 2, column 'trial_id': trial 'R1' has no trace points in traces.csv"]),
    ("ragged traces row", {"traces": trace_rows().replace("R1,60,", "R1,60,7,8,")},
     ["traces.csv, row 3: has 5 fields where the header has 3"]),
    ("ragged trials row", {"trials": TRIALS.replace("ben,2026-10-01T11:00", "ben,2026-10-01T11:00,extra")},
     ["trials.csv, row 3: has 14 fields where the header has 13"]),
    ("unclosed quote in trials", {"trials": TRIALS.replace("R4,,50", '"R4,,50')},
     ["trials.csv, row", "cannot be read as CSV", "a quote is not closed"]),
    ("a bare number as a start time", {"trials": replace_cell(TRIALS, 2, "started_at", "2026")},
     ["trials.csv, row 2, column 'started_at'", "'2026' is not an ISO 8601 date-time"]),
    ("binary junk in traces", {"traces": trace_rows().replace("R2,60,", "R2,\x00\x01,")},
     ["traces.csv, row", "column 'time [s]'"]),
    ("time in a temperature unit", {"traces": trace_rows().replace("time [s]", "time [degC]")},
     ["traces.csv, row 1, column 'time [degC]'"]),
    ("not UTF-8", {"catalysts": CATALYSTS.replace("carbon", "carb\udcffon")}, ["catalysts.csv", "not UTF-8"]),
]


@pytest.mark.parametrize("files, words", [(f, w) for _, f, w in CSV_ATTACKS], ids=[c for c, _, _ in CSV_ATTACKS])
def test_csv_attack_is_refused_cleanly(seeded, tmp_path, capsys, files, words):
    texts = {"catalysts": CATALYSTS, "trials": TRIALS, "traces": trace_rows(), **files}
    folder = tmp_path / "attack"
    folder.mkdir()
    for name, text in texts.items():
        (folder / f"{name}.csv").write_bytes(text.encode("utf-8", errors="surrogateescape"))
    err = _attack(seeded, tmp_path, folder, capsys)
    for word in words:
        assert word in err, err


def test_empty_metal_cell_imports_as_no_metal(tmp_path):
    # Under pandas 3 an empty text cell read with the string dtype is NaN; it must reach the store as NULL.
    folder = write_campaign(tmp_path / "c", catalysts=CATALYSTS.replace("PdC-A,Pd,", "PdC-A,,"))
    db = tmp_path / "store.duckdb"
    store.import_campaign(db, read_source(folder))
    stored = snapshot(db)["catalysts"].set_index("catalyst_id")
    assert pd.isna(stored.loc["PdC-A", "metal"]) and stored.loc["RuAl-B", "metal"] == "Ru"


# ----- workbooks


def _workbook(path: Path, sheets: dict[str, list[list]]) -> Path:
    book = openpyxl.Workbook()
    book.remove(book.active)
    for name, rows in sheets.items():
        sheet = book.create_sheet(name)
        for row in rows:
            sheet.append(row)
    book.save(path)
    return path


def _sheets(trials: str = TRIALS) -> dict[str, list[list]]:
    return {name: [line.split(",") for line in text.splitlines()]
            for name, text in (("catalysts", CATALYSTS), ("trials", trials), ("traces", trace_rows()))}


def _inflate_cell(book: Path, target: Path, placeholder: str, size: int) -> Path:
    """Copy a workbook, writing ``size`` bytes of 'x' where ``placeholder`` was (a cell a zip bomb inflates)."""
    with zipfile.ZipFile(book) as src, zipfile.ZipFile(target, "w", zipfile.ZIP_DEFLATED) as out:
        for info in src.infolist():
            data = src.read(info)
            if placeholder.encode() not in data:
                out.writestr(info.filename, data)
                continue
            head, tail = data.split(placeholder.encode(), 1)
            with out.open(info.filename, "w", force_zip64=True) as member:
                member.write(head)
                block = b"x" * (1 << 20)
                for _ in range(size // len(block)):
                    member.write(block)
                member.write(tail)
    return target


def test_workbook_bomb_is_refused_before_parsing(seeded, tmp_path, capsys, monkeypatch):
    # The same attack as the 1 GiB cell below, scaled down with the limit so it runs in the quick loop.
    monkeypatch.setattr(archive, "WORKBOOK_UNPACKED_LIMIT", 2 * 2**20)
    book = _workbook(tmp_path / "plain.xlsx", _sheets(replace_cell(TRIALS, 2, "operator", "BOMB")))
    bomb = _inflate_cell(book, tmp_path / "bomb.xlsx", "BOMB", 4 * 2**20)
    err = _attack(seeded, tmp_path, bomb, capsys)
    assert "bomb.xlsx: 'xl/" in err and "unpacks to more than the" in err


@pytest.mark.slow
def test_one_gib_cell_workbook_is_refused_with_bounded_memory(seeded, tmp_path, capsys):
    import resource

    book = _workbook(tmp_path / "plain.xlsx", _sheets(replace_cell(TRIALS, 2, "operator", "BOMB")))
    bomb = _inflate_cell(book, tmp_path / "bomb.xlsx", "BOMB", 2**30)
    assert bomb.stat().st_size < 3 * 2**20  # a small upload
    before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    err = _attack(seeded, tmp_path, bomb, capsys)
    grown_mib = (resource.getrusage(resource.RUSAGE_SELF).ru_maxrss - before) / 1024  # ru_maxrss is KiB on Linux
    assert "unpacks to more than the 512 MB allowed" in err
    assert grown_mib < 100, grown_mib


def _lie_about_size(path: Path, member: str, declared: int) -> None:
    """Rewrite the uncompressed size a member's local and central headers declare (the data stay as they are)."""
    data = bytearray(path.read_bytes())
    name = member.encode()
    for signature, size_at in ((b"PK\x03\x04", 22), (b"PK\x01\x02", 24)):
        at = data.find(signature)
        while at >= 0:
            name_at = at + (30 if signature == b"PK\x03\x04" else 46)
            if data[name_at:name_at + len(name)] == name:
                struct.pack_into("<I", data, at + size_at, declared)
            at = data.find(signature, at + 4)
    path.write_bytes(bytes(data))


def test_workbook_member_declaring_a_false_size_is_refused(seeded, tmp_path, capsys):
    book = _workbook(tmp_path / "lying.xlsx", _sheets())
    sheet = next(n for n in zipfile.ZipFile(book).namelist() if n.startswith("xl/worksheets/"))
    _lie_about_size(book, sheet, 100)
    err = _attack(seeded, tmp_path, book, capsys)
    assert "lying.xlsx" in err and "damaged" in err


def test_workbook_that_is_not_a_zip(seeded, tmp_path, capsys):
    fake = tmp_path / "fake.xlsx"
    fake.write_bytes(b"catalyst_id,metal\nA,Pt\n")
    assert "fake.xlsx: not a readable zip container" in _attack(seeded, tmp_path, fake, capsys)


def test_workbook_duplicate_column_is_refused(seeded, tmp_path, capsys):
    sheets = _sheets()
    sheets["trials"] = [row + [value] for row, value in zip(sheets["trials"], ["temperature [K]"] + ["300"] * 4,
                                                               strict=True)]
    err = _attack(seeded, tmp_path, _workbook(tmp_path / "dup.xlsx", sheets), capsys)
    assert "dup.xlsx, sheet 'trials', row 1, column 'temperature [K]'" in err and "appears twice" in err


def test_workbook_with_header_only_sheets_writes_nothing(seeded, tmp_path, capsys):
    sheets = {name: rows[:1] for name, rows in _sheets().items()}
    err = _attack(seeded, tmp_path, _workbook(tmp_path / "empty.xlsx", sheets), capsys)
    assert "empty.xlsx, sheet 'trials': has a header but no data rows" in err


def test_stream_member_stops_on_the_real_byte_count():
    buffer = io.BytesIO()
    with zipfile.ZipFile(buffer, "w", zipfile.ZIP_DEFLATED) as z:
        z.writestr("big.xml", b"x" * 5_000_000)
    with zipfile.ZipFile(buffer) as z:
        seen = []
        with pytest.raises(Exception, match="unpacks to more than"):
            archive.stream_member(z, z.getinfo("big.xml"), 1_000_000, "upload.zip", seen.append)
    assert sum(map(len, seen)) <= 1_000_000


@pytest.mark.parametrize("column, value, words", [
    # Clearing the id is refused before the blank-trial rule (store.corrections): a blank is a new experiment.
    ("catalyst_id", "", "would turn trial 'R1' into an uncatalysed blank"),
    ("temperature", "5000 degC", "plausible range for temperature"),
    ("temperature", "1e308 degC", "plausible range for temperature"),
    ("catalyst_mass", "1e308 kg", "plausible range for catalyst_mass"),
])
def test_correction_goes_through_the_same_checks(seeded, tmp_path, capsys, column, value, words):
    db = tmp_path / "store.duckdb"
    shutil.copy(seeded[0], db)
    code = main(["correct", "trial", "R1", column, value, "--db", str(db), "--reason", "hostile"])
    err = capsys.readouterr().err
    assert code == 2 and words in err and "Traceback" not in err, err
    assert snapshot(db)["trials"].equals(seeded[1]["trials"])
