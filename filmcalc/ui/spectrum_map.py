"""Map of spectra page: a mapping run of reflectance spectra becomes a thickness map and uniformity figures."""

import hashlib
import io
from pathlib import Path

import numpy as np
import streamlit as st

from filmcalc.charts import spectrum_map_figure, spectrum_map_figure_image
from filmcalc.errors import FilmcalcError
from filmcalc.links import UPLOAD
from filmcalc.spectra import fit_map, read_spectrum_map
from filmcalc.ui.common import (DEMO_DIR, RUN_CANCEL_HINT, PageLink, cautions_box, choose_demo_stack, load_or_stop,
                                save_run_panel, stack_file_name, stack_picker)

DEMOS = {"wafer-map.csv": "oxide-coupon.toml"}

st.title("Map of spectra")
st.write("Load a mapping run (one CSV with columns x, y, wavelength, reflectance: one row per point and "
         "wavelength), pick the stack, and get the thickness at every point with the uniformity figures a process "
         "report needs. Positions keep the file's units (mm in the demo).")

link = PageLink("spectrum-map", {"run": {**{Path(n).stem: n for n in DEMOS}, UPLOAD: UPLOAD}})
if link.fresh:  # a new link chooses the run: a demo by name, or "upload" for the user's own
    given = link.given().get("run")
    st.session_state.pop("smap_source", None)
    st.session_state.pop("smap_demo", None)
    if given == UPLOAD:
        st.session_state["smap_source"] = "my run"
    elif given:
        st.session_state["smap_source"], st.session_state["smap_demo"] = "demo run", given
source = st.radio("Mapping run", ["demo run", "my run"], horizontal=True, key="smap_source", persist_state="session")
if source == "demo run":
    name = st.selectbox("Demo run", list(DEMOS), key="smap_demo", persist_state="session",
                        help="An invented 150 mm wafer written by demo_data/make_demo_spectra.py.")
    link.keep("run", name)
    data = (DEMO_DIR / "spectra" / name).read_bytes()
    choose_demo_stack(DEMOS[name], f"smap::{name}")
else:
    link.keep("run", UPLOAD)
    link.note("The mapping run you uploaded is not in the link: whoever opens it must upload the same file.")
    upload = st.file_uploader("Mapping run (CSV: x, y, wavelength_nm, reflectance)", type=["csv", "tsv", "txt"],
                              key="smap_upload")
    if upload is None:
        st.info("Upload a mapping run, or pick the demo run above.")
        link.publish()
        cautions_box()
        st.stop()
    data, name = upload.getvalue(), upload.name

text, base_dir, origin = stack_picker(link)
stack = load_or_stop(text, base_dir, origin)
with st.sidebar:
    st.header("Fit")
    c1, c2 = st.columns(2)
    link.attach("t_min_nm", "smap_lo")
    lo = c1.number_input("Thinnest (nm)", 0.0, 100000.0, 0.0, 10.0, key="smap_lo", persist_state="session")
    link.attach("t_max_nm", "smap_hi")
    hi = c2.number_input("Thickest (nm)", 1.0, 100000.0, 3000.0, 10.0, key="smap_hi", persist_state="session")
    link.attach("baseline", "smap_baseline")
    baseline = st.selectbox("Baseline", ["none", "offset", "scale+offset"], key="smap_baseline",
                            persist_state="session")
    link.attach("position_unit", "smap_unit")
    unit = st.text_input("Position unit", "mm", key="smap_unit", max_chars=12, persist_state="session")
link.publish()

# The fit of a run is kept for this session, keyed by everything that defines it, so changing only the
# position unit or coming back to the page does not fit again.
run_key = (hashlib.sha256(data).hexdigest(), name, text, base_dir, lo, hi, baseline)
stored = st.session_state.get("smap_result")
if stored and stored[0] == run_key:
    smap, result = stored[1], stored[2]
else:
    st.caption(f"Fitting every spectrum shows its progress. {RUN_CANCEL_HINT}")
    try:
        smap = read_spectrum_map(data, name=name)
        bar = st.progress(0.0, "starting")
        result = fit_map(smap, stack, (lo, hi), baseline=baseline,
                         progress=lambda f, m: bar.progress(min(f, 1.0), m))
        bar.empty()
    except FilmcalcError as exc:
        st.error(str(exc))
        st.stop()
    st.session_state["smap_result"] = (run_key, smap, result)
for note in smap.notes:
    st.caption(f"Note: {note}.")
for w in result.warnings:
    st.warning(w)
s = result.statistics
cols = st.columns(4)
cols[0].metric("mean", f"{s['mean_nm']:.2f} nm", help=f"over {s['points']} points")
cols[1].metric("std over points", f"{s['std_nm']:.2f} nm")
cols[2].metric("range", f"{s['range_nm']:.2f} nm", help=f"{s['min_nm']:.2f} to {s['max_nm']:.2f} nm")
cols[3].metric("non-uniformity", f"{s['nonuniformity_pct']:.2f} %", help="(max − min) / (2 · mean)")
st.plotly_chart(spectrum_map_figure(result, unit=unit), width="stretch")
st.caption(f"{result.seconds:.2f} s for {s['points']} spectra. Crosses mark points where another thickness fits "
           "almost as well.")
rows = [{"x": x, "y": y, "thickness (nm)": round(t, 3), "1σ (nm)": round(sg, 4), "reduced χ²": round(c, 2),
         "ambiguous": bool(a)} for x, y, t, sg, c, a in zip(result.x, result.y, result.thickness_nm, result.sigma_nm,
                                                             result.reduced_chi2, result.ambiguous)]
with st.expander("Every point"):
    st.dataframe(rows, hide_index=True, width="stretch")
table = "x,y,thickness_nm,sigma_nm,reduced_chi2,ambiguous\n" + "\n".join(
    f"{r['x']:g},{r['y']:g},{r['thickness (nm)']},{r['1σ (nm)']},{r['reduced χ²']},{int(r['ambiguous'])}" for r in rows)
png = io.BytesIO()
spectrum_map_figure_image(result, f"{stack.name}: {name}", png, unit=unit)
c1, c2 = st.columns(2)
c1.download_button("Points (CSV)", table, name.rsplit(".", 1)[0] + "-thickness.csv", key="smap_dl_csv")
c2.download_button("Map (PNG)", png.getvalue(), name.rsplit(".", 1)[0] + "-thickness.png", key="smap_dl_png")
# Saved as `filmcalc fit-map … --save` saves it (the same output names), so either opens the other's runs.
save_run_panel(
    "fit-map", inputs={"input": (name, data), "stack": (stack_file_name(origin), text)},
    outputs={"x.npy": result.x, "y.npy": result.y, "thickness_nm.npy": result.thickness_nm,
             "sigma_nm.npy": result.sigma_nm, "reduced_chi2.npy": result.reduced_chi2,
             "ambiguous.npy": np.asarray(result.ambiguous, bool)},
    settings={"command": "fit-map", "range": f"{lo:g}:{hi:g}", "window": None, "baseline": baseline, "scale": "auto",
              "position_unit": unit},
    summary={"input": smap.name, "stack": stack.name, "points": int(result.x.size), "statistics": result.statistics,
             "ambiguous_points": int(result.ambiguous.sum()), "notes": smap.notes, "warnings": result.warnings,
             "seconds": round(result.seconds, 3)}, link=link)
cautions_box()
