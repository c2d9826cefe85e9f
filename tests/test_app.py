"""The Streamlit workbench driven headless with AppTest against a real DuckDB file per test (no mocks)."""

from __future__ import annotations

import io
import zipfile
from pathlib import Path

import pytest
import streamlit as st
from streamlit.testing.v1 import AppTest

from catalog import store
from catalog.analysis import diagnostics

APP = str(Path(__file__).resolve().parent.parent / "app.py")
PAGES = ("overview", "log_trial", "import_campaign", "trials", "compare", "rank")


@pytest.fixture
def db(tmp_path, monkeypatch):
    path = tmp_path / "workbench.duckdb"
    monkeypatch.setenv("CATALOG_DB", str(path))
    # Streamlit's caches live for the whole process; each test starts from a clean slate.
    st.cache_data.clear()
    st.cache_resource.clear()
    yield path
    st.cache_data.clear()
    st.cache_resource.clear()


def open_page(page: str) -> AppTest:
    at = AppTest.from_file(APP, default_timeout=120)
    at.run()
    if page != "overview":
        at.switch_page(f"catalog/webapp_pages/{page}.py").run()
    return at


def assert_clean(at: AppTest) -> None:
    assert not at.exception, [e.value for e in at.exception]
    assert not at.error, [e.value for e in at.error]


@pytest.mark.parametrize("page", PAGES)
def test_every_page_starts_on_a_fresh_seeded_database(db, page):
    at = open_page(page)
    assert_clean(at)
    counts = store.table_counts(db)
    assert counts["trials"] > 0 and counts["imports"] == 1
    assert any("Demo data" in i.value for i in at.info), "the demo banner must be visible on every page"


def test_seeding_happens_once(db):
    open_page("overview")
    open_page("overview")
    assert store.table_counts(db)["imports"] == 1


def test_reference_temperature_changes_the_ranking(db):
    at = open_page("rank")
    assert_clean(at)
    before = at.dataframe[0].value
    assert "PtCe-12" in set(before["catalyst"])
    at.number_input(key="rank_T").set_value(55.0).run()
    assert_clean(at)
    after = at.dataframe[0].value
    value = next(c for c in before.columns if c.startswith("TOF"))
    assert not before[value].equals(after[value])
    # TOF rises with temperature for every catalyst with an Arrhenius fit (positive Ea).
    b = before.set_index("catalyst")[value]
    a = after.set_index("catalyst")[value]
    assert (a.loc["PtCe-12"] > b.loc["PtCe-12"])
    assert {d.label for d in at.get("download_button")} >= {"Shortlist (csv)", "Shortlist (xlsx)",
                                                             "Shortlist (parquet)"}


def test_excluded_catalysts_stay_in_the_ranking_with_their_flags(db):
    at = open_page("rank")
    at.multiselect(key="rank_exclude").set_value(["single-temperature"]).run()
    assert_clean(at)
    table = at.dataframe[0].value.set_index("catalyst")
    assert table.loc["RhAl-03", "left out"] == "yes"
    assert diagnostics.FLAG_CODES["single-temperature"][0] in table.loc["RhAl-03", "flags"]


def test_bad_upload_shows_problems_and_writes_nothing(db):
    at = open_page("import_campaign")
    before = store.table_counts(db)
    catalysts = b"catalyst_id,metal\nXX-1,Pt\n"
    trials = (b"trial_id,catalyst_id,temperature [degC],measurement,signal_unit,catalyst_mass [mg]\n"
              b"N1,XX-1,warm,gas_volume,mL,10\n")
    traces = b"trial_id,time [s],value\nN1,0,0\nN1,60,1\n"
    at.file_uploader(key="import_files").set_value([
        ("catalysts.csv", catalysts, "text/csv"), ("trials.csv", trials, "text/csv"),
        ("traces.csv", traces, "text/csv")]).run()
    assert not at.exception
    assert at.error, "the bad temperature must be reported"
    problems = at.dataframe[-1].value
    assert any("warm" in p for p in problems["problem"])
    assert not [b for b in at.button if b.label == "Write to database"]
    assert store.table_counts(db) == before


def test_good_zip_upload_is_previewed_then_written(db, tmp_path):
    at = open_page("import_campaign")
    before = store.table_counts(db)
    buffer = io.BytesIO()
    with zipfile.ZipFile(buffer, "w") as archive:
        archive.writestr("campaign/catalysts.csv", "catalyst_id,metal,metal_loading [wt%],dispersion [%]\n"
                                                   "ZZ-9,Pd,5,30\n")
        archive.writestr("campaign/trials.csv", "trial_id,catalyst_id,temperature [degC],measurement,signal_unit,"
                                                "catalyst_mass [mg],limiting_amount [mmol],liquid_volume [mL]\n"
                                                "Z1,ZZ-9,35,gas_volume,mL,10,1,10\n")
        rows = "".join(f"Z1,{60 * i},{20 * (1 - 0.9 ** i):.3f}\n" for i in range(20))
        archive.writestr("campaign/traces.csv", "trial_id,time [s],value\n" + rows)
    at.file_uploader(key="import_files").set_value(("campaign.zip", buffer.getvalue(), "application/zip")).run()
    assert_clean(at)
    assert store.table_counts(db) == before, "a preview writes nothing"
    at.button(key="import_write").click().run()
    assert_clean(at)
    after = store.table_counts(db)
    assert after["trials"] == before["trials"] + 1
    assert after["catalysts"] == before["catalysts"] + 1


def test_logging_a_trial_adds_one_trial_and_shows_its_analysis(db):
    at = open_page("log_trial")
    assert_clean(at)
    before = store.table_counts(db)["trials"]
    at.selectbox(key="log_catalyst").set_value("PtC-01")
    at.text_input(key="log_operator").set_value("A. Tester")
    at.text_area(key="log_trace_text").set_value(
        "time,volume\n" + "".join(f"{60 * i},{20 * (1 - 0.85 ** i):.3f}\n" for i in range(25)))
    at.run()
    at.button(key="log_save").click().run()
    assert_clean(at)
    assert store.table_counts(db)["trials"] == before + 1
    assert any("saved and analysed" in s.value for s in at.success)
    assert any(m.label == "TOF" for m in at.metric)


def test_logging_a_bad_trial_shows_located_problems_and_writes_nothing(db):
    at = open_page("log_trial")
    before = store.table_counts(db)
    at.text_area(key="log_trace_text").set_value("0,0\n60,abc\n30,2\n")
    at.run()
    at.button(key="log_save").click().run()
    assert not at.exception
    assert at.error
    problems = at.dataframe[-1].value
    assert any("abc" in p for p in problems["problem"])
    assert store.table_counts(db) == before
