"""Monochromatic and two-wavelength fringes → film thickness.

Public names
------------
fringe_spacing_nm
    Thickness between neighbouring dark (or bright) fringes, λ / (2 n cos θ_t).
synthetic_wavelength
    Λ = λ₁ λ₂ / |λ₁ − λ₂|, the beat of two wavelengths.
unambiguous_span_nm
    How far above a given thickness the fringes at one or two wavelengths
    never look the same twice (so no anchor is needed within it).
line_profile_thickness, FringeProfile
    Fringe counting along a line that starts at a known thickness.
fringe_map, FringeMap
    A thickness map from one or two monochrome images, with uncertainty,
    flags and statistics.
FLAGS, FLAG_MEANINGS
    Bit values of the per-pixel flags, and what each means.

Method
------
Under light of one wavelength λ the film's reflectance R(d) repeats every
λ / (2 n cos θ_t) of thickness, n the film's index at λ and θ_t the
refraction angle in the film (Hecht 2017, §9.4): neighbouring bright and
dark fringes are half of that apart. A camera records I = a + b R(d),
where a (background, stray light) and b (illumination, exposure) are unknown
and vary slowly over the image. Between its local brightest and darkest
levels (the envelopes) the normalised intensity

    u = (I − I_dark) / (I_bright − I_dark)

equals the model's own normalised reflectance (R − R_min) / (R_max − R_min)
whatever a and b are. For a weakly reflecting film u = (1 − cos φ)/2 with φ
the round-trip phase, so between two extrema the thickness follows from
arccos; inverting the optics core's R(d) instead does the same for strong
multiple reflections, absorbing films and any substrate, and knows whether
the film is bright or dark at the anchor (a film of lower index than its
substrate starts bright, a free-standing one dark).

1. Line profile: intensity is sampled along the line (bilinear, one sample
   per pixel), lightly smoothed, and its extrema found by prominence. The
   k-th extremum after the anchor is the k-th extremum of R(d) past the
   anchor thickness in the direction given (its kind, bright or dark,
   decides where counting starts); between extrema u is inverted on that
   half-fringe of the model.
2. Map: u per pixel between envelopes (maximum and minimum filters over a
   window about two fringes wide, then a box mean; widened where a patch
   shows no fringe of its own, such as the top of a dome; the outward
   overshoot that noise gives the extremes is taken off). Candidates are
   the thicknesses in the user's range where the model's u matches the
   pixel's (local minima of the distance, one per half fringe); the fringe
   order is chosen by the quality-guided growth of
   :mod:`filmcalc.thickness`, from the anchor, on a grid of about three
   cells per half fringe, and each pixel then takes the candidate nearest
   the grown surface. Pixels more than a quarter fringe spacing from a
   neighbour are flagged, and so are the patches such steps cut off from
   the anchor.
3. Two wavelengths: candidates must match both normalised intensities at
   once (distance in the plane of the two). The pair repeats only after the
   synthetic wavelength Λ = λ₁λ₂/|λ₁ − λ₂| (Wyant 1971), a thickness
   period P₁P₂/|P₁ − P₂| of the two fringe spacings P (Λ / 2n without
   dispersion); intensity gives each phase only up to its sign, so
   :func:`unambiguous_span_nm` finds, on the model itself, how far the
   match stays unique. Within that span the most uniquely matched pixels
   seed the growth and no anchor is needed.
4. Uncertainty (1σ) comes from intensity noise: the noise (from second
   differences, robust) of the lightly smoothed image over the fringe
   contrast, turned into thickness by the local slope of the model's u(d),
   and to second order at the extrema where the slope vanishes, plus the
   model grid's step. A wrong fringe order is not in σ: it is what the
   flags are for (too faint, too dense, inconsistent with the neighbours,
   not tied to the anchor).

Assumptions and limits: the camera is linear in light (pass
``encoded=True`` for sRGB-encoded photos); the film is continuous (a step in
thickness looks like a fringe, so steps are not followed); fringes are
resolved (at least ``DENSE_PX`` pixels per half fringe; fringes finer than
two pixels alias undetected). Under one wavelength, closed fringes (the top
of a dome, the bottom of a dip) look the same whether the film rises or
falls inside them: continuity decides, and may decide wrongly without a
flag; a second wavelength tells them apart.

References
----------
Hecht, E. (2017). Optics, 5th ed., Pearson, §9.4 (thin-film interference;
fringes of equal thickness).
Born, M. & Wolf, E. (1999). Principles of Optics, 7th ed., ch. 7
(multiple-beam fringes of thin films; from memory).
Wyant, J. C. (1971). Testing aspherics using two-wavelength holography.
Applied Optics 10, 2113–2118 (the synthetic, "equivalent" wavelength; from
memory).
Ghiglia, D. C. & Pritt, M. D. (1998). Two-Dimensional Phase Unwrapping:
Theory, Algorithms, and Software, ch. 4 (quality-guided path following).
"""

from __future__ import annotations

import bisect
import dataclasses
import heapq
import itertools
import time

import numpy as np
from scipy import ndimage, signal

from .appearance import fringe_order
from .colour import srgb_decode
from .errors import FilmcalcError
from .optics import reflectance_sweep
from .thickness import TRENDS, _blur_normalised, _Candidates, _candidates, _repick, _statistics, _upsample

__all__ = ["DIRECTIONS", "FLAGS", "FLAG_MEANINGS", "FringeMap", "FringeProfile", "fringe_map", "fringe_spacing_nm",
           "line_profile_thickness", "synthetic_wavelength", "unambiguous_span_nm"]

FLAGS = {"saturated": 1, "faint": 2, "dense": 4, "no_match": 8, "unanchored": 16, "inconsistent": 32}

FLAG_MEANINGS = {
    "saturated": "the intensity is at the top of the camera's range",
    "faint": "fringe contrast below a few times the image noise",
    "dense": "fewer than 3 pixels per half fringe: fringes too dense to follow",
    "no_match": "no thickness in the range gives both intensities (two wavelengths)",
    "unanchored": "not joined to the anchor (without one, to the largest patch) through neighbours within a "
                  "quarter fringe spacing",
    "inconsistent": "differs from a neighbour, or from the local surface, by over a quarter fringe spacing",
}

DIRECTIONS = ("thicker", "thinner")

WAVELENGTH_RANGE_NM = (200.0, 2000.0)
# Fewer pixels than this per half fringe (bright to dark) and the fringes cannot be followed
# reliably (the figure; common practice, no source).
DENSE_PX = 3.0
# Fringe contrast (bright − dark envelope) below this many times the image noise is too faint
# to read (our choice; common practice, no source).
FAINT_CONTRAST = 5.0
SATURATED = 0.995  # values at or above this (of 0–1) are taken as clipped (as in filmcalc.thickness)
# Normalised intensity is quantised to this many levels per image before the candidate search
# (one image / two images): under 0.1 % / 0.8 % of the contrast, a fraction of a nm.
LEVELS = {1: 1024, 2: 128}
# Largest distance between observed and model normalised intensities (0–1 per image) for a
# candidate; envelope errors of a few percent stay well inside (our choice).
MATCH_TOLERANCE = 0.25
# Two thicknesses whose normalised intensities lie closer than this cannot be told apart in a
# real image (about the envelope error; our choice).
AMBIGUITY_TOLERANCE = 0.1
# A pixel takes the narrowest envelope window whose contrast reaches this share of the widest
# window's (our choice).
ENVELOPE_SHARE = 0.75
# The envelopes' outward overshoot from noise, in units of the smoothed image's noise: the mean
# excess measured on synthetic fringes with 0.2–3 % noise (our calibration).
ENVELOPE_OVERSHOOT = 2.2
# Growth grid: at most this many cells a side (the growth is pure Python; our choice).
COARSE_MAX_CELLS = 192
# The growth predicts each step from a plane fitted to the cells already assigned within this many
# cells (a 7 × 7 window; our choice) ...
PLANE_CELLS = 3
# ... each weighted by 1 / (1 + (w / (PLANE_WIDTH · spacing))²), w the width of the stretch of
# thickness its intensity allows: cells the intensity places count fully, cells within a bright or
# dark fringe, placed by continuity, hardly (our choice) ...
PLANE_WIDTH = 1 / 32
# ... and its slope drawn towards the one the cell was predicted with by this much (in weighted
# cells²): a slope the window cannot see (cells on one line only, or none the intensity places)
# is carried on (our choice).
PLANE_RIDGE = 0.5
# A step that changes the thickness against the plane's slope costs this many times the change
# (our choice).
AGAINST_SLOPE = 2.0
# Thicknesses whose normalised intensities differ by less than this many times their noise are
# told apart by continuity, not by intensity (common practice, no source).
FLAT_SIGMAS = 3.0
# Noise floor: the quantisation noise of 8-bit data, one step / √12.
QUANTISATION_NOISE = 1.0 / 255 / np.sqrt(12)


def _check_wavelength(wavelength_nm):
    lo, hi = WAVELENGTH_RANGE_NM
    try:
        wl = float(wavelength_nm)
    except (TypeError, ValueError):
        raise FilmcalcError(f"The wavelength must be a number in nm (got {wavelength_nm!r}).") from None
    if not (np.isfinite(wl) and lo <= wl <= hi):
        raise FilmcalcError(f"Wavelength {wavelength_nm} nm is outside {lo:g}–{hi:g} nm: give the vacuum wavelength "
                            "of the line or filter in nanometres (e.g. 589.3 for sodium, 632.8 for a HeNe laser).")
    return wl


def _check_film(stack):
    if stack.film_index is None:
        raise FilmcalcError(f"Stack {stack.name!r} marks no layer as unknown = true: mark the film whose thickness "
                            "the fringes show.")


def fringe_spacing_nm(stack, wavelength_nm, angle_deg=None):
    """Thickness between neighbouring dark (or bright) fringes of the stack's film.

    Parameters
    ----------
    stack : filmcalc.stack.Stack
        Its unknown layer is the film.
    wavelength_nm : float
        Vacuum wavelength of the light, nm (200–2000).
    angle_deg : float, optional
        Angle of incidence in the ambient, degrees (the stack's own by default).

    Returns
    -------
    float
        λ / (2 n cos θ_t), nm: one fringe order (Hecht 2017, §9.4), with n the
        real part of the film's index at λ and θ_t from Snell's law.

    Examples
    --------
    >>> from filmcalc.stack import loads_stack
    >>> soap = loads_stack('[ambient]\\nmaterial = "air"\\n[[layers]]\\nmaterial = {n = 1.333, k = 0}\\n'
    ...                    'thickness_nm = 100\\nunknown = true\\n[substrate]\\nmaterial = "air"\\n')
    >>> round(fringe_spacing_nm(soap, 650.0), 1)
    243.8
    """
    wl = _check_wavelength(wavelength_nm)
    _check_film(stack)
    order = float(fringe_order(stack, 1.0, angle_deg, wl))
    if order <= 0:
        raise FilmcalcError("At this angle the light is totally reflected before it enters the film, so it shows "
                            "no fringes: use a smaller angle of incidence.")
    return 1.0 / order


def synthetic_wavelength(wavelength1_nm, wavelength2_nm):
    """The synthetic wavelength Λ = λ₁λ₂ / |λ₁ − λ₂| of two wavelengths, nm.

    Two fringe patterns together repeat only after a path difference of Λ
    (Wyant 1971), far longer than either wavelength when they are close.

    Examples
    --------
    >>> round(synthetic_wavelength(632.8, 532.0))  # HeNe and frequency-doubled Nd:YAG lasers
    3340
    """
    l1, l2 = _check_wavelength(wavelength1_nm), _check_wavelength(wavelength2_nm)
    if l1 == l2:
        raise FilmcalcError(f"The two wavelengths are equal ({l1:g} nm), so together they add nothing: use two "
                            "different lines or filters.")
    return l1 * l2 / abs(l1 - l2)


# ---------------------------------------------------------------------------
# The model: normalised reflectance over thickness.


@dataclasses.dataclass
class _Model:
    """The film's reflectance at each wavelength over a thickness grid, and its normalised form."""

    thickness_nm: np.ndarray   # (L,)
    reflectance: np.ndarray    # (L, K)
    normalised: np.ndarray     # (L, K), 0 at the local dark envelope, 1 at the bright one
    slope: np.ndarray          # (L, K), d(normalised)/dd, 1/nm
    curvature: np.ndarray      # (L, K), 1/nm²
    period_nm: np.ndarray      # (K,) fringe spacing at each wavelength


def _extrema(values):
    """Indices of the interior maxima and of the interior minima of a sampled curve."""
    v = np.asarray(values)
    middle, before, after = v[1:-1], v[:-2], v[2:]
    maxima = np.flatnonzero((middle > before) & (middle >= after)) + 1
    minima = np.flatnonzero((middle < before) & (middle <= after)) + 1
    return maxima, minima


def _model(stack, wavelengths_nm, lo_nm, hi_nm, step_nm, angle_deg=None):
    """:class:`_Model` from ``lo_nm`` to ``hi_nm``; envelopes are taken a period beyond either end."""
    periods = np.array([fringe_spacing_nm(stack, w, angle_deg) for w in wavelengths_nm])
    pad = float(periods.max())
    grid = np.arange(max(0.0, lo_nm - pad), hi_nm + pad + step_nm / 2, step_nm)
    sweep = reflectance_sweep(stack, np.asarray(wavelengths_nm, float), grid,
                              None if angle_deg is None else [angle_deg])
    R = sweep.reflectance(stack.light.polarisation)[0]
    u = np.empty_like(R)
    for k, wl in enumerate(wavelengths_nm):
        maxima, minima = _extrema(R[:, k])
        bright = np.interp(grid, grid[maxima], R[maxima, k]) if maxima.size else np.full(grid.shape, R[:, k].max())
        dark = np.interp(grid, grid[minima], R[minima, k]) if minima.size else np.full(grid.shape, R[:, k].min())
        if np.max(bright - dark) < 1e-6:
            raise FilmcalcError(f"At {wl:g} nm this film shows no fringes (its reflectance does not change with "
                                "thickness): its index matches its surroundings. Check the stack's materials.")
        u[:, k] = np.clip((R[:, k] - dark) / np.maximum(bright - dark, 1e-12), 0.0, 1.0)
    slope = np.gradient(u, grid, axis=0)
    keep = (grid >= lo_nm - 1e-9) & (grid <= hi_nm + 1e-9)
    return _Model(grid[keep], R[keep], u[keep], slope[keep], np.gradient(slope, grid, axis=0)[keep], periods)


def _thickness_sigma(slope, curvature, sigma_u):
    """1σ thickness from a 1σ error ``sigma_u`` of the normalised intensity.

    Solves |u′| δ + ½ |u″| δ² = σ_u for δ: σ_u / |u′| where the model is
    steep, √(2 σ_u / |u″|) at an extremum where it is flat.
    """
    a, b = np.abs(slope), 0.5 * np.abs(curvature)
    with np.errstate(divide="ignore", invalid="ignore"):
        quadratic = (np.sqrt(a**2 + 4 * b * sigma_u) - a) / (2 * b)
        return np.where(b > 1e-12 * np.maximum(a, 1e-30), quadratic, sigma_u / a)


def _unambiguous_span(model, start_nm):
    """Span above ``start_nm`` where no stretch of film a quarter of the shortest fringe spacing
    either way looks like another one (forwards, or mirrored: intensity cannot tell a film
    thickening from one thinning) more than a quarter spacing away: their RMS distance in
    normalised intensity stays above ``AMBIGUITY_TOLERANCE``. Infinite if that holds over the
    whole model. Worked on at most 2000 thicknesses (a (2000, 2000) table)."""
    separation = float(model.period_nm.min()) / 4
    t = model.thickness_nm
    every = max(1, int(separation / 12 / (t[1] - t[0])), int(np.ceil(t.size / 2000)))
    keep = t[::every] >= start_nm - 1e-9
    t, u = t[::every][keep], model.normalised[::every][keep].astype(np.float32)
    L = t.size
    reach = max(1, round(separation / (t[1] - t[0])))
    forward = np.zeros((L, L), dtype=np.float32)
    mirrored = np.zeros((L, L), dtype=np.float32)
    index = np.arange(L)
    for s in range(-reach, reach + 1):
        ahead, behind = u[np.clip(index + s, 0, L - 1)], u[np.clip(index - s, 0, L - 1)]
        for k in range(u.shape[1]):
            forward += (ahead[:, None, k] - ahead[None, :, k]) ** 2
            mirrored += (ahead[:, None, k] - behind[None, :, k]) ** 2
    rms = np.sqrt(np.minimum(forward, mirrored) / (2 * reach + 1))
    confusable = (rms < AMBIGUITY_TOLERANCE) & (t[:, None] - t[None, :] >= separation)  # row: the thicker one
    rows = np.flatnonzero(confusable.any(axis=1))
    return float(t[rows[0]] - t[0]) if rows.size else np.inf


def unambiguous_span_nm(stack, wavelengths_nm, start_nm=0.0, angle_deg=None):
    """How far above ``start_nm`` the fringes never look the same twice.

    Within the span, no stretch of film (a quarter of the shortest fringe
    spacing either side of a thickness) shows the same normalised
    intensities, within ``AMBIGUITY_TOLERANCE`` RMS over the wavelengths, as
    a stretch more than a quarter spacing thicker or thinner (an error that
    would be a wrong fringe order), whether that one thickens the same way
    or the other way. A film known to lie within the span needs no anchor;
    single pixels may still look alike (e.g. dark at both wavelengths near
    zero thickness and again about one fringe spacing up), which continuity
    with their neighbours settles.

    Parameters
    ----------
    stack : filmcalc.stack.Stack
    wavelengths_nm : float or sequence of float
        One or two vacuum wavelengths, nm.
    start_nm : float
        The thinnest thickness considered, nm.
    angle_deg : float, optional

    Returns
    -------
    float
        The span, nm. With one wavelength it is under one fringe spacing
        (intensity repeats mirrored about each extremum: 5/8 of a spacing
        from a dark fringe); with two it is about half the synthetic period
        in thickness, Λ / (4 n cos θ_t) (intensity gives each phase only up
        to its sign), shorter where the pair nearly repeats. The search
        stops at 20 µm above ``start_nm``.
    """
    wavelengths = [_check_wavelength(w) for w in np.atleast_1d(wavelengths_nm)]
    if len(wavelengths) not in (1, 2):
        raise FilmcalcError("Give one or two wavelengths.")
    _check_film(stack)
    start = float(start_nm)
    if not (np.isfinite(start) and start >= 0):
        raise FilmcalcError(f"The starting thickness must be ≥ 0 nm (got {start_nm}).")
    periods = np.array([fringe_spacing_nm(stack, w, angle_deg) for w in wavelengths])
    beat = periods[0] if len(periods) == 1 else np.prod(periods) / max(abs(periods[0] - periods[1]), 1e-9)
    reach = min(20000.0, 1.2 * float(beat))
    span = _unambiguous_span(_model(stack, wavelengths, start, start + reach, float(periods.min()) / 100,
                                    angle_deg), start)
    return min(span, reach)


# ---------------------------------------------------------------------------
# Images.


def _image(intensity, encoded, what="image"):
    """A validated 2-D float32 image of linear intensity in 0–1."""
    image = np.asarray(intensity, dtype=np.float32)
    if image.ndim != 2:
        raise FilmcalcError(f"The {what} must be a 2-D array of intensities (got shape {image.shape}); for a colour "
                            "photo pass one channel, e.g. photo.rgb[..., 0] for red.")
    if min(image.shape) < 8:
        raise FilmcalcError(f"The {what} is only {image.shape[1]} × {image.shape[0]} pixels: too small for fringes.")
    if not np.all(np.isfinite(image)):
        raise FilmcalcError(f"The {what} holds NaN or infinite values: replace them before the fringe analysis.")
    if image.min() < 0 or image.max() > 1:
        raise FilmcalcError(f"The {what}'s values run {image.min():g}–{image.max():g}: scale them to 0–1 "
                            "(divide by the camera's full scale, e.g. 255 or 65535).")
    return srgb_decode(image).astype(np.float32) if encoded else image


def _white_noise(values, axis=-1):
    """Standard deviation of white noise, from second differences along ``axis`` (median-based, so fringes
    barely count; the second difference of white noise has variance 6σ²), at least 8-bit quantisation."""
    second = np.diff(values, n=2, axis=axis)
    return max(1.4826 * float(np.median(np.abs(second))) / np.sqrt(6), QUANTISATION_NOISE)


def _smoothing_gain(smooth_px, ndim):
    """The factor by which a Gaussian of σ = ``smooth_px`` lowers white noise's standard deviation."""
    if smooth_px <= 0:
        return 1.0
    size = 2 * int(np.ceil(4 * smooth_px)) + 1
    delta = np.zeros((size,) * ndim)
    delta[(size // 2,) * ndim] = 1.0
    return float(np.sqrt(np.sum(ndimage.gaussian_filter(delta, smooth_px) ** 2)))


@dataclasses.dataclass
class _Normalised:
    """One image normalised between its local envelopes."""

    value: np.ndarray           # (H, W) float32, 0 dark – 1 bright
    contrast: np.ndarray        # (H, W) float32, bright − dark envelope
    near_contrast: np.ndarray   # (H, W) float32, the same over the narrowest window
    noise: float                # white noise of the raw image
    half_fringe_px: np.ndarray  # (H, W) float32, local pixels per half fringe
    window_px: int              # the smallest envelope window


def _normalise(image, smooth_px, window_px=None):
    """Normalise an image between its bright and dark envelopes.

    The envelopes are maximum and minimum filters over a window, then a box
    mean over the same window. A window must hold a bright and a dark fringe:
    by default it starts at about two fringes (where they are denser than
    usual) and, where a pixel's contrast stays below ``ENVELOPE_SHARE`` of
    the contrast over a window sixteen times wider (a broad fringe-free
    patch, such as the top of a dome), a window four or sixteen times wider
    is used. A ``window_px`` given is used as it is.
    """
    smoothed = ndimage.gaussian_filter(image, smooth_px) if smooth_px > 0 else image
    noise = _white_noise(image)
    steps = _difference_rms(image, noise)
    windows = [int(window_px) | 1] if window_px is not None else []
    if not windows:
        # The first window spans about two fringes where they are denser than usual (a quarter
        # of the pixels), from the local fringe density at the image's overall contrast.
        lo, hi = np.percentile(smoothed[::4, ::4], [1, 99])
        first = 4 * np.percentile(_half_fringe_px(np.float32(hi - lo), steps[::2, ::2]), 25)
        windows = sorted({int(min(np.clip(first, 9, max(image.shape)) * f, 2 * max(image.shape))) | 1
                          for f in (1, 4, 16)})
    bright = dark = widest = near = None
    for window in reversed(windows):  # widest first; a narrower window wins where it sees enough contrast
        b = ndimage.uniform_filter(ndimage.maximum_filter(smoothed, window), window)
        d = ndimage.uniform_filter(ndimage.minimum_filter(smoothed, window), window)
        if widest is None:
            bright, dark, widest = b, d, b - d
            continue
        near = b - d
        enough = near >= ENVELOPE_SHARE * widest
        bright, dark = np.where(enough, b, bright), np.where(enough, d, dark)
    # The brightest and darkest of many noisy pixels overshoot the fringes' own extremes.
    overshoot = np.float32(ENVELOPE_OVERSHOOT * noise * _smoothing_gain(smooth_px, 2))
    bright, dark = bright - overshoot, dark + overshoot
    contrast = bright - dark
    value = np.clip((smoothed - dark) / np.maximum(contrast, 1e-6), 0.0, 1.0)
    near = contrast if near is None else near - 2 * overshoot
    return _Normalised(value.astype(np.float32), contrast.astype(np.float32), near.astype(np.float32), noise,
                       _half_fringe_px(contrast, steps), windows[0])


def _difference_rms(image, noise, box_px=9):
    """RMS over ``box_px`` × ``box_px`` of the raw image's pixel-to-pixel differences (along x plus
    along y, in quadrature), with white noise's share (4σ²) taken off. Raw, because smoothing would
    hide exactly the dense fringes this serves to find."""
    dx = np.diff(image, axis=1, append=image[:, -1:])
    dy = np.diff(image, axis=0, append=image[-1:, :])
    power = ndimage.uniform_filter(dx * dx + dy * dy, box_px) - np.float32(4 * noise**2)
    return np.sqrt(np.maximum(power, np.float32(1e-12)))


def _half_fringe_px(contrast, difference_rms):
    """Pixels per half fringe: fringes of contrast A and half-fringe h px (over a few px) have a mean
    square of differences (along x plus along y) of (π A / h)² / 8."""
    return (np.pi / np.sqrt(8) * contrast / difference_rms).astype(np.float32)


def _match(values, model, max_candidates):
    """Candidates for every quantised combination of normalised intensities (a :class:`_Candidates`)."""
    K = len(values)
    levels = LEVELS[K]
    code = np.zeros(values[0].shape, dtype=np.int32)
    for v in values:
        code = code * levels + np.rint(v * (levels - 1)).astype(np.int32)
    present = np.flatnonzero(np.bincount(code.ravel(), minlength=levels**K))
    table = np.zeros(levels**K, dtype=np.int32)
    table[present] = np.arange(present.size, dtype=np.int32)
    observed = np.stack(np.unravel_index(present, (levels,) * K), axis=1) / (levels - 1)
    idx, dist = _candidates(observed, model.normalised, MATCH_TOLERANCE, max_candidates)
    none = np.full((1, idx.shape[1]), np.inf, np.float32)
    t = np.vstack([np.where(idx >= 0, model.thickness_nm[np.maximum(idx, 0)], np.inf).astype(np.float32), none])
    d = np.vstack([dist.astype(np.float32), none])
    i = np.vstack([np.maximum(idx, 0), np.zeros_like(none, dtype=np.int64)]).astype(np.int32)
    return _Candidates(t, d, i, table[code])


def _grow(cand_t, cand_d, cand_lo, cand_hi, fringe, flat_nm, seeds, period_nm, valid, trend=None):
    """Quality-guided growth over the coarse grid: each cell's thickness (NaN where unreached).

    Each candidate stands for the stretch of thickness whose intensity the
    noise cannot tell from its own (see :func:`_stretch_table`): a point where
    the intensity changes fast with thickness, a range at a bright or dark
    fringe, where it is flat. Each step predicts a neighbour's thickness from
    a plane fitted to the cells of its region already assigned within
    ``PLANE_CELLS`` (weighted least squares: cells the intensity placed count
    fully, cells placed by continuity within a fringe hardly, see
    ``PLANE_WIDTH``; the slope drawn towards the one the current cell was
    predicted with, by ``PLANE_RIDGE``), and takes the point of the
    candidates' stretches nearest the prediction, a change against the
    plane's slope costing ``AGAINST_SLOPE`` times its size.

    Bright and dark fringes need more. The normalised intensity is symmetric
    about each extremum of R(d), so past one a neighbour has two candidates
    equally far either side of it: the film may continue through the fringe,
    or fold back at it, and where the film changes slowly the noise hides
    which. A continuous film does not fold exactly at a fringe (its
    thickness would have a crease there), so it continues: the cells whose
    stretches hold a flat point of the model (``cand_flat``: an extremum
    with one wavelength) are the fringes, the other cells split into
    patches between them, and the first cell of a patch reached across a
    fringe takes a candidate on the other side of the fringe's thickness
    from the patch the growth came from. Within a patch, and back into one
    already reached, continuity alone decides.

    A neighbour more than a third of a fringe spacing from every stretch is
    left for another path. Cells no seed reaches start regions of their own,
    where the intensity places the film best (the largest gap between the
    best and second-best match, times the best one's weight). A trend (the
    direction of thicker film) costs a candidate that thins against it a
    fringe spacing.

    Parameters
    ----------
    cand_t, cand_d : numpy.ndarray, shape (h, w, C)
        Candidate thicknesses (nm, +inf where none), best match first, and
        their distances in normalised intensity.
    cand_lo, cand_hi : numpy.ndarray, shape (h, w, C)
        The ends of each candidate's stretch, nm.
    cand_flat : numpy.ndarray, shape (h, w, C)
        The flat point within each stretch, nm (NaN where none).
    seeds : list of (row, column, thickness_nm)
    period_nm : float
        The shortest fringe spacing.
    valid : numpy.ndarray of bool, shape (h, w)
    trend : {"right", "left", "down", "up"}, optional

    Returns
    -------
    numpy.ndarray, shape (h, w)
    """
    H, W, _ = cand_t.shape
    ty, tx = TRENDS[trend] if trend else (0, 0)
    break_nm = period_nm / 3
    width_nm = PLANE_WIDTH * period_nm
    usable = valid & np.isfinite(cand_t[..., 0])
    fringe = usable & fringe
    flat_nm = flat_nm.tolist()
    patch = ndimage.label(usable & ~fringe)[0].tolist()
    cells = [[[] for _ in range(W)] for _ in range(H)]
    ys, xs, cs = np.nonzero(usable[..., None] & np.isfinite(cand_t))
    rows = np.stack([cand_lo[ys, xs, cs], cand_hi[ys, xs, cs]], axis=1).tolist()
    for y, x, row in zip(ys.tolist(), xs.tolist(), rows):
        cells[y][x].append(row)
    ok = usable.tolist()
    chosen = [[None] * W for _ in range(H)]
    region = [[-1] * W for _ in range(H)]
    weight = [[0.0] * W for _ in range(H)]            # the cell's weight in the planes
    prior = [[(0.0, 0.0)] * W for _ in range(H)]      # the slope it was predicted with
    crossing = [[None] * W for _ in range(H)]         # in a fringe: (its thickness, side, patch) came from

    def place(y, x, t, rid, w, came_from):
        chosen[y][x], region[y][x], weight[y][x] = t, rid, w
        if patch[y][x]:
            return
        k = bisect.bisect(flat_nm, t)  # the fringe's thickness: the flat point nearest the cell's
        flat = min(flat_nm[max(k - 1, 0):k + 1], key=lambda f: abs(f - t), default=t)
        if came_from is None:  # a seed in a fringe: which side it continues to is unknown
            crossing[y][x] = (flat, 0.0, 0)
        elif patch[came_from[0]][came_from[1]]:
            t0 = chosen[came_from[0]][came_from[1]]
            crossing[y][x] = (flat, 1.0 if t0 > flat else -1.0, patch[came_from[0]][came_from[1]])
        else:
            crossing[y][x] = crossing[came_from[0]][came_from[1]]

    heap = []
    for rid, (y, x, t) in enumerate(seeds):
        if ok[y][x] and chosen[y][x] is None:
            place(y, x, t, rid, 1.0, None)
            heap.append((0.0, y, x))
    heapq.heapify(heap)
    next_region = len(seeds)
    with np.errstate(invalid="ignore"):
        margin = np.where(np.isfinite(cand_d[..., 1]), cand_d[..., 1] - cand_d[..., 0], 1e6) - 1e-3 * cand_d[..., 0]
        first_weight = 1.0 / (1.0 + ((cand_hi[..., 0] - cand_lo[..., 0]) / width_nm) ** 2)
    order = np.argsort(np.where(usable, -margin * first_weight, np.inf), axis=None)[:int(usable.sum())].tolist()
    pos = 0
    while True:
        while heap:
            _, y, x = heapq.heappop(heap)
            rid = region[y][x]
            # The local plane: weighted sums over the window (the cell itself with a token weight, so
            # that where nothing around counts the plane keeps its value).
            py, px = prior[y][x]
            s0, st = 1e-6, 1e-6 * chosen[y][x]
            sy = sx = syy = sxx = sxy = sty = stx = 0.0
            for j in range(max(0, y - PLANE_CELLS), min(H, y + PLANE_CELLS + 1)):
                row_t, row_r, row_w, dy = chosen[j], region[j], weight[j], j - y
                for i in range(max(0, x - PLANE_CELLS), min(W, x + PLANE_CELLS + 1)):
                    t = row_t[i]
                    if t is not None and row_r[i] == rid:
                        w, dx = row_w[i], i - x
                        s0 += w
                        sy += w * dy
                        sx += w * dx
                        syy += w * dy * dy
                        sxx += w * dx * dx
                        sxy += w * dy * dx
                        st += w * t
                        sty += w * t * dy
                        stx += w * t * dx
            # Eliminate the plane's value here (t0), then solve for its slope (nm per cell).
            a11, a12, a22 = syy - sy * sy / s0 + PLANE_RIDGE, sxy - sy * sx / s0, sxx - sx * sx / s0 + PLANE_RIDGE
            b1, b2 = sty - sy * st / s0 + PLANE_RIDGE * py, stx - sx * st / s0 + PLANE_RIDGE * px
            det = a11 * a22 - a12 * a12
            gy, gx = (a22 * b1 - a12 * b2) / det, (a11 * b2 - a12 * b1) / det
            t0 = (st - sy * gy - sx * gx) / s0
            across = crossing[y][x]
            for dy, dx in ((1, 0), (-1, 0), (0, 1), (0, -1)):
                yy, xx = y + dy, x + dx
                if not (0 <= yy < H and 0 <= xx < W and ok[yy][xx] and chosen[yy][xx] is None):
                    continue
                change = gy * dy + gx * dx
                predicted = t0 + change
                sense = AGAINST_SLOPE if change > 0 else -AGAINST_SLOPE if change < 0 else 0.0
                along = dy * ty + dx * tx
                # Out of a fringe into another patch: the film continues through the fringe.
                flat, side = across[:2] if across and patch[yy][xx] not in (0, across[2]) else (0.0, 0.0)
                best, best_cost, best_jump, best_width = None, np.inf, 0.0, 0.0
                for lo, hi in cells[yy][xx]:
                    t = lo if predicted < lo else hi if predicted > hi else predicted
                    jump = abs(t - predicted)
                    cost = jump + max(0.0, (t0 - t) * sense)
                    if (t - flat) * side > 0:
                        cost += period_nm  # back to the side of the fringe the growth came from
                    if along and (t - t0) * along < -0.05 * period_nm:
                        cost += period_nm  # against the trend
                    if cost < best_cost:
                        best, best_cost, best_jump, best_width = t, cost, jump, hi - lo
                if best_jump > break_nm:
                    continue  # no candidate continues the film here: left for another path or region
                place(yy, xx, best, rid, 1.0 / (1.0 + (best_width / width_nm) ** 2), (y, x))
                prior[yy][xx] = (gy, gx)
                heapq.heappush(heap, ((best_jump + best_width) / period_nm, yy, xx))
        # Start a new region from the most uniquely matched unreached cell.
        while pos < len(order):
            y, x = divmod(order[pos], W)
            pos += 1
            if chosen[y][x] is None:
                place(y, x, float(cand_t[y, x, 0]), next_region, float(first_weight[y, x]), None)
                next_region += 1
                heap.append((0.0, y, x))
                break
        else:
            break
    return np.array([[np.nan if v is None else v for v in row] for row in chosen], dtype=float)


def _stretch_table(model, tolerance):
    """The stretch of thickness around each of the model's thicknesses whose normalised intensities
    stay within ``tolerance`` of its own (distance over the wavelengths), contiguous and at most a
    quarter of the shortest fringe spacing either way.

    Returns
    -------
    low, high : numpy.ndarray
        Its ends, nm.
    holds : numpy.ndarray of bool
        Whether it holds a flat point of the model.
    flat_nm : numpy.ndarray
        The flat points, nm: where the intensities change slowest with thickness (the extrema of
        R(d), with one wavelength).
    """
    t, u = model.thickness_nm, model.normalised
    L = t.size
    reach = max(1, int(float(model.period_nm.min()) / 4 / (t[1] - t[0])))
    index = np.arange(L)
    ends = []
    for sign in (-1, 1):
        end, open_ = index.copy(), np.ones(L, dtype=bool)
        for s in range(1, reach + 1):
            j = np.clip(index + sign * s, 0, L - 1)
            open_ &= (index + sign * s >= 0) & (index + sign * s < L)
            open_ &= np.sqrt(np.sum((u[j] - u) ** 2, axis=1)) <= tolerance
            if not open_.any():
                break
            end[open_] = j[open_]
        ends.append(t[end])
    speed = np.sqrt(np.sum(model.slope**2, axis=1))
    flat_nm = t[np.flatnonzero((speed[1:-1] <= speed[:-2]) & (speed[1:-1] < speed[2:])) + 1]
    holds = np.searchsorted(flat_nm, ends[1], side="right") > np.searchsorted(flat_nm, ends[0], side="left")
    return ends[0], ends[1], holds, flat_nm


def _resolve(cands, usable, model, tolerance, anchor, trend, coarse_max):
    """Fringe orders, coarse to fine.

    The growth of :func:`_grow` runs on a grid of at most ``coarse_max``
    cells a side laid through the anchor pixel (x, y, thickness_nm), if
    there is one, and seeded there: at the anchor's thickness if the
    intensity allows it (it lies within a candidate's stretch), else at the
    nearest end of the nearest stretch. Each pixel then takes the candidate
    nearest the upsampled growth, and again the one nearest a local mean of
    those (σ = 3 px).

    Parameters
    ----------
    cands : filmcalc.thickness._Candidates
    usable : numpy.ndarray of bool, shape (H, W)
    stretch : (numpy.ndarray, numpy.ndarray)
        :func:`_stretch_table` of the model the candidates index.
    anchor : (int, int, float) or None
    period_nm : float
        The shortest fringe spacing.
    trend : str or None
    coarse_max : int

    Returns
    -------
    chosen, local : numpy.ndarray, shape (H, W)
        The thickness per pixel and the local surface it was picked against, nm.
    seeded : bool
        Whether the anchor could seed the growth (False without one).
    """
    H, W = cands.key.shape
    period_nm = float(model.period_nm.min())
    stretch = _stretch_table(model, tolerance)
    step = max(1, int(np.ceil(max(H, W) / coarse_max)))
    offset = (anchor[1] % step, anchor[0] % step) if anchor else (0, 0)
    rows, cols = slice(offset[0], None, step), slice(offset[1], None, step)
    ct, cd = cands.at(rows, cols)
    index = cands.i[cands.key[rows, cols]]
    lo = np.where(np.isfinite(ct), stretch[0][index], np.inf)
    hi = np.where(np.isfinite(ct), stretch[1][index], np.inf)
    valid = usable[rows, cols]
    seeds = []
    if anchor:
        x, y, t = anchor
        yy, xx = y // step, x // step  # the anchor pixel itself
        if valid[yy, xx]:
            nearest = np.clip(t, lo[yy, xx], hi[yy, xx])
            seeds.append((yy, xx, float(nearest[np.argmin(np.abs(nearest - t))])))
    # Fringes: cells where most of the candidates matching about as well as the best hold a flat point.
    good = np.isfinite(ct) & (cd <= cd[..., :1] + tolerance)
    fringe = 2 * np.sum(good & stretch[2][index], axis=-1) > np.sum(good, axis=-1)
    coarse = _grow(ct, cd, lo, hi, fringe, stretch[3], seeds, period_nm, valid, trend)
    # Unreached cells take a local mean of the reached ones, so the reference is defined everywhere.
    filled = np.where(np.isnan(coarse), _blur_normalised(coarse, np.ones_like(coarse), 2.0), coarse)
    filled = np.where(np.isnan(filled), np.nanmean(coarse) if np.isfinite(coarse).any() else 0.0, filled)
    reference = _upsample(filled, step, (H, W), offset)
    pick = _repick(cands, reference, np.zeros((H, W), dtype=np.int8))
    local = _blur_normalised(cands.take(pick), np.ones((H, W), np.float32), 3.0)
    local = np.where(np.isfinite(local), local, reference).astype(np.float32)
    del reference
    pick = _repick(cands, local, pick)
    return cands.take(pick), local, bool(seeds)


@dataclasses.dataclass
class FringeMap:
    """Result of :func:`fringe_map` (arrays have the image's shape).

    Attributes
    ----------
    thickness_nm : numpy.ndarray, float32
        NaN where no thickness matches (flag ``no_match``).
    sigma_nm : numpy.ndarray, float32
        1σ from intensity noise (see the module docstring).
    flags : numpy.ndarray, uint8
        Bits of :data:`FLAGS`.
    wavelengths_nm, period_nm : tuple of float
        The wavelengths and the fringe spacing at each, nm.
    statistics : dict
        Thickness statistics of the unflagged pixels, the image noise, the
        envelope window, and without an anchor the unambiguous span.
    warnings : list of str
    seconds : float
    """

    thickness_nm: np.ndarray
    sigma_nm: np.ndarray
    flags: np.ndarray
    wavelengths_nm: tuple
    period_nm: tuple
    statistics: dict
    warnings: list
    seconds: float

    def flag_mask(self, name):
        """Boolean map of one flag."""
        return (self.flags & FLAGS[name]) != 0


def _images_and_wavelengths(intensity, wavelengths_nm, encoded):
    wavelengths = [_check_wavelength(w) for w in np.atleast_1d(np.asarray(wavelengths_nm, dtype=object))]
    if len(wavelengths) not in (1, 2):
        raise FilmcalcError(f"Give one or two wavelengths (got {len(wavelengths)}).")
    if len(wavelengths) == 2:
        synthetic_wavelength(*wavelengths)  # raises for two equal wavelengths, which add nothing
    if isinstance(intensity, (list, tuple)) or (np.ndim(intensity) == 3 and len(intensity) == len(wavelengths)):
        arrays = list(intensity)  # one image per wavelength
    else:
        arrays = [intensity]  # one image (checked to be 2-D below)
    if len(arrays) != len(wavelengths):
        raise FilmcalcError(f"{len(arrays)} image(s) for {len(wavelengths)} wavelength(s): give one 2-D image per "
                            "wavelength, in the same order.")
    images = [_image(a, encoded, f"image at {w:g} nm") for a, w in zip(arrays, wavelengths)]
    if any(image.shape != images[0].shape for image in images):
        raise FilmcalcError(f"The images differ in size ({', '.join(str(i.shape) for i in images)}): "
                            "give registered images of the same field.")
    return images, wavelengths


def _check_range(range_nm):
    try:
        lo, hi = (float(v) for v in range_nm)
    except (TypeError, ValueError):
        raise FilmcalcError(f"The thickness range must be two numbers in nm (got {range_nm!r}).") from None
    if not (np.isfinite(hi) and 0 <= lo < hi):
        raise FilmcalcError(f"The thickness range needs 0 ≤ min < max in nm (got {range_nm!r}).")
    return lo, hi


def fringe_map(intensity, stack, wavelengths_nm, anchor=None, trend=None, range_nm=(0.0, 2000.0), *,
               encoded=False, smooth_px=1.0, envelope_px=None, angle_deg=None, pixel_size_um=None, progress=None):
    """Thickness map from monochrome fringe images at one or two wavelengths.

    Parameters
    ----------
    intensity : array_like, shape (H, W), or a sequence of them
        One image per wavelength, values 0–1 (linear in light unless
        ``encoded``), registered to each other: e.g. a photo through a
        band-pass filter, or a colour camera's red and blue channels under
        two-line light.
    stack : filmcalc.stack.Stack
        Its unknown layer is the film.
    wavelengths_nm : float or sequence of float
        One or two vacuum wavelengths, nm (200–2000), in the images' order.
    anchor : (x, y, thickness_nm), optional
        A pixel of known thickness (x = column, y = row from the top-left).
        Needed with one wavelength unless the range lies within the
        unambiguous span (:func:`unambiguous_span_nm`).
    trend : {"right", "left", "down", "up"}, optional
        The direction in which the film gets thicker, where known.
    range_nm : (float, float)
        Thicknesses to consider, nm.
    encoded : bool
        The images are sRGB-encoded (as :func:`filmcalc.io.load_photo` gives
        them); they are decoded to linear intensity first.
    smooth_px : float
        σ of the light Gaussian smoothing before normalisation, px.
    envelope_px : int, optional
        Width of the window for the bright and dark envelopes, px (default:
        about two fringes, estimated from the image).
    angle_deg : float, optional
        Angle of incidence, degrees (the stack's own by default).
    pixel_size_um : float, optional
        For areas in the statistics.
    progress : callable(fraction, message), optional

    Returns
    -------
    FringeMap
    """
    t_start = time.perf_counter()
    report = progress or (lambda fraction, message: None)
    images, wavelengths = _images_and_wavelengths(intensity, wavelengths_nm, encoded)
    _check_film(stack)
    lo, hi = _check_range(range_nm)
    H, W = images[0].shape
    if trend is not None and trend not in TRENDS:
        raise FilmcalcError(f"The trend must be one of {', '.join(TRENDS)} (the direction of thicker film).")
    anchors = []
    if anchor is not None:
        try:
            x, y, t = int(anchor[0]), int(anchor[1]), float(anchor[2])
        except (TypeError, ValueError, IndexError):
            raise FilmcalcError(f"The anchor must be (x, y, thickness_nm) (got {anchor!r}).") from None
        if not (0 <= x < W and 0 <= y < H):
            raise FilmcalcError(f"Anchor ({x}, {y}) lies outside the {W} × {H} image.")
        if not lo <= t <= hi:
            raise FilmcalcError(f"Anchor thickness {t:g} nm lies outside the range {lo:g}–{hi:g} nm: widen the "
                                "range or correct the anchor.")
        anchors = [(x, y, t)]
    report(0.05, "modelling the fringes")
    periods = np.array([fringe_spacing_nm(stack, w, angle_deg) for w in wavelengths])
    p_min = float(periods.min())
    model = _model(stack, wavelengths, lo, hi, min(max(0.5, (hi - lo) / 8000), p_min / 40), angle_deg)
    warnings, extra = [], {}
    if not anchors:
        span = _unambiguous_span(model, lo)
        extra["unambiguous_span_nm"] = round(span, 1) if np.isfinite(span) else None  # None: the whole range
        if span < hi - lo:
            if len(wavelengths) == 1:
                raise FilmcalcError(f"With one wavelength the fringes repeat every {periods[0]:.0f} nm, so "
                                    f"{lo:g}–{hi:g} nm cannot be read without an anchor: give a pixel of known "
                                    f"thickness, narrow the range to under {span:.0f} nm, or add a second wavelength.")
            warnings.append(f"Above {lo + span:.0f} nm the two wavelengths' fringes nearly repeat: there the fringe "
                            "order rests on continuity with thinner parts. Give an anchor, or narrow the range.")
    report(0.15, "normalising between the fringe envelopes")
    normalised = [_normalise(image, smooth_px, envelope_px) for image in images]
    faint = np.zeros((H, W), dtype=bool)
    saturated, dense = faint.copy(), faint.copy()
    for image, norm in zip(images, normalised):
        faint |= norm.near_contrast < FAINT_CONTRAST * norm.noise
        saturated |= image >= SATURATED
        dense |= norm.half_fringe_px < DENSE_PX
    if faint.all():
        raise FilmcalcError("The image shows no fringes (its intensity is flat within the noise): check the light, "
                            "the focus and the exposure.")
    report(0.3, "matching intensities")
    cands = _match([n.value for n in normalised], model, int(np.clip(np.ceil(2 * (hi - lo) / p_min) + 4, 4, 64)))
    has = cands.has()
    usable = has & ~(saturated | faint | dense)
    if not usable.any():
        raise FilmcalcError("No pixel shows fringes that can be read (every one is saturated, too faint, too dense "
                            "or matches no thickness in the range): check the exposure, magnification and range.")
    report(0.5, "resolving fringe orders")
    # The growth grid must follow the fringes: three cells per half fringe where they are densest.
    densest = min(float(np.percentile(n.half_fringe_px[usable], 10)) for n in normalised)
    coarse_max = int(np.clip(np.ceil(max(H, W) / max(1, int(densest // 3))), 96, COARSE_MAX_CELLS))
    # Thicknesses whose intensities differ by under three times the noise cannot be told apart.
    sigma_u = max(float(_smoothing_gain(smooth_px, 2) * n.noise / np.median(n.contrast[usable])) for n in normalised)
    chosen, local, seeded = _resolve(cands, usable, model, FLAT_SIGMAS * sigma_u, anchors[0] if anchors else None,
                                     trend, coarse_max)
    if anchors and not seeded:
        raise FilmcalcError(_ANCHOR_UNREADABLE.format(*anchors[0][:2]))
    report(0.85, "uncertainty and flags")
    thickness = np.where(np.isfinite(chosen), chosen, np.nan).astype(np.float32)
    sigma = _sigma_nm(thickness, model, normalised, _smoothing_gain(smooth_px, 2))
    # Continuity: a pixel more than a quarter fringe from a neighbour or from the local surface is
    # inconsistent; the rest split into patches joined by such small steps, and only the patch
    # holding the anchor (without one, the largest) is tied to a known fringe order.
    inconsistent = (_largest_step(thickness) > p_min / 4) | (np.abs(np.nan_to_num(thickness - local)) > p_min / 4)
    patches, _ = ndimage.label(usable & ~inconsistent)
    tied = _anchor_patch(patches, anchors[0][:2]) if anchors else _largest_patch(patches)
    flags = np.zeros((H, W), dtype=np.uint8)
    for name, mask in (("saturated", saturated), ("faint", faint), ("dense", dense), ("no_match", ~has),
                       ("unanchored", has & (patches != tied)), ("inconsistent", inconsistent)):
        flags |= mask.view(np.uint8) * np.uint8(FLAGS[name])
    stats = _statistics(thickness, flags, pixel_size_um)
    stats.update(extra)
    stats.update({"noise": [round(n.noise, 5) for n in normalised], "envelope_px": [n.window_px for n in normalised],
                  "growth_step_px": int(np.ceil(max(H, W) / coarse_max))})
    if dense.mean() > 0.05:
        warnings.append(f"{100 * dense.mean():.0f} % of pixels have fringes too dense to follow (under "
                        f"{DENSE_PX:g} px per half fringe): use a higher magnification or a longer wavelength.")
    if stats["flagged_fraction"] > 0.2:
        warnings.append(f"{100 * stats['flagged_fraction']:.0f} % of pixels are flagged: check the stack, "
                        "wavelengths, range and exposure, or move the anchor.")
    report(1.0, "done")
    return FringeMap(thickness, sigma, flags, tuple(wavelengths), tuple(float(p) for p in periods), stats, warnings,
                     time.perf_counter() - t_start)


_ANCHOR_UNREADABLE = ("The anchor at ({}, {}) sits where the fringes cannot be read (saturated, too faint, too "
                      "dense or inconsistent with its neighbours): move it to a clear part of the image.")


def _sigma_nm(thickness, model, normalised, smoothing_gain):
    """1σ thickness from intensity noise, combined over the images, and the model grid's resolution.

    Per image, the smoothed image's noise over the fringe contrast is an
    error of the normalised intensity, turned into thickness through the
    model's slope (and curvature, at extrema); images combine as
    independent measurements. The grid adds a uniform error over one step.
    Capped at a quarter of the shortest fringe spacing (beyond that the
    fringe order is in question, which the flags report).
    """
    inverse_var = np.zeros(thickness.shape, dtype=np.float32)
    with np.errstate(divide="ignore", invalid="ignore"):
        for k, norm in enumerate(normalised):
            slope = np.interp(thickness, model.thickness_nm, model.slope[:, k]).astype(np.float32)
            curvature = np.interp(thickness, model.thickness_nm, model.curvature[:, k]).astype(np.float32)
            sigma_u = smoothing_gain * norm.noise / np.maximum(norm.contrast, 1e-6)
            inverse_var += _thickness_sigma(slope, curvature, sigma_u) ** -2.0
        step = float(model.thickness_nm[1] - model.thickness_nm[0])
        sigma = np.sqrt(1 / inverse_var + step**2 / 12)
    return np.minimum(sigma, float(model.period_nm.min()) / 4).astype(np.float32)


def _largest_step(thickness):
    """Largest thickness difference from each pixel to its four neighbours (NaN counts as none)."""
    t = np.nan_to_num(thickness, nan=0.0)
    step = np.zeros_like(t)
    for axis in (0, 1):
        jump = np.abs(np.diff(t, axis=axis))
        jump[np.isnan(np.diff(thickness, axis=axis))] = 0
        lead = [slice(None)] * 2
        lead[axis] = slice(None, -1)
        trail = [slice(None)] * 2
        trail[axis] = slice(1, None)
        np.maximum(step[tuple(lead)], jump, out=step[tuple(lead)])
        np.maximum(step[tuple(trail)], jump, out=step[tuple(trail)])
    return step


def _largest_patch(patches):
    """Label of the largest patch (0 if none)."""
    counts = np.bincount(patches.ravel())
    counts[0] = 0
    return int(np.argmax(counts))


def _anchor_patch(patches, anchor_xy, reach_px=3):
    """Label of the patch most of the pixels within ``reach_px`` of the anchor belong to."""
    x, y = anchor_xy
    near = patches[max(0, y - reach_px):y + reach_px + 1, max(0, x - reach_px):x + reach_px + 1].ravel()
    near = near[near > 0]
    if not near.size:
        raise FilmcalcError(_ANCHOR_UNREADABLE.format(x, y))
    return int(np.argmax(np.bincount(near)))


# ---------------------------------------------------------------------------
# Line profiles.


@dataclasses.dataclass
class FringeProfile:
    """Result of :func:`line_profile_thickness`.

    Attributes
    ----------
    distance_px : numpy.ndarray, shape (N,)
        Distance from the line's start, px.
    thickness_nm, sigma_nm : numpy.ndarray, shape (N,)
        Thickness and its 1σ from intensity noise, nm.
    intensity : numpy.ndarray, shape (N,)
        The linear intensity sampled along the line.
    extrema_px, extrema_nm : numpy.ndarray, shape (E,)
        Where the bright and dark fringes cross the line, and their thickness.
    extrema_kind : numpy.ndarray of str, shape (E,)
        ``"max"`` (bright) or ``"min"`` (dark).
    period_nm : float
        The fringe spacing λ / (2 n cos θ_t).
    warnings : list of str
    """

    distance_px: np.ndarray
    thickness_nm: np.ndarray
    sigma_nm: np.ndarray
    intensity: np.ndarray
    extrema_px: np.ndarray
    extrema_nm: np.ndarray
    extrema_kind: np.ndarray
    period_nm: float
    warnings: list


def _sample_line(image, line):
    """Bilinear samples one pixel apart along the line (x0, y0, x1, y1); distance in px and values."""
    H, W = image.shape
    try:
        x0, y0, x1, y1 = (float(v) for v in line)
    except (TypeError, ValueError):
        raise FilmcalcError(f"The line must be four numbers (x0, y0, x1, y1) in pixels (got {line!r}).") from None
    for x, y in ((x0, y0), (x1, y1)):
        if not (0 <= x <= W - 1 and 0 <= y <= H - 1):
            raise FilmcalcError(f"The line's end ({x:g}, {y:g}) lies outside the {W} × {H} image "
                                "(x = column, y = row from the top-left).")
    length = float(np.hypot(x1 - x0, y1 - y0))
    if length < 8:
        raise FilmcalcError(f"The line is only {length:.1f} px long: draw it across at least one bright and one dark "
                            "fringe.")
    f = np.linspace(0.0, 1.0, int(np.ceil(length)) + 1)
    values = ndimage.map_coordinates(image, [y0 + f * (y1 - y0), x0 + f * (x1 - x0)], order=1, mode="nearest")
    return f * length, values.astype(float)


def _profile_extrema(values, prominence, noise):
    """Alternating maxima and minima of a profile: sub-sample positions (in samples), kinds (+1 max, −1 min)
    and values. Two of a kind in a row keep the more extreme.

    An extremum close to the profile's end has little prominence on its far
    side, so the most extreme point after the last one found is taken too
    when it stands out by ``prominence`` on its near side and the profile
    turns back after it by over four times the ``noise``.
    """
    found = [(int(i), +1) for i in signal.find_peaks(values, prominence=prominence)[0]]
    found += [(int(i), -1) for i in signal.find_peaks(-values, prominence=prominence)[0]]
    kept = []
    for i, kind in sorted(found):
        if kept and kept[-1][1] == kind:
            if kind * values[i] > kind * values[kept[-1][0]]:
                kept[-1] = (i, kind)
            continue
        kept.append((i, kind))
    if kept:
        last, want = kept[-1][0], -kept[-1][1]
        j = last + int(np.argmax(want * values[last:]))
        if (j < values.size - 2 and want * (values[j] - values[last]) >= prominence
                and want * (values[j] - values[-1]) > 4 * noise):
            kept.append((j, want))
    index = np.array([i for i, _ in kept], dtype=int)
    kinds = np.array([k for _, k in kept], dtype=int)
    before, here, after = values[index - 1], values[index], values[index + 1]
    curvature = before - 2 * here + after
    with np.errstate(divide="ignore", invalid="ignore"):
        shift = np.where(curvature != 0, 0.5 * (before - after) / curvature, 0.0)
    return index + np.clip(shift, -0.5, 0.5), kinds, here


def _missed_fringe(values, extrema, noise):
    """Whether, between neighbouring extrema, the profile holds a turning point standing out by over
    eight times its noise (a fringe below the prominence asked for, most likely)."""
    bounds = np.concatenate([[0], np.round(extrema).astype(int), [values.size - 1]])
    for a, b in itertools.pairwise(bounds):
        stretch = values[a:b + 1]
        if stretch.size > 3 and (signal.find_peaks(stretch, prominence=8 * noise)[0].size
                                 or signal.find_peaks(-stretch, prominence=8 * noise)[0].size):
            return True
    return False


def _extrema_ahead(model, anchor_nm, sign):
    """Thickness and kind (+1 bright, −1 dark) of the model's extrema past the anchor, in the order a
    film thickening (``sign`` +1) or thinning (−1) from it meets them."""
    maxima, minima = _extrema(model.reflectance[:, 0])
    t = model.thickness_nm[np.concatenate([maxima, minima])]
    kind = np.concatenate([np.ones(maxima.size, int), -np.ones(minima.size, int)])
    ahead = sign * (t - anchor_nm) > model.thickness_nm[1] - model.thickness_nm[0]
    order = np.argsort(sign * t[ahead])
    return t[ahead][order], kind[ahead][order]


def _invert_half_fringe(model_nm, model_u, a_nm, b_nm, u):
    """Thickness between ``a_nm`` and ``b_nm`` where the model's normalised intensity equals ``u``.

    The model is monotonic between neighbouring extrema; if it is not on the
    span asked for, None.
    """
    inside = (model_nm >= min(a_nm, b_nm) - 1e-9) & (model_nm <= max(a_nm, b_nm) + 1e-9)
    t, v = model_nm[inside], model_u[inside]
    if t.size < 2:
        return None
    steps = np.diff(v)
    if np.any(steps > 1e-12) and np.any(steps < -1e-12):
        return None
    order = np.argsort(v, kind="stable")
    return np.interp(u, v[order], t[order])


def line_profile_thickness(intensity, line, wavelength_nm, stack, anchor_nm, direction="thicker", *,
                           encoded=False, smooth_px=1.0, prominence=0.2, angle_deg=None):
    """Thickness along a line by counting monochromatic fringes from a known start.

    Parameters
    ----------
    intensity : array_like, shape (H, W)
        Monochrome image, values 0–1 (linear unless ``encoded``); for a
        colour photo under line light, the channel that sees the line.
    line : (x0, y0, x1, y1)
        Start and end pixels (x = column, y = row from the top-left); the
        start is where the thickness is known.
    wavelength_nm : float
        Vacuum wavelength of the light, nm (200–2000).
    stack : filmcalc.stack.Stack
        Its unknown layer is the film.
    anchor_nm : float
        Film thickness at the line's start, nm (e.g. a few nm for a black
        soap film, 0 for bare substrate).
    direction : {"thicker", "thinner"}
        How the film changes along the line (monotonically, as fringe
        counting assumes).
    encoded : bool
        The image is sRGB-encoded; it is decoded to linear intensity first.
    smooth_px : float
        σ of the Gaussian smoothing along the line before extrema are found, px.
    prominence : float
        Smallest prominence of an extremum, as a fraction of the profile's
        range (and at least four times its noise).
    angle_deg : float, optional
        Angle of incidence, degrees (the stack's own by default).

    Returns
    -------
    FringeProfile
    """
    image = _image(intensity, encoded)
    wl = _check_wavelength(wavelength_nm)
    _check_film(stack)
    if direction not in DIRECTIONS:
        raise FilmcalcError(f"The direction must be 'thicker' or 'thinner' along the line (got {direction!r}).")
    anchor = float(anchor_nm)
    if not (np.isfinite(anchor) and anchor >= 0):
        raise FilmcalcError(f"The anchor thickness must be ≥ 0 nm (got {anchor_nm}).")
    distance, raw = _sample_line(image, line)
    smoothed = ndimage.gaussian_filter1d(raw, smooth_px) if smooth_px > 0 else raw
    raw_noise = _white_noise(raw)
    noise = raw_noise * _smoothing_gain(smooth_px, 1)  # of the smoothed profile
    spread = float(np.ptp(smoothed))
    if spread < FAINT_CONTRAST * raw_noise:
        raise FilmcalcError("The intensity along the line is flat within the noise: no fringes to count. Check the "
                            "line's position, the light and the exposure.")
    position, kind, level = _profile_extrema(smoothed, max(prominence * spread, 4 * noise), noise)
    if not (np.any(kind > 0) and np.any(kind < 0)):
        raise FilmcalcError("The line crosses fewer than one bright and one dark fringe, which are needed to scale the "
                            "intensity: lengthen the line, or lower the prominence if fringes were missed.")
    step = distance[1] - distance[0]
    extrema_px = position * step
    bright = np.interp(distance, extrema_px[kind > 0], level[kind > 0])
    dark = np.interp(distance, extrema_px[kind < 0], level[kind < 0])
    contrast = bright - dark
    u = np.clip((smoothed - dark) / np.maximum(contrast, 1e-12), 0.0, 1.0)

    period = fringe_spacing_nm(stack, wl, angle_deg)
    E = kind.size
    sign = 1.0 if direction == "thicker" else -1.0
    if sign > 0:
        model = _model(stack, [wl], anchor, anchor + (E + 3) * period / 2, period / 1000, angle_deg)
    else:
        model = _model(stack, [wl], 0.0, anchor + period, period / 1000, angle_deg)
    t_model, u_model = model.thickness_nm, model.normalised[:, 0]
    ahead_nm, ahead_kind = _extrema_ahead(model, anchor, sign)
    starts = np.flatnonzero(ahead_kind == kind[0])
    if not starts.size or starts[0] + E > ahead_nm.size:
        raise FilmcalcError(f"The line shows {E} bright and dark fringes, more than a film thinning from "
                            f"{anchor:g} nm can show before 0 nm: check the anchor and the direction.")
    k0 = int(starts[0])
    warnings = []
    if k0:
        warnings.append(f"The first fringe on the line is {'bright' if kind[0] > 0 else 'dark'}, but at {anchor:g} nm "
                        "the model expects the other kind first: a fringe near the start may be missed, or the anchor "
                        "is off. The stretch before the first fringe is interpolated linearly.")
    extrema_nm = ahead_nm[k0:k0 + E]
    end_nm = ahead_nm[k0 + E] if k0 + E < ahead_nm.size else 0.0
    # Thickness per stretch: before the first fringe, between fringes, after the last one.
    nodes_nm = np.concatenate([[anchor], extrema_nm, [end_nm]])
    segment = np.searchsorted(extrema_px, distance, side="right")
    thickness = np.empty_like(distance)
    for s in range(E + 1):
        here = segment == s
        if not here.any():
            continue
        inverted = _invert_half_fringe(t_model, u_model, nodes_nm[s], nodes_nm[s + 1], u[here])
        if inverted is None:  # only before the first fringe, after a skipped one
            inverted = np.interp(distance[here], [0.0, extrema_px[0]], nodes_nm[:2])
        thickness[here] = inverted
    expected_u = float(np.interp(anchor, t_model, u_model))
    if abs(u[0] - expected_u) > 0.5:
        warnings.append(f"The line starts {'bright' if u[0] > 0.5 else 'dark'}, but a film of {anchor:g} nm should "
                        f"look {'bright' if expected_u > 0.5 else 'dark'} here: check the anchor thickness and the "
                        "line's start.")
    if np.min(np.diff(extrema_px), initial=np.inf) < DENSE_PX:
        warnings.append(f"Some fringes lie under {DENSE_PX:g} px apart: fringes may be missed there; use a higher "
                        "magnification.")
    if _missed_fringe(smoothed, extrema_px / step, noise):
        warnings.append("Between two fringes the intensity turns back and forth by more than the noise without "
                        "reaching the prominence asked for: a faint fringe may have been missed there (lower the "
                        "prominence).")
    sigma_u = noise / np.maximum(contrast, 1e-12)
    sigma = _thickness_sigma(np.interp(thickness, t_model, model.slope[:, 0]),
                             np.interp(thickness, t_model, model.curvature[:, 0]), sigma_u)
    return FringeProfile(distance, thickness, np.minimum(sigma, period / 4), raw, extrema_px, extrema_nm,
                         np.where(kind > 0, "max", "min"), period, warnings)


CHANNELS = {"red": 0, "green": 1, "blue": 2}


def _channel_for(wavelength_nm):
    """The colour-camera channel that sees a line best (common practice, no source)."""
    return "red" if wavelength_nm >= 580 else "green" if wavelength_nm >= 500 else "blue"


def fringe_images(photo, wavelengths_nm, channels=None):
    """One encoded 0–1 image per wavelength from a :class:`filmcalc.io.Photo`: its grey level, or a colour
    channel per wavelength (``channels``: red, green, blue or grey; by default grey for a greyscale
    photo, else the channel the line falls in)."""
    if channels and len(channels) != len(wavelengths_nm):
        raise FilmcalcError("Give one --channel per --wavelength, in the same order.")
    images = []
    for i, wl in enumerate(wavelengths_nm):
        channel = channels[i] if channels else ("grey" if photo.greyscale else _channel_for(wl))
        if channel == "grey":
            images.append(photo.rgb.mean(axis=2))
        elif channel in CHANNELS:
            images.append(photo.rgb[..., CHANNELS[channel]])
        else:
            raise FilmcalcError(f"Unknown channel {channel!r}: use red, green, blue or grey.")
    return images
