"""Page script run by st.navigation; the page itself is catalog.webapp.page_overview."""

from catalog.webapp import page_overview

page_overview()
