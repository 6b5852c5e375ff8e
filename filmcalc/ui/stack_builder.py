"""Stack builder page: edit materials, layers and light; save the stack file."""

import streamlit as st

from filmcalc.errors import FilmcalcError
from filmcalc.materials import BUILT_IN, spec_from_text
from filmcalc.stack import POLARISATIONS, dumps_stack, loads_stack, stack_from_dict, stack_to_dict
from filmcalc.ui.common import BUILDER_CHOICE, PageLink, cautions_box, load_or_stop, stack_picker

LIGHTS = ["D65", "D50", "A", "F2", "F7", "F11", "LED-B3", "LED-B4", "blackbody:3200", "sodium", "mercury",
          "mercury-green", "hene", "hene-green"]

st.title("Stack builder")
st.write("Describe the sample from the side the light comes from down to the substrate. Materials are built-in "
         "names (see the list below), a constant index such as `n=1.47` or `n=2.5, k=3.4`, or Cauchy "
         "coefficients `cauchy=A, B, C` (λ in µm). Mark one thin layer as the film to measure.")

link = PageLink("stack-builder")
text, base_dir, origin = stack_picker(link)
link.note("Your edits are not in the link: the link opens the sample you started from. To share your stack, "
          "download its file below.")
link.publish()
start = load_or_stop(text, base_dir, origin, need_film=False)
data = stack_to_dict(start)


def as_text(spec, material):
    """A material as the builder's text box shows it (a built-in by its name, not its expanded formula)."""
    if isinstance(spec, dict) and "name" not in spec and material.name in BUILT_IN:
        return material.name
    if isinstance(spec, dict) and set(spec) <= {"n", "k"}:
        return ", ".join(f"{k}={v:g}" for k, v in spec.items())
    if isinstance(spec, dict) and set(spec) == {"cauchy"}:
        return "cauchy=" + ",".join(f"{v:g}" for v in spec["cauchy"])
    return spec if isinstance(spec, str) else str(spec)


key = f"builder::{origin}"
name = st.text_input("Name", data["name"], key=key + "::name")
c1, c2 = st.columns(2)
ambient = c1.text_input("Ambient (light arrives through it)", as_text(data["ambient"]["material"], start.ambient),
                        key=key + "::ambient")
substrate = c2.text_input("Substrate", as_text(data["substrate"]["material"], start.substrate), key=key + "::substrate")

st.subheader("Layers, top to bottom")
rows = [{"material": as_text(layer["material"], built.material), "thickness (nm)": layer["thickness_nm"],
         "thick (incoherent)": not layer.get("coherent", True), "film to measure": layer.get("unknown", False)}
        for layer, built in zip(data["layers"], start.layers)]
edited = st.data_editor(
    rows, num_rows="dynamic", width="stretch", key=key + "::layers",
    column_config={
        "material": st.column_config.TextColumn(help="built-in name, n=…, n=…,k=… or cauchy=A,B,C", required=True),
        "thickness (nm)": st.column_config.NumberColumn(min_value=0.0, format="%.1f", required=True),
        "thick (incoherent)": st.column_config.CheckboxColumn(help="a slide or disc much thicker than the "
                                                              "light's coherence length"),
        "film to measure": st.column_config.CheckboxColumn(help="exactly one thin layer"),
    })

st.subheader("Light")
c1, c2, c3, c4 = st.columns(4)
source_default = data["light"]["source"]
options = LIGHTS if source_default in LIGHTS else [source_default] + LIGHTS
source = c1.selectbox("Source", options + ["other…"], index=options.index(source_default), key=key + "::source")
if source == "other…":
    source = c1.text_input("Source name", "line:632.8", key=key + "::source_text",
                           help="any CIE illuminant name, blackbody:T, line:λ1,λ2 or a CSV path")
angle = c2.number_input("Angle (°)", 0.0, 89.0, float(data["light"]["angle_deg"]), 1.0, key=key + "::angle")
polarisation = c3.selectbox("Polarisation", POLARISATIONS, POLARISATIONS.index(data["light"]["polarisation"]),
                            key=key + "::pol")
na = c4.number_input("Numerical aperture", 0.0, 0.95, float(data["light"]["numerical_aperture"]), 0.05,
                     key=key + "::na")

try:
    layers = []
    for i, row in enumerate(edited, start=1):
        if not row.get("material"):
            raise FilmcalcError(f"Layer {i}: give a material.")
        layer = {"material": spec_from_text(row["material"]), "thickness_nm": float(row.get("thickness (nm)") or 0)}
        if row.get("thick (incoherent)"):
            layer["coherent"] = False
        if row.get("film to measure"):
            layer["unknown"] = True
        layers.append(layer)
    built = stack_from_dict({"name": name, "ambient": {"material": spec_from_text(ambient)}, "layers": layers,
                             "substrate": {"material": spec_from_text(substrate)},
                             "light": {"source": source, "angle_deg": angle, "polarisation": polarisation,
                                       "numerical_aperture": na}}, base_dir)
    toml_text = dumps_stack(built)
    loads_stack(toml_text, base_dir)  # the file it writes must read back
except FilmcalcError as exc:
    st.error(str(exc))
    st.stop()

if built.film_index is None:
    st.warning("No layer is marked as the film to measure: the charts need one.")
st.success("The stack is valid.")
c1, c2 = st.columns(2)
if c1.button("Use this stack on every page", type="primary", key=key + "::use"):
    st.session_state["builder_text"] = toml_text
    st.session_state["stack_choice_saved"] = BUILDER_CHOICE
    st.rerun()
c2.download_button("Download stack file", toml_text, "stack.toml", "application/toml", key=key + "::dl")
with st.expander("Stack file (TOML)"):
    st.code(toml_text, language="toml")
with st.expander("Built-in materials"):
    st.dataframe([{"name": k, "what": v} for k, v in BUILT_IN.items()], hide_index=True, width="stretch")
cautions_box()
