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
from catalog.present import exports

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
    for extra in ("enhancement_low", "enhancement_high", "rank_low", "rank_high", f"p_top{TOP_K}", "metric",
                  "metric_value", "pareto", "dh [kJ/mol]", "ds [J/(mol K)]", "rate_per_mass [mmol/(g h)]",
                  "rate_per_area [mmol/(m2 h)]", "ton_max", "site_basis", "models", "n_temperatures",
                  "t_range [degC]", "reference_temperature [degC]", "excluded", "note", "metal", "support"):
        assert extra in table.columns


def test_rows_follow_the_ranking(demo, table):
    res, ranked = demo
    assert list(table["catalyst_id"]) == list(ranked.index)
    ranks = table["rank"].dropna().to_numpy()
    assert np.all(np.diff(ranks) > 0)


def test_units_are_converted_at_the_edge(demo, table):
    res, _ = demo
    cat = res.catalysts.loc[table["catalyst_id"]]
    # 1 kJ = 1000 J (BIPM SI Brochure, 9th ed. 2019, Table 7 prefixes); exact up to float rounding, rtol 1e-12.
    np.testing.assert_allclose(table["ea [kJ/mol]"], cat["ea"].to_numpy(float) / 1000, rtol=1e-12)
    np.testing.assert_allclose(table["dh [kJ/mol]"], cat["dh"].to_numpy(float) / 1000, rtol=1e-12)
    # 1 h = 3600 s and 1 g = 1e-3 kg (SI Brochure Table 8): mol/(kg s) -> mmol/(g h) is x 3600; rtol 1e-12.
    np.testing.assert_allclose(table["rate_per_mass [mmol/(g h)]"], cat["rate_per_mass_ref"].to_numpy(float) * 3600,
                               rtol=1e-12)
    # t/°C = T/K - 273.15 (SI Brochure 2.3.1); the default reference is 308.15 K, i.e. 35 °C; abs 1e-9.
    assert table["reference_temperature [degC]"].iloc[0] == pytest.approx(35.0, abs=1e-9)
    # TOF is already in 1/s, so the number is the analysis' own.
    np.testing.assert_array_equal(table["tof [1/s]"], cat["tof_ref"].to_numpy(float))


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
    for name in ("tof [1/s]", "ea [kJ/mol]", "enhancement", f"p_top{TOP_K}"):
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
    assert list(flags.columns) == ["code", "title", "explanation"]
    assert set(flags["code"]) == set(exports.flag_codes(table))
    for code, title in zip(flags["code"], flags["title"]):
        assert title == diagnostics.FLAG_CODES[code][0]

    settings = dict(pd.read_excel(path, sheet_name="settings").astype(str).itertuples(index=False, name=None))
    assert settings["software version"] == __version__
    assert settings["data stamp"] == res.data_stamp
    assert settings["safety caution"] == CAUTION
    assert float(settings["reference_temperature"]) == res.settings.reference_temperature


def test_hand_built_ranking_with_an_excluded_catalyst(tmp_path, demo):
    res, _ = demo
    ids = list(res.catalysts.index[:3])
    ranked = pd.DataFrame({
        "rank": [1.0, 2.0, np.nan], "value": [3.0, 2.0, np.nan], "value_low": [2.5, 1.5, np.nan],
        "value_high": [3.5, 2.5, np.nan], "rank_low": [1.0, 1.0, np.nan], "rank_high": [2.0, 2.0, np.nan],
        "p_top_k": [0.9, 0.1, 0.0], "pareto": [True, False, False], "excluded": [False, False, True],
        "demoted": [False, False, False], "note": ["", "", "excluded: flagged"]}, index=pd.Index(ids, name="catalyst_id"))
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
