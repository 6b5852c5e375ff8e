"""Colour charts page: what the film looks like over thickness and angle, and back."""

import json

import numpy as np
import streamlit as st

from filmcalc.appearance import match_colour
from filmcalc.charts import (chromaticity_figure, colour_strip_figure, reflectance_map_figure, spectrum_figure,
                             thickness_angle_figure, thickness_unit)
from filmcalc.colour import parse_colour
from filmcalc.errors import FilmcalcError
from filmcalc.optics import stack_reflectance
from filmcalc.stack import POLARISATIONS
from filmcalc.ui.common import (PageLink, cached_bench_chart, cached_colours, cached_reflectance_map, cautions_box,
                                load_or_stop, save_run_panel, stack_file_name, stack_picker)

st.title("Colour charts")
st.write("The film's colour under the stack's light for every thickness and angle, a chart to print for the "
         "bench, and the thicknesses a colour could mean.")

link = PageLink("colour-charts")
text, base_dir, origin = stack_picker(link)
stack = load_or_stop(text, base_dir, origin)

with st.sidebar:
    st.header("Chart")
    link.attach("t_max_nm", "chart_tmax")
    t_max = st.number_input("Largest thickness (nm)", 50.0, 20000.0, 2000.0, 50.0, key="chart_tmax",
                            persist_state="session")
    link.attach("t_points", "chart_tpoints")
    t_points = st.select_slider("Thickness points", [201, 501, 1001, 2001, 4001], value=2001, key="chart_tpoints",
                                persist_state="session")
    link.attach("angle_max_deg", "chart_amax")
    a_max = st.slider("Largest angle (°)", 0.0, 80.0, 60.0, 5.0, format="%.0f°", key="chart_amax",
                      persist_state="session")
    link.attach("unit", "chart_unit")
    unit = st.radio("Thickness unit", ["nm", "µm", "Å"], horizontal=True, key="chart_unit", persist_state="session")
    link.attach("polarisation", "chart_pol")
    polarisation = st.radio("Polarisation", POLARISATIONS, horizontal=True,
                            index=POLARISATIONS.index(stack.light.polarisation), key="chart_pol",
                            persist_state="session")
    link.attach("auto_exposure", "chart_auto")
    auto = st.toggle("Automatic exposure", True, key="chart_auto", persist_state="session",
                     help="Scale the light so the brightest colour on the chart is near white, as a camera "
                          "exposed for the film would. Off: set it yourself (1× = beside a perfect white).")
    link.attach("exposure", "chart_exposure")
    exposure = None if auto else st.slider("Exposure (×)", 0.5, 30.0, 1.0, 0.5, format="%.1f×",
                                           key="chart_exposure", persist_state="session")
    link.attach("observer", "chart_observer")
    observer = st.radio("Observer", ["2", "10"], horizontal=True, key="chart_observer", persist_state="session",
                        format_func=lambda o: "CIE 1931 2°" if o == "2" else "CIE 1964 10°")
    link.attach("na", "chart_na")
    na = st.slider("Numerical aperture", 0.0, 0.9, float(stack.light.numerical_aperture), 0.05,
                   key="chart_na", persist_state="session",
                   help="Averages each angle over a microscope objective's cone.")
link.publish()

thickness_range = (0.0, float(t_max), int(t_points))
angle_count = int(a_max) + 1 if a_max > 0 else 1
angle_range = (0.0, float(a_max), angle_count)
try:
    with st.spinner("Computing colours…"):
        colours = cached_colours(text, base_dir, thickness_range, angle_range, observer, polarisation, float(na))
    colours = colours.with_exposure(colours.auto_exposure() if auto else exposure)
except FilmcalcError as exc:
    st.error(str(exc))
    st.stop()
for warning in colours.warnings:
    st.warning(warning)
if auto:
    st.caption(f"Automatic exposure {colours.exposure:.3g}×: the brightest film colour on the chart (luminous "
               f"reflectance {colours.Y_reflectance.max():.3g} %) is shown near white.")
if colours.monochromatic:
    st.info("Line light: the charts show the intensity fringes in the colour of the line.")

link.attach("angle_deg", "chart_angle", fits=lambda v: v <= a_max, misfit="above the largest angle")
view_angle = st.slider("Angle for the strip, path and matching (°)", 0.0, float(a_max), float(min(stack.light.angle_deg,
                     a_max)), 1.0, format="%.0f°", key="chart_angle", persist_state="session") if a_max > 0 else 0.0
row = int(round(view_angle))  # angles are every 1°
one = colours.at_angle(row)

tabs = st.tabs(["Thickness × angle", "Colour strip", "Reflectance map", "Colour path", "Spectrum",
                "Colour → thickness", "Printable chart"])
with tabs[0]:
    if a_max > 0:
        st.plotly_chart(thickness_angle_figure(colours, stack, unit), width="stretch")
    else:
        st.info("Raise the largest angle to see colours over angle.")
with tabs[1]:
    st.plotly_chart(colour_strip_figure(one, stack, unit), width="stretch")
with tabs[2]:
    with st.spinner("Computing reflectance…"):
        refl = cached_reflectance_map(text, base_dir, (0.0, float(t_max), min(int(t_points), 1001)), view_angle,
                                      float(na))
    st.plotly_chart(reflectance_map_figure(refl, np.linspace(0.0, t_max, min(int(t_points), 1001)), stack,
                                           polarisation, unit), width="stretch")
with tabs[3]:
    link.attach("diagram", "chart_space")
    space = st.radio("Diagram", ["xy", "uv"], horizontal=True, key="chart_space", persist_state="session",
                     format_func=lambda s: "CIE 1931 xy" if s == "xy" else "CIE 1976 u′v′")
    st.plotly_chart(chromaticity_figure(one, space, label_every_nm=100.0 if t_max <= 3000 else 500.0, unit=unit),
                    width="stretch")
with tabs[4]:
    link.attach("spectrum_nm", "chart_spec_d")
    d_spec = st.number_input("Film thickness (nm)", 0.0, 20000.0, float(min(stack.film.thickness_nm, t_max)),
                             1.0, key="chart_spec_d", persist_state="session")
    spec = stack_reflectance(stack, np.arange(380.0, 781.0, 1.0), d_spec, view_angle, na)
    st.plotly_chart(spectrum_figure(spec, polarisation, f"{d_spec:g} nm at {view_angle:g}°"), width="stretch")
with tabs[5]:
    st.write("Type or pick the colour you see; every thickness within the tolerance is listed, best first, "
             "with its fringe order at 550 nm. Colours repeat at higher orders: use what else you know "
             "(neighbouring colours, a bare-substrate reference, the expected range) to choose.")
    c1, c2, c3, c4 = st.columns(4)
    link.attach("colour", "match_picker")
    picked = c1.color_picker("Colour", "#5b6aa5", key="match_picker", persist_state="session")
    link.attach("colour_text", "match_text")
    typed = c2.text_input("…or type it", "", placeholder="#RRGGBB, srgb:R,G,B or lab:L,a,b", key="match_text",
                          persist_state="session")
    link.attach("swatch_nm", "match_swatch", fits=lambda v: v <= t_max, misfit="above the largest thickness")
    swatch = c3.number_input("…or take the chart's swatch at (nm)", 0.0, float(t_max), value=None,
                             placeholder="thickness", key="match_swatch", persist_state="session",
                             help="Which other thicknesses look like the chart's colour at this thickness?")
    link.attach("tolerance_de00", "match_tol")
    tolerance = c4.slider("Tolerance ΔE00", 0.5, 15.0, 5.0, 0.5, key="match_tol", persist_state="session")
    try:
        if swatch is not None and not typed:
            index = int(np.argmin(np.abs(one.thickness_nm - swatch)))
            target = one.Lab[0, index]
            st.caption(f"Swatch at {one.thickness_nm[index]:g} nm: {one.hex(cols=[index])[0, 0]}")
        else:
            target = parse_colour(typed or picked, colours.white_XYZ)
        found = match_colour(target, one, tolerance, stack)
    except FilmcalcError as exc:
        st.error(str(exc))
        found = None
    if found == []:
        st.warning("No thickness in the chart's range comes that close: raise the tolerance, widen the range, "
                   "or check the light, exposure and stack.")
    elif found:
        name_f = thickness_unit(unit)[1]
        st.dataframe([{"colour": c["hex"], f"thickness ({unit})": round(c["thickness_nm"] * name_f, 4),
                       "ΔE00": round(c["delta_E"], 2), "fringe order": c["order"],
                       f"within tolerance from ({unit})": round(c["from_nm"] * name_f, 4),
                       f"to ({unit})": round(c["to_nm"] * name_f, 4)} for c in found],
                     hide_index=True, width="stretch")
    if found is not None:
        # Saved as `filmcalc match … --save` saves it (the same output name), so either opens the other's runs.
        described = typed or (f"the chart's swatch at {swatch:g} nm" if swatch is not None else picked)
        found_plain = [{k: (v.item() if hasattr(v, "item") else v) for k, v in c.items()} for c in found]
        save_run_panel(
            "match", inputs={"stack": (stack_file_name(origin), text)},
            outputs={"candidates.json": json.dumps(found_plain, indent=1, default=str)},
            settings={"command": "match", "colour": described, "range": f"0:{t_max:g}", "tolerance": tolerance,
                      "resolution": float(t_max) / (int(t_points) - 1), "angle": view_angle, "observer": observer,
                      "exposure": float(colours.exposure), "polarisation": polarisation, "na": float(na)},
            summary={"stack": stack.name, "colour": described, "CIELAB": [round(float(v), 3) for v in target],
                     "tolerance": tolerance, "range_nm": [0.0, float(t_max)], "angle_deg": float(view_angle),
                     "candidates": len(found), "best_thickness_nm": found_plain[0]["thickness_nm"] if found else None,
                     "best_delta_E": found_plain[0]["delta_E"] if found else None},
            link=link, key="match")
with tabs[6]:
    st.write("Swatches for this stack, light and angle, with a title block, ready to print. Printed colours "
             "depend on the printer and on the light the chart is viewed under.")
    c1, c2, c3 = st.columns(3)
    link.attach("print_step_nm", "print_step")
    step = c1.number_input("Step (nm)", 1.0, 500.0, 10.0, 1.0, key="print_step", persist_state="session")
    link.attach("print_to_nm", "print_top", fits=lambda v: v >= step, misfit="below the step")
    top = c2.number_input("Up to (nm)", step, 20000.0, min(600.0, float(t_max)), step, key="print_top",
                          persist_state="session")
    link.attach("paper", "print_paper")
    paper = c3.radio("Paper", ["A4", "Letter"], horizontal=True, key="print_paper", persist_state="session")
    thickness_count = np.arange(0.0, top + step / 2, step).size
    if thickness_count > 240:
        st.error(f"{thickness_count} swatches do not fit on a page: raise the step or lower the largest thickness.")
    else:
        with st.spinner("Drawing the chart…"):
            files = cached_bench_chart(text, base_dir, float(step), float(top), float(view_angle), observer,
                                       float(colours.exposure), polarisation, float(na), unit, paper)
        st.image(files["png"], width=520)
        d1, d2, d3 = st.columns(3)
        d1.download_button("Download PDF", files["pdf"], "filmcalc-chart.pdf", "application/pdf")
        d2.download_button("Download PNG", files["png"], "filmcalc-chart.png", "image/png")
        d3.download_button("Download CSV", files["csv"], "filmcalc-chart.csv", "text/csv")
        # Saved as `filmcalc chart … --save` saves it (the same output names), so either opens the other's runs.
        swatch_nm = files["arrays"]["thickness_nm.npy"]
        save_run_panel(
            "chart", inputs={"stack": (stack_file_name(origin), text)},
            outputs={"chart.pdf": files["pdf"], "chart.png": files["png"], "colours.csv": files["csv"],
                     **files["arrays"]},
            settings={"command": "chart", "from_nm": 0.0, "to_nm": float(top), "step": float(step), "angles": None,
                      "unit": unit, "paper": paper, "exposure": float(colours.exposure), "observer": observer,
                      "angle": float(view_angle), "polarisation": polarisation, "na": float(na)},
            summary={"stack": stack.name, "from_nm": float(swatch_nm[0]), "to_nm": float(swatch_nm[-1]),
                     "step_nm": float(step), "thicknesses": int(swatch_nm.size), "angles": 1, "light": files["light"],
                     "observer": files["observer"], "exposure": files["exposure"],
                     "out_of_gamut_fraction": files["out_of_gamut_fraction"]},
            link=link, key="chart")
link.publish()
cautions_box()
