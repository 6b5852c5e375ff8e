"""filmcalc dashboard: page configuration and navigation only.

Start it with `make run` (or `streamlit run dashboard.py`).
"""

import streamlit as st

st.set_page_config(page_title="filmcalc", page_icon=":material/layers:", layout="wide")

pages = [
    st.Page("filmcalc/ui/film_spectrum.py", title="Film spectrum", icon=":material/show_chart:", default=True),
    st.Page("filmcalc/ui/colour_charts.py", title="Colour charts", icon=":material/palette:"),
    st.Page("filmcalc/ui/photo_map.py", title="Thickness from a photo", icon=":material/image:"),
    st.Page("filmcalc/ui/spectrum_fit.py", title="Spectrum fit", icon=":material/ssid_chart:"),
    st.Page("filmcalc/ui/spectrum_map.py", title="Map of spectra", icon=":material/grid_on:"),
    st.Page("filmcalc/ui/fringe_analysis.py", title="Fringes", icon=":material/waves:"),
    st.Page("filmcalc/ui/film_sequence.py", title="Film over time", icon=":material/movie:"),
    st.Page("filmcalc/ui/stack_builder.py", title="Stack builder", icon=":material/layers:"),
    st.Page("filmcalc/ui/safety.py", title="Cautions", icon=":material/health_and_safety:"),
]
st.navigation(pages).run()
