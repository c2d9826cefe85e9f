"""Page script run by st.navigation; the page itself is catalog.webapp.page_import."""

from catalog.webapp import page_import

page_import()
