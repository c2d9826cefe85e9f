"""Start the workbench: page setup, the demo seed, navigation, and the one place a user error becomes a message."""

from __future__ import annotations

from pathlib import Path

import streamlit as st

from catalog.app import common
from catalog.errors import CatalogError

PAGE_DIR = Path(__file__).resolve().parent
#: (module file, title, icon); the first is the default page.
PAGES = (
    ("overview.py", "Overview", ":material/home:"),
    ("log_trial.py", "Log a trial", ":material/edit_note:"),
    ("import_page.py", "Import a campaign", ":material/upload_file:"),
    ("trials.py", "Trials", ":material/table_rows:"),
    ("compare.py", "Compare catalysts", ":material/show_chart:"),
    ("rank.py", "Rank and export", ":material/format_list_numbered:"),
)


def run() -> None:
    """Start the workbench (called by ``app.py``)."""
    st.set_page_config(page_title="catalog: screening workbench", page_icon=":material/science:", layout="wide")
    db = common.database()
    try:
        common.seed_if_new(db)
    except CatalogError as exc:
        st.error("The database could not be opened or seeded: " + common.text(exc))
        st.stop()
    pages = [st.Page(PAGE_DIR / name, title=title, icon=icon, default=n == 0)
             for n, (name, title, icon) in enumerate(PAGES)]
    page = st.navigation(pages)
    st.sidebar.caption(f"Database: `{db}`")
    try:
        common.demo_banner(db)
        page.run()
    except CatalogError as exc:
        common.show_error(exc)
