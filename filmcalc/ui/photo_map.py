"""Photo → thickness page: a photo of interference colours becomes a calibrated thickness map."""

import hashlib
import json
import tempfile
from pathlib import Path

import numpy as np
import plotly.graph_objects as go
import streamlit as st

from filmcalc import io as fio
from filmcalc.charts import calibration_figure, map_figure
from filmcalc.errors import FilmcalcError
from filmcalc.links import UPLOAD
from filmcalc.thickness import (FLAG_MEANINGS, FLAGS, TRENDS, CameraModel, build_lookup, lab_of_encoded, line_profile,
                                thickness_map)
from filmcalc.ui.common import (DEMO_DIR, RUN_CANCEL_HINT, PageLink, cautions_box, choose_demo_stack, load_or_stop,
                                pick_grid, picked_pixel, picked_rectangle, save_run_panel, stack_file_name,
                                stack_picker)


def _empty_anchors():
    """An empty anchors table that still shows its three columns (an empty list would show none)."""
    import pandas as pd

    return pd.DataFrame({"x": pd.Series(dtype="Int64"), "y": pd.Series(dtype="Int64"),
                         "thickness (nm)": pd.Series(dtype="float64")})


def _rows(table):
    """The anchors table as a list of row dicts (None where a cell is empty), whatever the editor returned."""
    if isinstance(table, list):
        return table
    import pandas as pd

    return [{k: (None if pd.isna(v) else v) for k, v in row.items()} for row in table.to_dict("records")]


PHOTO_DIR = DEMO_DIR / "photos"

st.title("Thickness from a photo")
st.write("Load a photo of interference colours, say which stack it shows and what you know about the sample "
         "(thickness range, a pixel of known thickness, a reference region), and get a thickness map with its "
         "uncertainty. Pixel coordinates count from the top-left corner: x along a row, y down the image.")

demos = {json.loads(p.read_text())["photo"]: json.loads(p.read_text()) for p in sorted(PHOTO_DIR.glob("*.json"))}
link = PageLink("photo-map", {"photo": {**{Path(n).stem: n for n in demos}, UPLOAD: UPLOAD}})
if link.fresh:  # a new link chooses the photo: a demo by name, or "upload" for the user's own
    given = link.given().get("photo")
    st.session_state.pop("photo_source", None)
    st.session_state.pop("photo_demo", None)
    if given == UPLOAD:
        st.session_state["photo_source"] = "my photo"
    elif given:
        st.session_state["photo_source"], st.session_state["photo_demo"] = "demo photo", given
source = st.radio("Photo", ["demo photo", "my photo"], horizontal=True, key="photo_source", persist_state="session")
if source == "demo photo":
    name = st.selectbox("Demo photo", list(demos), key="photo_demo", persist_state="session",
                        help="Invented samples rendered by demo_data/make_demo_photos.py.")
    link.keep("photo", name)
    settings = demos[name]
    data, photo_name = (PHOTO_DIR / name).read_bytes(), name
    # Show the demo's own stack unless the user picked another one for it.
    if st.session_state.get("photo_demo_last") != name:
        st.session_state.pop("photo_result", None)
        st.session_state["photo_demo_last"] = name
    choose_demo_stack(settings["stack"], f"photo::{name}")
    st.caption(f"What the lab knows: {settings['note']}.")
else:
    link.keep("photo", UPLOAD)
    link.note("The photo you uploaded is not in the link: whoever opens it must upload the same photo.")
    upload = st.file_uploader("Photo (PNG, JPEG or TIFF; 8 or 16 bit)", type=["png", "jpg", "jpeg", "tif", "tiff"],
                              key="photo_upload")
    if upload is None:
        st.info("Upload a photo, or pick a demo photo above.")
        link.publish()
        cautions_box()
        st.stop()
    data, photo_name, settings = upload.getvalue(), upload.name, {}

text, base_dir, origin = stack_picker(link)
stack = load_or_stop(text, base_dir, origin)

try:
    photo = fio.load_photo(data, name=photo_name)
except FilmcalcError as exc:
    st.error(str(exc))
    st.stop()
if photo.greyscale:
    st.error(f"{photo_name} is greyscale: colour cannot tell thickness here. Monochromatic fringe analysis "
             "handles photos under line light (a separate page, not built yet).")
    st.stop()
H, W = photo.shape

# Anchors and the reference region can be set by clicking or box-selecting on the photo. The
# chart's selection is read here, before the widgets it fills in are drawn on this run.
anchor_key, version_key, pick_key = f"anchor_list::{photo_name}", f"anchor_version::{photo_name}", f"pick::{photo_name}"


def on_photo(pixel_values):
    """True when every (x, y, …) pixel lies on this photo."""
    xs, ys = pixel_values[0::2], pixel_values[1::2]
    return all(0 <= x < W for x in xs) and all(0 <= y < H for y in ys)


if link.fresh:  # a new link's anchors replace the table; without any, the demo's own come back
    if "anchor" in link.given():
        fitting = [a for a in link.given()["anchor"] if on_photo(a[:2])]
        if len(fitting) < len(link.given()["anchor"]):
            link.refuse("anchor", f"{len(link.given()['anchor']) - len(fitting)} pixel(s)", f"outside the photo "
                        f"({W} × {H} px)")
        st.session_state[anchor_key] = [{"x": x, "y": y, "thickness (nm)": nm} for x, y, nm in fitting]
        st.session_state[version_key] = st.session_state.get(version_key, 0) + 1
    else:
        st.session_state.pop(anchor_key, None)
if anchor_key not in st.session_state:
    st.session_state[anchor_key] = [{"x": a[0], "y": a[1], "thickness (nm)": a[2]} for a in settings.get("anchors", [])]
    st.session_state[version_key] = st.session_state.get(version_key, 0) + 1
selection = (st.session_state.get(pick_key) or {}).get("selection")
signature = repr(selection)
if selection and st.session_state.get(pick_key + "_seen") != signature:
    st.session_state[pick_key + "_seen"] = signature
    clicked, box = picked_pixel(selection, W, H), picked_rectangle(selection, W, H)
    if clicked:
        # The table starts afresh (a new key) from what it showed, plus the clicked pixel.
        shown = st.session_state.get(anchor_key + "_shown", st.session_state[anchor_key])
        st.session_state[anchor_key] = list(shown) + [
            {"x": clicked[0], "y": clicked[1], "thickness (nm)": st.session_state.get(f"next_nm::{photo_name}", 0.0)}]
        st.session_state[version_key] += 1
    elif box:
        st.session_state[f"useref::{photo_name}"] = True
        for i, v in enumerate(box):
            st.session_state[f"ref{i}::{photo_name}"] = float(v)

with st.sidebar:
    st.header("What you know")
    lo_default, hi_default = settings.get("range", [0, 1500])
    c1, c2 = st.columns(2)
    link.attach("t_min_nm", f"lo::{photo_name}")
    lo = c1.number_input("Thinnest (nm)", 0.0, 50000.0, float(lo_default), 10.0, key=f"lo::{photo_name}",
                         persist_state="session")
    link.attach("t_max_nm", f"hi::{photo_name}")
    hi = c2.number_input("Thickest (nm)", 1.0, 50000.0, float(hi_default), 10.0, key=f"hi::{photo_name}",
                         persist_state="session")
    trend_options = ["not known"] + list(TRENDS)
    link.attach("trend", f"trend::{photo_name}")
    trend = st.selectbox("Film gets thicker towards", trend_options, persist_state="session",
                         index=trend_options.index(settings.get("trend") or "not known"), key=f"trend::{photo_name}")
    link.attach("pixel_um", f"px::{photo_name}")
    pixel = st.number_input("Pixel size (µm, 0 = unknown)", 0.0, 10000.0, 0.0, 0.1, key=f"px::{photo_name}",
                            persist_state="session")
    st.caption("Anchors: pixels of known thickness (x, y in pixels; thickness in nm). Click the photo to add one "
               "with the thickness below, or edit the table.")
    st.number_input("Thickness at the next clicked pixel (nm)", 0.0, 50000.0, 0.0, 1.0, key=f"next_nm::{photo_name}")
    anchors_rows = _rows(st.data_editor(st.session_state[anchor_key] or _empty_anchors(), num_rows="dynamic",
                                        key=f"anchors::{photo_name}::{st.session_state[version_key]}",
                                        column_config={"x": st.column_config.NumberColumn("x (px)", min_value=0, step=1),
                                                       "y": st.column_config.NumberColumn("y (px)", min_value=0, step=1),
                                                       "thickness (nm)": st.column_config.NumberColumn(min_value=0.0)}))
    st.session_state[anchor_key + "_shown"] = anchors_rows  # edits included: what a click adds to
    link.keep("anchor", [(round(r["x"]), round(r["y"]), float(r["thickness (nm)"])) for r in anchors_rows
                         if all(r.get(c) is not None for c in ("x", "y", "thickness (nm)"))])
    ref_default = settings.get("reference")
    link.attach("use_reference", f"useref::{photo_name}")
    use_ref = st.checkbox("Reference region of known thickness (sets the camera's gains; drag a box on the photo)",
                          ref_default is not None, key=f"useref::{photo_name}", persist_state="session")
    link.attach("reference", tuple(f"ref{i}::{photo_name}" for i in range(5)), fits=lambda r: on_photo(r[:4]),
                misfit=f"outside the photo ({W} × {H} px)", convert=lambda r: tuple(float(v) for v in r))
    reference = None
    if use_ref:
        r = ref_default or [0, 0, min(20, W - 1), min(20, H - 1), 0.0]
        labels = ["x0 (px)", "y0 (px)", "x1 (px)", "y1 (px)", "known thickness (nm)"]
        for i in range(5):
            st.session_state.setdefault(f"ref{i}::{photo_name}", float(r[i]))
        places = [*st.columns(2), *st.columns(2), st.container()]  # two corners, then the thickness
        reference = [places[i].number_input(labels[i], key=f"ref{i}::{photo_name}", persist_state="session")
                     for i in range(5)]
# The profile line is drawn with the result; a link's line waits in session state until then.
link.attach("line", tuple(f"line{i}::{photo_name}" for i in range(4)), fits=on_photo,
            misfit=f"outside the photo ({W} × {H} px)")
link.note("The link holds the settings, not the map: press “Compute the thickness map” after opening it.")
link.publish()

shown = max(1, int(np.ceil(max(H, W) / 1200)))  # a large photo is shown at up to 1200 px a side
fig = go.Figure([go.Image(z=np.rint(photo.rgb[::shown, ::shown] * 255).astype(np.uint8), dx=shown, dy=shown,
                          hoverinfo="skip"), pick_grid(H, W, cells=200)])
for row in anchors_rows:
    if row.get("x") is not None and row.get("y") is not None:
        fig.add_trace(go.Scatter(x=[row["x"]], y=[row["y"]], mode="markers+text", text=[f"{row.get('thickness (nm)')} nm"],
                                 textposition="top center", marker={"symbol": "x", "size": 10, "color": "white"},
                                 textfont={"color": "white", "size": 13, "shadow": "1px 1px 2px black"},
                                 showlegend=False, hoverinfo="skip"))
if reference:
    x0, y0, x1, y1, _ = reference
    fig.add_shape(type="rect", x0=x0, y0=y0, x1=x1, y1=y1, line={"color": "white", "dash": "dot"})
fig.update_layout(height=380, margin={"l": 50, "r": 0, "t": 10, "b": 40}, title=None, dragmode="zoom",
                  xaxis={"range": [-0.5, W - 0.5], "showgrid": False, "title": "x (px)"},
                  yaxis={"range": [H - 0.5, -0.5], "showgrid": False, "scaleanchor": "x", "title": "y (px)"})
st.plotly_chart(fig, width="stretch", on_select="rerun", selection_mode=("points", "box"), key=pick_key)
st.caption("Click the photo to add an anchor there (drag to zoom in first, double-click to zoom out). To set the "
           "reference region, pick the box-select tool (dotted square, top right) and drag a box.")

st.caption(f"Computing a map shows its progress. {RUN_CANCEL_HINT}")
if st.button("Compute the thickness map", type="primary", key="photo_run"):
    try:
        anchors = [(int(r["x"]), int(r["y"]), float(r["thickness (nm)"])) for r in anchors_rows
                   if r.get("x") is not None and r.get("y") is not None and r.get("thickness (nm)") is not None]
        ref = None if not reference else (int(reference[0]), int(reference[1]), int(reference[2]),
                                          int(reference[3]), float(reference[4]))
        bar = st.progress(0.0, "starting")
        result = thickness_map(photo.rgb, stack, (lo, hi), anchors=anchors, reference=ref,
                               trend=None if trend == "not known" else trend, pixel_size_um=pixel or None,
                               progress=lambda f, m: bar.progress(min(1.0, f), m))
        bar.empty()
        st.session_state["photo_result"] = {"result": result, "photo": photo_name, "stack": stack.name,
                                            "settings": {"range_nm": [lo, hi], "anchors": anchors, "reference": ref,
                                                         "trend": trend, "pixel_size_um": pixel or None},
                                            # what was mapped, for saving it as a run
                                            "photo_data": data, "photo_sha256": photo.sha256,
                                            "bit_depth": photo.bit_depth, "stack_text": text,
                                            "stack_file": stack_file_name(origin), "light": stack.light.source,
                                            "angle_deg": stack.light.angle_deg}
    except FilmcalcError as exc:
        st.error(str(exc))

saved = st.session_state.get("photo_result")
if not saved or saved["photo"] != photo_name:
    cautions_box()
    st.stop()

result = saved["result"]
for w in result.warnings:
    st.warning(w)
stats = result.statistics
scale = pixel or None
cols = st.columns(4)
if "mean_nm" in stats:
    cols[0].metric("mean thickness", f"{stats['mean_nm']:.1f} nm")
    cols[1].metric("σ across the map", f"{stats['std_nm']:.1f} nm")
    cols[2].metric("range", f"{stats['min_nm']:.0f}–{stats['max_nm']:.0f} nm")
cols[3].metric("flagged pixels", f"{100 * stats['flagged_fraction']:.1f} %")
st.caption(f"Computed in {result.seconds:.1f} s. Calibration: {result.calibration['method']}; gains "
           f"{', '.join(f'{g:.3f}' for g in result.camera.gains)}. Median pixel uncertainty "
           f"{np.nanmedian(result.sigma_nm):.1f} nm (1σ).")

tabs = st.tabs(["Thickness", "Uncertainty", "Colour residual", "Flags", "Calibration check", "Profile and histogram",
                "Downloads"])
with tabs[0]:
    st.plotly_chart(map_figure(result.thickness_nm, "thickness", "nm", pixel_size_um=scale), width="stretch")
with tabs[1]:
    st.plotly_chart(map_figure(result.sigma_nm, "uncertainty (1σ)", "nm", "Viridis", pixel_size_um=scale),
                    width="stretch")
with tabs[2]:
    st.plotly_chart(map_figure(result.residual_dE, "colour residual", "ΔE00", "Magma", 0, 10, scale),
                    width="stretch")
with tabs[3]:
    st.write("Flagged pixels get no thickness, or one to treat with care:")
    st.dataframe([{"flag": k, "pixels": int(np.count_nonzero(result.flags & v)), "meaning": FLAG_MEANINGS[k]}
                  for k, v in FLAGS.items()], hide_index=True, width="stretch")
    st.plotly_chart(map_figure(result.flags.astype(float), "flags (bit values)", "flags", "Greys", pixel_size_um=scale),
                    width="stretch")
with tabs[4]:
    lookup = build_lookup(stack, (lo, hi))
    st.plotly_chart(calibration_figure(lab_of_encoded(photo.rgb), lookup.lab(CameraModel()),
                                       lookup.lab(result.camera), lookup.thickness_nm), width="stretch")
    st.caption("If the grey cloud of photo colours does not follow the solid path, the stack, the light or the "
               "camera correction is off.")
with tabs[5]:
    st.caption("A line between two pixels (x, y from the top-left); values are the nearest pixel's, so steps "
               "stay steps.")
    c = st.columns(4)
    ends = [c[i].number_input(label, 0, (W if i % 2 == 0 else H) - 1, value, 1, key=f"line{i}::{photo_name}",
                              persist_state="session")
            for i, (label, value) in enumerate((("x0", 0), ("y0", H // 2), ("x1", W - 1), ("y1", H // 2)))]
    distance, values = line_profile(result.thickness_nm, *ends)
    sig = line_profile(result.sigma_nm, *ends)[1]
    pos = distance * (scale or 1)
    prof = go.Figure([go.Scatter(x=pos, y=values + sig, line={"width": 0}, showlegend=False, hoverinfo="skip"),
                      go.Scatter(x=pos, y=values - sig, fill="tonexty", line={"width": 0}, name="±1σ",
                                 hoverinfo="skip"),
                      go.Scatter(x=pos, y=values, name="thickness", line={"color": "black"})])
    prof.update_layout(height=320, xaxis_title="distance along the line (µm)" if scale else
                       "distance along the line (px)",
                       yaxis_title="thickness (nm)", margin={"l": 10, "r": 10, "t": 20, "b": 10})
    st.plotly_chart(prof, width="stretch")
    good = result.thickness_nm[np.isfinite(result.thickness_nm)]
    hist = go.Figure(go.Histogram(x=good, nbinsx=80))
    hist.update_layout(height=280, xaxis_title="thickness (nm)", yaxis_title="pixels",
                       margin={"l": 10, "r": 10, "t": 20, "b": 10})
    st.plotly_chart(hist, width="stretch")
with tabs[6]:
    record = {"photo": {"file": photo_name, "sha256": photo.sha256, "width": W, "height": H},
              "stack": saved["stack"], "settings": saved["settings"], "calibration": result.calibration,
              "statistics": stats}
    with tempfile.TemporaryDirectory() as tmp:
        files = {}
        stem = Path(photo_name).stem + "-thickness"
        for ext, save in ((".tiff", lambda p: fio.save_map_tiff(p, result.thickness_nm, scale)),
                          (".npy", lambda p: fio.save_map_npy(p, result.thickness_nm)),
                          (".csv", lambda p: fio.save_map_csv(p, result.thickness_nm, result.sigma_nm, result.flags,
                                                              result.residual_dE)),
                          (".png", lambda p: fio.save_map_png(p, result.thickness_nm, photo_name, pixel_size_um=scale)),
                          (".json", lambda p: fio.save_provenance(p, record))):
            path = Path(tmp) / (stem + ext)
            save(path)
            files[ext] = path.read_bytes()
    cols = st.columns(5)
    for col, (ext, blob) in zip(cols, files.items()):
        col.download_button(ext[1:].upper(), blob, stem + ext, key=f"dl{ext}")
    st.caption("TIFF: float32 nm, opens in ImageJ/Fiji with unit and pixel size; CSV: x, y, thickness, σ, flags, "
               "residual; JSON: the provenance record (photo hash, stack, settings, calibration, statistics).")

# Saved as `filmcalc map … --save` saves it: the same output names and settings, so either opens the other's runs.
used = saved["settings"]
flag_counts = {k: int(np.count_nonzero(result.flags & v)) for k, v in FLAGS.items()}
stack_text = saved.get("stack_text", text)
stack_file = saved.get("stack_file", stack_file_name(origin))
provenance = {
    "photo": {"file": photo_name, "sha256": saved.get("photo_sha256", photo.sha256), "width": W, "height": H,
              "bit_depth": saved.get("bit_depth", photo.bit_depth)},
    "stack": {"file": stack_file, "sha256": hashlib.sha256(stack_text.encode("utf-8")).hexdigest(),
              "name": saved["stack"], "light": saved.get("light"), "angle_deg": saved.get("angle_deg")},
    "settings": used, "calibration": result.calibration, "statistics": stats, "flags": flag_counts,
    "warnings": result.warnings, "seconds": round(result.seconds, 3)}
save_run_panel(
    "map", inputs={"photo": (photo_name, saved.get("photo_data", data)), "stack": (stack_file, stack_text)},
    outputs={"thickness_nm.npy": result.thickness_nm, "sigma_nm.npy": result.sigma_nm, "flags.npy": result.flags,
             "residual_dE.npy": result.residual_dE},
    settings={"command": "map", "range": "{:g}:{:g}".format(*used["range_nm"]),
              "anchor": [f"{x},{y},{nm:g}" for x, y, nm in used["anchors"]] or None,
              "reference": ",".join(f"{v:g}" for v in used["reference"]) if used["reference"] else None,
              "trend": None if used["trend"] == "not known" else used["trend"], "pixel_size": used["pixel_size_um"]},
    summary={"stack": saved["stack"], "photo": photo_name, **stats, "flags": flag_counts,
             "calibration_method": result.calibration.get("method"), "seconds": provenance["seconds"]},
    provenance=provenance, link=link)
link.publish()
cautions_box()
