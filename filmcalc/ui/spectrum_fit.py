"""Spectrum fit page: a measured reflectance spectrum becomes a film thickness with its uncertainty."""

import json
from pathlib import Path

import streamlit as st

from filmcalc.charts import fit_landscape_figure, spectrum_fit_figure
from filmcalc.errors import FilmcalcError
from filmcalc.links import UPLOAD
from filmcalc.spectra import fit_spectrum, read_spectrum
from filmcalc.ui.common import (DEMO_DIR, PageLink, cautions_box, choose_demo_stack, load_or_stop, save_run_panel,
                                stack_file_name, stack_picker)

SPECTRA_DIR = DEMO_DIR / "spectra"
# Demo spectrum → the demo stack it was measured on, and the range to search.
DEMOS = {"oxide-spot.csv": ("oxide-coupon.toml", (0, 3000)), "resist-counts.csv": ("resist-wafer.toml", (0, 5000))}

st.title("Spectrum fit")
st.write("Load a reflectance spectrum (wavelength and reflectance, or raw sample / reference / dark counts), pick the "
         "stack it was measured on, and get the film's thickness with its 1σ uncertainty, the fit quality and any "
         "other thickness that would explain the data.")

link = PageLink("spectrum-fit", {"spectrum": {**{Path(n).stem: n for n in DEMOS}, UPLOAD: UPLOAD}})
if link.fresh:  # a new link chooses the spectrum: a demo by name, or "upload" for the user's own
    given = link.given().get("spectrum")
    st.session_state.pop("spec_source", None)
    st.session_state.pop("spec_demo", None)
    if given == UPLOAD:
        st.session_state["spec_source"] = "my spectrum"
    elif given:
        st.session_state["spec_source"], st.session_state["spec_demo"] = "demo spectrum", given
source = st.radio("Spectrum", ["demo spectrum", "my spectrum"], horizontal=True, key="spec_source",
                  persist_state="session")
if source == "demo spectrum":
    name = st.selectbox("Demo spectrum", list(DEMOS), key="spec_demo", persist_state="session",
                        help="Invented samples written by demo_data/make_demo_spectra.py.")
    link.keep("spectrum", name)
    data = (SPECTRA_DIR / name).read_bytes()
    choose_demo_stack(DEMOS[name][0], f"spec::{name}")
    default_range = DEMOS[name][1]
else:
    link.keep("spectrum", UPLOAD)
    link.note("The spectrum you uploaded is not in the link: whoever opens it must upload the same file.")
    upload = st.file_uploader("Spectrum (CSV or TSV: wavelength in nm, then reflectance or counts)",
                              type=["csv", "tsv", "txt"], key="spec_upload")
    if upload is None:
        st.info("Upload a spectrum, or pick a demo spectrum above.")
        link.publish()
        cautions_box()
        st.stop()
    data, name, default_range = upload.getvalue(), upload.name, (0, 3000)

text, base_dir, origin = stack_picker(link)
stack = load_or_stop(text, base_dir, origin)

with st.sidebar:
    st.header("Fit")
    c1, c2 = st.columns(2)
    link.attach("t_min_nm", f"spec_lo::{name}")
    lo = c1.number_input("Thinnest (nm)", 0.0, 100000.0, float(default_range[0]), 10.0, key=f"spec_lo::{name}",
                         persist_state="session")
    link.attach("t_max_nm", f"spec_hi::{name}")
    hi = c2.number_input("Thickest (nm)", 1.0, 100000.0, float(default_range[1]), 10.0, key=f"spec_hi::{name}",
                         persist_state="session")
    link.attach("scale", "spec_scale")
    scale = st.radio("Reflectance given as", ["auto", "percent", "fraction"], horizontal=True, key="spec_scale",
                     persist_state="session", help="auto: values above 1.5 are read as percent.")
    link.attach("fit", "spec_fit")
    what = st.selectbox("Free parameters", ["thickness", "thickness,cauchy"], key="spec_fit", persist_state="session",
                        help="thickness,cauchy also fits the film's Cauchy coefficients A, B, C.")
    link.attach("baseline", "spec_baseline")
    baseline = st.selectbox("Baseline", ["none", "offset", "scale+offset"], key="spec_baseline",
                            persist_state="session",
                            help="Lets the model shift (and scale) to absorb a reference or dark-count error.")
link.publish()

try:
    spectrum = read_spectrum(data, name=name, scale=scale)
except FilmcalcError as exc:
    st.error(str(exc))
    st.stop()
for note in spectrum.notes:
    st.caption(f"Note: {note}.")
wl = spectrum.wavelength_nm
link.attach("window_nm", f"spec_window::{name}", fits=lambda w: wl[0] <= w[0] < w[1] <= wl[-1],
            misfit=f"not within the spectrum's {wl[0]:g}–{wl[-1]:g} nm")
window = st.slider("Wavelength window (nm)", float(wl[0]), float(wl[-1]), (float(wl[0]), float(wl[-1])), 1.0,
                   key=f"spec_window::{name}", persist_state="session")
link.publish()

try:
    with st.spinner("Fitting…"):
        fit = fit_spectrum(spectrum, stack, (lo, hi), fit=what, window_nm=window, baseline=baseline)
except FilmcalcError as exc:
    st.error(str(exc))
    st.stop()

cols = st.columns(4)
cols[0].metric("film thickness", f"{fit.thickness_nm:.2f} nm")
cols[1].metric("1σ", f"{fit.sigma_nm:.2g} nm")
cols[2].metric("reduced χ²", f"{fit.reduced_chi2:.2f}")
cols[3].metric("rms residual", f"{100 * fit.rms_residual:.2f} %")
for w in fit.warnings:
    st.warning(w)
if fit.fft_thickness_nm is not None:
    st.info(f"Independent estimate from the fringe frequency: {fit.fft_thickness_nm:.0f} nm (FFT of R against "
            f"1/λ with the film's group index; the FFT's resolution is {fit.fft_resolution_nm:.0f} nm).")
st.plotly_chart(spectrum_fit_figure(fit), width="stretch")
left, right = st.columns([3, 2])
left.plotly_chart(fit_landscape_figure(fit), width="stretch")
with right:
    st.write("**Other minima** (a reduced χ² near the best one means the spectrum cannot tell them apart):")
    st.dataframe([{"thickness (nm)": round(a["thickness_nm"], 2), "reduced χ²": round(a["reduced_chi2"], 2)}
                  for a in fit.alternatives] or [{"thickness (nm)": "—", "reduced χ²": "—"}], hide_index=True)
    if len(fit.parameters) > 1:
        st.write("**Fitted parameters** (value ± 1σ):")
        st.dataframe([{"parameter": k, "value": f"{v:.6g}", "1σ": f"{s:.2g}"} for k, (v, s) in fit.parameters.items()],
                     hide_index=True)
    record = {"spectrum": name, "stack": stack.name, **fit.summary()}
    st.download_button("Result (JSON)", json.dumps(record, indent=1), f"{name.rsplit('.', 1)[0]}-fit.json",
                       key="spec_dl_json")
    table = "wavelength_nm,data,model\n" + "\n".join(f"{w:.3f},{d:.6f},{m:.6f}"
                                                    for w, d, m in zip(fit.wavelength_nm, fit.data, fit.model))
    st.download_button("Data and model (CSV)", table, f"{name.rsplit('.', 1)[0]}-fit.csv", key="spec_dl_csv")
# Saved as `filmcalc fit … --save` saves it (the same output names), so either opens the other's runs.
save_run_panel(
    "fit", inputs={"spectrum": (name, data), "stack": (stack_file_name(origin), text)},
    outputs={"wavelength_nm.npy": fit.wavelength_nm, "data.npy": fit.data, "model.npy": fit.model,
             "landscape_nm.npy": fit.landscape_nm, "landscape_chi2.npy": fit.landscape_chi2},
    settings={"command": "fit", "range": f"{lo:g}:{hi:g}", "fit": what, "window": f"{window[0]:g}:{window[1]:g}",
              "reference": "silicon", "baseline": baseline, "scale": scale},
    summary={"spectrum": spectrum.name, "stack": stack.name, "notes": spectrum.notes, **fit.summary()}, link=link)
cautions_box()
