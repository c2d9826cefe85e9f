"""Streamlit entry point: `streamlit run app.py` (the workbench lives in catalog.app)."""

from catalog.app.main import run

run()
