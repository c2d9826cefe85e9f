"""Overview page: what is in the database, what each page does, and the safety caution."""

from __future__ import annotations

import streamlit as st

from catalog import store
from catalog.app import common
from catalog.present import labels


def render() -> None:
    db = common.database()
    st.title("Catalyst screening workbench")
    counts = store.table_counts(db)
    cols = st.columns(4)
    for col, (label, key) in zip(cols, (("Catalysts", "catalysts"), ("Trials", "trials"),
                                        ("Trace points", "trace_points"), ("Imports", "imports")), strict=True):
        col.metric(label, f"{counts[key]:,}")
    st.markdown(
        "- **Log a trial**: enter one trial's conditions and its trace; it is checked like any import and "
        "analysed at once.\n"
        "- **Import a campaign**: the three CSV files, a zip of the folder, or one .xlsx workbook; checked and "
        "previewed before anything is written.\n"
        "- **Trials**: filter the trials and open one to see its trace, fitted rate law and residuals.\n"
        f"- **Compare catalysts**: traces, Arrhenius plots, TOF and {labels.ENHANCEMENT} side by side.\n"
        "- **Rank and export**: a ranked shortlist with intervals, downloadable as a table or an HTML report."
    )
    st.subheader("Imports")
    imports = store.list_imports(db)
    if imports.empty:
        st.caption("Nothing imported yet.")
    else:
        shown = imports[["import_id", "imported_at", "imported_by", "source", "n_catalysts", "n_trials", "n_points",
                         "n_skipped", "is_demo"]].rename(columns={
            "import_id": "import", "imported_at": "when (UTC)", "imported_by": "by", "n_catalysts": "catalysts",
            "n_trials": "trials", "n_points": "points", "n_skipped": "skipped", "is_demo": "demo"})
        shown = shown.assign(by=shown["by"].fillna(""), demo=shown["demo"].astype(bool).map({True: "yes",
                                                                                             False: ""}))
        st.dataframe(shown, hide_index=True, width="stretch")
    common.caution()


if __name__ == "__main__":
    render()
