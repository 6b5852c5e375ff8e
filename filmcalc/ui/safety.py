"""Cautions page: measurement honesty and lab safety."""

import streamlit as st

from filmcalc.ui.common import MEASUREMENT_CAUTION, PageLink

st.title("Cautions")
PageLink("cautions").publish()
st.subheader("About the numbers")
st.info(MEASUREMENT_CAUTION)
st.markdown(
    "- The colour of a film also depends on the light, the viewing angle, the camera and its settings. "
    "The model is only as good as the refractive indices and the light you give it.\n"
    "- Colours repeat at higher fringe orders: one colour can mean several thicknesses.\n"
    "- Built-in materials name their sources; deposited films often differ from bulk values."
)
st.subheader("In the lab")
st.warning(
    "filmcalc is software; it does not make any lab work safe. Follow your institution's safety rules, "
    "the equipment manuals and licensed practice, and ask your safety officer when in doubt."
)
st.markdown(
    "- **Lasers**: know the class of your laser (IEC 60825-1). Class 2 (≤ 1 mW visible) relies on the blink "
    "reflex; Class 3R, 3B and 4 beams can injure the eye at once. Never look into a beam or its specular "
    "reflection from a wafer or film; use the eyewear your laser safety officer specifies.\n"
    "- **UV and bright lamps**: mercury and UV sources can burn eyes and skin (risk groups per IEC 62471). "
    "Use shields and UV-blocking eyewear; never look at the lamp.\n"
    "- **Furnaces and hot plates** (thermal oxidation, resist bakes): hot surfaces and hot wafers burn; "
    "follow the tool's operating procedure.\n"
    "- **Solvents and etchants** (acetone, developers, buffered or dilute HF, piranha): use a fume hood, "
    "the gloves and face protection your safety data sheets require, and your site's training. "
    "Hydrofluoric acid needs specific training and first-aid (calcium gluconate) at hand.\n"
    "- **Soap-film and oil experiments**: glycerol and surfactant spills make floors slippery; "
    "oils and solvents near lamps are a fire risk."
)
