"""Reflectance spectrum → film thickness, for one spot or a map of spots.

Public names
------------
Spectrum, read_spectrum, reflectance_from_counts
    A measured reflectance spectrum, read from CSV/TSV (reflectance as a
    fraction or in percent, or raw sample / reference / dark counts).
fit_spectrum, SpectrumFit
    Thickness of the stack's unknown film (optionally its Cauchy
    coefficients and other layers' thicknesses) with 1σ, reduced χ², the
    other local minima and, for thick films, an independent estimate from
    the fringe frequency.
SpectrumMap, read_spectrum_map, fit_map, uniformity
    Many spectra with (x, y) positions: thickness at every spot and the
    uniformity figures people report.

Method
------
1. Global search: the model reflectance R(d) on a fine, even thickness grid
   over the whole range (one call of the fast one-layer sweep) and the sum
   of squared residuals S(d) = Σ (R(d) − y)² for every grid thickness, with
   an optional baseline (offset, or scale and offset) solved in closed form
   at each thickness. Every local minimum of S(d) is a candidate.
2. Local refinement of the best minima: a finer grid around each, a parabola
   through the three lowest points and one Gauss–Newton step; with more free
   parameters, ``scipy.optimize.least_squares`` on the general
   transfer-matrix path.
3. Uncertainty: 1σ from the Jacobian and the residual,
   cov = s² (JᵀJ)⁻¹ with s² = S / (N − p). Reduced χ² = s² / σ_y², σ_y the
   data's own noise estimated from second differences
   (σ_y² ≈ ⟨(y_{i+1} − 2y_i + y_{i−1})²⟩ / 6 for white noise).
4. Thick films (> 2 µm): R oscillates in k = 1/λ with frequency 2 n_g d cos θ_t
   (n_g the group index); the FFT peak of R(k) gives d independently.

References
----------
Heavens, O. S. (1991). Optical Properties of Thin Solid Films, Dover, ch. 4
(reflectance of a single film). Press, W. H. et al. (2007). Numerical Recipes,
3rd ed., §15.5–15.6 (least squares, parameter covariance from the Jacobian).
"""

from __future__ import annotations

import csv
import dataclasses
import io
import time
from pathlib import Path

import numpy as np

from .errors import FilmcalcError
from .materials import CauchyIndex, brief_repr, built_in_material
from .optics import reflectance_sweep, stack_indices, stack_reflectance, thickness_sweep

__all__ = ["Spectrum", "read_spectrum", "reflectance_from_counts", "bare_reflectance", "fit_spectrum", "SpectrumFit", "SpectrumMap",
           "read_spectrum_map", "fit_map", "uniformity"]

MIN_POINTS = 10
THICK_FILM_NM = 2000.0  # above this, the fringe-frequency estimate is reported too


@dataclasses.dataclass
class Spectrum:
    """A reflectance spectrum.

    Attributes
    ----------
    wavelength_nm : numpy.ndarray, shape (W,)
        Increasing vacuum wavelengths, nm.
    reflectance : numpy.ndarray, shape (W,)
        Reflectance as a fraction (0–1).
    name : str
    notes : list of str
        What reading did to the data (percent converted, rows dropped, sorted...).
    """

    wavelength_nm: np.ndarray
    reflectance: np.ndarray
    name: str = "spectrum"
    notes: list = dataclasses.field(default_factory=list)


def _is_file(path):
    """``path.is_file()``, False for a name the system cannot even look up (too long, a NUL character)."""
    try:
        return path.is_file()
    except (OSError, ValueError):
        return False


def _text(source, name, what):
    """A text table's contents and a name for messages, from a path or bytes (binary data refused)."""
    if isinstance(source, (bytes, bytearray)):
        data, name = bytes(source), name or what
    else:
        path = Path(source)
        if not _is_file(path):
            raise FilmcalcError(f"{what.capitalize()} file {brief_repr(str(path), 80)} does not exist.")
        try:
            data, name = path.read_bytes(), name or path.name
        except OSError as exc:
            raise FilmcalcError(f"Cannot read {brief_repr(path.name)}: {exc.strerror or exc}.") from None
    if data.startswith((b"\xff\xfe", b"\xfe\xff")):  # UTF-16 with a byte-order mark
        text = data.decode("utf-16", errors="replace")
    else:
        text = data.decode("utf-8-sig", errors="replace")
    if "\x00" in text:
        raise FilmcalcError(f"{name} is not a text table (it holds binary data).")
    return text, name


def _rows(text, name):
    """Numeric rows and the header (or None) of a CSV/TSV/whitespace table."""
    lines = [ln for ln in text.splitlines() if ln.strip() and not ln.lstrip().startswith("#")]
    if not lines:
        raise FilmcalcError(f"{name} holds no data.")
    sample = "\n".join(lines[:20])
    try:
        dialect = csv.Sniffer().sniff(sample, delimiters=",;\t ")
        delimiter = dialect.delimiter
    except csv.Error:
        delimiter = None
    split = (lambda ln: ln.split()) if delimiter in (None, " ") else (lambda ln: next(csv.reader([ln], delimiter=delimiter)))
    header, rows = None, []
    for number, line in enumerate(lines, 1):
        try:
            cells = [c.strip() for c in split(line) if c.strip() != ""]
        except csv.Error as exc:
            raise FilmcalcError(f"{name}, data line {number}: cannot be split into columns ({exc}).") from None
        try:
            rows.append([float(c) if c.lower() not in ("nan", "") else np.nan for c in cells])
        except ValueError:
            if rows or header is not None:
                raise FilmcalcError(f"{name}, data line {number}: {line.strip()[:60]!r} is not a row of numbers.")
            header = [c.lower() for c in cells]
    if not rows:
        raise FilmcalcError(f"{name} has a header but no rows of numbers.")
    width = len(rows[0])
    if any(len(r) != width for r in rows):
        bad = next(i for i, r in enumerate(rows, 1) if len(r) != width)
        raise FilmcalcError(f"{name}: row {bad} has a different number of columns from the first row.")
    return np.array(rows, dtype=float), header


def _check_width(header, data, name, *columns):
    """The rows must hold a number in every column the header names and the reader uses."""
    used = [i for i in columns if i is not None]
    if used and max(used) >= data.shape[1]:
        raise FilmcalcError(f"{name}: the header names {len(header)} columns but the rows hold {data.shape[1]} "
                            "numbers; give every row a value for each column, or remove the extra names.")


def _column(header, *keys):
    if header is None:
        return None
    for i, h in enumerate(header):
        if any(k in h for k in keys):
            return i
    return None


def _clean(wavelength, values, name, notes):
    """Drop NaN rows, sort, average repeated wavelengths, and check what is left."""
    finite = np.all(np.isfinite(np.column_stack([wavelength] + list(values))), axis=1)
    if not finite.all():
        notes.append(f"{int((~finite).sum())} rows with missing values (NaN) were left out")
    wavelength = wavelength[finite]
    values = [v[finite] for v in values]
    if wavelength.size and np.any(np.diff(wavelength) < 0):
        order = np.argsort(wavelength, kind="stable")
        wavelength, values = wavelength[order], [v[order] for v in values]
        notes.append("wavelengths were not in increasing order: sorted")
    unique, inverse, counts = np.unique(wavelength, return_inverse=True, return_counts=True)
    if unique.size < wavelength.size:
        values = [np.bincount(inverse, weights=v) / counts for v in values]
        notes.append(f"{wavelength.size - unique.size} repeated wavelengths were averaged")
        wavelength = unique
    if wavelength.size < MIN_POINTS:
        raise FilmcalcError(f"{name} has {wavelength.size} usable points; a fit needs at least {MIN_POINTS}.")
    if wavelength[0] < 150 or wavelength[-1] > 20000:
        raise FilmcalcError(f"{name}: wavelengths {wavelength[0]:g}–{wavelength[-1]:g} do not look like "
                            "nanometres (expected roughly 200–2000 nm).")
    return wavelength, values


def _as_fraction(reflectance, scale, name, notes):
    """Reflectance in percent or as a fraction → fraction (``scale``: "auto", "percent" or "fraction")."""
    if scale not in ("auto", "percent", "fraction"):
        raise FilmcalcError(f"scale must be auto, percent or fraction (got {scale!r}).")
    top = float(np.max(reflectance))
    # A reflectance cannot exceed 1 (beyond noise): larger values are percent.
    if scale == "percent" or (scale == "auto" and top > 1.05):
        if scale == "auto":
            notes.append(f"values up to {top:g} read as percent (divided by 100); say scale=fraction if not")
        reflectance = reflectance / 100.0
    elif scale == "auto":
        notes.append(f"values up to {top:g} read as fractions of 1; say scale=percent if they are percent")
    if np.max(reflectance) > 1.05 or np.min(reflectance) < -0.1:
        raise FilmcalcError(f"{name}: reflectance runs from {np.min(reflectance):.3g} to {np.max(reflectance):.3g}; "
                            "expected 0–1 (or 0–100 %). Check the column and the scale.")
    return reflectance


def reflectance_from_counts(sample, reference, dark=None, reference_reflectance=1.0):
    """Reflectance from raw detector counts: R = (S − D) / (Rf − D) · R_ref.

    Parameters
    ----------
    sample, reference, dark : array_like, shape (W,)
        Counts on the sample, on the reference, and with the light blocked.
    reference_reflectance : float or array_like
        The reference's own reflectance (e.g. bare silicon from the optics core).
    """
    sample, reference = np.asarray(sample, float), np.asarray(reference, float)
    dark = np.zeros_like(sample) if dark is None else np.asarray(dark, float)
    span = reference - dark
    if np.any(span <= 0):
        raise FilmcalcError("The reference counts must exceed the dark counts at every wavelength.")
    return (sample - dark) / span * np.asarray(reference_reflectance, float)


def bare_reflectance(material_name, wavelength_nm, ambient="air"):
    """Normal-incidence reflectance of a bare reference material (e.g. silicon) against ``ambient``."""
    from .stack import Stack

    stack = Stack("reference", built_in_material(ambient), [], built_in_material(material_name))
    return stack_reflectance(stack, wavelength_nm).R


def read_spectrum(source, name=None, scale="auto", reference_material="silicon"):
    """Read a reflectance spectrum from CSV, TSV or whitespace-separated text.

    Accepted columns (a header is optional; names are matched loosely):
    ``wavelength, reflectance`` (fraction or percent, detected and
    overridable with ``scale``), or ``wavelength, sample, reference[, dark]``
    counts, turned into reflectance with the reference's reflectance computed
    by the optics core (``reference_material``, bare silicon by default).

    Parameters
    ----------
    source : str, path-like or bytes
    name : str, optional
    scale : {"auto", "percent", "fraction"}
    reference_material : str
        Built-in material the counts' reference is made of.

    Returns
    -------
    Spectrum
    """
    text, name = _text(source, name, "spectrum")
    data, header = _rows(text, name)
    notes = []
    i_wl = _column(header, "wave", "lambda", "nm")
    i_wl = 0 if i_wl is None else i_wl
    i_sample, i_ref, i_dark = _column(header, "sample"), _column(header, "ref"), _column(header, "dark")
    i_r = _column(header, "reflect", "refl", "r_", "r(")
    counts = i_sample is not None and i_ref is not None  # counts need a header that names them
    if data.shape[1] < 2:
        raise FilmcalcError(f"{name} needs at least two columns: wavelength (nm) and reflectance.")
    _check_width(header, data, name, i_wl, *((i_sample, i_ref, i_dark) if counts else (i_r,)))
    if counts:
        columns = [data[:, i_sample], data[:, i_ref]] + ([data[:, i_dark]] if i_dark is not None else [])
        wl, columns = _clean(data[:, i_wl], columns, name, notes)
        dark = columns[2] if len(columns) > 2 else np.zeros_like(wl)
        lit = columns[1] > dark
        if not lit.all():
            notes.append(f"{int((~lit).sum())} wavelengths where the reference is not above the dark level were "
                         "left out")
            wl, columns, dark = wl[lit], [c[lit] for c in columns], dark[lit]
            if wl.size < MIN_POINTS:
                raise FilmcalcError(f"{name}: the reference counts exceed the dark counts at only {wl.size} "
                                    "wavelengths.")
        r_ref = bare_reflectance(reference_material, wl)
        reflectance = reflectance_from_counts(columns[0], columns[1], dark, r_ref)
        notes.append(f"counts turned into reflectance against bare {reference_material}")
        reflectance = _as_fraction(reflectance, "fraction", name, notes)
    else:
        if header is None and data.shape[1] > 2:
            notes.append(f"columns 3–{data.shape[1]} ignored (name them sample, reference, dark for raw counts)")
        i_r = i_r if i_r is not None and i_r != i_wl else (1 if i_wl == 0 else 0)
        wl, (reflectance,) = _clean(data[:, i_wl], [data[:, i_r]], name, notes)
        reflectance = _as_fraction(reflectance, scale, name, notes)
    return Spectrum(wl, reflectance, name, notes)


def _noise(y):
    """Noise σ of a smooth curve's samples, from second differences (robust)."""
    if y.shape[-1] < 5:
        return np.full(y.shape[:-1], 1e-4)
    d2 = y[..., 2:] - 2 * y[..., 1:-1] + y[..., :-2]
    return np.maximum(1.4826 * np.median(np.abs(d2), axis=-1) / np.sqrt(6.0), 1e-5)


def _model_table(stack, wavelength_nm, grid):
    """R on a thickness grid (D, W) for the stack's light and polarisation."""
    light = stack.light
    if light.angle_deg == 0 and light.numerical_aperture == 0:
        # At normal incidence s and p coincide: one polarisation is enough.
        n, warnings = stack_indices(stack, wavelength_nm)
        R, _ = thickness_sweep(n, [layer.thickness_nm for layer in stack.layers],
                               [layer.coherent for layer in stack.layers], stack.film_index, grid, wavelength_nm,
                               0.0, "s", transmittance=False)
        return R[0], warnings
    sweep = reflectance_sweep(stack, wavelength_nm, grid)
    return sweep.reflectance(light.polarisation)[0], sweep.warnings


BASELINES = ("none", "offset", "scale+offset")


def _ssr(table, y, baseline):
    """S(d) for every grid row, with the baseline's linear parameters solved at each: shape (D, M)."""
    y = np.atleast_2d(y)  # (M, W)
    if baseline == "none":
        return (np.sum(table**2, 1)[:, None] - 2 * table @ y.T + np.sum(y**2, 1)[None, :])
    tc = table - table.mean(1, keepdims=True)
    yc = y - y.mean(1, keepdims=True)
    syy = np.sum(yc**2, 1)[None, :]
    if baseline == "offset":
        return np.sum(tc**2, 1)[:, None] - 2 * tc @ yc.T + syy
    # scale + offset: S = Syy − (Σ tc·yc)² / Σ tc²
    stt = np.maximum(np.sum(tc**2, 1), 1e-300)[:, None]
    cross = tc @ yc.T
    # A negative scale (the model upside down) is not a fit: such thicknesses explain nothing.
    return syy - np.where(cross > 0, cross, 0.0) ** 2 / stt


def _local_minima(s):
    """Indices of the local minima of a 1-D curve (ends included when lower than their neighbour)."""
    left = np.r_[True, s[1:] < s[:-1]]
    right = np.r_[s[:-1] <= s[1:], True]
    return np.flatnonzero(left & right)


def _refine(stack, wl, y, d0, step, baseline, lo, hi):
    """Sub-grid thickness near ``d0``: a grid 20× finer over ±2 steps, and a parabola through its
    three lowest points.

    Returns thickness, model at it (baseline applied), Jacobian columns (W, p) and the baseline
    (offset, scale).
    """
    fine_step = step / 20
    grid = np.unique(np.clip(d0 + np.arange(-40, 41) * fine_step, lo, hi))
    table, _ = _model_table(stack, wl, grid)
    s = _ssr(table, y, baseline)[:, 0]
    k = int(np.argmin(s))
    d = grid[k]
    if 0 < k < grid.size - 1:
        a, b, c = s[k - 1], s[k], s[k + 1]
        den = a - 2 * b + c
        if den > 0:
            d = grid[k] + 0.5 * (grid[k + 1] - grid[k]) * (a - c) / den
    # Model and its thickness derivative at d, interpolated on the fine grid (0.05 nm or finer).
    dtable = np.gradient(table, grid, axis=0) if grid.size > 1 else np.zeros_like(table)
    j = int(np.clip(np.searchsorted(grid, d) - 1, 0, grid.size - 2)) if grid.size > 1 else 0
    w = float(np.clip((d - grid[j]) / (grid[j + 1] - grid[j]), 0, 1)) if grid.size > 1 else 0.0
    model = (1 - w) * table[j] + w * table[min(j + 1, grid.size - 1)]
    dmodel = (1 - w) * dtable[j] + w * dtable[min(j + 1, grid.size - 1)]
    offset, scale, columns = 0.0, 1.0, [dmodel]
    if baseline == "offset":
        offset = float(np.mean(y - model))
        columns.append(np.ones_like(model))
    elif baseline == "scale+offset":
        (scale, offset), *_ = np.linalg.lstsq(np.column_stack([model, np.ones_like(model)]), y, rcond=None)
        if scale <= 0:  # the model upside down is no fit: keep its shape, shift only
            scale, offset = 1.0, float(np.mean(y - model))
        columns = [scale * dmodel, np.ones_like(model), model]
    return float(d), scale * model + offset, np.column_stack(columns), (float(offset), float(scale))


def _fringe_factor(stack, wl_nm):
    """d(optical phase)/dk per unit thickness over 4π: (n·n_g − β²)/√(n² − β²) of the film at ``wl_nm``.

    n_g = n − λ dn/dλ is the group index and β = n₀ sin θ₀ the ambient's
    tangential index; at normal incidence the factor is n_g.
    """
    material = stack.film.material
    h = 1.0
    n0, n1, n2 = (material.index(np.array([wl_nm + dx]))[0].real for dx in (-h, 0.0, h))
    ng = n1 - wl_nm * (n2 - n0) / (2 * h)
    beta = stack.ambient.index(np.array([wl_nm]))[0].real * np.sin(np.deg2rad(stack.light.angle_deg))
    return float((n1 * ng - beta**2) / np.sqrt(max(n1**2 - beta**2, 1e-12)))


def fringe_frequency_thickness(wavelength_nm, reflectance, factor):
    """Thickness from the fringe frequency: the FFT of R(k), k = 1/λ, peaks at 2 · factor · d.

    ``factor`` is the film's group index at normal incidence (see
    :func:`_fringe_factor` for oblique light). Returns the thickness (nm) and
    the FFT's resolution converted to thickness (nm; not an uncertainty), or
    (None, None) with too few fringes.
    """
    k = 1.0 / np.asarray(wavelength_nm, float)[::-1]
    r = np.asarray(reflectance, float)[::-1]
    n = 4 * k.size
    kk = np.linspace(k[0], k[-1], n)
    rr = np.interp(kk, k, r)
    rr = rr - np.polyval(np.polyfit(kk, rr, 1), kk)
    pad = 8 * n
    spectrum = np.abs(np.fft.rfft(rr * np.hanning(n), pad))
    freq = np.fft.rfftfreq(pad, kk[1] - kk[0])  # cycles per unit k = optical path 2 n_g d cos θ (nm)
    span = kk[-1] - kk[0]
    first = int(np.searchsorted(freq, 2.0 / span))  # at least two fringes across the window
    if first >= spectrum.size - 2:
        return None, None
    i = first + int(np.argmax(spectrum[first:]))
    if 0 < i < spectrum.size - 1:
        a, b, c = np.log(spectrum[i - 1:i + 2] + 1e-300)
        shift = 0.5 * (a - c) / (a - 2 * b + c) if (a - 2 * b + c) < 0 else 0.0
    else:
        shift = 0.0
    f = freq[i] + shift * (freq[1] - freq[0])
    return float(f / (2 * factor)), float(1.0 / span / (2 * factor))


@dataclasses.dataclass
class SpectrumFit:
    """Result of :func:`fit_spectrum`.

    Attributes
    ----------
    thickness_nm, sigma_nm : float
        Best-fit thickness of the unknown film and its 1σ.
    reduced_chi2 : float
        S / (N − p) / σ_y², σ_y the data's noise estimated from second differences.
    rms_residual : float
        √(S / N), reflectance units.
    noise : float
        σ_y, reflectance units.
    parameters : dict
        Every fitted parameter and its 1σ (``{"thickness_nm": (value, sigma), ...}``).
    alternatives : list of dict
        Other local minima: ``thickness_nm`` and ``reduced_chi2``, best first.
    landscape_nm, landscape_chi2 : numpy.ndarray
        Reduced χ² over the thickness grid (the goodness-of-fit landscape).
    wavelength_nm, data, model : numpy.ndarray
        The fitted window: data and best model.
    fft_thickness_nm, fft_resolution_nm : float or None
        Independent estimate from the fringe frequency (thick films).
    baseline : dict
        ``offset`` and ``scale`` applied to the model.
    warnings : list of str
    seconds : float
    """

    thickness_nm: float
    sigma_nm: float
    reduced_chi2: float
    rms_residual: float
    noise: float
    parameters: dict
    alternatives: list
    landscape_nm: np.ndarray
    landscape_chi2: np.ndarray
    wavelength_nm: np.ndarray
    data: np.ndarray
    model: np.ndarray
    fft_thickness_nm: float | None
    fft_resolution_nm: float | None
    baseline: dict
    warnings: list
    seconds: float

    def summary(self):
        """A JSON-ready dictionary of the numbers."""
        return {"thickness_nm": round(self.thickness_nm, 3), "sigma_nm": round(self.sigma_nm, 4),
                "reduced_chi2": round(self.reduced_chi2, 4), "rms_residual": round(self.rms_residual, 6),
                "noise": round(self.noise, 6),
                "parameters": {k: [round(v[0], 6), round(v[1], 6)] for k, v in self.parameters.items()},
                "alternatives": [{k: round(v, 3) for k, v in a.items()} for a in self.alternatives],
                "fft_thickness_nm": None if self.fft_thickness_nm is None else round(self.fft_thickness_nm, 2),
                "fft_resolution_nm": None if self.fft_resolution_nm is None else round(self.fft_resolution_nm, 2),
                "baseline": {k: round(v, 6) for k, v in self.baseline.items()},
                "window_nm": [float(self.wavelength_nm[0]), float(self.wavelength_nm[-1])],
                "points": int(self.wavelength_nm.size), "warnings": self.warnings,
                "seconds": round(self.seconds, 4)}


def _window(spectrum, window_nm, warnings):
    wl, y = np.asarray(spectrum.wavelength_nm, float), np.asarray(spectrum.reflectance, float)
    finite = np.isfinite(wl) & np.isfinite(y)
    if not finite.all():
        warnings.append(f"{int((~finite).sum())} points with missing values (NaN) were left out")
        wl, y = wl[finite], y[finite]
    if wl.size and np.any(np.diff(wl) <= 0):
        raise FilmcalcError("The spectrum's wavelengths must increase (read it with read_spectrum to sort them).")
    if window_nm is not None:
        a, b = float(window_nm[0]), float(window_nm[1])
        if not a < b:
            raise FilmcalcError(f"The wavelength window must run from a shorter to a longer wavelength (got {a}–{b}).")
        keep = (wl >= a) & (wl <= b)
        wl, y = wl[keep], y[keep]
        if wl.size < MIN_POINTS:
            raise FilmcalcError(f"Only {wl.size} points lie in the window {a:g}–{b:g} nm; a fit needs {MIN_POINTS}.")
    return wl, y


def _grid_step(stack, wl, hi):
    """A thickness step fine enough that S(d) is well sampled: a 40th of the shortest half-fringe."""
    n = np.max(stack.film.material.index(np.array([wl[0], wl[-1]])).real)
    # S(d) minima narrow with thickness: their width scales as λ_min² / (n · Δλ_window) at most.
    half_fringe = wl[0] / (4 * n)
    width = wl[0] ** 2 / (2 * n * max(wl[-1] - wl[0], 1.0))
    return float(max(0.05, min(1.0, half_fringe / 40, width / 10)))


MAX_TABLE = 30_000_000  # thickness grid × wavelengths held at once (240 MB of float64)


def _thickness_grid(stack, wl, lo, hi):
    """The even thickness grid of the global search (at least 3 points), refused if too large to hold."""
    step = _grid_step(stack, wl, hi)
    grid = np.arange(lo, hi + step / 2, step)
    if grid.size < 3:
        step = (hi - lo) / 2
        grid = np.array([lo, lo + step, hi])
    if grid.size * wl.size > MAX_TABLE:
        raise FilmcalcError(f"A {lo:g}–{hi:g} nm range needs {grid.size} thicknesses × {wl.size} wavelengths: too "
                            "many to hold at once. Narrow the thickness range or the wavelength window.")
    return grid, step


def _at_range_end(d, lo, hi, step):
    """A warning when the best thickness sits at an end of the searched range."""
    if (lo > 0 and d <= lo + step) or d >= hi - step:
        return f"the best fit lies at the end of the searched range ({d:.1f} nm): widen the range"
    return None


def _ambiguous(delta_ssr, noise, reduced):
    """Another minimum is about as good: its Δχ² (scaled by χ²_ν when that exceeds 1) is below 9 (3σ)."""
    return delta_ssr / (noise**2 * np.maximum(reduced, 1.0)) < 9.0


def _check_fit_inputs(stack, range_nm, baseline):
    if stack.film_index is None:
        raise FilmcalcError(f"Stack {stack.name!r} marks no layer as unknown = true: nothing to fit.")
    lo, hi = float(range_nm[0]), float(range_nm[1])
    if not 0 <= lo < hi:
        raise FilmcalcError(f"The thickness range needs 0 ≤ min < max (got {lo:g}–{hi:g} nm).")
    if baseline not in BASELINES:
        raise FilmcalcError(f"baseline must be one of {', '.join(BASELINES)} (got {baseline!r}).")
    return lo, hi


def fit_spectrum(spectrum, stack, range_nm=(0.0, 3000.0), fit="thickness", window_nm=None, baseline="none",
                 max_alternatives=5):
    """Fit the unknown film's thickness (and optionally more) to a reflectance spectrum.

    Parameters
    ----------
    spectrum : Spectrum
    stack : filmcalc.stack.Stack
        The sample; its light sets the angle and polarisation.
    range_nm : (float, float)
        Thicknesses searched, nm.
    fit : str
        Comma-separated free parameters: ``thickness`` (always), ``cauchy``
        (the film's A, B, C), ``layer:K`` (thickness of layer K, 1 = just
        below the ambient).
    window_nm : (float, float), optional
        Wavelengths used, nm.
    baseline : {"none", "offset", "scale+offset"}
        Nuisance terms between model and data (a reference or dark-count
        error shifts or scales a measured spectrum).
    max_alternatives : int
        How many other local minima to report.

    Returns
    -------
    SpectrumFit
    """
    t_start = time.perf_counter()
    lo, hi = _check_fit_inputs(stack, range_nm, baseline)
    warnings = []
    wl, y = _window(spectrum, window_nm, warnings)
    extras = [p.strip() for p in fit.split(",") if p.strip() and p.strip() != "thickness"]
    for p in extras:
        if p != "cauchy" and not (p.startswith("layer:") and p[6:].isdigit()
                                  and 1 <= int(p[6:]) <= len(stack.layers)):
            raise FilmcalcError(f"Unknown fit parameter {p!r}: use thickness, cauchy or layer:K "
                                f"(K = 1–{len(stack.layers)}).")
    grid, step = _thickness_grid(stack, wl, lo, hi)
    table, model_warnings = _model_table(stack, wl, grid)
    warnings += model_warnings
    s = _ssr(table, y, baseline)[:, 0]
    del table
    p_base = {"none": 0, "offset": 1, "scale+offset": 2}[baseline]
    dof = max(wl.size - 1 - p_base, 1)
    minima = _local_minima(s)
    minima = minima[np.argsort(s[minima])]
    # Refine the best minima; the best refined one wins.
    # Minima whose grid residual is close to the best are refined; the best refined one wins.
    close = [k for k in minima[:max_alternatives + 1] if s[k] <= s[minima[0]] + 0.2 * abs(s[minima[0]])]
    refined = []
    for k in close:
        d, fitted, J, (offset, scale) = _refine(stack, wl, y, grid[k], step, baseline, lo, hi)
        refined.append((float(np.sum((y - fitted) ** 2)), d, fitted, J, offset, scale))
    refined.sort(key=lambda r: r[0])
    ssr, d, fitted, J, offset, scale = refined[0]
    # The other minima, placed by a parabola on the grid.
    others = [(r[0], r[1]) for r in refined[1:]]
    for k in minima[:max_alternatives + 1]:
        if k in close:
            continue
        t = grid[k]
        if 0 < k < grid.size - 1 and s[k - 1] - 2 * s[k] + s[k + 1] > 0:
            t += 0.5 * step * (s[k - 1] - s[k + 1]) / (s[k - 1] - 2 * s[k] + s[k + 1])
        others.append((float(s[k]), float(t)))
    others.sort()
    parameters = {}
    fitted_stack = stack.with_film_thickness(d)
    if extras:
        d, fitted, J, parameters, fitted_stack, more = _fit_more(stack, wl, y, d, extras, baseline, lo, hi)
        warnings = warnings + more
        ssr = float(np.sum((y - fitted) ** 2))
        dof = max(wl.size - J.shape[1], 1)
    s2 = ssr / dof
    # The data's own noise, from second differences of what the model leaves (a smooth residual
    # of a good fit adds nothing; the fringes themselves are taken out).
    noise = float(_noise(y - fitted))
    try:
        cov = s2 * np.linalg.inv(J.T @ J)
        sigma = float(np.sqrt(max(cov[0, 0], 0.0)))
    except np.linalg.LinAlgError:
        sigma = float("nan")
        warnings.append("the Jacobian is singular: the thickness is not determined by this spectrum")
    if not extras:
        parameters = {"thickness_nm": (d, sigma)}
        if baseline != "none":
            parameters["offset"] = (offset, float(np.sqrt(max(cov[1, 1], 0.0))))
        if baseline == "scale+offset":
            parameters["scale"] = (scale, float(np.sqrt(max(cov[2, 2], 0.0))))
    reduced = s2 / noise**2
    alternatives = [{"thickness_nm": t, "reduced_chi2": ssr_k / dof / noise**2} for ssr_k, t in others
                    if abs(t - d) > step][:max_alternatives]
    # A model far above the data's noise: say what may be wrong.
    mean_offset = float(np.mean(y - fitted))
    if baseline == "none" and abs(mean_offset) > 3 * noise and abs(mean_offset) > 0.005:
        warnings.append(f"the data sit {100 * mean_offset:+.1f} % (absolute) from the best model on average: "
                        "a baseline error? Try baseline=offset (or scale+offset)")
    if reduced > 25:
        warnings.append(f"reduced χ² is {reduced:.0f}: the stack, the angle or the wavelength window does not "
                        "describe this spectrum well")
    if alternatives and _ambiguous((alternatives[0]["reduced_chi2"] - reduced) * dof * noise**2, noise, reduced):
        warnings.append(f"another thickness ({alternatives[0]['thickness_nm']:.1f} nm) fits almost as well: "
                        "narrow the range or widen the wavelength window")
    end = _at_range_end(d, lo, hi, step)
    if end:
        warnings.append(end)
    fft_d = fft_res = None
    if d > THICK_FILM_NM:
        # The window's centre in k = 1/λ: the harmonic mean of its ends.
        factor = _fringe_factor(fitted_stack, 2.0 / (1.0 / wl[0] + 1.0 / wl[-1]))
        fft_d, fft_res = fringe_frequency_thickness(wl, y, factor)
    return SpectrumFit(d, sigma, float(reduced), float(np.sqrt(ssr / wl.size)), noise, parameters, alternatives,
                       grid, s / dof / noise**2, wl, y, fitted, fft_d, fft_res,
                       {"offset": offset, "scale": scale}, warnings, time.perf_counter() - t_start)


def _fit_more(stack, wl, y, d0, extras, baseline, lo, hi):
    """Thickness with the film's Cauchy coefficients and/or other layers' thicknesses (least squares)."""
    from scipy.optimize import least_squares

    film = stack.film_index
    names, start, lower, upper = ["thickness_nm"], [d0], [lo], [hi]
    if "cauchy" in extras:
        # Start from the film's own index, fitted with A + B/λ² + C/λ⁴ (λ in µm) over the window.
        n = stack.film.material.index(wl).real
        A = np.column_stack([np.ones_like(wl), (wl / 1000) ** -2, (wl / 1000) ** -4])
        abc, *_ = np.linalg.lstsq(A, n, rcond=None)
        names += ["cauchy_A", "cauchy_B_um2", "cauchy_C_um4"]
        start += list(abc)
        lower += [1.0, -1.0, -1.0]
        upper += [4.0, 1.0, 1.0]
    layer_ids = [int(p[6:]) - 1 for p in extras if p.startswith("layer:")]
    for i in layer_ids:
        if i == film:
            continue
        names.append(f"layer{i + 1}_nm")
        start.append(stack.layers[i].thickness_nm)
        lower.append(0.0)
        upper.append(max(10 * stack.layers[i].thickness_nm, hi))
    n_base = {"none": 0, "offset": 1, "scale+offset": 2}[baseline]
    names += ["offset"] * (n_base >= 1) + ["scale"] * (n_base == 2)
    start += [0.0] * (n_base >= 1) + [1.0] * (n_base == 2)
    lower += [-1.0] * (n_base >= 1) + [0.1] * (n_base == 2)
    upper += [1.0] * (n_base >= 1) + [10.0] * (n_base == 2)

    def build(p):
        layers = list(stack.layers)
        j = 1
        material = layers[film].material
        if "cauchy" in extras:
            material = CauchyIndex(p[1], p[2], p[3], name="fitted Cauchy film")
            j = 4
        layers[film] = dataclasses.replace(layers[film], material=material, thickness_nm=float(p[0]))
        for i in layer_ids:
            if i != film:
                layers[i] = dataclasses.replace(layers[i], thickness_nm=float(p[j]))
                j += 1
        return dataclasses.replace(stack, layers=layers)

    def model(p):
        r = stack_reflectance(build(p), wl).reflectance(stack.light.polarisation)
        scale = p[-1] if n_base == 2 else 1.0
        offset = p[len(p) - n_base] if n_base else 0.0
        return scale * r + offset

    start = np.clip(start, np.array(lower) + 1e-9, np.array(upper) - 1e-9)
    result = least_squares(lambda p: model(p) - y, start, bounds=(lower, upper), x_scale="jac")
    J = result.jac
    s2 = float(np.sum(result.fun**2)) / max(wl.size - len(start), 1)
    warnings = []
    try:
        cov = s2 * np.linalg.inv(J.T @ J)
        sig = np.sqrt(np.maximum(np.diag(cov), 0))
    except np.linalg.LinAlgError:
        sig = np.full(len(start), np.nan)
        warnings.append("some fitted parameters are not determined by this spectrum (singular Jacobian)")
    params = {name: (float(v), float(s)) for name, v, s in zip(names, result.x, sig)}
    return float(result.x[0]), model(result.x), J, params, build(result.x), warnings


# ----------------------------------------------------------------------------------------------
# Maps of spectra
# ----------------------------------------------------------------------------------------------

@dataclasses.dataclass
class SpectrumMap:
    """Many spectra on one wavelength grid, each at a position (x, y).

    Attributes
    ----------
    wavelength_nm : numpy.ndarray, shape (W,)
    reflectance : numpy.ndarray, shape (M, W)
        Fractions.
    x, y : numpy.ndarray, shape (M,)
        Positions (units as given, e.g. mm).
    name : str
    notes : list of str
    """

    wavelength_nm: np.ndarray
    reflectance: np.ndarray
    x: np.ndarray
    y: np.ndarray
    name: str = "map"
    notes: list = dataclasses.field(default_factory=list)


def read_spectrum_map(source, positions=None, scale="auto", name=None):
    """Read a mapping run.

    Either one long CSV with columns ``x, y, wavelength, reflectance`` (a
    header is required; one row per point and wavelength), or a folder of
    spectrum files plus ``positions`` (a CSV ``file, x, y``). Spectra on other
    wavelength grids are interpolated onto the first one's (noted).
    """
    notes = []
    if positions is not None or (not isinstance(source, (bytes, bytearray)) and _is_dir(Path(source))):
        folder = Path(source)
        pos_path = Path(positions) if positions is not None else folder / "positions.csv"
        if not _is_file(pos_path):
            raise FilmcalcError(f"A folder of spectra needs a positions file (file, x, y); "
                                f"{brief_repr(str(pos_path), 80)} is missing.")
        try:
            rows = list(csv.reader(io.StringIO(_text(pos_path, None, "positions")[0])))
        except csv.Error as exc:
            raise FilmcalcError(f"{pos_path.name} cannot be split into columns file, x, y ({exc}).") from None
        rows = [r for r in rows if r and not r[0].lstrip().startswith("#")]
        if rows and not _is_number(rows[0][1] if len(rows[0]) > 1 else ""):
            rows = rows[1:]
        if not rows:
            raise FilmcalcError(f"{pos_path} lists no spectra.")
        spectra, xs, ys = [], [], []
        for r in rows:
            if len(r) < 3:
                raise FilmcalcError(f"{pos_path}: each row needs file, x, y (got {r!r}).")
            file = Path(r[0].strip())
            if file.is_absolute() or ".." in file.parts:
                raise FilmcalcError(f"{pos_path}: {r[0]!r} must be a file name inside the folder.")
            try:
                xs.append(float(r[1]))
                ys.append(float(r[2]))
            except ValueError:
                raise FilmcalcError(f"{pos_path.name}: x and y must be numbers (got {brief_repr(r)}).") from None
            spectra.append(read_spectrum(folder / file, scale=scale))
        wl = spectra[0].wavelength_nm
        refl = []
        for s in spectra:
            if s.wavelength_nm.shape != wl.shape or not np.allclose(s.wavelength_nm, wl):
                if s.wavelength_nm[0] > wl[0] or s.wavelength_nm[-1] < wl[-1]:
                    raise FilmcalcError(f"{s.name} does not cover {wl[0]:g}–{wl[-1]:g} nm like the first spectrum.")
                notes.append(f"{s.name} interpolated onto the first spectrum's wavelengths")
            refl.append(np.interp(wl, s.wavelength_nm, s.reflectance))
        return SpectrumMap(wl, np.array(refl), np.array(xs), np.array(ys), name or folder.name, notes)
    text, name = _text(source, name, "map")
    data, header = _rows(text, name)
    cols = [_column(header, "x"), _column(header, "y"), _column(header, "wave", "lambda", "nm"),
            _column(header, "refl", "r_", "r(")]
    if header is None or None in cols or len(set(cols)) < 4:
        raise FilmcalcError(f"{name} needs a header naming the columns x, y, wavelength (nm) and reflectance.")
    _check_width(header, data, name, *cols)
    x, y, wl, r = (data[:, c] for c in cols)
    finite = np.isfinite(x) & np.isfinite(y) & np.isfinite(wl) & np.isfinite(r)
    if not finite.all():
        notes.append(f"{int((~finite).sum())} rows with missing values were left out")
        x, y, wl, r = x[finite], y[finite], wl[finite], r[finite]
    points, inverse = np.unique(np.column_stack([x, y]), axis=0, return_inverse=True)
    inverse = inverse.ravel()
    grid = np.unique(wl)
    if grid.size < MIN_POINTS:
        raise FilmcalcError(f"{name} has {grid.size} distinct wavelengths; a fit needs at least {MIN_POINTS}.")
    refl = np.full((points.shape[0], grid.size), np.nan)
    refl[inverse, np.searchsorted(grid, wl)] = r
    missing = ~np.isfinite(refl)
    if missing.any():
        bad = int(np.any(missing, axis=1).sum())
        raise FilmcalcError(f"{name}: {bad} points do not have a reflectance at every wavelength of the run.")
    refl = _as_fraction(refl, scale, name, notes)
    return SpectrumMap(grid, refl, points[:, 0], points[:, 1], name, notes)


def _is_dir(path):
    """``path.is_dir()``, False for a name the system cannot even look up."""
    try:
        return path.is_dir()
    except (OSError, ValueError):
        return False


def _is_number(text):
    try:
        float(text)
        return True
    except ValueError:
        return False


def uniformity(thickness_nm):
    """Uniformity figures of a set of thickness values (NaNs ignored).

    Non-uniformity is (max − min) / (2 · mean), in percent: common practice
    for wafer maps, no source.
    """
    t = np.asarray(thickness_nm, float)
    t = t[np.isfinite(t)]
    if t.size == 0:
        return {"points": 0}
    mean = float(t.mean())
    return {"points": int(t.size), "mean_nm": mean, "std_nm": float(t.std(ddof=1)) if t.size > 1 else 0.0,
            "min_nm": float(t.min()), "max_nm": float(t.max()), "range_nm": float(np.ptp(t)),
            "nonuniformity_pct": float(100 * np.ptp(t) / (2 * mean)) if mean > 0 else float("nan")}


@dataclasses.dataclass
class MapFit:
    """Result of :func:`fit_map` (arrays have one entry per point)."""

    x: np.ndarray
    y: np.ndarray
    thickness_nm: np.ndarray
    sigma_nm: np.ndarray
    reduced_chi2: np.ndarray
    ambiguous: np.ndarray
    statistics: dict
    warnings: list
    seconds: float


def fit_map(spectrum_map, stack, range_nm=(0.0, 3000.0), window_nm=None, baseline="none", progress=None,
            chunk=512):
    """Fit the unknown film's thickness at every point of a map of spectra.

    The model table over the thickness grid is computed once; S(d) for a
    block of spectra is one matrix product; each spectrum's best grid point is
    refined by a parabola and one Gauss–Newton step on the table's thickness
    derivative. A point is ``ambiguous`` when a minimum more than a third of a
    fringe period away is within Δχ² = 9 of the best (as in :func:`fit_spectrum`).

    Returns
    -------
    MapFit
    """
    t_start = time.perf_counter()
    report = progress or (lambda fraction, message: None)
    lo, hi = _check_fit_inputs(stack, range_nm, baseline)
    wl, keep = spectrum_map.wavelength_nm, slice(None)
    if window_nm is not None:
        keep = (wl >= window_nm[0]) & (wl <= window_nm[1])
        if keep.sum() < MIN_POINTS:
            raise FilmcalcError(f"Only {int(keep.sum())} wavelengths lie in the window; a fit needs {MIN_POINTS}.")
        wl = wl[keep]
    Y = np.asarray(spectrum_map.reflectance, float)[:, keep]
    if not np.all(np.isfinite(Y)):
        bad = int(np.any(~np.isfinite(Y), axis=1).sum())
        raise FilmcalcError(f"{bad} spectra of the map have missing values (NaN) in the window; remove them or "
                            "narrow the window.")
    grid, step = _thickness_grid(stack, wl, lo, hi)
    report(0.02, "computing the model over the thickness range")
    table, warnings = _model_table(stack, wl, grid)
    deriv = np.gradient(table, grid, axis=0)
    n_film = float(np.max(stack.film.material.index(np.array([wl[0]])).real))
    exclude = max(1, int(wl[0] / (2 * n_film) / 3 / step))  # a third of the shortest fringe period
    M = Y.shape[0]
    d_out, sig_out, chi_out = (np.empty(M) for _ in range(3))
    amb_out = np.zeros(M, dtype=bool)
    p_base = {"none": 0, "offset": 1, "scale+offset": 2}[baseline]
    dof = max(wl.size - 1 - p_base, 1)

    def fitted_at(d, y):
        """Model (baseline applied), thickness derivative (the baseline's directions taken out) at d."""
        f = (d - grid[0]) / step
        i0 = np.clip(np.floor(f).astype(int), 0, grid.size - 2)
        w = np.clip(f - i0, 0, 1)[:, None]
        model = (1 - w) * table[i0] + w * table[i0 + 1]
        J = (1 - w) * deriv[i0] + w * deriv[i0 + 1]
        if p_base == 0:
            return model, J
        mc, Jc = model - model.mean(1, keepdims=True), J - J.mean(1, keepdims=True)
        yc = y - y.mean(1, keepdims=True)
        if p_base == 1:
            return mc + y.mean(1, keepdims=True), Jc
        # Scale and offset: the best positive scale, and J made orthogonal to the scale's direction.
        mm = np.maximum(np.sum(mc**2, 1), 1e-300)
        scale = np.maximum(np.sum(mc * yc, 1) / mm, 1e-6)[:, None]
        Jp = Jc - (np.sum(Jc * mc, 1) / mm)[:, None] * mc
        return scale * mc + y.mean(1, keepdims=True), scale * Jp

    ends = 0
    for a in range(0, M, chunk):
        report(0.05 + 0.9 * a / M, f"fitting spectra {a + 1}–{min(a + chunk, M)} of {M}")
        y = Y[a:a + chunk]
        s = _ssr(table, y, baseline)  # (D, m)
        k = np.argmin(s, axis=0)
        m = np.arange(y.shape[0])
        best = s[k, m]
        # The best minimum more than a third of a period away, for the ambiguity test below.
        masked = s.copy()
        rows = np.clip(k[None, :] + np.arange(-exclude, exclude + 1)[:, None], 0, grid.size - 1)
        masked[rows, m[None, :]] = np.inf
        second = masked.min(axis=0)
        del masked
        # Parabola through the neighbours on the grid, then one Gauss–Newton step.
        km, kp = np.clip(k - 1, 0, grid.size - 1), np.clip(k + 1, 0, grid.size - 1)
        sa, sb, sc = s[km, m], best, s[kp, m]
        den = sa - 2 * sb + sc
        shift = np.where((den > 0) & (km != k) & (kp != k), 0.5 * (sa - sc) / np.where(den > 0, den, 1), 0.0)
        d = np.clip(grid[k] + np.clip(shift, -1, 1) * step, lo, hi)
        model, J = fitted_at(d, y)
        jj = np.maximum(np.sum(J**2, 1), 1e-300)
        d = np.clip(d + np.clip(np.sum(J * (y - model), 1) / jj, -step, step), lo, hi)
        # Residual, noise and σ at the final thickness.
        model, J = fitted_at(d, y)
        resid = y - model
        s2 = np.sum(resid**2, 1) / dof
        noise = _noise(resid)
        reduced = s2 / noise**2
        d_out[a:a + chunk] = d
        sig_out[a:a + chunk] = np.sqrt(s2 / np.maximum(np.sum(J**2, 1), 1e-300))
        chi_out[a:a + chunk] = reduced
        amb_out[a:a + chunk] = _ambiguous(second - best, noise, reduced)
        ends += int(np.sum(((lo > 0) & (d <= lo + step)) | (d >= hi - step)))
    stats = uniformity(d_out)
    if amb_out.any():
        warnings = warnings + [f"{int(amb_out.sum())} of {M} points have another thickness fitting almost as well"]
    if ends:
        warnings = warnings + [f"{ends} of {M} points fit best at an end of the searched range: widen the range"]
    report(1.0, "done")
    return MapFit(np.asarray(spectrum_map.x, float), np.asarray(spectrum_map.y, float), d_out, sig_out, chi_out,
                  amb_out, stats, warnings, time.perf_counter() - t_start)
