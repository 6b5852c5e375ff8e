"""Helpers shared by the dashboard pages: demo files, cached computations, cautions."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import streamlit as st

from filmcalc.colour import XYZ_to_srgb, colour_kernel, reflectance_to_XYZ, srgb_to_hex
from filmcalc.optics import stack_reflectance
from filmcalc.stack import load_stack, loads_stack

DEMO_DIR = Path(__file__).resolve().parents[2] / "demo_data"

MEASUREMENT_CAUTION = (
    "Thickness read from colour is an estimate. Its uncertainty is shown where filmcalc can compute it; "
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
    kernel = colour_kernel(stack.light.source, base_dir=base_dir)
    on_kernel = stack_reflectance(stack, kernel.wavelength_nm, thickness_nm, angle_deg)
    XYZ = reflectance_to_XYZ(on_kernel.reflectance(polarisation), kernel, exposure)
    srgb, out_of_gamut = XYZ_to_srgb(XYZ, kernel.white_XYZ)
    return {
        "wavelength_nm": wl, "R_s": spec.R_s, "R_p": spec.R_p, "R": spec.R, "warnings": spec.warnings,
        "XYZ": XYZ, "hex": srgb_to_hex(srgb), "out_of_gamut": bool(out_of_gamut),
        "monochromatic": kernel.monochromatic,
    }


def cautions_box():
    """The short caution shown on every page."""
    st.caption("⚠️ " + MEASUREMENT_CAUTION + " Lasers, UV lamps, furnaces and the solvents or etchants used "
               "to make films can hurt you: see the Cautions page and follow your local safety rules.")
