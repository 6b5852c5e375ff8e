"""Fringes page: a photo under monochromatic (or two-line) light becomes a thickness map or profile."""

import hashlib
import json
import tempfile
import time
from pathlib import Path

import numpy as np
import plotly.graph_objects as go
import streamlit as st

from filmcalc import io as fio
from filmcalc.charts import map_figure
from filmcalc.errors import FilmcalcError
from filmcalc.fringes import FLAG_MEANINGS, FLAGS, fringe_images, fringe_map, fringe_spacing_nm, line_profile_thickness
from filmcalc.links import UPLOAD
from filmcalc.thickness import TRENDS
from filmcalc.ui.common import (DEMO_DIR, RUN_CANCEL_HINT, PageLink, cautions_box, choose_demo_stack, load_or_stop,
                                pick_grid, picked_pixel, save_run_panel, stack_file_name, stack_picker)

FRINGE_DIR = DEMO_DIR / "fringes"

st.title("Fringes")
st.write("Under one line of light (a sodium lamp, a laser, a band-pass filter) a film shows dark and bright bands, "
         "one band per λ / (2 n cos θ) of thickness. Load such a photo, say the wavelength and one pixel of known "
         "thickness, and get the thickness along a line or over the whole image; two lines at once (e.g. the red "
         "and blue channels under two-line light) can fix the fringe order without a known pixel.")

demos = {json.loads(p.read_text())["photo"]: json.loads(p.read_text()) for p in sorted(FRINGE_DIR.glob("*.json"))}
link = PageLink("fringes", {"photo": {**{Path(n).stem: n for n in demos}, UPLOAD: UPLOAD}})
if link.fresh:  # a new link chooses the photo: a demo by name, or "upload" for the user's own
    given = link.given().get("photo")
    st.session_state.pop("fr_source", None)
    st.session_state.pop("fr_demo", None)
    if given == UPLOAD:
        st.session_state["fr_source"] = "my photo"
    elif given:
        st.session_state["fr_source"], st.session_state["fr_demo"] = "demo photo", given
source = st.radio("Photo", ["demo photo", "my photo"], horizontal=True, key="fr_source", persist_state="session")
if source == "demo photo":
    name = st.selectbox("Demo photo", list(demos), key="fr_demo", persist_state="session",
                        help="Invented samples rendered by demo_data/make_demo_fringes.py.")
    link.keep("photo", name)
    settings = demos[name]
    data = (FRINGE_DIR / name).read_bytes()
    choose_demo_stack(settings["stack"], f"fr::{name}")
    st.caption(f"What the lab knows: {settings['note']}.")
else:
    link.keep("photo", UPLOAD)
    link.note("The photo you uploaded is not in the link: whoever opens it must upload the same photo.")
    upload = st.file_uploader("Photo (PNG, JPEG or TIFF)", type=["png", "jpg", "jpeg", "tif", "tiff"], key="fr_upload")
    if upload is None:
        st.info("Upload a photo, or pick a demo photo above.")
        link.publish()
        cautions_box()
        st.stop()
    data, name, settings = upload.getvalue(), upload.name, {}

text, base_dir, origin = stack_picker(link)
stack = load_or_stop(text, base_dir, origin)
try:
    photo = fio.load_photo(data, name=name)
except FilmcalcError as exc:
    st.error(str(exc))
    st.stop()
H, W = photo.shape
anchor_default = settings.get("anchor") or [W // 2, H // 2, 0.0]
line_default = settings.get("line") or [0, H // 2, W - 1, H // 2]


def on_photo(pixel_values):
    """True when every (x, y) pair lies on this photo."""
    xs, ys = pixel_values[0::2], pixel_values[1::2]
    return all(0 <= x < W for x in xs) and all(0 <= y < H for y in ys)


link.attach("anchor", tuple(f"fr_anchor{i}::{name}" for i in range(3)), fits=lambda a: on_photo(a[:2]),
            misfit=f"outside the photo ({W} × {H} px)")
link.attach("line", tuple(f"fr_line{i}::{name}" for i in range(4)), fits=on_photo,
            misfit=f"outside the photo ({W} × {H} px)")
# Clicks on the photo fill the anchor or the line's ends (read before those inputs are drawn).
pick_key = f"fr_pick::{name}"
for i, v in enumerate(anchor_default):
    st.session_state.setdefault(f"fr_anchor{i}::{name}", float(v))
for i, v in enumerate(line_default):
    st.session_state.setdefault(f"fr_line{i}::{name}", int(v))
selection = (st.session_state.get(pick_key) or {}).get("selection")
if selection and st.session_state.get(pick_key + "_seen") != repr(selection):
    st.session_state[pick_key + "_seen"] = repr(selection)
    clicked = picked_pixel(selection, W, H)
    target = st.session_state.get(f"fr_click::{name}", "the known pixel")
    if clicked:
        if target == "the known pixel":
            st.session_state[f"fr_anchor0::{name}"], st.session_state[f"fr_anchor1::{name}"] = map(float, clicked)
        else:
            first = 0 if target == "the line's start" else 2
            st.session_state[f"fr_line{first}::{name}"], st.session_state[f"fr_line{first + 1}::{name}"] = clicked

with st.sidebar:
    st.header("Light")
    wavelengths = settings.get("wavelengths_nm", [589.3])
    link.attach("two_wavelengths", f"fr_two::{name}")
    two = st.checkbox("Two wavelengths", len(wavelengths) == 2, key=f"fr_two::{name}", persist_state="session")
    channels_default = settings.get("channels") or (["grey"] if photo.greyscale else ["red", "blue"])
    chosen_wl, chosen_ch = [], []
    for i in range(2 if two else 1):
        c1, c2 = st.columns(2)
        wl_default = wavelengths[i] if i < len(wavelengths) else 488.0
        link.attach(f"wavelength{i + 1}_nm", f"fr_wl{i}::{name}")
        chosen_wl.append(c1.number_input(f"λ{i + 1} (nm)", 200.0, 2000.0, float(wl_default), 0.1,
                                         key=f"fr_wl{i}::{name}", persist_state="session"))
        options = ["grey", "red", "green", "blue"]
        ch = channels_default[i] if i < len(channels_default) else "blue"
        link.attach(f"channel{i + 1}", f"fr_ch{i}::{name}")
        chosen_ch.append(c2.selectbox(f"channel {i + 1}", options, options.index(ch), key=f"fr_ch{i}::{name}",
                                      persist_state="session"))
    st.header("What you know")
    link.attach("result", f"fr_mode::{name}")
    mode = st.radio("Result", ["map", "along a line"], horizontal=True, key=f"fr_mode::{name}",
                    persist_state="session")
    c1, c2 = st.columns(2)
    link.attach("t_min_nm", f"fr_lo::{name}")
    lo = c1.number_input("Thinnest (nm)", 0.0, 50000.0, float(settings.get("range", [0, 2000])[0]), 10.0,
                         key=f"fr_lo::{name}", persist_state="session")
    link.attach("t_max_nm", f"fr_hi::{name}")
    hi = c2.number_input("Thickest (nm)", 1.0, 50000.0, float(settings.get("range", [0, 2000])[1]), 10.0,
                         key=f"fr_hi::{name}", persist_state="session")
    link.attach("use_anchor", f"fr_use_anchor::{name}")
    use_anchor = st.checkbox("A pixel of known thickness", bool(settings.get("anchor")) or mode == "along a line",
                             key=f"fr_use_anchor::{name}", persist_state="session")
    cols = st.columns(3)
    anchor = [cols[i].number_input(lbl, key=f"fr_anchor{i}::{name}", persist_state="session")
              for i, lbl in enumerate(("x", "y", "nm"))]
    trend_options = ["not known"] + list(TRENDS)
    link.attach("trend", f"fr_trend::{name}")
    trend = st.selectbox("Film gets thicker towards", trend_options, persist_state="session",
                         index=trend_options.index(settings.get("trend") or "not known"), key=f"fr_trend::{name}")
    if mode == "along a line":
        cols = st.columns(4)
        line = [cols[i].number_input(lbl, 0, (W if i % 2 == 0 else H) - 1, key=f"fr_line{i}::{name}",
                                     persist_state="session")
                for i, lbl in enumerate(("x0", "y0", "x1", "y1"))]
        link.attach("direction", f"fr_dir::{name}")
        direction = st.radio("Along the line the film gets", ["thicker", "thinner"], horizontal=True,
                             key=f"fr_dir::{name}", persist_state="session")
        st.caption("The known thickness (nm above) is the thickness at the line's start.")
    st.radio("A click on the photo sets", ["the known pixel", "the line's start", "the line's end"],
             key=f"fr_click::{name}")
link.note("The link holds the settings, not the result: press “Compute the thickness” after opening it.")
link.publish()

try:
    images = fringe_images(photo, chosen_wl, chosen_ch)
    spacing = [fringe_spacing_nm(stack, wl) for wl in chosen_wl]
except FilmcalcError as exc:
    st.error(str(exc))
    st.stop()
st.caption("One fringe (dark to dark) = " + ", ".join(f"{s:.1f} nm at {wl:g} nm" for s, wl in zip(spacing, chosen_wl))
           + " of film thickness.")

shown = max(1, int(np.ceil(max(H, W) / 1200)))
fig = go.Figure([go.Image(z=np.rint(photo.rgb[::shown, ::shown] * 255).astype(np.uint8), dx=shown, dy=shown,
                          hoverinfo="skip"), pick_grid(H, W, cells=200)])
if use_anchor:
    fig.add_trace(go.Scatter(x=[anchor[0]], y=[anchor[1]], mode="markers+text", text=[f"{anchor[2]:g} nm"],
                             textposition="top center", marker={"symbol": "x", "size": 11, "color": "#ffbf00"},
                             textfont={"color": "white", "shadow": "1px 1px 2px black"}, showlegend=False,
                             hoverinfo="skip"))
if mode == "along a line":
    fig.add_trace(go.Scatter(x=[line[0], line[2]], y=[line[1], line[3]], mode="lines+markers",
                             line={"color": "#00c8ff", "width": 2}, showlegend=False, hoverinfo="skip"))
fig.update_layout(height=380, margin={"l": 50, "r": 0, "t": 10, "b": 40}, dragmode="zoom",
                  xaxis={"range": [-0.5, W - 0.5], "showgrid": False, "title": "x (px)"},
                  yaxis={"range": [H - 0.5, -0.5], "showgrid": False, "scaleanchor": "x", "title": "y (px)"})
st.plotly_chart(fig, width="stretch", on_select="rerun", selection_mode=("points",), key=pick_key)
st.caption("Click the photo to set the pixel chosen in the sidebar (drag to zoom in, double-click to zoom out).")

st.caption(f"A map shows its progress while it is computed. {RUN_CANCEL_HINT}")
# The result stays on the page (for downloads and saving) until a setting that defines it changes.
along = mode == "along a line"
run_key = (name, photo.sha256, text, base_dir, tuple(chosen_wl), tuple(chosen_ch), mode, lo, hi, use_anchor,
           tuple(anchor), trend, tuple(line) if along else None, direction if along else None)
if st.button("Compute the thickness", type="primary", key="fr_run"):
    started = time.perf_counter()
    try:
        if along:
            computed = line_profile_thickness(images[0], tuple(int(v) for v in line), chosen_wl[0], stack, anchor[2],
                                              direction, encoded=not photo.linear)
        else:
            bar = st.progress(0.0, "starting")
            computed = fringe_map(images, stack, chosen_wl, anchor=tuple(anchor) if use_anchor else None,
                                  trend=None if trend == "not known" else trend, range_nm=(lo, hi),
                                  encoded=not photo.linear, progress=lambda f, m: bar.progress(min(f, 1.0), m))
            bar.empty()
    except FilmcalcError as exc:
        st.error(str(exc))
        st.stop()
    st.session_state["fr_result"] = {"key": run_key, "result": computed,
                                     "seconds": round(time.perf_counter() - started, 3)}
kept = st.session_state.get("fr_result")
if not kept or kept["key"] != run_key:
    cautions_box()
    st.stop()
if along:
    profile = kept["result"]
else:
    result = kept["result"]

if mode == "along a line":
    for w in profile.warnings:
        st.warning(w)
    cols = st.columns(3)
    cols[0].metric("thickness at the end", f"{profile.thickness_nm[-1]:.0f} nm")
    cols[1].metric("fringe extrema crossed", f"{len(profile.extrema_px)}")
    cols[2].metric("one fringe", f"{profile.period_nm:.1f} nm")
    prof = go.Figure([
        go.Scatter(x=profile.distance_px, y=profile.thickness_nm + profile.sigma_nm, line={"width": 0},
                   showlegend=False, hoverinfo="skip"),
        go.Scatter(x=profile.distance_px, y=profile.thickness_nm - profile.sigma_nm, fill="tonexty",
                   line={"width": 0}, name="±1σ", hoverinfo="skip"),
        go.Scatter(x=profile.distance_px, y=profile.thickness_nm, name="thickness", line={"color": "black"}),
        go.Scatter(x=profile.extrema_px, y=profile.extrema_nm, mode="markers", name="bright / dark fringe",
                   marker={"color": np.where(profile.extrema_kind == "max", "#f2c500", "#333")})])
    prof.update_layout(height=360, xaxis_title="distance along the line (px)", yaxis_title="thickness (nm)",
                       margin={"l": 10, "r": 10, "t": 20, "b": 10}, legend={"orientation": "h", "y": -0.25})
    st.plotly_chart(prof, width="stretch")
    table = "distance_px,thickness_nm,sigma_nm,intensity\n" + "\n".join(
        f"{d:.2f},{t:.2f},{s:.2f},{i:.4f}" for d, t, s, i in zip(profile.distance_px, profile.thickness_nm,
                                                                  profile.sigma_nm, profile.intensity))
    st.download_button("Profile (CSV)", table, Path(name).stem + "-profile.csv", key="fr_dl_profile")
else:
    for w in result.warnings:
        st.warning(w)
    stats = result.statistics
    cols = st.columns(3)
    if "mean_nm" in stats:
        cols[0].metric("mean thickness", f"{stats['mean_nm']:.1f} nm")
        cols[1].metric("range", f"{stats['min_nm']:.0f}–{stats['max_nm']:.0f} nm")
    flagged = float(np.mean(result.flags != 0))
    cols[2].metric("flagged pixels", f"{100 * flagged:.1f} %")
    tabs = st.tabs(["Thickness", "Uncertainty", "Flags", "Downloads"])
    with tabs[0]:
        st.plotly_chart(map_figure(result.thickness_nm, "thickness", "nm"), width="stretch")
    with tabs[1]:
        st.plotly_chart(map_figure(result.sigma_nm, "uncertainty (1σ)", "nm", "Viridis"), width="stretch")
    with tabs[2]:
        st.dataframe([{"flag": k, "pixels": int(np.count_nonzero(result.flags & v)), "meaning": FLAG_MEANINGS[k]}
                      for k, v in FLAGS.items()], hide_index=True, width="stretch")
        st.plotly_chart(map_figure(result.flags.astype(float), "flags (bit values)", "flags", "Greys"),
                        width="stretch")
    with tabs[3]:
        with tempfile.TemporaryDirectory() as tmp:
            stem = Path(name).stem + "-thickness"
            files = {}
            for ext, save in ((".tiff", lambda p: fio.save_map_tiff(p, result.thickness_nm, None)),
                              (".npy", lambda p: fio.save_map_npy(p, result.thickness_nm)),
                              (".csv", lambda p: fio.save_map_csv(p, result.thickness_nm, result.sigma_nm,
                                                                  result.flags)),
                              (".png", lambda p: fio.save_map_png(p, result.thickness_nm, name))):
                path = Path(tmp) / (stem + ext)
                save(path)
                files[ext] = path.read_bytes()
        cols = st.columns(4)
        for col, (ext, blob) in zip(cols, files.items()):
            col.download_button(ext[1:].upper(), blob, stem + ext, key=f"fr_dl{ext}")

# Saved as `filmcalc fringes … --save` saves it (the same output names), so either opens the other's runs.
record = {"photo": {"file": name, "sha256": photo.sha256, "width": W, "height": H},
          "stack": {"file": stack_file_name(origin), "name": stack.name,
                    "sha256": hashlib.sha256(text.encode("utf-8")).hexdigest()},
          "settings": {"wavelengths_nm": chosen_wl, "channels": chosen_ch,
                       "anchor": [int(anchor[0]), int(anchor[1]), anchor[2]] if (use_anchor or along) else None,
                       "trend": None if trend == "not known" else trend, "range_nm": [lo, hi]}}
settings = {"command": "fringes", "wavelength": chosen_wl, "channel": chosen_ch,
            "anchor": "{:g},{:g},{:g}".format(*anchor) if (use_anchor or along) else None,
            "trend": None if trend == "not known" else trend, "line": None, "direction": "thicker",
            "range": f"{lo:g}:{hi:g}"}
if along:
    settings.update(line=",".join(str(int(v)) for v in line), direction=direction)
    record["settings"].update(line=[int(v) for v in line], direction=direction)
    record.update(period_nm=profile.period_nm, extrema=len(profile.extrema_px),
                  thickness_end_nm=float(profile.thickness_nm[-1]), warnings=profile.warnings, seconds=kept["seconds"])
    outputs = {"distance_px.npy": profile.distance_px, "thickness_nm.npy": profile.thickness_nm,
               "sigma_nm.npy": profile.sigma_nm, "intensity.npy": profile.intensity,
               "extrema_px.npy": np.asarray(profile.extrema_px, float),
               "extrema_nm.npy": np.asarray(profile.extrema_nm, float)}
    summary = {"stack": stack.name, "photo": name, "mode": "line", "period_nm": profile.period_nm,
               "extrema": len(profile.extrema_px), "thickness_start_nm": float(profile.thickness_nm[0]),
               "thickness_end_nm": float(profile.thickness_nm[-1]), "seconds": kept["seconds"]}
else:
    flag_counts = {k: int(np.count_nonzero(result.flags & v)) for k, v in FLAGS.items()}
    record.update(period_nm=list(result.period_nm), statistics=result.statistics, flags=flag_counts,
                  warnings=result.warnings, seconds=kept["seconds"])
    outputs = {"thickness_nm.npy": result.thickness_nm, "sigma_nm.npy": result.sigma_nm, "flags.npy": result.flags}
    summary = {"stack": stack.name, "photo": name, "mode": "map", **result.statistics,
               "period_nm": list(result.period_nm), "flags": flag_counts, "seconds": kept["seconds"]}
save_run_panel("fringes", inputs={"photo": (name, data), "stack": (stack_file_name(origin), text)}, outputs=outputs,
               settings=settings, summary=summary, provenance=record, link=link)
cautions_box()
