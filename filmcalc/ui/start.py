"""Start page: what filmcalc is for, and every demo one click away."""

import streamlit as st

from filmcalc.links import DEMO_SCENARIOS
from filmcalc.ui.common import PageLink, cautions_box

# URL path → page file (relative to dashboard.py) and icon, for the links below; titles as in the navigation.
PAGES = {
    "film-spectrum": ("filmcalc/ui/film_spectrum.py", ":material/show_chart:", "Film spectrum",
                      "reflectance and colour of one film thickness"),
    "colour-charts": ("filmcalc/ui/colour_charts.py", ":material/palette:", "Colour charts",
                      "colour over thickness and angle, a chart to print, a colour's candidate thicknesses"),
    "photo-map": ("filmcalc/ui/photo_map.py", ":material/image:", "Thickness from a photo",
                  "a photo of interference colours becomes a thickness map with uncertainty and flags"),
    "spectrum-fit": ("filmcalc/ui/spectrum_fit.py", ":material/ssid_chart:", "Spectrum fit",
                     "a reflectance spectrum gives the thickness ± 1σ and any other thickness that fits"),
    "spectrum-map": ("filmcalc/ui/spectrum_map.py", ":material/grid_on:", "Map of spectra",
                     "a mapping run of spectra becomes a thickness map with uniformity figures"),
    "fringes": ("filmcalc/ui/fringe_analysis.py", ":material/waves:", "Fringes",
                "a photo under one or two lines of light gives thickness along a line or over the image"),
    "film-over-time": ("filmcalc/ui/film_sequence.py", ":material/movie:", "Film over time",
                       "a recording becomes thickness over time, a thinning law and the rupture"),
    "saved-runs": ("filmcalc/ui/saved_runs.py", ":material/bookmarks:", "Saved runs",
                   "open a saved analysis again, compare runs, follow a sample over time"),
    "stack-builder": ("filmcalc/ui/stack_builder.py", ":material/layers:", "Stack builder",
                      "describe your own sample (materials, layers, light) and save its stack file"),
    "cautions": ("filmcalc/ui/safety.py", ":material/health_and_safety:", "Cautions",
                 "what the numbers mean, and safety in the lab"),
}

st.title("filmcalc")
link = PageLink("start")
st.write(
    "filmcalc tells how thick a thin transparent film is (a soap or foam film, an oxide on silicon, a resist, "
    "an oil or lubricant film), across a sample or over time, from the colours it shows, from its fringes "
    "under one line of light, or from a measured reflectance spectrum, by modelling the light in the film "
    "stack from first principles. "
    "Each thickness it gives is an estimate with an uncertainty, to be confirmed by an independent "
    "measurement where it matters."
)

st.subheader("Try a demo")
st.caption("Each demo opens its page with an invented sample and its settings already chosen; the address it "
           "opens is a link you can share like any other.")
for first in range(0, len(DEMO_SCENARIOS), 2):  # row by row, so a narrow window keeps the order
    for column, scenario in zip(st.columns(2), DEMO_SCENARIOS[first:first + 2]):
        file, icon, _, _ = PAGES[scenario.page]
        with column.container(border=True):
            st.page_link(file, label=f"**{scenario.title}**", icon=icon, query_params=scenario.query)
            st.caption(scenario.text)

st.subheader("Or start from your own data")
for file, icon, title, purpose in PAGES.values():
    # The page's name as the link, what it does beneath (a long link label would not wrap).
    st.page_link(file, label=f"**{title}**", icon=icon)
    st.caption(purpose)
link.publish()
cautions_box()
