"""The shortlist table and its CSV / Excel / Parquet files, on the demo campaign in a real DuckDB file."""

from __future__ import annotations

import csv

import numpy as np
import openpyxl
import pandas as pd
import pyarrow.parquet as pq
import pytest

from catalog import __version__
from catalog.analysis import diagnostics, ranking, results
from catalog.analysis.settings import Settings
from catalog.core.hazard import CAUTION
from catalog.errors import CatalogError
from catalog.present import exports, numbers

TOP_K = 3


@pytest.fixture(scope="module")
def demo(demo_db):
    res = results.get_results(demo_db, Settings())
    ranked = ranking.rank(res.catalysts, metric="tof", top_k=TOP_K, n_draws=500, seed=7)
    return res, ranked


@pytest.fixture(scope="module")
def table(demo):
    res, ranked = demo
    return exports.shortlist_table(ranked, res, TOP_K)


def test_required_columns_come_first_in_order(table):
    assert tuple(table.columns[: len(exports.REQUIRED_COLUMNS)]) == exports.REQUIRED_COLUMNS
    for extra in ("flag_titles", "rate_enhancement_low", "rate_enhancement_high", "rank_low", "rank_high",
                  f"p_top{TOP_K}", "metric", "metric_value", "pareto", "dh [kJ/mol]", "ds [J/(mol K)]",
                  "rate_per_mass [mmol/(g h)]",
                  "rate_per_area [mmol/(m2 h)]", "ton_max", "site_basis", "models", "n_temperatures",
                  "t_range [degC]", "reference_temperature [degC]", "excluded", "note", "metal", "support"):
        assert extra in table.columns


def test_rows_follow_the_ranking(demo, table):
    res, ranked = demo
    assert list(table["catalyst_id"]) == list(ranked.index)
    ranks = table["rank"].dropna().to_numpy()
    assert np.all(np.diff(ranks) > 0)


def _within_rounding(shown, exact, low, high):
    """A value rounded to two significant digits of its shorter half-width (GUM 7.2.6) is off by at most half a
    unit of that digit, i.e. by at most (high - low) / 40."""
    shown, exact = np.asarray(shown, float), np.asarray(exact, float)
    ok = np.isfinite(exact)
    np.testing.assert_array_equal(np.isfinite(shown), ok)
    bound = (np.asarray(high, float) - np.asarray(low, float)) / 40 * (1 + 1e-9)
    bound = np.where(np.isfinite(bound), bound, 5e-4 * np.abs(exact))  # no interval: four significant digits
    assert np.all(np.abs(shown[ok] - exact[ok]) <= bound[ok] + 1e-15)


def test_units_are_converted_at_the_edge(demo, table):
    res, _ = demo
    cat = res.catalysts.loc[table["catalyst_id"]]
    # 1 kJ = 1000 J (BIPM SI Brochure, 9th ed. 2019, Table 7 prefixes).
    ea, low, high = (cat[c].to_numpy(float) / 1000 for c in ("ea", "ea_low", "ea_high"))
    _within_rounding(table["ea [kJ/mol]"], ea, low, high)
    np.testing.assert_allclose(table["dh [kJ/mol]"], cat["dh"].to_numpy(float) / 1000, rtol=5e-4)
    # 1 h = 3600 s and 1 g = 1e-3 kg (SI Brochure Table 8): mol/(kg s) -> mmol/(g h) is x 3600; four digits kept.
    np.testing.assert_allclose(table["rate_per_mass [mmol/(g h)]"], cat["rate_per_mass_ref"].to_numpy(float) * 3600,
                               rtol=5e-4)
    # t/°C = T/K - 273.15 (SI Brochure 2.3.1); the default reference is 308.15 K, i.e. 35 °C, with no float noise.
    assert table["reference_temperature [degC]"].iloc[0] == 35.0
    # TOF is already in 1/s.
    _within_rounding(table["tof [1/s]"], *(cat[c].to_numpy(float) for c in ("tof_ref", "tof_ref_low", "tof_ref_high")))


def test_numbers_carry_only_the_digits_their_interval_defends(tmp_path, table):
    path = exports.write_table(table, tmp_path / "shortlist.csv")
    with open(path, newline="", encoding="utf-8") as handle:
        rows = list(csv.DictReader(handle))
    for row in rows:
        for column, (low, high) in exports.INTERVALS.items():
            trio = [row[column], row[low], row[high]]
            if all(trio) and "e" not in "".join(trio):
                # GUM 7.2.6: two significant digits of the shorter half-width fix the decimal place of all three
                # (one more allowed: rounding can move the half-width across a power of ten).
                place = numbers.interval_decimals(*map(float, trio))
                if place is not None:
                    assert all(len(t.partition(".")[2]) <= max(place, 0) + 1 for t in trio), (column, trio)
        for text in row.values():
            assert "0000000000" not in text and "9999999999" not in text  # no float noise


def test_missing_figures_are_empty_not_invented(demo, table):
    res, _ = demo
    # The demo has one catalyst measured at a single temperature: no activation energy can exist for it.
    single = res.catalysts.index[res.catalysts["n_temperatures"] == 1]
    assert len(single) >= 1
    rows = table[table["catalyst_id"].isin(single)]
    assert rows["ea [kJ/mol]"].isna().all() and rows["dh [kJ/mol]"].isna().all()


def test_csv_round_trip_keeps_values_and_empty_cells(tmp_path, demo, table):
    res, _ = demo
    path = exports.write_table(table, tmp_path / "shortlist.csv")
    back = pd.read_csv(path, keep_default_na=True)
    assert list(back.columns) == list(table.columns)
    for name in ("tof [1/s]", "ea [kJ/mol]", "rate_enhancement", f"p_top{TOP_K}"):
        np.testing.assert_allclose(back[name].to_numpy(float), table[name].to_numpy(float), rtol=1e-12)
    assert list(back["catalyst_id"]) == list(table["catalyst_id"])
    single = set(res.catalysts.index[res.catalysts["n_temperatures"] == 1])
    with open(path, newline="", encoding="utf-8") as handle:
        rows = list(csv.DictReader(handle))
    assert all(r["ea [kJ/mol]"] == "" for r in rows if r["catalyst_id"] in single)
    # Ranks are whole numbers on the page, not '1.0'.
    assert rows[0]["rank"] == "1"


def test_parquet_round_trip(tmp_path, table):
    path = exports.write_table(table, tmp_path / "shortlist.parquet")
    back = pq.read_table(path).to_pandas()
    assert list(back.columns) == list(table.columns)
    pd.testing.assert_frame_equal(back, table, check_dtype=False)


def test_xlsx_round_trip_with_flag_and_settings_sheets(tmp_path, demo, table):
    res, _ = demo
    path = exports.write_table(table, tmp_path / "shortlist.xlsx", results=res)
    book = openpyxl.load_workbook(path)
    assert book.sheetnames == ["table", "flags", "settings"]
    sheet = book["table"]
    assert sheet.freeze_panes == "A2"
    assert all(cell.font.bold for cell in sheet[1])
    back = pd.read_excel(path, sheet_name="table")
    assert list(back.columns) == list(table.columns)
    np.testing.assert_allclose(back["tof [1/s]"].to_numpy(float), table["tof [1/s]"].to_numpy(float), rtol=1e-12)
    single = set(res.catalysts.index[res.catalysts["n_temperatures"] == 1])
    blank_rows = [r for r in sheet.iter_rows(min_row=2, values_only=True) if r[1] in single]
    ea_col = list(table.columns).index("ea [kJ/mol]")
    assert blank_rows and all(r[ea_col] is None for r in blank_rows)

    flags = pd.read_excel(path, sheet_name="flags")
    assert list(flags.columns) == ["title", "code", "explanation"]
    assert set(flags["code"]) == set(exports.flag_codes(table))
    for code, title in zip(flags["code"], flags["title"], strict=True):
        assert title == diagnostics.FLAG_CODES[code][0]

    sheet = pd.read_excel(path, sheet_name="settings").astype(str)
    settings = dict(zip(sheet["setting"], sheet["value"], strict=True))
    assert settings["software version"] == __version__
    assert settings["data fingerprint"] == res.data_stamp
    assert settings["safety caution"] == CAUTION
    # Plain words and display units: 308.15 K is 35 °C (SI Brochure 2.3.1), 20e3 J/mol is 20 kJ/mol.
    assert settings["reference temperature for comparing catalysts"] == "35.0 °C"
    assert settings["apparent Ea below which transport control is suspected"] == "20.0 kJ/mol"
    assert "low_ea" in set(sheet["name"])  # the field name stays as a secondary detail


def test_hand_built_ranking_with_an_excluded_catalyst(tmp_path, demo):
    res, _ = demo
    ids = list(res.catalysts.index[:3])
    ranked = pd.DataFrame({
        "rank": [1.0, 2.0, np.nan], "value": [3.0, 2.0, np.nan], "value_low": [2.5, 1.5, np.nan],
        "value_high": [3.5, 2.5, np.nan], "rank_low": [1.0, 1.0, np.nan], "rank_high": [2.0, 2.0, np.nan],
        "p_top_k": [0.9, 0.1, 0.0], "pareto": [True, False, False], "excluded": [False, False, True],
        "demoted": [False, False, False], "note": ["", "", "excluded: flagged"]},
        index=pd.Index(ids, name="catalyst_id"))
    table = exports.shortlist_table(ranked, res, top_k=1)
    assert "p_top1" in table.columns
    path = exports.write_table(table, tmp_path / "t.csv")
    with open(path, newline="", encoding="utf-8") as handle:
        last = list(csv.DictReader(handle))[-1]
    assert last["rank"] == "" and last["rank_low"] == "" and last["metric_value"] == ""
    assert last["excluded"] == "True" and last["note"] == "excluded: flagged"


def test_unknown_ending_and_unwritable_path_are_user_errors(tmp_path, table):
    with pytest.raises(CatalogError, match=r"\.csv"):
        exports.write_table(table, tmp_path / "shortlist.txt")
    with pytest.raises(CatalogError, match="could not write"):
        exports.write_table(table, tmp_path / "no such folder" / "shortlist.csv")


# ------------------------------------------------------------------------------------------ hostile text, faults

#: Text a spreadsheet would run as a formula (OWASP, CSV Injection: cells starting with = + - @ tab or CR).
HOSTILE = ["=HYPERLINK(\"http://host/x\",\"click\")", "+1+cmd|' /C calc'!A0", "-2+3", "@SUM(A1:A9)",
           "\t=1+1", "\r=1+1", "=1+1\n", "plain-id"]


def _hostile_frame():
    return pd.DataFrame({"rank": pd.array([1, 2, 3, 4, 5, 6, 7, 8], dtype="Int64"), "catalyst_id": HOSTILE,
                         "tof [1/s]": [-1.5, 2.0, 3.0, 4.0, 5.0, 6.0, 7.0, 8.0], "note": HOSTILE[::-1],
                         "flags": ["", "", "", "", "", "", "", ""]})


def test_csv_neutralises_formula_text(tmp_path):
    path = exports.write_table(_hostile_frame(), tmp_path / "hostile.csv")
    with open(path, newline="", encoding="utf-8") as handle:
        rows = list(csv.DictReader(handle))
    for row, original in zip(rows, HOSTILE, strict=True):
        for text in (row["catalyst_id"], row["note"]):
            assert not text.startswith(("=", "+", "-", "@", "\t", "\r"))
        expected = original if original == "plain-id" else "'" + original
        assert row["catalyst_id"] == expected  # the text itself is kept, after the quote
    assert rows[0]["tof [1/s]"] == "-1.5"  # numbers are numbers, not neutralised


def test_xlsx_holds_no_formula_anywhere(tmp_path, demo):
    import zipfile

    res, _ = demo
    path = exports.write_table(_hostile_frame(), tmp_path / "hostile.xlsx", results=res)
    book = openpyxl.load_workbook(path)
    for sheet in book.worksheets:
        for line in sheet.iter_rows():
            for cell in line:
                assert cell.data_type != "f", (sheet.title, cell.coordinate, cell.value)
                if isinstance(cell.value, str):
                    assert not cell.value.startswith(("=", "+", "-", "@", "\t", "\r"))
    with zipfile.ZipFile(path) as archive:
        for name in archive.namelist():
            if name.startswith("xl/worksheets/"):
                assert b"<f>" not in archive.read(name) and b"<f " not in archive.read(name)
    assert book["table"]["C2"].value == -1.5


def test_xlsx_keeps_a_control_character_out_of_the_file(tmp_path):
    frame = pd.DataFrame({"catalyst_id": ["a\x01b"], "flags": [""]})
    path = exports.write_table(frame, tmp_path / "ctrl.xlsx")
    assert openpyxl.load_workbook(path)["table"]["A2"].value == "a\ufffdb"


def test_a_failed_write_leaves_the_previous_file_and_no_debris(tmp_path, table):
    import errno

    from catalog.present.files import atomic_write

    path = exports.write_table(table, tmp_path / "shortlist.csv")
    before = path.read_bytes()

    def disk_full(temp):
        temp.write_bytes(before[: len(before) // 2])
        raise OSError(errno.ENOSPC, "No space left on device")

    with pytest.raises(CatalogError, match="No space left"):
        atomic_write(path, disk_full)
    assert path.read_bytes() == before
    assert [p.name for p in tmp_path.iterdir()] == ["shortlist.csv"]


def test_written_files_get_the_usual_permissions(tmp_path, table):
    import os

    mask = os.umask(0o022)
    try:
        path = exports.write_table(table, tmp_path / "shortlist.xlsx")
    finally:
        os.umask(mask)
    assert path.stat().st_mode & 0o777 == 0o644
