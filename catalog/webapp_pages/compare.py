"""Page script run by st.navigation; the page itself is catalog.webapp.page_compare."""

from catalog.webapp import page_compare

page_compare()
