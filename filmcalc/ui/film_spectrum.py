"""Film spectrum page: choose a stack, move the film thickness, see R(λ) and the colour."""

import streamlit as st

from filmcalc.charts import spectrum_figure
from filmcalc.errors import FilmcalcError
from filmcalc.stack import POLARISATIONS
from filmcalc.ui.common import PageLink, cautions_box, load_or_stop, spectrum_and_colour, stack_picker

st.title("Film spectrum")
st.write(
    "How much light a thin film reflects at each wavelength, and the colour that makes under the stack's "
    "light. Pick a demo sample or load your own stack file, then move the thickness."
)

link = PageLink("film-spectrum")
text, base_dir, origin = stack_picker(link)
stack = load_or_stop(text, base_dir, origin)

film = stack.film
with st.sidebar:
    st.header("Film and light")
    link.attach("thickness_nm", f"thickness::{origin}")
    thickness = st.slider("Film thickness (nm)", 0.0, 2000.0, float(min(film.thickness_nm, 2000.0)), 1.0,
                          format="%.0f nm", key=f"thickness::{origin}", persist_state="session")
    link.attach("angle_deg", f"angle::{origin}")
    angle = st.slider("Angle of incidence (°)", 0.0, 80.0, float(min(stack.light.angle_deg, 80.0)), 0.5,
                      format="%.1f°", key=f"angle::{origin}", persist_state="session")
    link.attach("polarisation", f"pol::{origin}")
    polarisation = st.radio("Polarisation", POLARISATIONS,
                            index=POLARISATIONS.index(stack.light.polarisation), horizontal=True,
                            key=f"pol::{origin}", persist_state="session")
    link.attach("exposure", f"exposure::{origin}")
    exposure = st.slider("Exposure (×)", 0.5, 30.0, 1.0, 0.5, format="%.1f×", key=f"exposure::{origin}",
                         persist_state="session",
                         help="Scales the reflected light before it becomes a colour, as a camera's exposure "
                              "would. 1× shows the film next to a perfect white; weakly reflecting films such "
                              "as soap films (under 8 %) need 8–12× to show their colours brightly.")
link.publish()

try:
    with st.spinner("Computing…"):
        result = spectrum_and_colour(text, base_dir, thickness, angle, polarisation, exposure)
except FilmcalcError as exc:
    st.error(str(exc))
    st.stop()

for warning in result["warnings"]:
    st.warning(warning)

left, right = st.columns([3, 1])
with left:
    fig = spectrum_figure(result["spectrum"], polarisation,
                          f"{stack.name}: {film.material.name} {thickness:.0f} nm at {angle:g}°")
    st.plotly_chart(fig, width="stretch")

with right:
    st.subheader("Colour")
    st.markdown(
        f"<div style='height:150px;border-radius:8px;border:1px solid #888;background:{result['hex']}'></div>",
        unsafe_allow_html=True)
    X, Y, Z = result["XYZ"]
    st.markdown(f"**{result['hex']}** (sRGB)  \nXYZ = {X:.1f}, {Y:.1f}, {Z:.1f}  \n"
                f"light: {stack.light.source}, CIE 1931 2° observer, {polarisation}, exposure {exposure:g}×")
    if result["out_of_gamut"]:
        st.caption("Outside the sRGB gamut: each channel is clipped for display.")
    if result["monochromatic"]:
        st.caption("Line light: the film shows brighter or darker shades of the line colour.")

st.subheader("Layers")
rows = [{"medium": "ambient", "material": stack.ambient.name, "thickness (nm)": "—", "source": stack.ambient.source}]
for i, layer in enumerate(stack.layers, start=1):
    rows.append({"medium": f"layer {i}" + (" (film)" if layer.unknown else "")
                 + ("" if layer.coherent else " (thick)"),
                 "material": layer.material.name,
                 "thickness (nm)": f"{thickness if layer.unknown else layer.thickness_nm:,.1f}",
                 "source": layer.material.source})
rows.append({"medium": "substrate", "material": stack.substrate.name, "thickness (nm)": "—",
             "source": stack.substrate.source})
st.dataframe(rows, hide_index=True, width="stretch")
if stack.light.numerical_aperture:
    st.caption(f"Averaged over an illumination cone of NA {stack.light.numerical_aperture:g} "
               "(uniformly filled pupil).")
cautions_box()
