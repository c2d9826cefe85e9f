"""Page script run by st.navigation; the page itself is catalog.webapp.page_log_trial."""

from catalog.webapp import page_log_trial

page_log_trial()
