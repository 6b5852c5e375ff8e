"""Saved runs page: find a saved analysis, open it again from its stored arrays, compare runs, follow a sample."""

import datetime as dt
import json
import re
import tempfile
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import plotly.graph_objects as go
import streamlit as st

from filmcalc import fringes as fringe_flags
from filmcalc import io as fio
from filmcalc import thickness as photo_flags
from filmcalc.charts import (fit_landscape_figure, fit_overlay_figure, history_figure, kymograph_figure, map_figure,
                             plus_minus, spectrum_figure, spectrum_fit_figure, spectrum_map_figure, thinning_figure)
from filmcalc.errors import FilmcalcError
from filmcalc.runs import KINDS, compare_maps, history_table, numeric_summary_keys
from filmcalc.sequence import load_series
from filmcalc.series import PowerLawFit
from filmcalc.ui.common import PageLink, address_of, cautions_box, run_store

LIST_LIMIT = 200          # runs listed at once (newest first); the filters reach older ones
MAX_SHOWN_SIDE = 1200     # a larger map or photo is shown with every n-th pixel
COMPARE_LIMIT = 12
MAP_KINDS = ("map", "fringes")
KIND_NAMES = {"map": "photo map", "fringes": "fringes", "fit": "spectrum fit", "fit-map": "map of spectra",
              "sequence": "film over time", "chart": "colour chart", "match": "colour → thickness",
              "spectrum": "film spectrum", "colour": "film colour"}
KIND_TITLES = {"map": "Thickness map from a photo", "fringes": "Fringe analysis"}
# Summary numbers offered first in the history, by what they usually mean for a process.
PREFERRED_KEYS = ("mean_nm", "statistics.mean_nm", "thickness_nm", "alpha", "mean_nm_first_frame",
                  "best_thickness_nm", "R_mean")

st.title("Saved runs")
st.write("Analyses saved from a page (“Save as a run” under a result) or with `filmcalc … --save`: find one, "
         "open it again exactly as it was computed, compare runs side by side, and follow a sample's numbers "
         "over time.")
link = PageLink("saved-runs")
try:
    store = run_store()
    total = store.count_runs()
    facets = store.facets()
except FilmcalcError as exc:
    st.error(str(exc))
    link.publish()
    cautions_box()
    st.stop()
st.caption(f":material/database: Runs are kept in {store.describe()}. The dashboard and the `filmcalc` command "
           "share it; set FILMCALC_DATA (a folder) or FILMCALC_DATABASE_URL before starting the dashboard to use "
           "another store.")


# --------------------------------------------------------------------------- words and numbers

def kind_name(kind):
    return KIND_NAMES.get(kind, KINDS.get(kind, kind))


def when(created_utc):
    """``2026-12-02T13:05:11.123456Z`` → ``2026-12-02 13:05``."""
    return created_utc[:16].replace("T", " ")


def number(value, spec=".1f", unit=""):
    """A number with its unit, or – when the run has none."""
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not np.isfinite(value):
        return "–"
    return f"{value:{spec}}" + (f" {unit}" if unit else "")


def plain(text):
    """User text shown as itself in Markdown (no links, emphasis or HTML from a note)."""
    return re.sub(r"([\\`*_{}\[\]()<>#+\-.!|~$:])", r"\\\1", str(text))


UNIT_SUFFIXES = (("_nm", "nm"), ("_pct", "%"), ("_um2", "µm²"), ("_deg", "°"), ("_s", "s"), ("_nL", "nL"),
                 ("_fraction", "fraction of pixels"))


def key_unit(key):
    """The unit of a summary number, from its name (``mean_nm`` → nm); "" for pure numbers."""
    last = key.rsplit(".", 1)[-1]
    if last == "seconds":
        return "s"
    if last in ("R_mean", "R_min", "R_max"):
        return "fraction"
    for suffix, unit in UNIT_SUFFIXES:
        if last.endswith(suffix):
            return unit
    return ""


def key_label(key):
    unit = key_unit(key)
    return f"{key} ({unit})" if unit else f"{key} (no unit)"


def headline(info):
    """The run's key number with its unit, for the list."""
    s, kind = info.summary, info.kind
    stats = s.get("statistics") if isinstance(s.get("statistics"), dict) else {}
    if kind == "map" or (kind == "fringes" and s.get("mode") != "line"):
        return f"mean {number(s.get('mean_nm'), '.1f', 'nm')}, σ {number(s.get('std_nm'), '.1f', 'nm')}"
    if kind == "fringes":
        return f"{number(s.get('thickness_start_nm'), '.0f', 'nm')} → {number(s.get('thickness_end_nm'), '.0f', 'nm')}"
    if kind == "fit":
        value, sigma = s.get("thickness_nm"), s.get("sigma_nm")
        if isinstance(value, (int, float)) and isinstance(sigma, (int, float)):
            return f"{plus_minus(value, sigma)} nm"
        return number(value, ".2f", "nm")
    if kind == "fit-map":
        return (f"mean {number(stats.get('mean_nm'), '.2f', 'nm')}, non-uniformity "
                f"{number(stats.get('nonuniformity_pct'), '.2f', '%')}")
    if kind == "sequence":
        rupture = s.get("rupture_time_s")
        return (f"α {number(s.get('alpha'), '.3f')}, "
                + (f"rupture at {number(rupture, '.4g', 's')}" if rupture is not None else "no rupture"))
    if kind == "spectrum":
        return f"mean R {number(100 * s['R_mean'] if isinstance(s.get('R_mean'), (int, float)) else None, '.2f', '%')}"
    if kind == "colour":
        return f"{s.get('hex', '–')} at {number(s.get('thickness_nm'), 'g', 'nm')}"
    if kind == "chart":
        return (f"{number(s.get('from_nm'), 'g')}–{number(s.get('to_nm'), 'g', 'nm')}, "
                f"{s.get('thicknesses', '–')} swatches")
    if kind == "match":
        return (f"best {number(s.get('best_thickness_nm'), 'g', 'nm')} (ΔE00 {number(s.get('best_delta_E'), '.2f')}), "
                f"{s.get('candidates', 0)} candidates")
    return ""


def option_label(info):
    sample = info.sample or "no sample name"
    return f"{when(info.created_utc)} · {kind_name(info.kind)} · {sample} · {headline(info)} · {info.id}"


def size_text(size):
    for unit, factor in (("GB", 1e9), ("MB", 1e6), ("kB", 1e3)):
        if size >= factor:
            return f"{size / factor:.1f} {unit}"
    return f"{size} B"


# --------------------------------------------------------------------------- reading a run back

def stride_for(shape):
    return max(1, int(np.ceil(max(shape[:2]) / MAX_SHOWN_SIDE)))


def load_map(run, name):
    """A stored 2-D array, every n-th pixel of a large one (read through a memory map); (array, stride)."""
    array = store.load_array(run, name, mmap=True)
    step = stride_for(array.shape)
    return np.array(array[::step, ::step]), step


@st.cache_data(show_spinner=False, max_entries=8)
def photo_preview(_store, run_id, name, sha256):
    """The stored photo as 8-bit RGB for display (every n-th pixel of a large one), its size and bit depth."""
    photo = fio.load_photo(_store.read_bytes(run_id, name, "input"), name=name)
    step = stride_for(photo.shape)
    return np.rint(photo.rgb[::step, ::step] * 255).astype(np.uint8), photo.shape, photo.bit_depth


def input_name(run, role, suffixes=None):
    """The stored name of the input that played ``role`` (settings["inputs"]), else the first with a suffix."""
    name = (run.settings.get("inputs") or {}).get(role)
    if name in run.inputs:
        return name
    for candidate in run.inputs:
        if suffixes and candidate.lower().endswith(suffixes):
            return candidate
    return None


def pixel_size(run):
    value = run.settings.get("pixel_size", run.settings.get("pixel_size_um"))
    return value if isinstance(value, (int, float)) and value > 0 else None


def show_photo(run):
    name = input_name(run, "photo", (".png", ".jpg", ".jpeg", ".tif", ".tiff"))
    if name is None:
        st.info("This run holds no photo.")
        return
    rgb, (height, width), bits = photo_preview(store, run.id, name, run.inputs[name].sha256)
    st.image(rgb, caption=f"The photo as stored: {name}, {width} × {height} px, {bits}-bit", width="stretch")


def flags_table(flags, table, meanings):
    st.dataframe([{"flag": k, "pixels": int(np.count_nonzero(flags & v)), "meaning": meanings[k]}
                  for k, v in table.items()], hide_index=True, width="stretch")


def draw_map(run):
    """A photo map or a fringe map: the photo beside the thickness map, then σ, residual and flags."""
    s = run.summary
    fringe = run.kind == "fringes"
    cols = st.columns(4)
    cols[0].metric("mean thickness", number(s.get("mean_nm"), ".1f", "nm"))
    cols[1].metric("σ across the map", number(s.get("std_nm"), ".1f", "nm"))
    cols[2].metric("range", f"{number(s.get('min_nm'), '.0f')}–{number(s.get('max_nm'), '.0f', 'nm')}")
    cols[3].metric("flagged pixels", number(100 * s["flagged_fraction"] if isinstance(
        s.get("flagged_fraction"), (int, float)) else None, ".1f", "%"))
    pixel = pixel_size(run)
    thickness, step = load_map(run, "thickness_nm.npy")
    left, right = st.columns(2)
    with left:
        show_photo(run)
    right.plotly_chart(map_figure(thickness, "thickness", "thickness (nm)", pixel_size_um=pixel, stride=step),
                       width="stretch", key=f"sr_map::{run.id}")
    left, right = st.columns(2)
    sigma, _ = load_map(run, "sigma_nm.npy")
    left.plotly_chart(map_figure(sigma, "uncertainty (1σ)", "1σ (nm)", "Viridis", pixel_size_um=pixel, stride=step),
                      width="stretch", key=f"sr_sigma::{run.id}")
    flags = store.load_array(run, "flags.npy")
    module = fringe_flags if fringe else photo_flags
    if "residual_dE.npy" in run.outputs:
        residual, _ = load_map(run, "residual_dE.npy")
        right.plotly_chart(map_figure(residual, "colour residual", "ΔE00", "Magma", 0, 10, pixel, stride=step),
                           width="stretch", key=f"sr_residual::{run.id}")
        with st.expander("Flagged pixels"):
            flags_table(flags, module.FLAGS, module.FLAG_MEANINGS)
    else:
        with right:
            st.write("**Flagged pixels**")
            flags_table(flags, module.FLAGS, module.FLAG_MEANINGS)
    st.caption("Drawn from the arrays stored with the run: nothing was computed again.")


def draw_line(run):
    """A fringe count along a line."""
    s = run.summary
    cols = st.columns(3)
    cols[0].metric("thickness at the end", number(s.get("thickness_end_nm"), ".0f", "nm"))
    cols[1].metric("fringe extrema crossed", f"{s.get('extrema', '–')}")
    cols[2].metric("one fringe", number(s.get("period_nm"), ".1f", "nm"))
    d, t, sig = (store.load_array(run, n) for n in ("distance_px.npy", "thickness_nm.npy", "sigma_nm.npy"))
    ex_px, ex_nm = store.load_array(run, "extrema_px.npy"), store.load_array(run, "extrema_nm.npy")
    left, right = st.columns(2)
    with left:
        show_photo(run)
        line = run.settings.get("line")
        if line:
            st.caption(f"Thickness along the line x0, y0, x1, y1 = {plain(line)} (px), counted from the known pixel "
                       "at its start.")
    prof = go.Figure([go.Scatter(x=d, y=t + sig, line={"width": 0}, showlegend=False, hoverinfo="skip"),
                      go.Scatter(x=d, y=t - sig, fill="tonexty", line={"width": 0}, name="±1σ", hoverinfo="skip"),
                      go.Scatter(x=d, y=t, name="thickness", line={"color": "#444"}),
                      go.Scatter(x=ex_px, y=ex_nm, mode="markers", name="fringe extrema", marker={"color": "#f2a900"})])
    prof.update_layout(height=360, xaxis_title="distance along the line (px)", yaxis_title="thickness (nm)",
                       margin={"l": 10, "r": 10, "t": 20, "b": 10}, legend={"orientation": "h", "y": -0.25})
    right.plotly_chart(prof, width="stretch", key=f"sr_line::{run.id}")


def stored_fit(run):
    s = run.summary
    return SimpleNamespace(
        wavelength_nm=store.load_array(run, "wavelength_nm.npy"), data=store.load_array(run, "data.npy"),
        model=store.load_array(run, "model.npy"), landscape_nm=store.load_array(run, "landscape_nm.npy"),
        landscape_chi2=store.load_array(run, "landscape_chi2.npy"), thickness_nm=float(s["thickness_nm"]),
        sigma_nm=float(s.get("sigma_nm") or 0.0), reduced_chi2=float(s.get("reduced_chi2") or 0.0),
        alternatives=s.get("alternatives") or [])


def draw_fit(run):
    s = run.summary
    cols = st.columns(4)
    cols[0].metric("film thickness", number(s.get("thickness_nm"), ".2f", "nm"))
    cols[1].metric("1σ", number(s.get("sigma_nm"), ".2g", "nm"))
    cols[2].metric("reduced χ²", number(s.get("reduced_chi2"), ".2f"))
    cols[3].metric("rms residual", number(100 * s["rms_residual"] if isinstance(s.get("rms_residual"), (int, float))
                                          else None, ".2f", "%"))
    fit = stored_fit(run)
    st.plotly_chart(spectrum_fit_figure(fit), width="stretch", key=f"sr_fit::{run.id}")
    left, right = st.columns([3, 2])
    left.plotly_chart(fit_landscape_figure(fit), width="stretch", key=f"sr_landscape::{run.id}")
    with right:
        st.write("**Other minima**:")
        st.dataframe([{"thickness (nm)": a.get("thickness_nm"), "reduced χ²": a.get("reduced_chi2")}
                      for a in fit.alternatives] or [{"thickness (nm)": "—", "reduced χ²": "—"}], hide_index=True)
        params = s.get("parameters") or {}
        if len(params) > 1:
            st.write("**Fitted parameters** (value ± 1σ):")
            st.dataframe([{"parameter": k, "value": f"{v[0]:.6g}", "1σ": f"{v[1]:.2g}"} for k, v in params.items()],
                         hide_index=True)


def stored_spectrum_map(run):
    return SimpleNamespace(**{n: store.load_array(run, f"{n}.npy") for n in
                              ("x", "y", "thickness_nm", "sigma_nm", "reduced_chi2", "ambiguous")},
                           statistics=run.summary.get("statistics") or {})


def position_unit(run):
    return run.settings.get("position_unit") or "the file's unit"


def draw_fit_map(run):
    stats = run.summary.get("statistics") or {}
    cols = st.columns(4)
    cols[0].metric("mean", number(stats.get("mean_nm"), ".2f", "nm"), help=f"over {stats.get('points', '–')} points")
    cols[1].metric("std over points", number(stats.get("std_nm"), ".2f", "nm"))
    cols[2].metric("range", number(stats.get("range_nm"), ".2f", "nm"))
    cols[3].metric("non-uniformity", number(stats.get("nonuniformity_pct"), ".2f", "%"),
                   help="(max − min) / (2 · mean)")
    result = stored_spectrum_map(run)
    if stats.get("mean_nm") is not None and stats.get("nonuniformity_pct") is not None:
        figure = spectrum_map_figure(result, unit=position_unit(run))
    else:
        figure = spectrum_map_figure(result, unit=position_unit(run), title="Thickness map")
    st.plotly_chart(figure, width="stretch", key=f"sr_fitmap::{run.id}")
    with st.expander("Every point"):
        unit = position_unit(run)
        st.dataframe([{f"x ({unit})": float(x), f"y ({unit})": float(y), "thickness (nm)": round(float(t), 3),
                       "1σ (nm)": round(float(s), 4),
                       "reduced χ²": round(float(c), 2), "ambiguous": bool(a)}
                      for x, y, t, s, c, a in zip(result.x, result.y, result.thickness_nm, result.sigma_nm,
                                                  result.reduced_chi2, result.ambiguous)], hide_index=True,
                     width="stretch")


@st.cache_data(show_spinner=False, max_entries=8)
def stored_series(_store, run_id, sha256):
    """A sequence run's series.csv, read with the sequence module's reader."""
    with tempfile.TemporaryDirectory() as tmp:
        (Path(tmp) / "series.csv").write_bytes(_store.read_bytes(run_id, "series.csv"))
        return load_series(tmp)


def draw_sequence(run):
    s = run.summary
    full = json.loads(store.read_bytes(run, "summary.json")) if "summary.json" in run.outputs else {}
    cols = st.columns(3)
    cols[0].metric("frames mapped", f"{s.get('frames_mapped', '–')} of {s.get('frames_selected', '–')}")
    rupture = s.get("rupture_time_s")
    cols[1].metric("rupture", f"t = {rupture:.4g} s" if isinstance(rupture, (int, float)) else "none seen")
    law = full.get("thinning_law")
    cols[2].metric("thinning exponent α", number(s.get("alpha"), ".3f") if s.get("alpha") is not None else "no fit",
                   help="h = A·(t − t₀)^−α fitted to the mean thickness before the rupture.")
    fit = None
    if isinstance(law, dict):
        try:
            fit = PowerLawFit(**law)
        except TypeError:
            fit = None
    series = stored_series(store, run.id, run.outputs["series.csv"].sha256)
    times = series["time_s"]
    shown = {"mean over the film": series["mean_nm"]}
    for column in series:
        if column.startswith("point_") and column.endswith("_nm"):
            shown[column.removesuffix("_nm").replace("_", " ")] = series[column]
    st.plotly_chart(thinning_figure(times, shown, fit, rupture if isinstance(rupture, (int, float)) else None),
                    width="stretch", key=f"sr_thinning::{run.id}")
    cube, _ = store.open_cube(run)
    maps = cube.get("thickness_nm")
    good = [k for k, status in enumerate(series["status"]) if status == "ok"]
    if maps is not None and good:
        k = st.select_slider("Frame", options=good, value=good[0], key=f"sr_frame::{run.id}",
                             format_func=lambda i: f"{i}: {series['frame'][i]} (t = {times[i]:.4g} s)")
        step = stride_for(maps.shape[1:])
        frame = np.asarray(maps[k, ::step, ::step])
        first = np.asarray(maps[good[0], ::step, ::step])
        lo, hi = np.nanpercentile(first, [1, 99]) if np.isfinite(first).any() else (None, None)
        left, right = st.columns(2)
        left.plotly_chart(map_figure(frame, f"{series['frame'][k]}, t = {times[k]:.4g} s", "thickness (nm)",
                                     zmin=lo, zmax=hi, pixel_size_um=pixel_size(run), stride=step),
                          width="stretch", key=f"sr_seqmap::{run.id}")
        if "kymograph_nm" in cube:
            right.plotly_chart(kymograph_figure(np.asarray(cube["kymograph_nm"]), times), width="stretch",
                               key=f"sr_kymo::{run.id}")
        st.caption("Every frame on the colour scale of the first mapped frame (its 1st–99th percentile).")


def draw_chart(run):
    s = run.summary
    cols = st.columns(3)
    cols[0].metric("thicknesses", f"{number(s.get('from_nm'), 'g')}–{number(s.get('to_nm'), 'g', 'nm')}")
    cols[1].metric("step", number(s.get("step_nm"), "g", "nm"))
    cols[2].metric("swatches out of the sRGB gamut", number(100 * s["out_of_gamut_fraction"] if isinstance(
        s.get("out_of_gamut_fraction"), (int, float)) else None, ".0f", "%"))
    if "chart.png" in run.outputs:
        st.image(store.read_bytes(run, "chart.png"), width=520)
    columns = st.columns(3)
    for col, name in zip(columns, [n for n in ("chart.pdf", "chart.png", "colours.csv") if n in run.outputs]):
        col.download_button(f"Download {name}", store.read_bytes(run, name), f"{run.id}-{name}",
                            icon=":material/download:", key=f"sr_dl::{run.id}::{name}")


def draw_match(run):
    s = run.summary
    st.write(f"Colour {plain(s.get('colour', '–'))} (CIELAB {', '.join(f'{v:g}' for v in s.get('CIELAB') or [])}), "
             f"tolerance ΔE00 {number(s.get('tolerance'), 'g')}, at {number(s.get('angle_deg'), 'g', '°')}.")
    candidates = json.loads(store.read_bytes(run, "candidates.json")) if "candidates.json" in run.outputs else []
    st.dataframe([{"colour": c.get("hex"), "thickness (nm)": c.get("thickness_nm"), "ΔE00": c.get("delta_E"),
                   "fringe order": c.get("order"), "from (nm)": c.get("from_nm"), "to (nm)": c.get("to_nm")}
                  for c in candidates] or [{"thickness (nm)": "no candidate"}], hide_index=True, width="stretch")


def draw_spectrum(run):
    s = run.summary
    wl = store.load_array(run, "wavelength_nm.npy")
    values = {"s": store.load_array(run, "R_s.npy"), "p": store.load_array(run, "R_p.npy")}
    values["unpolarised"] = (store.load_array(run, "R.npy") if s.get("polarisation") == "unpolarised"
                             else (values["s"] + values["p"]) / 2)
    stored = SimpleNamespace(wavelength_nm=wl, reflectance=lambda key: values[key])
    title = (f"{s.get('stack', '')}: film {number(s.get('film_thickness_nm'), 'g', 'nm')} at "
             f"{number(s.get('angle_deg'), 'g', '°')}")
    st.plotly_chart(spectrum_figure(stored, s.get("polarisation", "unpolarised"), title), width="stretch",
                    key=f"sr_spectrum::{run.id}")


def draw_colour(run):
    s = run.summary
    hex_colour = s.get("hex") if re.fullmatch(r"#[0-9a-fA-F]{6}", str(s.get("hex"))) else "#808080"
    left, right = st.columns([1, 3])
    left.markdown(f"<div style='height:120px;border-radius:8px;border:1px solid #888;background:{hex_colour}'></div>",
                  unsafe_allow_html=True)
    right.markdown(f"**{hex_colour}** (sRGB) at {number(s.get('thickness_nm'), 'g', 'nm')} and "
                   f"{number(s.get('angle_deg'), 'g', '°')}  \nCIELAB L* {number(s.get('L_star'), '.2f')}, "
                   f"a* {number(s.get('a_star'), '.2f')}, b* {number(s.get('b_star'), '.2f')}  \n"
                   f"light {plain(s.get('light', '–'))}, exposure {number(s.get('exposure'), 'g', '×')}")


def draw_results(run):
    if not run.outputs and run.kind != "colour":  # e.g. saved through the Python API with numbers only
        st.info("This run holds summary numbers only, no result files to draw: see Summary below.")
        return
    if run.kind == "fringes" and run.summary.get("mode") == "line":
        draw_line(run)
    elif run.kind in MAP_KINDS:
        draw_map(run)
    else:
        {"fit": draw_fit, "fit-map": draw_fit_map, "sequence": draw_sequence, "chart": draw_chart,
         "match": draw_match, "spectrum": draw_spectrum, "colour": draw_colour}.get(run.kind, lambda r: None)(run)


# --------------------------------------------------------------------------- deleting and exporting

def ask_to_delete(run_id):
    st.session_state["sr_delete_pending"] = run_id


def keep_run():
    st.session_state.pop("sr_delete_pending", None)


def delete_run(run_id):
    """The confirmed delete (a button callback, so the run is gone before the page is drawn again)."""
    st.session_state.pop("sr_delete_pending", None)
    try:
        gone = store.delete(run_id)
    except FilmcalcError as exc:
        st.session_state["sr_message"] = ("error", f"Run {run_id} was not deleted: {exc}")
        return
    done = (f"Run {gone.id} ({kind_name(gone.kind)}, sample {gone.sample or '–'}, saved {when(gone.created_utc)} UTC) "
            "is deleted.")
    st.session_state["sr_message"] = ("success", done)
    if st.session_state.get("sr_open") == run_id:
        st.session_state["sr_open"] = None
    st.session_state["sr_compare"] = [r for r in st.session_state.get("sr_compare", []) if r != run_id]


def run_actions(run):
    st.markdown("**Share, export, delete**")
    st.caption("The link opens this run for anyone who can reach this dashboard, photo and results included:")
    st.code(address_of("saved-runs", f"run={run.id}"), language=None)
    c1, c2 = st.columns(2)
    with c1:
        if st.button("Prepare the export (zip)", icon=":material/archive:", key="sr_export",
                     help="One zip with manifest.json (the run's record and every file's SHA-256), inputs/ and "
                          "outputs/; `filmcalc runs import` reads it into another store."):
            try:
                with tempfile.TemporaryDirectory() as tmp, st.spinner("Writing the zip…"):
                    path = store.export_zip(run.id, Path(tmp) / f"filmcalc-run-{run.id}.zip")
                    st.session_state["sr_export_zip"] = (run.id, path.name, path.read_bytes())
            except FilmcalcError as exc:
                st.error(str(exc))
        ready = st.session_state.get("sr_export_zip")
        if ready and ready[0] == run.id:
            st.download_button(f"Download {ready[1]} ({size_text(len(ready[2]))})", ready[2], ready[1],
                               "application/zip", icon=":material/download:", key="sr_export_download")
    with c2:
        if st.session_state.get("sr_delete_pending") == run.id:
            st.warning(f"Delete run {run.id} ({kind_name(run.kind)}, sample {plain(run.sample or '–')}, saved "
                       f"{when(run.created_utc)} UTC)? Its stored files go too unless another run uses them, and "
                       "links to it stop working. This cannot be undone: export it first to keep a copy.",
                       icon=":material/warning:")
            a, b = st.columns(2)
            a.button("Yes, delete it", type="primary", icon=":material/delete_forever:", key="sr_delete_yes",
                     on_click=delete_run, args=(run.id,))
            b.button("No, keep it", key="sr_delete_no", on_click=keep_run)
        else:
            st.button("Delete this run…", icon=":material/delete:", key="sr_delete", on_click=ask_to_delete,
                      args=(run.id,))


def show_run(run):
    tags = f"; tags: {', '.join(run.tags)}" if run.tags else ""
    title = KIND_TITLES.get(run.kind, kind_name(run.kind).capitalize())
    st.subheader(f"{title}: {plain(run.sample) if run.sample else 'no sample name'}")
    st.caption(f"Run {run.id}, saved {when(run.created_utc)} UTC" + (f" by {plain(run.saved_by)}" if run.saved_by
                                                                     else "")
               + f" with filmcalc {plain(run.filmcalc_version)}{plain(tags)}.")
    if run.note:
        st.info(plain(run.note), icon=":material/sticky_note_2:")
    try:
        draw_results(run)
    except FilmcalcError as exc:
        st.error(f"The results of run {run.id} cannot be shown: {exc}")
    run_actions(run)
    details = st.tabs(["Summary", "Settings", "Provenance", "Files"])
    with details[0]:
        st.caption("The run's summary numbers, as `filmcalc runs history --key` names them (units in the names: "
                   "_nm nanometres, _pct percent, _s seconds).")
        st.json(run.summary, expanded=1)
    with details[1]:
        st.json(run.settings, expanded=2)
    with details[2]:
        st.caption("What made the result: the filmcalc version, the command line or the page's link, the SHA-256 "
                   "of every input and output, and the analysis's own record.")
        st.json(run.provenance, expanded=1)
    with details[3]:
        st.dataframe([{"role": f.role, "name": f.name, "size": size_text(f.size), "SHA-256": f.sha256,
                       "type": f.media_type} for f in run.files], hide_index=True, width="stretch")
        names = [f"{f.role}: {f.name}" for f in run.files]
        if names:
            picked = st.selectbox("Download one file", names, index=None, key=f"sr_file::{run.id}",
                                  placeholder="choose a file")
            if picked:
                role, name = picked.split(": ", 1)
                try:
                    data = store.read_bytes(run, name, role)
                except FilmcalcError as exc:
                    st.error(str(exc))
                else:
                    st.download_button(f"Download {name} ({size_text(len(data))})", data, name.replace("/", "_"),
                                       key=f"sr_file_dl::{run.id}")


# --------------------------------------------------------------------------- the page

message = st.session_state.pop("sr_message", None)
if message:
    (st.success if message[0] == "success" else st.error)(message[1])


def exists(run_id):
    try:
        return store.exists(run_id)
    except FilmcalcError:
        return False


MISSING = "no run with this id in this store (deleted, or saved in another store)"

if total == 0:
    link.attach("run", "sr_open", fits=lambda v: False, misfit="this store holds no saved runs yet")
    st.info("No runs are saved here yet. To save one, open an analysis page (Thickness from a photo, Spectrum fit, "
            "Map of spectra, Fringes, Film over time or Colour charts), compute a result, open **Save as a run** "
            "under it, type the sample name and press **Save**. From the command line, add `--save` to an "
            "analysis, e.g. `filmcalc map PHOTO STACK --out map.tiff --save --sample \"coupon 3\"`, with "
            "FILMCALC_DATA set to the folder this dashboard uses.", icon=":material/bookmark_add:")
    link.publish()
    cautions_box()
    st.stop()

with st.sidebar:
    st.header("Find runs")
    sample = st.selectbox("Sample", facets["samples"], index=None, placeholder="any sample", key="sr_sample",
                          persist_state="session")
    tags = st.multiselect("Tags (runs with all of them)", facets["tags"], placeholder="any tags", key="sr_tags",
                          persist_state="session")
    kinds = st.multiselect("Kind", facets["kinds"], format_func=kind_name, placeholder="any kind", key="sr_kinds",
                           persist_state="session")
    saved_by = st.selectbox("Saved by", facets["saved_by"], index=None, placeholder="anyone", key="sr_by",
                            persist_state="session")
    c1, c2 = st.columns(2)
    since = c1.date_input("Saved from", None, key="sr_since", persist_state="session", help="A day (UTC), included.")
    until = c2.date_input("Saved until", None, key="sr_until", persist_state="session", help="A day (UTC), included.")
    text = st.text_input("Text in the sample, note or id", key="sr_text", persist_state="session")

filters = {"sample": sample, "tags": tags or None, "kind": kinds or None, "saved_by": saved_by, "since": since,
           "until": until + dt.timedelta(days=1) if until else None, "text": text.strip() or None}
try:
    matching = store.count_runs(**filters)
    runs = store.list_runs(**filters, limit=LIST_LIMIT)
except FilmcalcError as exc:
    st.error(str(exc))
    runs, matching = [], 0
listed = {r.id: r for r in runs}

tab_list, tab_compare, tab_history = st.tabs(["Runs", "Compare", "Sample history"])

with tab_list:
    plural = "" if total == 1 else "s"
    shown = (f"{matching} of {total} saved run{plural} match the filters" if matching != total
             else f"{total} saved run{plural}")
    if matching > LIST_LIMIT:
        shown += f"; the newest {LIST_LIMIT} are listed (narrow the filters to reach older ones)"
    st.caption(shown + ". Newest first; times in UTC.")
    if since and until and since > until:
        st.warning("“Saved from” is after “Saved until”: no run can match.")
    if runs:
        st.dataframe([{"id": r.id, "saved (UTC)": when(r.created_utc), "kind": kind_name(r.kind), "sample": r.sample,
                       "result": headline(r), "tags": ", ".join(r.tags), "saved by": r.saved_by,
                       "note": r.note.splitlines()[0][:80] if r.note else ""} for r in runs],
                     hide_index=True, width="stretch", height=min(38 + 35 * len(runs), 400))
    else:
        st.info("No saved run matches these filters: clear some of them in the sidebar.", icon=":material/search_off:")
    link.attach("run", "sr_open", fits=exists, misfit=MISSING)
    current = st.session_state.get("sr_open")
    options = list(listed)
    if current and current not in listed:  # opened by a link, or hidden by the filters: keep it open
        try:
            extra = store.get(current)
        except FilmcalcError:
            st.session_state["sr_open"] = None
        else:
            listed[current] = extra
            options.insert(0, current)
    opened_id = st.selectbox("Open a run", options, index=None, format_func=lambda i: option_label(listed[i]),
                             placeholder="choose a run to see its results again", key="sr_open")
    if opened_id:
        try:
            opened = store.get(opened_id)
        except FilmcalcError as exc:
            st.error(str(exc))
        else:
            with st.container(border=True):
                show_run(opened)

with tab_compare:
    st.caption("Two or more thickness maps side by side on one colour scale with their differences from the first "
               "one chosen; spectrum fits overlaid; maps of spectra side by side on one colour scale.")
    comparable = [r for r in runs if r.kind in ("map", "fit", "fit-map") or
                  (r.kind == "fringes" and r.summary.get("mode") != "line")]
    if link.fresh:
        given = (link.given().get("compare") or "").split(",")
        ids = [i for i in given if i and exists(i)]
        if len(ids) < len([i for i in given if i]):
            link.refuse("compare", ",".join(i for i in given if i not in ids), MISSING)
        st.session_state["sr_compare"] = ids
    chosen_before = [i for i in st.session_state.get("sr_compare", []) if exists(i)]
    st.session_state["sr_compare"] = chosen_before
    options = [r.id for r in comparable]
    for run_id in reversed(chosen_before):
        if run_id not in listed:
            listed[run_id] = store.get(run_id)
        if run_id not in options:
            options.insert(0, run_id)
    chosen = st.multiselect("Runs to compare", options, format_func=lambda i: option_label(listed[i]),
                            max_selections=COMPARE_LIMIT, key="sr_compare",
                            placeholder="choose two or more runs (the list's filters apply)")
    link.keep("compare", ",".join(chosen) if len(chosen) >= 2 else None)
    if len(chosen) < 2:
        st.info("Choose two or more runs of one sort: thickness maps (from photos or fringes), spectrum fits, or "
                "maps of spectra.")
    else:
        chosen_runs = [store.get(i) for i in chosen]
        sorts = {"maps" if r.kind in MAP_KINDS else r.kind for r in chosen_runs}
        if len(sorts) > 1:
            st.warning("These runs are of different sorts; compare thickness maps with thickness maps, fits with "
                       "fits, maps of spectra with maps of spectra.")
        elif sorts == {"maps"}:
            try:
                maps = {r.id: store.load_array(r, "thickness_nm.npy") for r in chosen_runs}
            except FilmcalcError as exc:
                st.error(str(exc))
                maps = {}
            chosen_runs = [r for r in chosen_runs if r.id in maps]
            finite = [m[np.isfinite(m)] for m in maps.values()]
            finite = [f for f in finite if f.size]
            lo = min(float(f.min()) for f in finite) if finite else None
            hi = max(float(f.max()) for f in finite) if finite else None
            st.markdown(f"**Thickness, one colour scale** ({number(lo, '.0f')}–{number(hi, '.0f', 'nm')})")
            per_row = 3 if len(maps) > 2 else 2
            for start in range(0, len(chosen_runs), per_row):
                cols = st.columns(per_row)
                for col, r in zip(cols, chosen_runs[start:start + per_row]):
                    step = stride_for(maps[r.id].shape)
                    col.plotly_chart(map_figure(maps[r.id][::step, ::step], f"{r.id}: {r.sample or 'no sample'}",
                                                "thickness (nm)", zmin=lo, zmax=hi, pixel_size_um=pixel_size(r),
                                                stride=step), width="stretch", key=f"sr_cmp_map::{r.id}")
            first = chosen_runs[0] if chosen_runs else None
            if first is not None:
                st.markdown(f"**Differences from run {first.id}** (each run − {first.id}, nm)")
            rows = []
            cols = st.columns(per_row)
            for r in chosen_runs[1:]:
                try:
                    diff = compare_maps(maps[first.id], maps[r.id])
                except FilmcalcError as exc:
                    st.warning(f"{r.id} − {first.id}: {exc}")
                    continue
                rounded = {k: None if diff[k] is None else round(diff[k], 3) for k in ("mean_nm", "std_nm", "rms_nm")}
                rows.append({"run": r.id, "mean difference (nm)": rounded["mean_nm"],
                             "σ of the difference (nm)": rounded["std_nm"], "rms difference (nm)": rounded["rms_nm"],
                             "pixels compared": diff["pixels"]})
                limit = diff["difference_limit"] or 1.0
                step = stride_for(diff["difference"].shape)
                cols[(len(rows) - 1) % per_row].plotly_chart(
                    map_figure(diff["difference"][::step, ::step], f"{r.id} − {first.id}", "difference (nm)",
                               "RdBu_r", -limit, limit, pixel_size(r), stride=step),
                    width="stretch", key=f"sr_cmp_diff::{r.id}")
            if rows:
                st.dataframe(rows, hide_index=True, width="stretch")
        elif sorts == {"fit"}:
            try:
                fits = [(f"{r.id} ({headline(r)})", *(
                    store.load_array(r, n) for n in ("wavelength_nm.npy", "data.npy", "model.npy")))
                    for r in chosen_runs]
            except FilmcalcError as exc:
                st.error(str(exc))
            else:
                st.plotly_chart(fit_overlay_figure(fits, "Measured spectra and fitted models"), width="stretch",
                                key="sr_cmp_fits")
                st.dataframe([{"run": r.id, "sample": r.sample, "thickness (nm)": r.summary.get("thickness_nm"),
                               "1σ (nm)": r.summary.get("sigma_nm"), "reduced χ²": r.summary.get("reduced_chi2")}
                              for r in chosen_runs], hide_index=True, width="stretch")
        else:  # maps of spectra
            try:
                results = {r.id: stored_spectrum_map(r) for r in chosen_runs}
            except FilmcalcError as exc:
                st.error(str(exc))
                results = {}
            values = [t[np.isfinite(t)] for t in (res.thickness_nm for res in results.values())]
            values = [v for v in values if v.size]
            lo = min(float(v.min()) for v in values) if values else None
            hi = max(float(v.max()) for v in values) if values else None
            cols = st.columns(2)
            for k, r in enumerate(chosen_runs):
                if r.id in results:
                    cols[k % 2].plotly_chart(spectrum_map_figure(results[r.id], position_unit(r), f"{r.id}: "
                                                                 f"{r.sample or 'no sample'}", lo, hi),
                                             width="stretch", key=f"sr_cmp_fitmap::{r.id}")
            st.dataframe([{"run": r.id, "sample": r.sample,
                           "mean (nm)": (r.summary.get("statistics") or {}).get("mean_nm"),
                           "std (nm)": (r.summary.get("statistics") or {}).get("std_nm"),
                           "non-uniformity (%)": (r.summary.get("statistics") or {}).get("nonuniformity_pct")}
                          for r in chosen_runs], hide_index=True, width="stretch")

with tab_history:
    st.caption("One summary number per run over time, for a sample or a tag, with the limits of an individuals "
               "control chart: the mean ± 3σ, σ from the average moving range of successive runs (MR̄ / 1.128; "
               "NIST/SEMATECH e-Handbook of Statistical Methods, section 6.3). Runs outside the limits are "
               "marked. The list's filters do not apply here.")
    c1, c2 = st.columns([1, 3])
    link.attach("history_by", "sr_hist_by")
    by = c1.radio("Follow a", ["sample", "tag"], horizontal=True, key="sr_hist_by", persist_state="session")
    names = facets["samples"] if by == "sample" else facets["tags"]
    link.attach("history_of", "sr_hist_of", fits=lambda v: v in names, misfit=f"no run has this {by}")
    of = c2.selectbox(by.capitalize(), names, index=0 if names else None, key="sr_hist_of", persist_state="session",
                      placeholder=f"no run has a {by} yet")
    if of is None:
        st.info(f"No saved run has a {by} yet: give one when saving a run, and follow it here.")
    else:
        try:
            history_runs = store.list_runs(**({"sample": of} if by == "sample" else {"tags": [of]}),
                                           newest_first=False)
        except FilmcalcError as exc:
            st.error(str(exc))
            history_runs = []
        kinds_here = sorted({r.kind for r in history_runs})
        c1, c2 = st.columns([1, 3])
        kind = c1.selectbox("Kind", kinds_here, index=0 if len(kinds_here) == 1 else None, format_func=kind_name,
                            placeholder="any kind", key="sr_hist_kind")
        if kind:
            history_runs = [r for r in history_runs if r.kind == kind]
        keys = numeric_summary_keys(history_runs)
        preferred = next((keys.index(k) for k in PREFERRED_KEYS if k in keys), 0)
        link.attach("history_key", "sr_hist_key", fits=lambda v: v in keys, misfit="not a number these runs hold")
        key = c2.selectbox("Summary number", keys, index=preferred if keys else None, format_func=key_label,
                           key="sr_hist_key", placeholder="these runs hold no numbers")
        c1, c2 = st.columns([1, 3])
        baseline = c1.number_input("Runs that set the limits (0: all)", 0, 100_000, 0, 1, key="sr_hist_baseline",
                                   help="The first N runs in time (a reference period); later ones are judged "
                                        "against their limits.")
        method = c2.radio("σ from", ["moving-range", "sample"], horizontal=True, key="sr_hist_sigma",
                          format_func=lambda m: "the moving range (MR̄ / 1.128)" if m == "moving-range"
                          else "the standard deviation")
        # The link carries the history only where it differs from what the page shows by default.
        link.keep("history_by", None if by == "sample" else by)
        link.keep("history_of", None if of == (names[0] if names else None) else of)
        link.keep("history_key", None if not keys or key == keys[preferred] else key)
        if key:
            try:
                table = history_table(history_runs, key, sigma_method=method, baseline=baseline or None)
            except FilmcalcError as exc:
                st.error(str(exc))
                table = None
            if table is not None:
                unit = key_unit(key)
                cols = st.columns(5)
                cols[0].metric("runs", f"{len(table.rows)}")
                cols[1].metric("mean", number(table.mean, ".4g", unit), help=f"σ = {number(table.sigma, '.3g', unit)}")
                cols[2].metric("lower limit (mean − 3σ)", number(table.lower, ".4g", unit))
                cols[3].metric("upper limit (mean + 3σ)", number(table.upper, ".4g", unit))
                cols[4].metric("outside the limits", f"{len(table.outside)}")
                st.plotly_chart(history_figure(table, f"{key_label(key)} of {by} {of}", key_label(key)),
                                width="stretch", key="sr_history")
                if table.mean is None:
                    st.info("The limits need at least two runs with this number.")
                if table.skipped:
                    st.caption(f"{len(table.skipped)} run(s) without this number are left out: "
                               f"{', '.join(table.skipped[:10])}{'…' if len(table.skipped) > 10 else ''}.")
                st.dataframe([{"saved (UTC)": when(r["created_utc"]), "run": r["run_id"], "sample": r["sample"],
                               "kind": kind_name(r["kind"]), f"{key} ({unit or 'no unit'})": r["value"],
                               "outside the limits": {"above": "above ↑", "below": "below ↓"}.get(r["side"], "")}
                              for r in table.rows], hide_index=True, width="stretch")

link.note("The link holds the run opened, the runs compared and the history shown, not the list's filters.")
link.publish()
cautions_box()
