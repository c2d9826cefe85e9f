"""Property and fuzz tests of the importer: every outcome is a clean import or a clear CatalogError with the
database unchanged, never another exception.

Random valid campaigns and random corruptions of them (bad numbers, missing columns, duplicate ids, unknown catalyst
references, non-increasing time, junk bytes, truncated files, BOM and CRLF variants). Real DuckDB files.
"""

from __future__ import annotations

import shutil
import tempfile
from pathlib import Path

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from support import snapshot, write_campaign

from catalog import store
from catalog.errors import CatalogError
from catalog.ingest.sources import read_source

FILES = ("catalysts.csv", "trials.csv", "traces.csv")


@pytest.fixture(scope="module")
def seeded(tmp_path_factory) -> tuple[Path, dict]:
    """A store that already holds a small campaign (so a bad import has something to leave untouched), and its
    table snapshot; every example imports into a fresh copy of it."""
    root = tmp_path_factory.mktemp("fuzz")
    db = root / "seeded.duckdb"
    store.import_campaign(db, read_source(write_campaign(root / "small")))
    return db, snapshot(db)


@st.composite
def campaigns(draw) -> dict[str, bytes]:
    """A valid three-file campaign: 1-3 catalysts, 1-4 trials (some blank), 2-6 increasing points each."""
    n_cat = draw(st.integers(1, 3))
    metals = draw(st.lists(st.sampled_from(["Pt", "Pd", "Ru", "Rh", "Ni", "Co", ""]), min_size=n_cat, max_size=n_cat))
    catalysts = ["catalyst_id,metal,metal_loading [wt%],dispersion [%]"]
    for i, metal in enumerate(metals):
        loading = draw(st.floats(0.1, 20, allow_nan=False))
        dispersion = draw(st.floats(1, 100, allow_nan=False))
        catalysts.append(f"FC{i},{metal},{loading!r},{dispersion!r}")
    trials = ["trial_id,catalyst_id,temperature [degC],measurement,signal_unit,catalyst_mass [mg]"]
    traces = ["trial_id,time [s],value"]
    for j in range(draw(st.integers(1, 4))):
        catalyst = draw(st.sampled_from([f"FC{i}" for i in range(n_cat)] + [""]))
        mass = repr(draw(st.floats(0.5, 100, allow_nan=False))) if catalyst else ""
        trials.append(f"FT{j},{catalyst},{draw(st.floats(-50, 300, allow_nan=False))!r},gas_volume,mL,{mass}")
        steps = draw(st.lists(st.floats(0.5, 600, allow_nan=False), min_size=2, max_size=6))
        t = 0.0
        for step in steps:
            traces.append(f"FT{j},{t!r},{draw(st.floats(0, 1e3, allow_nan=False))!r}")
            t += step
    tables = (catalysts, trials, traces)
    return {name: ("\n".join(rows) + "\n").encode() for name, rows in zip(FILES, tables, strict=True)}


def _bad_number(files, data):
    name = data.draw(st.sampled_from(FILES))
    lines = files[name].decode().splitlines()
    row = data.draw(st.integers(1, len(lines) - 1))
    cells = lines[row].split(",")
    col = data.draw(st.integers(2, len(cells) - 1)) if len(cells) > 2 else len(cells) - 1
    cells[col] = data.draw(st.sampled_from(["abc", "1,5", "nan", "inf", "-", "1e999", "--3", "0x10", " "]))
    lines[row] = ",".join(cells)
    return {**files, name: ("\n".join(lines) + "\n").encode()}


def _drop_column(files, data):
    name = data.draw(st.sampled_from(FILES))
    rows = [line.split(",") for line in files[name].decode().splitlines()]
    col = data.draw(st.integers(0, len(rows[0]) - 1))
    return {**files, name: ("\n".join(",".join(r[:col] + r[col + 1:]) for r in rows) + "\n").encode()}


def _duplicate_row(files, data):
    name = data.draw(st.sampled_from(FILES[:2]))
    lines = files[name].decode().splitlines()
    return {**files, name: ("\n".join(lines + [lines[1]]) + "\n").encode()}


def _unknown_catalyst(files, data):
    return {**files, "trials.csv": files["trials.csv"].replace(b",FC0,", b",NOPE,")}


def _time_backwards(files, data):
    lines = files["traces.csv"].decode().splitlines()
    row = data.draw(st.integers(2, len(lines) - 1))
    trial, _, value = lines[row].split(",")
    lines[row] = f"{trial},{data.draw(st.floats(-1e3, 0, allow_nan=False))!r},{value}"
    return {**files, "traces.csv": ("\n".join(lines) + "\n").encode()}


def _junk_bytes(files, data):
    name = data.draw(st.sampled_from(FILES))
    text = files[name]
    at = data.draw(st.integers(0, len(text)))
    return {**files, name: text[:at] + data.draw(st.binary(min_size=1, max_size=12)) + text[at:]}


def _truncate(files, data):
    name = data.draw(st.sampled_from(FILES))
    return {**files, name: files[name][:data.draw(st.integers(0, len(files[name]) - 1))]}


def _bom(files, data):
    name = data.draw(st.sampled_from(FILES))
    return {**files, name: b"\xef\xbb\xbf" + files[name]}


def _crlf(files, data):
    return {name: text.replace(b"\n", b"\r\n") for name, text in files.items()}


def _missing_file(files, data):
    return {name: text for name, text in files.items() if name != data.draw(st.sampled_from(FILES))}


CORRUPTIONS = (_bad_number, _drop_column, _duplicate_row, _unknown_catalyst, _time_backwards, _junk_bytes, _truncate,
               _bom, _crlf, _missing_file)


def _import_into_copy(seeded: tuple[Path, dict], files: dict[str, bytes]):
    """Import into a copy of the seeded store; return (report or error, snapshot before, snapshot after)."""
    with tempfile.TemporaryDirectory() as work:
        folder = Path(work) / "camp"
        folder.mkdir()
        for name, text in files.items():
            (folder / name).write_bytes(text)
        db = Path(work) / "store.duckdb"
        shutil.copy(seeded[0], db)
        before = seeded[1]
        try:
            outcome = store.import_campaign(db, read_source(folder))
        except CatalogError as exc:
            outcome = exc
        return outcome, before, snapshot(db)


@pytest.mark.slow
@settings(max_examples=100, deadline=None)
@given(files=campaigns())
def test_valid_campaigns_import_completely(seeded, files):
    outcome, before, after = _import_into_copy(seeded, files)
    assert not isinstance(outcome, CatalogError), str(outcome)
    n_trials = files["trials.csv"].count(b"\n") - 1
    assert outcome.n_trials == n_trials
    assert len(after["trials"]) == len(before["trials"]) + n_trials
    assert len(after["trace_points"]) == len(before["trace_points"]) + files["traces.csv"].count(b"\n") - 1


@pytest.mark.slow
@settings(max_examples=200, deadline=None)
@given(files=campaigns(), corruption=st.sampled_from(CORRUPTIONS), data=st.data())
def test_corrupted_campaigns_import_cleanly_or_change_nothing(seeded, files, corruption, data):
    outcome, before, after = _import_into_copy(seeded, corruption(files, data))
    if isinstance(outcome, CatalogError):
        assert str(outcome).strip()
        assert all(before[name].equals(after[name]) for name in before)
    else:
        assert len(after["trials"]) == len(before["trials"]) + outcome.n_trials
        assert len(after["imports"]) == len(before["imports"]) + 1
