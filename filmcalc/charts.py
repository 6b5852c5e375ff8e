"""Colour tables and figures: interactive (plotly) and printable (matplotlib).

Public names
------------
THICKNESS_UNITS, thickness_unit
    nm, µm and Å, and the factor from nm.
colour_table
    One row per thickness and angle: thickness, angle, hex, sRGB, CIELAB, XYZ, Y.
colour_strip_figure
    Film colour against thickness, fringe orders marked.
thickness_angle_figure
    Film colour over thickness × angle of incidence.
reflectance_map_figure
    Reflectance over thickness × wavelength.
chromaticity_figure
    The colour path in the CIE xy or u′v′ diagram, labelled with thickness.
spectrum_figure
    Reflectance spectrum (s, p, unpolarised) at one thickness and angle.
spectrum_fit_figure, fit_landscape_figure, fit_overlay_figure
    A fitted spectrum with its residuals, the goodness of fit over thickness, several fits on one plot.
calibration_figure, map_figure
    Diagnostics and results of the photo inversion.
thinning_figure, kymograph_figure
    A film over time: mean thickness with the fitted thinning law, and
    thickness along a line against time.
history_figure
    A summary number of saved runs over time, with control limits.
bench_chart, thickness_angle_chart_image, save_bench_chart
    A printable chart of labelled swatches with a title block (PNG or PDF,
    A4 or Letter), drawn with matplotlib so no browser is needed.

Hover readouts show thickness, angle, hex sRGB, CIELAB and luminous
reflectance in percent. Under line light the colours are shades of the line:
the charts then show the intensity fringes.
"""

from __future__ import annotations

import base64
import datetime as _dt
import io
import textwrap

import numpy as np
import plotly.graph_objects as go

from . import __version__
from .appearance import REFERENCE_WAVELENGTH_NM, fringe_order
from .colour import XYZ_to_uv, XYZ_to_xy, spectral_locus
from .errors import FilmcalcError

__all__ = ["THICKNESS_UNITS", "thickness_unit", "colour_table", "colour_strip_figure", "thickness_angle_figure",
           "reflectance_map_figure", "chromaticity_figure", "spectrum_figure", "bench_chart",
           "thickness_angle_chart_image", "save_bench_chart", "PAPER_SIZES_IN", "calibration_figure", "map_figure", "thinning_figure", "kymograph_figure", "plus_minus", "history_figure",
           "fit_overlay_figure"]

THICKNESS_UNITS = {"nm": 1.0, "µm": 1e-3, "Å": 10.0}
_UNIT_ALIASES = {"nm": "nm", "um": "µm", "µm": "µm", "micron": "µm", "a": "Å", "å": "Å", "angstrom": "Å"}
PAPER_SIZES_IN = {"A4": (8.27, 11.69), "Letter": (8.5, 11.0)}


def thickness_unit(unit):
    """Canonical unit name and the factor that converts nm into it."""
    key = _UNIT_ALIASES.get(str(unit).strip().lower())
    if key is None:
        raise FilmcalcError(f"Thickness unit must be nm, µm (um) or Å (A), not {unit!r}.")
    return key, THICKNESS_UNITS[key]


def colour_table(colours):
    """Rows (dicts) for every thickness and angle, for CSV export and tables."""
    hexes = colours.hex()
    rows = []
    for ia, angle in enumerate(colours.angle_deg):
        for idz, d in enumerate(colours.thickness_nm):
            L, a, b = colours.Lab[ia, idz]
            X, Y, Z = colours.XYZ[ia, idz]
            r, g, bl = colours.srgb[ia, idz]
            rows.append({"thickness_nm": float(d), "angle_deg": float(angle), "hex": str(hexes[ia, idz]),
                         "sR": round(float(r), 5), "sG": round(float(g), 5), "sB": round(float(bl), 5),
                         "L": round(float(L), 3), "a": round(float(a), 3), "b": round(float(b), 3),
                         "X": round(float(X), 4), "Y": round(float(Y), 4), "Z": round(float(Z), 4),
                         "luminous_reflectance_pct": round(float(colours.Y_reflectance[ia, idz]), 4),
                         "out_of_gamut": bool(colours.out_of_gamut[ia, idz])})
    return rows


def _rgb8(colours):
    return np.rint(np.clip(colours.srgb, 0, 1) * 255).astype(np.uint8)


def _hover_overlay(colours, unit):
    """A transparent heatmap on a coarse sub-grid (≤ 400 × 40 cells) that carries the hover readout."""
    name, f = thickness_unit(unit)
    A, D = colours.Lab.shape[:2]
    ia = np.arange(0, A, max(1, int(np.ceil(A / 40))))
    idz = np.arange(0, D, max(1, int(np.ceil(D / 400))))
    hexes = colours.hex(ia, idz)
    lab = colours.Lab[np.ix_(ia, idz)]
    Y = colours.Y_reflectance[np.ix_(ia, idz)]
    custom = np.stack([hexes, *(np.round(lab[..., i], 1).astype(str) for i in range(3)),
                       np.round(Y, 2).astype(str)], axis=-1)
    return go.Heatmap(
        z=np.zeros((ia.size, idz.size)), x=colours.thickness_nm[idz] * f, y=colours.angle_deg[ia],
        customdata=custom, opacity=0, showscale=False, colorscale=[[0, "black"], [1, "black"]],
        hovertemplate=(f"thickness %{{x:.4g}} {name}<br>angle %{{y:.3g}}°<br>%{{customdata[0]}}<br>"
                       "L* %{customdata[1]}, a* %{customdata[2]}, b* %{customdata[3]}<br>"
                       "luminous reflectance %{customdata[4]} %<extra></extra>"))


def _png_data_uri(rgb8):
    """An RGB uint8 array as a PNG data URI (far lighter for the browser than a JSON array)."""
    from PIL import Image

    buffer = io.BytesIO()
    Image.fromarray(np.ascontiguousarray(rgb8)).save(buffer, format="PNG")
    return "data:image/png;base64," + base64.b64encode(buffer.getvalue()).decode("ascii")


def _image(colours, unit, rows):
    name, f = thickness_unit(unit)
    d = colours.thickness_nm * f
    dx = (d[-1] - d[0]) / max(len(d) - 1, 1) if len(d) > 1 else 1.0
    a = colours.angle_deg
    dy = (a[-1] - a[0]) / max(len(a) - 1, 1) if len(a) > 1 else 1.0
    return go.Image(source=_png_data_uri(_rgb8(colours)[rows]), x0=d[0], dx=dx, y0=a[0], dy=dy,
                    hoverinfo="skip")


def _light_note(colours):
    note = (f"{colours.source}, {colours.observer}° observer, {colours.polarisation}, exposure "
            f"{colours.exposure:.3g}×")
    if colours.numerical_aperture:
        note += f", NA {colours.numerical_aperture:g}"
    if colours.monochromatic:
        note += " (line light: intensity fringes)"
    return note


def _check_uniform(colours):
    for what, v in (("thickness", colours.thickness_nm), ("angle", colours.angle_deg)):
        if v.size > 2 and not np.allclose(np.diff(v), v[1] - v[0], rtol=1e-6, atol=1e-9):
            raise FilmcalcError(f"Charts need evenly spaced {what} values.")


def colour_strip_figure(colours, stack, unit="nm", title=None):
    """Film colour against thickness at the first angle, fringe orders marked.

    Order boundaries are drawn where 2 n d cos θ_t / λ reaches a whole number
    at λ = 550 nm (one reflectance period of the film at that wavelength).
    """
    _check_uniform(colours)
    name, f = thickness_unit(unit)
    fig = go.Figure([_image(colours, unit, slice(0, 1))])
    fig.data[0].update(dy=1.0, y0=0.0)  # one row of pixels centred on y = 0
    overlay = _hover_overlay(colours.at_angle(0), unit)
    overlay.update(y=[0.0])
    fig.add_trace(overlay)
    orders = fringe_order(stack, colours.thickness_nm, colours.angle_deg[0])
    m_max = int(np.floor(orders.max()))
    per_order = colours.thickness_nm[-1] / orders[-1] if orders[-1] > 0 else None
    for m in range(1, m_max + 1):
        x = m * per_order * f
        fig.add_vline(x=x, line={"color": "white", "width": 1, "dash": "dot"})
        fig.add_annotation(x=x, y=0.5, text=f"order {m + 1} →", showarrow=False, xanchor="left",
                           font={"size": 10, "color": "white"}, bgcolor="rgba(0,0,0,0.45)")
    order_note = f"   ·   one order = {per_order * f:.4g} {name} at {REFERENCE_WAVELENGTH_NM:g} nm" if per_order else ""
    fig.update_layout(title=title or f"{stack.name}: colour against thickness at {colours.angle_deg[0]:g}°",
                      height=230, margin={"l": 10, "r": 10, "t": 50, "b": 40},
                      xaxis_title=f"film thickness ({name}){order_note}<br>{_light_note(colours)}")
    fig.update_yaxes(visible=False, scaleanchor=False, range=[-0.5, 0.5])
    return fig


def thickness_angle_figure(colours, stack, unit="nm", title=None):
    """Film colour over thickness (x) and angle of incidence (y)."""
    _check_uniform(colours)
    name, _ = thickness_unit(unit)
    fig = go.Figure([_image(colours, unit, slice(None)), _hover_overlay(colours, unit)])
    fig.update_layout(title=title or f"{stack.name}: colour over thickness and angle",
                      height=520, margin={"l": 10, "r": 10, "t": 50, "b": 40},
                      xaxis_title=f"film thickness ({name})   ·   {_light_note(colours)}",
                      yaxis_title="angle of incidence (°)")
    # Images keep square pixels unless told otherwise; let the chart fill its box.
    fig.update_yaxes(scaleanchor=False, autorange=True)
    return fig


def reflectance_map_figure(reflectance, thickness_nm, stack, polarisation="unpolarised", unit="nm", title=None):
    """Reflectance (percent) over thickness × wavelength for one angle.

    ``reflectance`` is a :class:`filmcalc.optics.Reflectance` from
    :func:`filmcalc.optics.reflectance_sweep` with one angle.
    """
    name, f = thickness_unit(unit)
    R = 100 * reflectance.reflectance(polarisation)[0]  # (D, W)
    fig = go.Figure(go.Heatmap(
        z=R.T, x=np.asarray(thickness_nm) * f, y=reflectance.wavelength_nm, colorscale="Viridis",
        colorbar={"title": "R (%)"},
        hovertemplate=f"thickness %{{x:.4g}} {name}<br>λ %{{y:.0f}} nm<br>R %{{z:.2f}} %<extra></extra>"))
    fig.update_layout(title=title or f"{stack.name}: reflectance ({polarisation})", height=460,
                      margin={"l": 10, "r": 10, "t": 50, "b": 40},
                      xaxis_title=f"film thickness ({name})", yaxis_title="wavelength (nm)")
    return fig


def chromaticity_figure(colours, space="xy", label_every_nm=100.0, unit="nm", title=None):
    """The film's colour path in a chromaticity diagram, with the spectral locus.

    Points along the path are coloured as the film looks; markers every
    ``label_every_nm`` of thickness are labelled, so revisited colours show
    where the path loops back.
    """
    name, f = thickness_unit(unit)
    if space not in ("xy", "uv"):
        raise FilmcalcError("Chromaticity space must be 'xy' or 'uv'.")
    locus = spectral_locus(colours.observer, space)
    pts = (XYZ_to_xy if space == "xy" else XYZ_to_uv)(colours.XYZ[0])
    # A black film (no reflected light) has no chromaticity: leave a gap there.
    pts[colours.XYZ[0, :, 1] < 1e-6 * colours.white_XYZ[1]] = np.nan
    white = (XYZ_to_xy if space == "xy" else XYZ_to_uv)(colours.white_XYZ)
    hexes = colours.hex()[0]
    d = colours.thickness_nm
    fig = go.Figure()
    fig.add_trace(go.Scatter(x=np.append(locus[:, 1], locus[0, 1]), y=np.append(locus[:, 2], locus[0, 2]),
                             mode="lines", line={"color": "#999", "width": 1}, name="spectral locus",
                             customdata=np.append(locus[:, 0], locus[0, 0]),
                             hovertemplate="%{customdata:.0f} nm<extra>spectral locus</extra>"))
    fig.add_trace(go.Scatter(x=pts[:, 0], y=pts[:, 1], mode="lines", line={"color": "#444", "width": 1},
                             name="colour path", hoverinfo="skip"))
    fig.add_trace(go.Scatter(
        x=pts[:, 0], y=pts[:, 1], mode="markers", marker={"color": list(hexes), "size": 6}, name="film",
        customdata=np.stack([d * f, hexes], -1),
        hovertemplate=f"%{{customdata[0]:.4g}} {name}<br>%{{customdata[1]}}<extra></extra>"))
    marks = np.flatnonzero(np.isclose(np.mod(d + 1e-9, label_every_nm), 0, atol=1e-6)) if label_every_nm else []
    fig.add_trace(go.Scatter(x=pts[marks, 0], y=pts[marks, 1], mode="markers+text",
                             text=[f"{v * f:.4g}" for v in d[marks]], textposition="top right",
                             marker={"color": "black", "size": 5, "symbol": "circle-open"},
                             name=f"every {label_every_nm * f:g} {name}", hoverinfo="skip"))
    fig.add_trace(go.Scatter(x=[white[0]], y=[white[1]], mode="markers", name="light's white",
                             marker={"symbol": "x", "size": 9, "color": "black"}))
    labels = ("x", "y") if space == "xy" else ("u′", "v′")
    fig.update_layout(title=title or f"Colour path in CIE {'1931 xy' if space == 'xy' else '1976 u′v′'}",
                      height=560, margin={"l": 10, "r": 10, "t": 50, "b": 40},
                      xaxis_title=labels[0], yaxis_title=labels[1])
    fig.update_yaxes(scaleanchor="x", scaleratio=1, range=[-0.02, 0.9] if space == "xy" else [-0.02, 0.62])
    fig.update_xaxes(range=[-0.02, 0.8] if space == "xy" else [-0.02, 0.65])
    return fig


def spectrum_figure(reflectance, polarisation="unpolarised", title=""):
    """Reflectance spectra in percent, the chosen polarisation drawn boldly."""
    fig = go.Figure()
    for key, label in (("s", "s"), ("p", "p"), ("unpolarised", "unpolarised")):
        bold = key == polarisation
        fig.add_trace(go.Scatter(
            x=reflectance.wavelength_nm, y=100 * reflectance.reflectance(key), name=label, mode="lines",
            line={"width": 3 if bold else 1.2, "dash": "solid" if bold else "dot"},
            hovertemplate="λ %{x:.0f} nm<br>R %{y:.2f} %<extra>" + label + "</extra>"))
    fig.update_layout(title=title, xaxis_title="wavelength (nm)", yaxis_title="reflectance (%)", height=430,
                      margin={"l": 10, "r": 10, "t": 50, "b": 10}, legend={"orientation": "h", "y": -0.2})
    fig.update_yaxes(rangemode="tozero")
    return fig


def calibration_figure(photo_lab, path_lab_before, path_lab_after, path_thickness_nm, max_points=4000, title=None):
    """Diagnostic: the photo's colours over the predicted colour path in CIELAB a*b*.

    If the photo's colours do not lie along the path, the stack, light or
    camera correction is wrong; the path is drawn before (dotted) and after
    (solid) calibration.
    """
    pts = np.asarray(photo_lab).reshape(-1, 3)
    pts = pts[np.all(np.isfinite(pts), axis=1)]
    if pts.shape[0] > max_points:
        pts = pts[np.random.default_rng(0).choice(pts.shape[0], max_points, replace=False)]
    fig = go.Figure()
    fig.add_trace(go.Scatter(x=pts[:, 1], y=pts[:, 2], mode="markers", name="photo pixels",
                             marker={"size": 3, "color": "rgba(80,80,80,0.35)"}, hoverinfo="skip"))
    for lab, name, dash in ((path_lab_before, "predicted, before calibration", "dot"),
                            (path_lab_after, "predicted, after calibration", "solid")):
        fig.add_trace(go.Scatter(x=lab[:, 1], y=lab[:, 2], mode="lines", name=name, line={"dash": dash},
                                 customdata=path_thickness_nm,
                                 hovertemplate="%{customdata:.1f} nm<br>a* %{x:.1f}, b* %{y:.1f}<extra></extra>"))
    fig.update_layout(title=title or "Photo colours on the predicted colour path (CIELAB a*b*, D65)",
                      xaxis_title="a*", yaxis_title="b*", height=480, margin={"l": 10, "r": 10, "t": 50, "b": 40})
    fig.update_yaxes(scaleanchor="x", scaleratio=1)
    return fig


def map_figure(values, title, label, colorscale="cividis", zmin=None, zmax=None, pixel_size_um=None, stride=1):
    """A map (thickness, uncertainty, residual) as a heatmap with hover readout.

    ``stride``: the map holds every stride-th pixel of the original (a large map shown lighter); the axes
    keep the original pixel coordinates.
    """
    h, w = np.shape(values)
    unit = "µm" if pixel_size_um else "px"
    scale = (pixel_size_um or 1.0) * stride
    fig = go.Figure(go.Heatmap(z=values, x=np.arange(w) * scale, y=np.arange(h) * scale, colorscale=colorscale,
                               zmin=zmin, zmax=zmax, colorbar={"title": label},
                               hovertemplate=f"x %{{x:.4g}} {unit}, y %{{y:.4g}} {unit}<br>{label} %{{z:.4g}}"
                                             "<extra></extra>"))
    fig.update_layout(title=title, height=420, margin={"l": 10, "r": 10, "t": 40, "b": 10},
                      xaxis_title=f"x ({unit})", yaxis_title=f"y ({unit})")
    fig.update_yaxes(autorange="reversed", scaleanchor="x", scaleratio=1)
    return fig


def thinning_figure(time_s, series, fit=None, rupture_s=None, log=False, title=None):
    """Thickness against time: the mean (and any other series), the fitted law h = A·(t − t₀)^−α, the rupture.

    Parameters
    ----------
    time_s : array_like
    series : dict of {name: array_like}
        Thicknesses in nm, NaN where none (e.g. ``{"mean": ...}``).
    fit : filmcalc.series.PowerLawFit, optional
    rupture_s : float, optional
    log : bool
        Log–log axes against t − t₀ (a power law is a straight line there); needs ``fit``.
    """
    t = np.asarray(time_s, float)
    shift = fit.t0_s if (log and fit is not None) else 0.0
    x_label = "t − t₀ (s)" if shift else "time (s)"
    fig = go.Figure()
    for name, values in series.items():
        fig.add_trace(go.Scatter(x=t - shift, y=values, mode="markers", name=name, marker={"size": 6},
                                 hovertemplate=f"%{{x:.4g}} s<br>%{{y:.1f}} nm<extra>{name}</extra>"))
    if fit is not None:
        tt = np.linspace(np.nanmin(t), np.nanmax(t) if rupture_s is None else rupture_s, 200)
        fig.add_trace(go.Scatter(x=tt - shift, y=fit.thickness_nm(tt), mode="lines", line={"color": "#d62728"},
                                 name=f"h ∝ (t − t₀)^−α, α = {plus_minus(fit.alpha, fit.alpha_sigma)}"))
    if rupture_s is not None and not shift:
        fig.add_vline(x=rupture_s, line={"dash": "dash", "color": "#555"}, annotation_text="rupture")
    fig.update_layout(title=title, height=380, margin={"l": 10, "r": 10, "t": 40 if title else 20, "b": 10},
                      xaxis_title=x_label, yaxis_title="thickness (nm)", legend={"orientation": "h", "y": -0.25})
    if shift:
        fig.update_xaxes(type="log")
        fig.update_yaxes(type="log")
    return fig


def plus_minus(value, sigma):
    """``value ± sigma`` with σ to two significant figures and the value to the same decimal place."""
    if not (np.isfinite(sigma) and sigma > 0):
        return f"{value:.4g}"
    decimals = max(0, 1 - int(np.floor(np.log10(sigma))))
    return f"{value:.{decimals}f} ± {sigma:.{decimals}f}"


def kymograph_figure(kymograph_nm, time_s, title=None, colorscale="cividis"):
    """Thickness along a line (x: distance, px) against time (y, s), as a heatmap."""
    k = np.asarray(kymograph_nm, float)
    fig = go.Figure(go.Heatmap(z=k, x=np.arange(k.shape[1]), y=np.asarray(time_s, float), colorscale=colorscale,
                               colorbar={"title": "nm"},
                               hovertemplate="%{x} px along the line<br>t %{y:.4g} s<br>%{z:.1f} nm<extra></extra>"))
    fig.update_layout(title=title, height=380, margin={"l": 10, "r": 10, "t": 40 if title else 20, "b": 10},
                      xaxis_title="distance along the line (px)", yaxis_title="time (s)")
    fig.update_yaxes(autorange="reversed")
    return fig


def spectrum_fit_figure(fit, title=None):
    """Measured spectrum and best model (top), residuals (bottom), reflectance in percent."""
    from plotly.subplots import make_subplots

    fig = make_subplots(rows=2, cols=1, shared_xaxes=True, row_heights=[0.72, 0.28], vertical_spacing=0.06)
    fig.add_trace(go.Scatter(x=fit.wavelength_nm, y=100 * fit.data, mode="markers", name="measured",
                             marker={"size": 4, "color": "#555"},
                             hovertemplate="λ %{x:.1f} nm<br>R %{y:.2f} %<extra>measured</extra>"), 1, 1)
    fig.add_trace(go.Scatter(x=fit.wavelength_nm, y=100 * fit.model, mode="lines", name=f"model, {fit.thickness_nm:.1f} nm",
                             line={"width": 2.5, "color": "#1f77b4"},
                             hovertemplate="λ %{x:.1f} nm<br>R %{y:.2f} %<extra>model</extra>"), 1, 1)
    fig.add_trace(go.Scatter(x=fit.wavelength_nm, y=100 * (fit.data - fit.model), mode="markers", name="residual",
                             marker={"size": 3, "color": "#d62728"}, showlegend=False,
                             hovertemplate="λ %{x:.1f} nm<br>%{y:.3f} %<extra>residual</extra>"), 2, 1)
    fig.update_yaxes(title_text="reflectance (%)", row=1, col=1)
    fig.update_yaxes(title_text="data − model (%)", row=2, col=1)
    fig.update_xaxes(title_text="wavelength (nm)", row=2, col=1)
    fig.update_layout(title=title or f"Fit: {fit.thickness_nm:.2f} ± {fit.sigma_nm:.2f} nm, reduced χ² "
                      f"{fit.reduced_chi2:.2f}", height=480, margin={"l": 10, "r": 10, "t": 50, "b": 10},
                      legend={"orientation": "h", "y": 1.08})
    return fig


def fit_overlay_figure(fits, title=None):
    """Several fitted spectra on one plot: each one's data (points) and model (line) in one colour, percent.

    Parameters
    ----------
    fits : list of (name, wavelength_nm, data, model)
        Reflectance as fractions; ``name`` labels the legend (e.g. a run id and its thickness).
    """
    palette = ("#1f77b4", "#d62728", "#2ca02c", "#9467bd", "#ff7f0e", "#17becf", "#8c564b", "#e377c2",
               "#7f7f7f", "#bcbd22", "#393b79", "#637939")
    dashes = ("solid", "dash", "dot", "dashdot")
    fig = go.Figure()
    for i, (name, wl, data, model) in enumerate(fits):
        colour = palette[i % len(palette)]
        fig.add_trace(go.Scatter(x=wl, y=100 * np.asarray(data, float), mode="markers", name=f"{name}: measured",
                                 legendgroup=str(i), marker={"size": 4, "color": colour, "opacity": 0.6},
                                 hovertemplate="λ %{x:.1f} nm<br>R %{y:.2f} %<extra>" + name + "</extra>"))
        fig.add_trace(go.Scatter(x=wl, y=100 * np.asarray(model, float), mode="lines", name=f"{name}: model",
                                 legendgroup=str(i), line={"width": 2, "color": colour,
                                                           "dash": dashes[i % len(dashes)]},
                                 hovertemplate="λ %{x:.1f} nm<br>model %{y:.2f} %<extra>" + name + "</extra>"))
    fig.update_layout(title=title, xaxis_title="wavelength (nm)", yaxis_title="reflectance (%)", height=460,
                      margin={"l": 10, "r": 10, "t": 50 if title else 20, "b": 10},
                      legend={"orientation": "h", "y": -0.2})
    return fig


def fit_landscape_figure(fit, title=None):
    """Goodness of fit (reduced χ², log scale) over the thickness range, best and other minima marked."""
    fig = go.Figure(go.Scatter(x=fit.landscape_nm, y=fit.landscape_chi2, mode="lines", name="reduced χ²",
                               hovertemplate="%{x:.1f} nm<br>χ²ᵣ %{y:.3g}<extra></extra>"))
    fig.add_trace(go.Scatter(x=[fit.thickness_nm], y=[max(fit.reduced_chi2, 1e-3)], mode="markers", name="best fit",
                             marker={"size": 11, "symbol": "star", "color": "#d62728"}))
    if fit.alternatives:
        fig.add_trace(go.Scatter(x=[a["thickness_nm"] for a in fit.alternatives],
                                 y=[a["reduced_chi2"] for a in fit.alternatives], mode="markers",
                                 name="other minima", marker={"size": 8, "symbol": "circle-open", "color": "#444"}))
    fig.update_layout(title=title or "Goodness of fit over the thickness range", xaxis_title="film thickness (nm)",
                      yaxis_title="reduced χ²", yaxis_type="log", height=360,
                      margin={"l": 10, "r": 10, "t": 50, "b": 10}, legend={"orientation": "h", "y": -0.25})
    return fig


def _contour_grid(x, y, t, size=120):
    """Linear interpolation of scattered values on a regular grid, or None (too few or collinear points)."""
    if x.size < 4 or np.ptp(x) == 0 or np.ptp(y) == 0:
        return None
    from scipy.interpolate import griddata
    from scipy.spatial import QhullError

    gx, gy = np.linspace(x.min(), x.max(), size), np.linspace(y.min(), y.max(), size)
    try:
        return gx, gy, griddata((x, y), t, (gx[None, :], gy[:, None]), method="linear")
    except QhullError:  # all points on one line: a line scan, shown as points only
        return None


def spectrum_map_figure(result, unit="mm", title=None, zmin=None, zmax=None):
    """Thickness at each measured point over an interpolated contour map (plotly).

    ``zmin``, ``zmax``: the colour range in nm (default: the map's own), e.g. one range for maps shown side by side.
    """
    fig = go.Figure()
    x, y, t = result.x, result.y, result.thickness_nm
    ok = np.isfinite(t)
    zmin = np.nanmin(t) if zmin is None else zmin
    zmax = np.nanmax(t) if zmax is None else zmax
    grid = _contour_grid(x[ok], y[ok], t[ok])
    if grid is not None:
        gx, gy, grid = grid
        fig.add_trace(go.Contour(x=gx, y=gy, z=grid, colorscale="cividis", colorbar={"title": "nm"},
                                 contours={"showlabels": True}, hoverinfo="skip", opacity=0.85,
                                 zmin=zmin, zmax=zmax))
    fig.add_trace(go.Scatter(x=x, y=y, mode="markers", name="measured points",
                             marker={"size": 8, "color": t, "colorscale": "cividis", "cmin": zmin,
                                     "cmax": zmax, "line": {"width": 1, "color": "white"},
                                     "symbol": np.where(result.ambiguous, "x", "circle")},
                             customdata=np.column_stack([result.sigma_nm, result.reduced_chi2]),
                             hovertemplate=f"x %{{x:.3g}} {unit}, y %{{y:.3g}} {unit}<br>%{{marker.color:.2f}} ± "
                                           "%{customdata[0]:.2f} nm<br>χ²ᵣ %{customdata[1]:.2f}<extra></extra>"))
    st = result.statistics
    fig.update_layout(title=title or f"Thickness map: mean {st['mean_nm']:.2f} nm, non-uniformity "
                      f"{st['nonuniformity_pct']:.2f} %", xaxis_title=f"x ({unit})", yaxis_title=f"y ({unit})",
                      height=520, margin={"l": 10, "r": 10, "t": 50, "b": 10}, showlegend=False)
    fig.update_yaxes(scaleanchor="x", scaleratio=1)
    return fig


def spectrum_map_figure_image(result, title, path, unit="mm"):
    """The map of spectra as a PNG (matplotlib): filled contours, the points, a colour bar and the statistics."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    fig, ax = plt.subplots(figsize=(6.4, 5.6), dpi=150)
    x, y, t = result.x, result.y, result.thickness_nm
    ok = np.isfinite(t)
    grid = _contour_grid(x[ok], y[ok], t[ok])
    filled = None
    if grid is not None:
        gx, gy, z = grid
        filled = ax.contourf(gx, gy, z, levels=14, cmap="cividis")
    points = ax.scatter(x[ok], y[ok], c=t[ok], cmap="cividis", edgecolors="white", linewidths=0.6, s=28)
    fig.colorbar(filled or points, ax=ax, label="thickness (nm)")
    ax.set_aspect("equal")
    ax.set_xlabel(f"x ({unit})")
    ax.set_ylabel(f"y ({unit})")
    st = result.statistics
    ax.set_title(f"{title}\nmean {st['mean_nm']:.2f} nm, σ {st['std_nm']:.2f} nm, range {st['range_nm']:.2f} nm, "
                 f"non-uniformity {st['nonuniformity_pct']:.2f} %", fontsize=9)
    fig.text(0.01, 0.01, f"filmcalc {__version__}: thickness from reflectance spectra; confirm values that matter "
             "independently.", fontsize=6, color="#555")
    fig.savefig(path, bbox_inches="tight")
    plt.close(fig)


def _stack_summary(stack, film_label):
    parts = [stack.ambient.name]
    for layer in stack.layers:
        parts.append(film_label if layer.unknown else f"{layer.material.name} {layer.thickness_nm:g} nm")
    parts.append(stack.substrate.name)
    return " / ".join(parts)


def _page(paper):
    """A blank matplotlib page of the given paper size (no display needed)."""
    import matplotlib

    matplotlib.use("Agg")
    from matplotlib.figure import Figure

    if paper not in PAPER_SIZES_IN:
        raise FilmcalcError(f"Paper must be one of {', '.join(PAPER_SIZES_IN)} (got {paper!r}).")
    return Figure(figsize=PAPER_SIZES_IN[paper])


_PRINT_NOTE = ("Printed colours depend on the printer, the paper and the light the chart is viewed under: compare "
               "samples with the chart under the light named above, and check the chart against a sample of known "
               "thickness. Thickness from colour is an estimate; confirm values that matter with an independent "
               "measurement.")


def _title_block(fig, stack, colours, heading, extra, date):
    """Title, stack, light, provenance at the top; the printing caution at the bottom."""
    fig.text(0.06, 0.955, heading, fontsize=15, weight="bold")
    film = stack.film
    angle = (f"angle of incidence {colours.angle_deg[0]:g}°" if colours.angle_deg.size == 1 else
             f"angles {colours.angle_deg[0]:g}–{colours.angle_deg[-1]:g}°")
    block = [f"Stack: {_stack_summary(stack, f'[{film.material.name}, thickness varies]')}",
             f"Light: {_light_note(colours)}; {angle}",
             f"{extra}Made {date or _dt.date.today().isoformat()} with filmcalc {__version__}."]
    for k, line in enumerate(block):
        fig.text(0.06, 0.925 - 0.018 * k, line, fontsize=8)
    fig.text(0.06, 0.085, "\n".join(textwrap.wrap(_PRINT_NOTE, 120)), fontsize=7, va="top", color="#333")


def bench_chart(colours, stack, unit="nm", paper="A4", columns=8, title=None, date=None):
    """A printable chart of labelled colour swatches (matplotlib Figure).

    Parameters
    ----------
    colours : FilmColours
        One angle; every thickness becomes one swatch (at most 240).
    stack : filmcalc.stack.Stack
    unit : {"nm", "µm", "Å"}
    paper : {"A4", "Letter"}
    columns : int
        Swatches per row.
    title, date : str, optional
        Heading (the stack's name by default) and date (today by default).
    """
    from matplotlib.patches import Rectangle

    name, f = thickness_unit(unit)
    count = colours.thickness_nm.size
    if count > 240:
        raise FilmcalcError(f"{count} swatches do not fit on one page: use a larger step (at most 240 swatches).")
    fig = _page(paper)
    ax = fig.add_axes((0.06, 0.12, 0.88, 0.74))
    rows = int(np.ceil(count / columns))
    rgb = np.clip(colours.srgb[0], 0, 1)
    orders = fringe_order(stack, colours.thickness_nm, colours.angle_deg[0])
    for i in range(count):
        r, c = divmod(i, columns)
        y = max(rows, 12) - r - 1
        ax.add_patch(Rectangle((c + 0.06, y + 0.32), 0.88, 0.62, facecolor=rgb[i], edgecolor="#777",
                               linewidth=0.4))
        ax.text(c + 0.5, y + 0.16, f"{colours.thickness_nm[i] * f:.4g} {name}", ha="center", va="center",
                fontsize=7 if columns <= 8 else 6)
        ax.text(c + 0.9, y + 0.86, f"{int(np.floor(orders[i])) + 1}", ha="right", va="top", fontsize=5,
                color="white" if colours.Lab[0, i, 0] < 55 else "black")
    ax.set_xlim(0, columns)
    ax.set_ylim(0, max(rows, 12))
    ax.axis("off")
    _title_block(fig, stack, colours, title or stack.name,
                 f"Small figure in each swatch: fringe order at {REFERENCE_WAVELENGTH_NM:g} nm.   ", date)
    return fig


def thickness_angle_chart_image(colours, stack, unit="nm", paper="A4", title=None, date=None):
    """A printable thickness × angle colour chart (matplotlib Figure)."""
    _check_uniform(colours)
    name, f = thickness_unit(unit)
    fig = _page(paper)
    ax = fig.add_axes((0.1, 0.5, 0.84, 0.36))
    d = colours.thickness_nm * f
    ax.imshow(np.clip(colours.srgb, 0, 1), origin="lower", aspect="auto", interpolation="nearest",
              extent=(d[0], d[-1], colours.angle_deg[0], colours.angle_deg[-1]))
    ax.set_xlabel(f"film thickness ({name})")
    ax.set_ylabel("angle of incidence (°)")
    _title_block(fig, stack, colours, title or f"{stack.name}: colour over thickness and angle", "", date)
    return fig


def save_bench_chart(fig, path):
    """Write a bench chart to PNG (200 dpi) or PDF, chosen by the file's suffix."""
    path = str(path)
    if path.lower().endswith(".png"):
        fig.savefig(path, dpi=200)
    elif path.lower().endswith(".pdf"):
        fig.savefig(path)
    else:
        raise FilmcalcError(f"The chart file must end in .png or .pdf (got {path!r}).")


def history_figure(table, title=None, label=None):
    """A summary number over time with its control limits.

    Parameters
    ----------
    table : filmcalc.runs.HistoryTable
        From :func:`filmcalc.runs.history_table`.
    title : str, optional
    label : str, optional
        The y-axis title, with its unit (default: the summary key).

    Points outside the limits are red diamonds; hover shows the run id,
    sample, time (UTC) and value. The mean is a solid line and mean ± kσ
    dashed lines.
    """
    rows = table.rows
    times = [r["created_utc"].replace("T", " ").rstrip("Z") for r in rows]
    values = [r["value"] for r in rows]
    label = label or table.key
    fig = go.Figure()
    fig.add_trace(go.Scatter(x=times, y=values, mode="lines", line={"color": "#b0b0b0", "width": 1},
                             hoverinfo="skip", showlegend=False))
    groups = (("inside the limits", False, {"color": "#1f77b4", "size": 7, "symbol": "circle"}),
              ("outside the limits", True, {"color": "#d62728", "size": 11, "symbol": "diamond"}))
    for name, outside, marker in groups:
        picked = [i for i, r in enumerate(rows) if r["outside"] == outside]
        if not picked:
            continue
        fig.add_trace(go.Scatter(
            x=[times[i] for i in picked], y=[values[i] for i in picked], mode="markers", name=name, marker=marker,
            customdata=[[rows[i]["run_id"], rows[i]["sample"] or "–"] for i in picked],
            hovertemplate=(f"run %{{customdata[0]}}<br>sample %{{customdata[1]}}<br>%{{x|%Y-%m-%d %H:%M}} UTC<br>"
                           f"{label} %{{y:.5g}}<extra></extra>")))
    if table.mean is not None:
        fig.add_hline(y=table.mean, line={"color": "#444", "width": 1},
                      annotation_text=f"mean {table.mean:.4g}", annotation_position="top left")
        for y, text in ((table.upper, f"+{table.k:g}σ"), (table.lower, f"−{table.k:g}σ")):
            fig.add_hline(y=y, line={"color": "#d62728", "width": 1, "dash": "dash"},
                          annotation_text=f"{text} {y:.4g}", annotation_position="top left")
    fig.update_layout(title=title, height=380, margin={"l": 10, "r": 10, "t": 40 if title else 20, "b": 10},
                      xaxis_title="saved (UTC)", yaxis_title=label, legend={"orientation": "h", "y": -0.25})
    fig.update_xaxes(type="date")
    return fig
