"""Page scripts for st.navigation (each runs one page of catalog.webapp when Streamlit executes it)."""
