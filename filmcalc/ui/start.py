"""Start page: what filmcalc is for, and every demo one click away."""

import streamlit as st

from filmcalc.links import DEMO_SCENARIOS
from filmcalc.ui.common import PageLink, cautions_box
from filmcalc.ui.pages import PAGES


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
