"""Page script run by st.navigation; the page itself is catalog.webapp.page_trials."""

from catalog.webapp import page_trials

page_trials()
