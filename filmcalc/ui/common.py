"""Helpers shared by the dashboard pages: demo files, cached computations, cautions."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import streamlit as st

from filmcalc.appearance import film_colours
from filmcalc.errors import FilmcalcError
from filmcalc.optics import reflectance_sweep, stack_reflectance
from filmcalc.stack import load_stack, loads_stack

DEMO_DIR = Path(__file__).resolve().parents[2] / "demo_data"

MEASUREMENT_CAUTION = (
    "Thickness read from colour, fringes or a spectrum is an estimate. Its uncertainty is shown where filmcalc "
    "can compute it; "
    "confirm any value that matters with an independent measurement (spectroscopic reflectometry or "
    "ellipsometry, a stylus profiler)."
)


# Demo samples in the order a newcomer meets them; any other demo file follows.
DEMO_ORDER = ("soap-film-loop", "oxide-coupon", "resist-wafer", "oil-on-water", "lubricant-contact")


def demo_stacks():
    """Demo stack files by display name, in :data:`DEMO_ORDER`."""
    paths = sorted(DEMO_DIR.glob("*.toml"),
                   key=lambda p: (DEMO_ORDER.index(p.stem) if p.stem in DEMO_ORDER else len(DEMO_ORDER), p.stem))
    return {load_stack(path).name: path for path in paths}


BUILDER_CHOICE = "Your stack (from the Stack builder page)"
UPLOAD_CHOICE_PREFIX = "Uploaded: "


def _remember(key):
    st.session_state[key + "_saved"] = st.session_state[key]


def stack_picker():
    """Sidebar control shared by the pages: which stack to work on.

    The choice, an uploaded file's text and the builder's stack live in
    session state, so they survive moving between pages.

    Returns
    -------
    text, base_dir, origin : str, str or None, str
        The stack file's text, the folder relative paths resolve against, and
        a name to show in messages.
    """
    demos = demo_stacks()
    options = list(demos)
    uploaded = st.session_state.get("uploaded_stack")
    if uploaded:
        options.append(UPLOAD_CHOICE_PREFIX + uploaded[0])
    if st.session_state.get("builder_text"):
        options.append(BUILDER_CHOICE)
    saved = st.session_state.get("stack_choice_saved", options[0])
    with st.sidebar:
        st.header("Stack")
        if st.session_state.get("stack_choice") not in options:
            st.session_state["stack_choice"] = saved if saved in options else options[0]
        choice = st.selectbox("Sample", options, key="stack_choice", on_change=_remember, args=("stack_choice",),
                              help="Demo samples are invented; their stack files are in demo_data/.")
        upload = st.file_uploader("Load a stack file (TOML)", type=["toml"], key="stack_upload",
                                  help="Used only in this browser session; not part of shared links.")
    if upload is not None and (not uploaded or uploaded[0] != upload.name):
        st.session_state["uploaded_stack"] = (upload.name, upload.getvalue().decode("utf-8", errors="replace"))
        st.session_state["stack_choice_saved"] = UPLOAD_CHOICE_PREFIX + upload.name
        st.rerun()
    if choice == BUILDER_CHOICE:
        return st.session_state["builder_text"], None, "your stack"
    if choice.startswith(UPLOAD_CHOICE_PREFIX) and uploaded:
        return uploaded[1], None, uploaded[0]
    path = demos[choice]
    return path.read_text(encoding="utf-8"), str(path.parent), path.name


def choose_demo_stack(stack_file, marker):
    """Select the demo stack a demo input was made with, once per demo (the user may then pick another)."""
    stack_name = next((n for n, p in demo_stacks().items() if p.name == stack_file), None)
    if stack_name and st.session_state.get("demo_stack_marker") != marker:
        st.session_state["stack_choice_saved"] = st.session_state["stack_choice"] = stack_name
        st.session_state["demo_stack_marker"] = marker


def load_or_stop(text, base_dir, origin, need_film=True):
    """The parsed stack, or an error message on the page and a stop."""
    try:
        stack = stack_from_text(text, base_dir)
        if need_film and stack.film_index is None:
            raise FilmcalcError("This stack marks no layer as unknown = true; mark the film being measured.")
    except FilmcalcError as exc:
        st.error(f"{origin}: {exc}")
        st.stop()
    return stack


@st.cache_data(show_spinner=False)
def stack_from_text(text, base_dir):
    """Parse a stack file once per distinct text (errors propagate as FilmcalcError)."""
    return loads_stack(text, base_dir=base_dir)


@st.cache_data(show_spinner=False)
def spectrum_and_colour(text, base_dir, thickness_nm, angle_deg, polarisation="unpolarised", exposure=1.0):
    """Reflectance spectrum (380–780 nm, 1 nm) and the film's colour under the stack's light."""
    stack = loads_stack(text, base_dir=base_dir)
    wl = np.arange(380.0, 781.0, 1.0)
    spec = stack_reflectance(stack, wl, thickness_nm, angle_deg)
    colours = film_colours(stack, [thickness_nm], [angle_deg], exposure=exposure, polarisation=polarisation)
    return {
        "spectrum": spec, "warnings": spec.warnings, "XYZ": colours.XYZ[0, 0], "hex": str(colours.hex()[0, 0]),
        "out_of_gamut": bool(colours.out_of_gamut[0, 0]), "monochromatic": colours.monochromatic,
    }


def cautions_box():
    """The short caution shown on every page."""
    st.caption("⚠️ " + MEASUREMENT_CAUTION + " Lasers, UV lamps, furnaces and the solvents or etchants used "
               "to make films can hurt you: see the Cautions page and follow your local safety rules.")


@st.cache_data(show_spinner=False, max_entries=16)
def cached_colours(text, base_dir, thickness_range, angle_range, observer, polarisation, na):
    """Film colours (exposure 1) over a thickness × angle grid, cached by every input that defines them."""
    stack = loads_stack(text, base_dir=base_dir)
    thickness = np.linspace(*thickness_range)
    angles = np.linspace(*angle_range)
    return film_colours(stack, thickness, angles, observer=observer, polarisation=polarisation,
                        numerical_aperture=na)


@st.cache_data(show_spinner=False, max_entries=8)
def cached_reflectance_map(text, base_dir, thickness_range, angle_deg, na):
    """Reflectance over thickness × wavelength (380–780 nm every 2 nm) at one angle."""
    stack = loads_stack(text, base_dir=base_dir)
    return reflectance_sweep(stack, np.arange(380.0, 781.0, 2.0), np.linspace(*thickness_range), [angle_deg],
                             numerical_aperture=na)


def pick_grid(height, width, cells=100):
    """An invisible scatter of points over an image, so clicks and box selections on it report pixels.

    One point every few pixels (at most ``cells`` a side); hovering shows the pixel.
    """
    import plotly.graph_objects as go

    step = max(1, int(np.ceil(max(height, width) / cells)))
    ys, xs = np.mgrid[0:height:step, 0:width:step]
    return go.Scattergl(x=xs.ravel(), y=ys.ravel(), mode="markers", marker={"size": 10, "opacity": 0},
                        hovertemplate="x %{x}, y %{y}<extra></extra>", showlegend=False, name="pixels")


def picked_pixel(selection, width, height):
    """The (x, y) pixel of a single clicked point in a Plotly selection, or None."""
    points = (selection or {}).get("points") or []
    if len(points) != 1 or (selection or {}).get("box"):
        return None
    x, y = int(round(points[0]["x"])), int(round(points[0]["y"]))
    return (x, y) if 0 <= x < width and 0 <= y < height else None


def picked_rectangle(selection, width, height):
    """The (x0, y0, x1, y1) pixel rectangle (inclusive, clipped to the image) of a box selection, or None."""
    boxes = (selection or {}).get("box") or []
    if not boxes:
        return None
    xs, ys = boxes[-1].get("x") or [], boxes[-1].get("y") or []
    if len(xs) < 2 or len(ys) < 2:
        return None
    x0, x1 = (int(np.clip(round(v), 0, width - 1)) for v in (min(xs), max(xs)))
    y0, y1 = (int(np.clip(round(v), 0, height - 1)) for v in (min(ys), max(ys)))
    return x0, y0, x1, y1
