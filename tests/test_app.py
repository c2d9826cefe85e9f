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
from catalog.present import labels, tradeoff

TRANSPORT_TITLES = [labels.flag_title(c) for c in tradeoff.TRANSPORT_CODES]

APP = str(Path(__file__).resolve().parent.parent / "app.py")
#: A burette trace (time [s], volume [mL]) of an invented first-order run, as a user would paste it.
GOOD_TRACE = "time,volume\n" + "".join(f"{60 * i},{20 * (1 - 0.85 ** i):.3f}\n" for i in range(25))
PAGES = ("overview", "log_trial", "import_page", "trials", "compare", "rank")


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
        at.switch_page(f"catalog/app/{page}.py").run()
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
    at = open_page("import_page")
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
    at = open_page("import_page")
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
    at.number_input(key="log_product_ratio").set_value(3.0)
    at.text_area(key="log_trace_text").set_value(GOOD_TRACE)
    at.run()
    at.button(key="log_save").click().run()
    assert_clean(at)
    assert store.table_counts(db)["trials"] == before + 1
    assert any("saved and analysed" in s.value for s in at.success)
    assert any("| TOF [s⁻¹] |" in m.value for m in at.markdown)


def test_logging_a_bad_trial_shows_located_problems_and_writes_nothing(db):
    at = open_page("log_trial")
    before = store.table_counts(db)
    at.number_input(key="log_product_ratio").set_value(3.0)
    at.text_area(key="log_trace_text").set_value("0,0\n60,abc\n30,2\n")
    at.run()
    at.button(key="log_save").click().run()
    assert not at.exception
    assert at.error
    problems = at.dataframe[-1].value
    assert any("abc" in p for p in problems["problem"])
    assert store.table_counts(db) == before


def _log(at: AppTest, trace: str) -> AppTest:
    at.number_input(key="log_product_ratio").set_value(3.0)
    at.text_area(key="log_trace_text").set_value(trace)
    at.run()
    return at.button(key="log_save").click().run()


def test_after_a_save_the_form_offers_a_fresh_id_and_a_bad_resubmission_writes_nothing(db):
    at = open_page("log_trial")
    first = at.text_input(key="log_id").value
    _log(at, GOOD_TRACE)
    assert_clean(at)
    assert first in set(store.list_trials(db)["trial_id"])
    fresh = at.text_input(key="log_id").value
    assert fresh != first and fresh not in set(store.list_trials(db)["trial_id"])
    # The same trial id again, with a bad cell: a located problem, nothing written.
    before = store.table_counts(db)
    at.text_input(key="log_id").set_value(first)
    _log(at, "0,0\n60,abc\n120,2\n")
    assert not at.exception
    problems = at.dataframe[-1].value
    assert any("abc" in p for p in problems["problem"])
    assert store.table_counts(db) == before


def test_product_ratio_is_required(db):
    at = open_page("log_trial")
    before = store.table_counts(db)
    at.text_area(key="log_trace_text").set_value(GOOD_TRACE)
    at.run()
    at.button(key="log_save").click().run()
    assert not at.exception
    assert set(at.dataframe[-1].value["column"]) == {"product_ratio"}
    assert store.table_counts(db) == before


def test_a_decimal_comma_with_semicolons_is_read_and_said(db):
    at = open_page("log_trial")
    trace = "time;volume\n" + "".join(f"{60 * i};{20 * (1 - 0.85 ** i):.3f}\n".replace(".", ",")
                                      for i in range(25))
    _log(at, trace)
    assert_clean(at)
    assert any("decimal comma" in c.value for c in at.caption)
    stored = store.load_trace(db, at.session_state["logged_trial"]["id"])
    # 20 (1 - 0.85) = 3.000 mL at the second reading: read as 3.0, not 3000 or 3 and 0.
    assert len(stored) == 25 and abs(stored["value"].iloc[1] - 3.0e-6) < 1e-12


def test_an_ambiguous_decimal_comma_is_refused_with_its_line(db):
    at = open_page("log_trial")
    before = store.table_counts(db)
    _log(at, "0,0\n60,9,8\n120,12,1\n")
    assert not at.exception
    problems = at.dataframe[-1].value
    assert list(problems["row"]) == ["2", "3"]
    assert all("semicolon" in p for p in problems["problem"])
    assert store.table_counts(db) == before


def test_switching_the_temperature_unit_converts_the_value(db):
    at = open_page("rank")
    before = at.dataframe[0].value
    at.radio(key="rank_T_unit").set_value("K").run()
    assert_clean(at)
    assert at.number_input(key="rank_T").value == pytest.approx(308.15)
    after = at.dataframe[0].value
    assert before.equals(after), "the same temperature in another unit ranks the same"
    at.radio(key="rank_T_unit").set_value("°C").run()
    assert at.number_input(key="rank_T").value == pytest.approx(35.0)


def test_rank_table_has_no_none_and_explains_the_score(db):
    at = open_page("rank")
    table = at.dataframe[0].value
    assert not table.astype(str).isin(["None", "nan", "<NA>"]).any().any()
    at.selectbox(key="rank_metric").set_value("score").run()
    assert_clean(at)
    assert any("How the score is built" in m.value for m in at.markdown)


def test_removing_the_demo_asks_first(db):
    at = open_page("overview")
    assert store.table_counts(db)["trials"] > 0, "opening the popover alone removes nothing"
    at.button(key="purge_demo").click().run()
    assert not at.exception
    assert store.table_counts(db)["trials"] == 0


HOSTILE_ID = "![b](http://host/x.png)"


def _upload_csvs(at: AppTest, catalysts: bytes, trials: bytes, traces: bytes) -> AppTest:
    return at.file_uploader(key="import_files").set_value([
        ("catalysts.csv", catalysts, "text/csv"), ("trials.csv", trials, "text/csv"),
        ("traces.csv", traces, "text/csv")]).run()


def _markdown_texts(at: AppTest) -> list[str]:
    kinds = ("markdown", "caption", "error", "warning", "info", "success", "subheader", "title")
    return [e.value for kind in kinds for e in at.get(kind)]


@pytest.mark.slow
def test_user_text_never_renders_as_markdown(db):
    at = open_page("import_page")
    rows = "".join(f"H{i},{60 * i},{20 * (1 - 0.8 ** i):.3f}\n" for i in range(1, 20)).replace("H", "")
    trials = ("trial_id,catalyst_id,temperature [degC],measurement,signal_unit,catalyst_mass [mg],"
              "limiting_amount [mmol],liquid_volume [mL],product_ratio\n")
    trials += "".join(f"H{t},{HOSTILE_ID},{t},gas_volume,mL,10,1,10,3\n" for t in (25, 35, 45))
    traces = "trial_id,time [s],value\n" + "".join(
        f"H{t},{60 * i},{20 * (1 - 0.8 ** i):.3f}\n" for t in (25, 35, 45) for i in range(20))
    del rows
    _upload_csvs(at, f"catalyst_id,metal,metal_loading [wt%],dispersion [%]\n{HOSTILE_ID},Pd,5,30\n".encode(),
                 trials.encode(), traces.encode())
    assert_clean(at)
    at.button(key="import_write").click().run()
    assert_clean(at)
    assert HOSTILE_ID in set(store.list_catalysts(db)["catalyst_id"])
    for page in ("compare", "rank", "trials"):
        shown = open_page(page)
        if page == "compare":
            shown.multiselect(key="compare_catalysts").set_value([HOSTILE_ID]).run()
        assert not shown.exception
        for body in _markdown_texts(shown):
            assert "![" not in body and "](" not in body, body
    # A hostile header name in the import preview is shown as text too.
    at = open_page("import_page")
    _upload_csvs(at, b"catalyst_id,metal\nQ-1,Pd\n",
                 f"trial_id,catalyst_id,{HOSTILE_ID} [degC]\nQ1,Q-1,30\n".encode(), b"trial_id,time [s],value\n")
    assert not at.exception
    for body in _markdown_texts(at):
        assert "![" not in body and "](" not in body, body


@pytest.mark.parametrize("traces", [b"", b"trial_id,time [s],value\n", b"\x00\x01junk\xff\n"])
def test_empty_or_malformed_traces_give_a_located_message(db, traces):
    at = open_page("import_page")
    before = store.table_counts(db)
    _upload_csvs(at, b"catalyst_id,metal\nQ-1,Pd\n",
                 b"trial_id,catalyst_id,temperature [degC],measurement,signal_unit,catalyst_mass [mg],"
                 b"limiting_amount [mmol],liquid_volume [mL],product_ratio\nQ1,Q-1,30,gas_volume,mL,10,1,10,3\n",
                 traces)
    assert not at.exception
    assert at.error
    assert any("traces.csv" in w for w in at.dataframe[-1].value["where"])
    assert store.table_counts(db) == before


def test_a_corrupt_zip_member_gives_a_message(db):
    buffer = io.BytesIO()
    with zipfile.ZipFile(buffer, "w", zipfile.ZIP_STORED) as archive:
        archive.writestr("catalysts.csv", "catalyst_id,metal\nQ-1,Pd\n" * 50)
    data = bytearray(buffer.getvalue())
    at_byte = data.index(b"Q-1,Pd")
    data[at_byte] ^= 0xFF  # flip a byte of the stored member: the CRC check fails
    at = open_page("import_page")
    at.file_uploader(key="import_files").set_value(("campaign.zip", bytes(data), "application/zip")).run()
    assert not at.exception
    assert any("damaged" in e.value for e in at.error)


def test_reuploading_an_imported_campaign_says_so_in_the_preview(db, tmp_path):
    at = open_page("import_page")
    folder = Path(__file__).resolve().parent.parent / "sample_campaign"
    files = [(name, (folder / name).read_bytes(), "text/csv") for name in ("catalysts.csv", "trials.csv",
                                                                         "traces.csv")]
    at.file_uploader(key="import_files").set_value(files).run()
    assert not at.exception
    assert any("already imported" in i.value for i in at.info)


def test_a_transport_flagged_catalyst_is_never_shown_optimal_without_its_flag(db):
    at = open_page("rank")
    table = at.dataframe[0].value.set_index("catalyst")
    front = next(c for c in table.columns if c.startswith("Pareto set"))
    for _, row in table.iterrows():
        if row[front].startswith("yes") and any(t in row["flags"] for t in TRANSPORT_TITLES):
            assert "transport warning" in row[front]


def test_rank_table_marks_a_transport_limited_catalyst_on_the_front(db):
    from catalog.analysis import ranking, results
    from catalog.analysis.settings import Settings
    from catalog.app import rank as rank_page

    open_page("overview")  # seeds the demo
    res = results.get_results(db, Settings())
    # Against Ea, the low-Ea (transport-limited) demo catalyst is on the front: exactly the case to mark.
    ranked = ranking.rank(res.catalysts, metric="tof", pareto_metrics=("tof", "ea"))
    table = rank_page.rank_table(ranked, res, "tof", 3, "Pareto").set_index("catalyst")
    warned = tradeoff.transport_warnings(res.catalysts)
    on_front = [c for c in warned if ranked.loc[c, "pareto"]]
    assert on_front, "the demo must hold a transport-flagged catalyst on this front"
    for cid in on_front:
        assert table.loc[cid, "Pareto"] == "yes ⚠ transport warning"
