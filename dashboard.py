"""filmcalc dashboard: page configuration and navigation only.

Start it with `make run` (or `streamlit run dashboard.py`). Each page has a
fixed URL path, so shared links and bookmarks keep working; with a shared
password set (FILMCALC_PASSWORD or .streamlit/secrets.toml), every page waits
for it first.
"""

import streamlit as st

from filmcalc.ui.access import ask_password, unlocked
from filmcalc.ui.pages import PAGES, START

st.set_page_config(page_title="filmcalc", page_icon=":material/layers:", layout="wide")

url_path, file, icon, title = START
pages = [st.Page(file, title=title, icon=icon, url_path=url_path, default=True)]
pages += [st.Page(file, title=title, icon=icon, url_path=url_path) for url_path, (file, icon, title, _) in PAGES.items()]
open_to_this_session = unlocked()
page = st.navigation(pages, position="sidebar" if open_to_this_session else "hidden")
if not open_to_this_session:
    ask_password()  # stops here until the right password is given; the link's page and settings wait
page.run()
