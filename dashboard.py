"""filmcalc dashboard: page configuration and navigation only.

Start it with `make run` (or `streamlit run dashboard.py`). Each page has a
fixed URL path, so shared links and bookmarks keep working; with a shared
password set (FILMCALC_PASSWORD or .streamlit/secrets.toml), every page waits
for it first.
"""

import streamlit as st

from filmcalc.ui.access import ask_password, unlocked

st.set_page_config(page_title="filmcalc", page_icon=":material/layers:", layout="wide")

pages = [
    st.Page("filmcalc/ui/start.py", title="Start", icon=":material/home:", url_path="start", default=True),
    st.Page("filmcalc/ui/film_spectrum.py", title="Film spectrum", icon=":material/show_chart:",
            url_path="film-spectrum"),
    st.Page("filmcalc/ui/colour_charts.py", title="Colour charts", icon=":material/palette:",
            url_path="colour-charts"),
    st.Page("filmcalc/ui/photo_map.py", title="Thickness from a photo", icon=":material/image:",
            url_path="photo-map"),
    st.Page("filmcalc/ui/spectrum_fit.py", title="Spectrum fit", icon=":material/ssid_chart:",
            url_path="spectrum-fit"),
    st.Page("filmcalc/ui/spectrum_map.py", title="Map of spectra", icon=":material/grid_on:",
            url_path="spectrum-map"),
    st.Page("filmcalc/ui/fringe_analysis.py", title="Fringes", icon=":material/waves:", url_path="fringes"),
    st.Page("filmcalc/ui/film_sequence.py", title="Film over time", icon=":material/movie:",
            url_path="film-over-time"),
    st.Page("filmcalc/ui/saved_runs.py", title="Saved runs", icon=":material/bookmarks:", url_path="saved-runs"),
    st.Page("filmcalc/ui/stack_builder.py", title="Stack builder", icon=":material/layers:",
            url_path="stack-builder"),
    st.Page("filmcalc/ui/safety.py", title="Cautions", icon=":material/health_and_safety:", url_path="cautions"),
]
open_to_this_session = unlocked()
page = st.navigation(pages, position="sidebar" if open_to_this_session else "hidden")
if not open_to_this_session:
    ask_password()  # stops here until the right password is given; the link's page and settings wait
page.run()
