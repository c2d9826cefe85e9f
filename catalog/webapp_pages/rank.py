"""Page script run by st.navigation; the page itself is catalog.webapp.page_rank."""

from catalog.webapp import page_rank

page_rank()
