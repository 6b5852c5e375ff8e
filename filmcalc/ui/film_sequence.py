"""Film over time page: a recording (frames, multi-page TIFF, video) becomes a thickness cube and its series."""

import json
import os
import shutil
import tempfile
from pathlib import Path

import numpy as np
import plotly.graph_objects as go
import streamlit as st

from filmcalc.charts import kymograph_figure, map_figure, plus_minus, thinning_figure
from filmcalc.errors import FilmcalcError
from filmcalc.frames import IMAGE_SUFFIXES, VIDEO_SUFFIXES, open_frames
from filmcalc.links import UPLOAD
from filmcalc.sequence import export_movie, export_tiff_stack, load_series, open_cube, run_sequence
from filmcalc.ui.common import (DEMO_DIR, RUN_CANCEL_HINT, PageLink, cautions_box, choose_demo_stack, load_or_stop,
                                save_run_panel, stack_file_name, stack_picker)

SEQUENCE_DIR = DEMO_DIR / "sequences"

st.title("Film over time")
st.write("Load a recording of a film (a folder of frames, a multi-page TIFF or a video) and map every frame to "
         "thickness, each frame continuing the one before, to follow the film as it thins: thickness at points, "
         "along a line, its mean, volume and thinning law, and when it breaks.")


def workspace():
    """A folder of this browser session's own for uploads and results (removed with the session's temp files)."""
    if "seq_workspace" not in st.session_state or not Path(st.session_state["seq_workspace"]).exists():
        st.session_state["seq_workspace"] = tempfile.mkdtemp(prefix="filmcalc-sequence-")
    return Path(st.session_state["seq_workspace"])


demos = {json.loads(p.read_text())["recording"]: json.loads(p.read_text())
         for p in sorted(SEQUENCE_DIR.glob("*.json"))}
link = PageLink("film-over-time", {"recording": {**{Path(n).stem: n for n in demos}, UPLOAD: UPLOAD}})
if link.fresh:  # a new link chooses the recording: a demo by name, or "upload" for the user's own
    given = link.given().get("recording")
    st.session_state.pop("seq_source", None)
    st.session_state.pop("seq_demo", None)
    if given == UPLOAD:
        st.session_state["seq_source"] = "my recording"
    elif given:
        st.session_state["seq_source"], st.session_state["seq_demo"] = "demo recording", given
choice = st.radio("Recording", ["demo recording", "my recording"], horizontal=True, key="seq_source",
                  persist_state="session")
if choice == "demo recording":
    name = st.selectbox("Demo recording", list(demos), key="seq_demo", persist_state="session",
                        help="Invented recordings rendered by demo_data/make_demo_sequence.py.")
    link.keep("recording", name)
    settings = demos[name]
    path = SEQUENCE_DIR / name
    choose_demo_stack(settings["stack"], f"seq::{name}")
    st.caption(f"What the lab knows: {settings['note']}.")
else:
    settings = {}
    link.keep("recording", UPLOAD)
    link.note("The recording you uploaded is not in the link: whoever opens it must upload the same files.")
    uploads = st.file_uploader("A video, a multi-page TIFF, or several frames (PNG, TIFF, JPEG; sorted by name)",
                               type=[s[1:] for s in VIDEO_SUFFIXES + IMAGE_SUFFIXES], accept_multiple_files=True,
                               key="seq_upload")
    if not uploads:
        st.info("Upload a recording, or pick the demo recording above.")
        link.publish()
        cautions_box()
        st.stop()
    folder = workspace() / "input"
    signature = [(u.name, u.size) for u in uploads]
    if st.session_state.get("seq_upload_signature") != signature:
        shutil.rmtree(folder, ignore_errors=True)
        folder.mkdir(parents=True)
        for u in uploads:
            (folder / Path(u.name).name).write_bytes(u.getvalue())  # the base name only: no path from the upload
        st.session_state["seq_upload_signature"] = signature
    files = sorted(folder.iterdir())
    single = len(files) == 1 and files[0].suffix.lower() in VIDEO_SUFFIXES + (".tif", ".tiff")
    path, name = (files[0], files[0].name) if single else (folder, f"{len(files)} frames")

text, base_dir, origin = stack_picker(link)
stack = load_or_stop(text, base_dir, origin)

with st.sidebar:
    st.header("Recording")
    link.attach("fps", f"seq_fps::{name}")
    fps = st.number_input("Frames per second", 0.0, 1e7, float(settings.get("fps", 0.0)), 1.0, key=f"seq_fps::{name}",
                          persist_state="session",
                          help="0: the video's own rate; frames and TIFF pages then count as 1 s apart.")
    link.attach("frames", f"seq_frames::{name}")
    frames_text = st.text_input("Frames (START:STOP:STEP)", "", key=f"seq_frames::{name}", persist_state="session",
                                help="0-based, STOP excluded; empty for all frames.")
link.publish()  # before the recording is opened, so a range that selects nothing is in the link too
try:
    source = open_frames(path, frames_text or None, fps or None)
except FilmcalcError as exc:
    st.error(str(exc))
    st.stop()
H, W = source.shape

with st.sidebar:
    st.header("What you know")
    c1, c2 = st.columns(2)
    rng = settings.get("range", [0, 1500])
    link.attach("t_min_nm", f"seq_lo::{name}")
    lo = c1.number_input("Thinnest (nm)", 0.0, 50000.0, float(rng[0]), 10.0, key=f"seq_lo::{name}",
                         persist_state="session")
    link.attach("t_max_nm", f"seq_hi::{name}")
    hi = c2.number_input("Thickest (nm)", 1.0, 50000.0, float(rng[1]), 10.0, key=f"seq_hi::{name}",
                         persist_state="session")
    link.attach("pixel_um", f"seq_px::{name}")
    pixel = st.number_input("Pixel size on the film (µm)", 0.0, 1e6, float(settings.get("pixel_size_um", 0.0)), 1.0,
                            key=f"seq_px::{name}", persist_state="session",
                            help="Gives the liquid volume; 0 if not known.")
    link.attach("use_anchor", f"seq_use_anchor::{name}")
    use_anchor = st.checkbox("A pixel of known thickness in the first frame", False, key=f"seq_use_anchor::{name}",
                             persist_state="session")
    link.attach("anchor", (f"seq_ax::{name}", f"seq_ay::{name}", f"seq_an::{name}"),
                fits=lambda a: a[0] < W and a[1] < H,
                misfit=f"outside the frame ({W} × {H} px)")
    if use_anchor:
        cols = st.columns(3)
        anchor = [cols[0].number_input("x", 0, W - 1, W // 2, key=f"seq_ax::{name}", persist_state="session"),
                  cols[1].number_input("y", 0, H - 1, H // 2, key=f"seq_ay::{name}", persist_state="session"),
                  cols[2].number_input("nm", 0.0, 50000.0, 0.0, key=f"seq_an::{name}", persist_state="session")]
    st.header("Where to follow it")
    p_default = settings.get("point", [W // 2, H // 2])
    cols = st.columns(2)
    link.attach("point", (f"seq_px0::{name}", f"seq_py0::{name}"), fits=lambda p: p[0] < W and p[1] < H,
                misfit=f"outside the frame ({W} × {H} px)")
    point = (cols[0].number_input("point x", 0, W - 1, int(p_default[0]), key=f"seq_px0::{name}",
                                  persist_state="session"),
             cols[1].number_input("point y", 0, H - 1, int(p_default[1]), key=f"seq_py0::{name}",
                                  persist_state="session"))
    l_default = settings.get("line", [W // 2, 0, W // 2, H - 1])
    cols = st.columns(4)
    link.attach("line", tuple(f"seq_l{i}::{name}" for i in range(4)),
                fits=lambda v: v[0] < W and v[2] < W and v[1] < H and v[3] < H,
                misfit=f"outside the frame ({W} × {H} px)")
    line = tuple(cols[i].number_input(lbl, 0, (W if i % 2 == 0 else H) - 1, int(l_default[i]),
                                      key=f"seq_l{i}::{name}", persist_state="session")
                 for i, lbl in enumerate(("x0", "y0", "x1", "y1")))
    st.header("Where to run")
    link.attach("run_on", "seq_where")
    where = st.radio("Run on", ["this process", "local Dask workers"], key="seq_where", persist_state="session",
                     help="Dask workers map several frames at once (one per core); worth it for long recordings.")
    link.attach("workers", "seq_workers")
    workers = st.number_input("Workers", 1, 64, max(1, min(8, os.cpu_count() or 1)), key="seq_workers",
                              persist_state="session", disabled=where == "this process")
link.attach("same_scale", "seq_fixed")  # view choices drawn with the result; a link's wait until then
link.attach("log_log", "seq_log")
link.note("The link holds the settings, not the result: press “Map every frame” after opening it.")
link.publish()

# Preview: scrub the recording before running.
k_preview = st.slider("Preview frame", 0, len(source) - 1, 0, key=f"seq_preview::{name}") if len(source) > 1 else 0
try:
    frame = source.read(k_preview)
    preview = go.Figure(go.Image(z=np.rint(frame * 255).astype(np.uint8), hoverinfo="x+y"))
    preview.add_trace(go.Scatter(x=[point[0]], y=[point[1]], mode="markers", marker={"symbol": "x", "size": 11,
                                                                                     "color": "#ffbf00"},
                                 name="point", hoverinfo="skip"))
    preview.add_trace(go.Scatter(x=[line[0], line[2]], y=[line[1], line[3]], mode="lines", name="line",
                                 line={"color": "#00c8ff", "width": 2}, hoverinfo="skip"))
    preview.update_layout(height=320, margin={"l": 50, "r": 0, "t": 10, "b": 40}, showlegend=False,
                          xaxis={"showgrid": False, "title": "x (px)"},
                          yaxis={"showgrid": False, "scaleanchor": "x", "title": "y (px)"})
    st.plotly_chart(preview, width="stretch")
except FilmcalcError as exc:
    st.warning(f"This frame cannot be shown: {exc}")
time_text = f"t = {source.times_s()[k_preview]:.4g} s" if source.fps else "frame rate not known"
st.caption(f"{source.names[k_preview]}, {time_text}; {len(source)} frames of {W} × {H} px selected.")

run_key = (str(path), frames_text, fps, lo, hi, pixel, use_anchor, point, line, text)
st.caption(f"Mapping shows its progress frame by frame. {RUN_CANCEL_HINT} Frames already mapped are then "
           "discarded.")
if st.button("Map every frame", type="primary", key="seq_run"):
    out = workspace() / "run"
    shutil.rmtree(out, ignore_errors=True)
    bar = st.progress(0.0, "starting")
    try:
        result = run_sequence(source, stack, out, range_nm=(lo, hi),
                              anchors=[tuple(anchor)] if use_anchor else (), pixel_size_um=pixel or None,
                              points=[point], line=line, scheduler="serial" if where == "this process" else "local",
                              workers=int(workers),
                              progress=lambda d, n, m: bar.progress(min(d / max(n, 1), 1.0), f"{d}/{n} frames: {m}"))
    except FilmcalcError as exc:
        bar.empty()
        st.error(str(exc))
        st.stop()
    bar.empty()
    recording = Path(path)
    st.session_state["seq_result"] = {
        "key": run_key, "out": str(out), "summary": result.summary(), "fit": result.fit,
        # what was mapped and how, as `filmcalc sequence … --save` records it, for saving it as a run
        "input": (("frames", [(f.name, f) for f in sorted(recording.iterdir()) if f.is_file()])
                  if recording.is_dir() else (recording.name, recording)),
        "stack": (stack_file_name(origin), text), "stack_name": stack.name,
        "settings": {"command": "sequence", "frames": frames_text or None, "fps": fps or None,
                     "anchor": ["{:d},{:d},{:g}".format(*anchor)] if use_anchor else None, "range": f"{lo:g}:{hi:g}",
                     "point": ["{:d},{:d}".format(*point)], "region": None, "line": "{:d},{:d},{:d},{:d}".format(*line),
                     "pixel_size": pixel or None, "chunk": None,
                     "scheduler": "serial" if where == "this process" else "local", "workers": int(workers),
                     "export": None}}

stored = st.session_state.get("seq_result")
if not stored:
    st.info("Set what you know in the sidebar, then map every frame.")
    cautions_box()
    st.stop()
if stored["key"] != run_key:
    st.warning("The settings changed since this result was computed: map again to update it.")
out, summary, fit = Path(stored["out"]), stored["summary"], stored["fit"]
try:
    series = load_series(out)
    cube, attrs = open_cube(out)
except FilmcalcError as exc:
    st.error(f"The last result is no longer available ({exc}); map again.")
    st.stop()
times = series["time_s"]
for w in summary["warnings"]:
    st.warning(w)

cols = st.columns(3)
cols[0].metric("frames mapped", f"{summary['frames_mapped']} of {summary['frames_selected']}")
rupture = summary["rupture"]
cols[1].metric("rupture", f"t = {rupture['time_s']:.4g} s" if rupture else "none seen")
law = summary["thinning_law"]
cols[2].metric("thinning exponent α", f"{law['alpha']:.3f}" if law else "no fit",
               help="h = A·(t − t₀)^−α fitted to the mean thickness before the rupture.")
fitted = (f"α = {plus_minus(law['alpha'], law['alpha_sigma'])} (1σ), t₀ = {law['t0_s']:.4g} s, "
          f"A = {law['amplitude_nm']:.4g} nm·s^α. ") if law else ""
st.caption(f"{fitted}{summary['thinning_law_note']} Mapped at {summary['frames_per_second_processed']:.2f} "
           f"frames/s on {summary['scheduler']}.")

tabs = st.tabs(["Maps over time", "Thickness against time", "Along the line", "Frames skipped", "Downloads"])
with tabs[0]:
    good = [k for k, s in enumerate(series["status"]) if s == "ok"]
    k = st.select_slider("Frame", options=list(range(len(times))), value=good[0] if good else 0,
                         format_func=lambda i: f"{i}: {series['frame'][i]} (t = {times[i]:.4g} s)", key="seq_scrub")
    if series["status"][k] != "ok":
        st.info(f"{series['frame'][k]}: {series['status'][k]}. {series['reason'][k]}")
    else:
        maps = cube["thickness_nm"]
        sample = np.asarray(maps[good[0]])
        lo_c, hi_c = np.nanpercentile(sample, [1, 99]) if np.isfinite(sample).any() else (0, 1)
        fixed = st.checkbox("Same colour scale for every frame (that of the first)", True, key="seq_fixed",
                            persist_state="session")
        st.plotly_chart(map_figure(np.asarray(maps[k]), f"{series['frame'][k]}, t = {times[k]:.4g} s", "nm",
                                   zmin=lo_c if fixed else None, zmax=hi_c if fixed else None,
                                   pixel_size_um=pixel or None), width="stretch")
with tabs[1]:
    log = st.checkbox("Log–log against t − t₀ (a power law is a straight line)", False, key="seq_log",
                      persist_state="session", disabled=fit is None)
    shown = {"mean over the film": series["mean_nm"]}
    point_col = next((c for c in series if c.startswith("point_1_")), None)
    if point_col:
        shown[f"at ({point[0]}, {point[1]})"] = series[point_col]
    st.plotly_chart(thinning_figure(times, shown, fit, rupture["time_s"] if rupture else None, log=log),
                    width="stretch")
    c1, c2 = st.columns(2)
    rate = go.Figure(go.Scatter(x=times, y=series["thinning_rate_nm_per_s"], mode="markers+lines",
                                name="−dh/dt of the mean"))
    rate.update_layout(height=300, xaxis_title="time (s)", yaxis_title="thinning rate (nm/s)",
                       margin={"l": 10, "r": 10, "t": 20, "b": 10})
    c1.plotly_chart(rate, width="stretch")
    if pixel:
        volume = go.Figure(go.Scatter(x=times, y=series["volume_nL"], mode="markers+lines"))
        volume.update_layout(height=300, xaxis_title="time (s)", yaxis_title="liquid in the film (nL)",
                             margin={"l": 10, "r": 10, "t": 20, "b": 10})
        c2.plotly_chart(volume, width="stretch")
    else:
        c2.info("Give the pixel size to see the liquid volume in the film.")
with tabs[2]:
    if "kymograph_nm" in cube:
        st.plotly_chart(kymograph_figure(np.asarray(cube["kymograph_nm"]), times), width="stretch")
        st.caption(f"Thickness along the line ({line[0]}, {line[1]}) → ({line[2]}, {line[3]}) against time.")
with tabs[3]:
    skipped = summary["frames_skipped"]
    if skipped:
        st.dataframe(skipped, hide_index=True, width="stretch")
    else:
        st.success("Every frame was mapped.")
with tabs[4]:
    st.download_button("Series (CSV)", (out / "series.csv").read_bytes(), "series.csv", key="seq_dl_csv")
    st.download_button("Summary (JSON)", (out / "summary.json").read_bytes(), "summary.json", key="seq_dl_json")
    c1, c2 = st.columns(2)
    if c1.button("Prepare the TIFF stack (float32, nm)", key="seq_make_tiff"):
        export_tiff_stack(out, out / "thickness.tif")
    if (out / "thickness.tif").exists():
        c1.download_button("Thickness stack (TIFF)", (out / "thickness.tif").read_bytes(), "thickness.tif",
                           key="seq_dl_tiff")
    if c2.button("Prepare the movie (animated GIF)", key="seq_make_gif"):
        bar = st.progress(0.0, "rendering")
        export_movie(out, out / "thickness.gif", fps=min(source.fps or 10.0, 20.0),
                     progress=lambda d, n, m: bar.progress(d / n, m))
        bar.empty()
    if (out / "thickness.gif").exists():
        c2.download_button("Movie (GIF)", (out / "thickness.gif").read_bytes(), "thickness.gif", key="seq_dl_gif")
    st.caption("The full cube (cube.zarr, readable with dask.array.from_zarr) is written by the command "
               "`filmcalc sequence`; see the README.")

# Saved as `filmcalc sequence … --save` saves it (the same output names), so either opens the other's runs.
if stored["key"] == run_key and "settings" in stored:
    law_fit, rupture_at = summary["thinning_law"] or {}, summary["rupture"] or {}
    mean_series = np.asarray(series["mean_nm"], float)
    first_mean = mean_series[np.isfinite(mean_series)]
    try:
        provenance = json.loads((out / "provenance.json").read_text(encoding="utf-8"))
    except (OSError, ValueError):
        provenance = {}
    save_run_panel(
        "sequence", inputs={"input": stored["input"], "stack": stored["stack"]},
        outputs={"cube.zarr.zip": out / "cube.zarr", "series.csv": out / "series.csv",
                 "summary.json": json.dumps({**summary, "exports": []}, indent=1)},
        settings=stored["settings"],
        summary={"stack": stored["stack_name"], "frames_selected": summary["frames_selected"],
                 "frames_mapped": summary["frames_mapped"], "frames_skipped": len(summary["frames_skipped"]),
                 "rupture_frame": rupture_at.get("index"), "rupture_time_s": rupture_at.get("time_s"),
                 "alpha": law_fit.get("alpha"), "alpha_sigma": law_fit.get("alpha_sigma"), "t0_s": law_fit.get("t0_s"),
                 "amplitude_nm": law_fit.get("amplitude_nm"),
                 "mean_nm_first_frame": float(first_mean[0]) if first_mean.size else None,
                 "seconds": summary["seconds"], "warnings": summary["warnings"]},
        provenance=provenance, link=link)
link.publish()
cautions_box()
