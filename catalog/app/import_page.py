"""Import page: upload a campaign, see what would be written and every problem, then write all or nothing."""

from __future__ import annotations

import tempfile
from pathlib import Path

import streamlit as st

from catalog import store
from catalog.app import common
from catalog.errors import CatalogError, Problem, ValidationError
from catalog.ingest import sources, upload, validate
from catalog.ingest.validate import trace_layout


def _already_imported(db: str, source: sources.CampaignSource) -> tuple[str | None, bool]:
    """A sentence when these exact files, or some of these trials, are already in the database, and whether the
    files are identical to an earlier import (then there is nothing to write)."""
    imports = store.list_imports(db)
    same = imports[imports["content_hash"] == source.content_hash]
    if not same.empty:
        first = same.iloc[0]
        return (f"These exact files were already imported as import #{int(first['import_id'])} on "
                f"{first['imported_at']:%Y-%m-%d %H:%M}; there is nothing new to write."), True
    ids = set(source.trials.to_pandas().get("trial_id", []))
    stored = ids & set(store.list_trials(db)["trial_id"])
    if stored:
        return (f"{len(stored)} of these {len(ids)} trials are already stored; identical ones will be skipped, "
                "different ones refused (record a correction, or give them new ids)."), False
    return None, False


def _preview(db: str, source: sources.CampaignSource, who: str) -> None:
    checked_catalysts = validate.check_catalysts(source.catalysts)
    known = ({c for c in checked_catalysts.table["catalyst_id"] if c is not None}
             | set(common.registry(db)["catalyst_id"]))
    checked_trials = validate.check_trials(source.trials, known)
    _, _, trace_problems, trace_notes = trace_layout(source.traces)
    trace_head, n_points = upload.trace_preview(source)
    st.subheader("What will be written")
    cols = st.columns(3)
    cols[0].metric("Catalysts", len(source.catalysts))
    cols[1].metric("Trials", len(source.trials))
    cols[2].metric("Trace points", f"{n_points:,}")
    again, identical = _already_imported(db, source)
    if again:
        st.info(common.text(again), icon=":material/content_copy:")
    for label, frame in (("catalysts", source.catalysts.to_pandas()), ("trials", source.trials.to_pandas()),
                         ("traces", trace_head)):
        st.markdown(f"First rows of **{label}**")
        st.dataframe(frame.head(5), hide_index=True, width="stretch")
    notes = checked_catalysts.notes + checked_trials.notes + trace_notes
    if notes:
        st.markdown("**How the units were read**")
        st.markdown("\n".join(f"- {common.text(n)}" for n in notes))
    found = checked_catalysts.problems + checked_trials.problems + trace_problems
    if found:
        # The importer checks every file, trace points included, and writes nothing when anything is wrong (as
        # here): running it lists the problems of all three files at once, not the tables' first.
        try:
            store.import_campaign(db, source, who=who or None)
        except ValidationError as exc:
            found = exc.problems
    elif n_points == 0:
        found = [Problem(source.traces.label, None, None, "has a header but no data rows: every trial needs its "
                                                          "readings")]
    if found:
        common.show_problems(found)
        st.caption("Fix these in the files and upload them again.")
        return
    if identical:
        return
    st.success("The catalysts and trials tables pass every check; the trace points are checked as they are "
               "written, all or nothing.")
    if st.button("Write to database", type="primary", key="import_write"):
        try:
            report = store.import_campaign(db, source, who=who or None)
        except ValidationError as exc:
            common.show_problems(exc.problems)
            return
        if report.duplicate_of is not None:
            st.info(common.text(report.notes[0] if report.notes else "Already imported; nothing written."))
            return
        st.cache_data.clear()
        st.success(f"Import #{report.import_id}: {report.n_catalysts} catalysts, {report.n_trials} trials, "
                   f"{report.n_points:,} trace points written.")
        if report.skipped_catalysts or report.skipped_trials:
            st.caption(f"Already stored and identical, so skipped: {len(report.skipped_catalysts)} catalysts, "
                       f"{len(report.skipped_trials)} trials.")


def render() -> None:
    db = common.database()
    st.title("Import a campaign")
    st.caption("Upload the three CSV files (catalysts.csv, trials.csv, traces.csv), a zip of the campaign folder, "
               f"or one .xlsx workbook with those three sheets; up to {upload.UPLOAD_LIMIT / 2**20:.0f} MB. "
               "Everything is checked and previewed first; nothing is written until you press the button, and then "
               "all or nothing.")
    files = st.file_uploader("Campaign files", type=["csv", "zip", "xlsx"], accept_multiple_files=True,
                             key="import_files", max_upload_size=upload.UPLOAD_LIMIT // 2**20)
    if not files:
        return
    who = st.text_input("Imported by", key="import_who", help="Recorded with the import; empty: the server's login")
    with tempfile.TemporaryDirectory() as tmp:
        try:
            source = sources.read_source(upload.stage_upload(common.uploads(files), Path(tmp)))
            _preview(db, source, who.strip())
        except ValidationError as exc:
            common.show_problems(exc.problems)
        except CatalogError as exc:
            common.show_error(exc)


if __name__ == "__main__":
    render()
