"""Streamlit entry point: `streamlit run app.py` (the workbench lives in catalog.webapp)."""

from catalog.webapp import run

run()
