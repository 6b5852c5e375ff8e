"""Numbers over time from a film's thickness maps: per-frame measures, thinning law, rupture.

Public names
------------
frame_measures
    One thickness map → mean and median thickness, coverage, liquid volume,
    values at points and in regions, and a line profile (a kymograph row).
fit_power_law, PowerLawFit
    h(t) = A·(t − t₀)^−α fitted to a thickness series, with 1σ uncertainties.
rupture_frame
    The frame from which the film is gone for good.
thinning_rate
    −dh/dt by central differences, nm/s.

All pure numpy (scipy for the fit); no files, no widgets.
"""

from __future__ import annotations

import dataclasses

import numpy as np

from .errors import FilmcalcError
from .thickness import line_profile

__all__ = ["frame_measures", "check_geometry", "fit_power_law", "PowerLawFit", "rupture_frame", "thinning_rate", "RUPTURE_FRACTION"]

# The film counts as gone where its covered area falls below this fraction of the area at the
# start of the recording and never recovers (our choice).
RUPTURE_FRACTION = 0.5


def frame_measures(thickness_nm, pixel_size_um=None, points=(), regions=(), line=None):
    """Measures of one thickness map (NaN where no thickness).

    Parameters
    ----------
    thickness_nm : numpy.ndarray, shape (H, W)
    pixel_size_um : float, optional
        Side of a pixel on the film, µm; gives the volume.
    points : sequence of (x, y)
        Pixels whose thickness to follow: the median over the 3 × 3 pixels around each.
    regions : sequence of (x0, y0, x1, y1)
        Rectangles (inclusive corners) whose mean thickness to follow.
    line : (x0, y0, x1, y1), optional
        A line whose thickness profile to record (one sample per pixel of length).

    Returns
    -------
    dict
        ``mean_nm``, ``median_nm``, ``coverage`` (fraction of pixels with a thickness),
        ``volume_nL`` (Σ thickness × pixel area over those pixels, when the pixel size is given),
        ``points_nm``, ``regions_nm``, ``line_nm`` (array or None).
    """
    t = np.asarray(thickness_nm)
    H, W = t.shape
    film = np.isfinite(t)
    values = t[film]
    out = {"coverage": float(film.mean()),
           "mean_nm": float(values.mean()) if values.size else float("nan"),
           "median_nm": float(np.median(values)) if values.size else float("nan"),
           "volume_nL": float("nan")}
    if pixel_size_um:
        # nm × µm² = 1e-3 µm³, and 1 nL = 1e6 µm³.
        out["volume_nL"] = float(values.sum(dtype=np.float64) * pixel_size_um**2 * 1e-9)
    out["points_nm"] = []
    for x, y in points:
        patch = t[max(0, y - 1):y + 2, max(0, x - 1):x + 2]
        patch = patch[np.isfinite(patch)]
        out["points_nm"].append(float(np.median(patch)) if patch.size else float("nan"))
    out["regions_nm"] = []
    for x0, y0, x1, y1 in regions:
        patch = t[y0:y1 + 1, x0:x1 + 1]
        patch = patch[np.isfinite(patch)]
        out["regions_nm"].append(float(patch.mean()) if patch.size else float("nan"))
    out["line_nm"] = None if line is None else line_profile(t, *line)[1].astype(np.float32)
    return out


def check_geometry(shape, points=(), regions=(), line=None):
    """Raise a clear error for points, regions or a line outside a (H, W) frame."""
    H, W = shape
    for x, y in points:
        if not (0 <= x < W and 0 <= y < H):
            raise FilmcalcError(f"Point ({x}, {y}) lies outside the {W} × {H} frames.")
    for x0, y0, x1, y1 in regions:
        if not (0 <= x0 <= x1 < W and 0 <= y0 <= y1 < H):
            raise FilmcalcError(f"Region ({x0},{y0})–({x1},{y1}) must lie within the {W} × {H} frames, "
                                "first corner top-left.")
    if line is not None:
        x0, y0, x1, y1 = line
        for x, y in ((x0, y0), (x1, y1)):
            if not (0 <= x < W and 0 <= y < H):
                raise FilmcalcError(f"The line's end ({x}, {y}) lies outside the {W} × {H} frames.")


def thinning_rate(t_s, h_nm):
    """−dh/dt (nm/s) by central differences (one-sided at the ends); NaN with fewer than 2 points."""
    t, h = np.asarray(t_s, float), np.asarray(h_nm, float)
    if t.size < 2:
        return np.full(t.shape, np.nan)
    return -np.gradient(h, t)


def rupture_frame(coverage, readable=None, fraction=RUPTURE_FRACTION, start_frames=5):
    """Index of the frame from which the film is gone for good, or None.

    A frame counts as without film where its coverage (fraction of pixels with a thickness) is
    below ``fraction`` × the median coverage of the first ``start_frames`` frames that have film.
    The rupture is the first such frame after which every readable frame is also without film;
    frames that cannot be read (``readable`` False) neither break nor make the run.

    Parameters
    ----------
    coverage : array_like
        Per frame, 0–1 (0 for a frame where no film was found).
    readable : array_like of bool, optional
    """
    c = np.nan_to_num(np.asarray(coverage, float))
    readable = np.ones(c.shape, bool) if readable is None else np.asarray(readable, bool)
    with_film = np.flatnonzero(readable & (c > 0))
    if with_film.size == 0:
        return None
    reference = float(np.median(c[with_film[:start_frames]]))
    gone = readable & (c < fraction * reference)
    still = np.flatnonzero(readable & ~gone)
    if still.size == 0:
        return None  # never any film to lose
    after = np.flatnonzero(gone & (np.arange(c.size) > still[-1]))
    return int(after[0]) if after.size else None


@dataclasses.dataclass
class PowerLawFit:
    """h(t) = amplitude_nm · ((t − t0_s) / 1 s)^−alpha, fitted in log space.

    Attributes
    ----------
    alpha, alpha_sigma : float
        Thinning exponent and its 1σ uncertainty.
    t0_s, t0_sigma_s : float
        Time origin of the law (before the first point), s.
    amplitude_nm : float
        Thickness at t − t₀ = 1 s, nm.
    rms_log_residual : float
        RMS of ln(h) − ln(model): the typical relative misfit.
    points : int
    t0_at_bound : bool
        The best t₀ lies at the edge of the search (0.001 to 1000 × the span before the first
        point): the data do not pin down the origin, and α is then poorly defined.
    """

    alpha: float
    alpha_sigma: float
    t0_s: float
    t0_sigma_s: float
    amplitude_nm: float
    rms_log_residual: float
    points: int
    t0_at_bound: bool

    def thickness_nm(self, t_s):
        """The fitted law at times t_s (s)."""
        return self.amplitude_nm * (np.asarray(t_s, float) - self.t0_s) ** -self.alpha

    def rate_nm_per_s(self, t_s):
        """The fitted thinning rate −dh/dt, nm/s."""
        dt = np.asarray(t_s, float) - self.t0_s
        return self.alpha * self.amplitude_nm * dt ** (-self.alpha - 1)


def fit_power_law(t_s, h_nm):
    """Fit h = A·(t − t₀)^−α to a thinning series (least squares on ln h).

    A search over t₀ (each giving a straight line in ln h against ln(t − t₀), solved exactly)
    finds the start; Levenberg–Marquardt on (ln A, α, ln(t_first − t₀)) refines it, and the
    1σ uncertainties are the square roots of the diagonal of s²·(JᵀJ)⁻¹, s² the residual
    variance (Press et al. 2007, Numerical Recipes, 3rd ed., §15.5).

    Parameters
    ----------
    t_s, h_nm : array_like
        Times (s) and thicknesses (nm); non-finite and non-positive thicknesses are left out.

    Raises
    ------
    FilmcalcError
        Fewer than 4 usable points, or times that do not increase.
    """
    from scipy.optimize import least_squares

    t, h = np.asarray(t_s, float), np.asarray(h_nm, float)
    keep = np.isfinite(t) & np.isfinite(h) & (h > 0)
    t, h = t[keep], h[keep]
    if t.size < 4:
        raise FilmcalcError(f"A thinning law needs at least 4 frames with a thickness; {t.size} available.")
    if np.any(np.diff(t) <= 0):
        raise FilmcalcError("The frame times must increase.")
    span = float(t[-1] - t[0])
    y = np.log(h)

    def line_fit(delta):
        x = np.log(t - t[0] + delta)
        A = np.stack([np.ones_like(x), -x], axis=1)
        coef, *_ = np.linalg.lstsq(A, y, rcond=None)
        return coef, float(np.sum((A @ coef - y) ** 2))

    deltas = span * np.geomspace(1e-3, 1e3, 241)
    ssr = [line_fit(d)[1] for d in deltas]
    best = int(np.argmin(ssr))
    (log_a, alpha), _ = line_fit(deltas[best])

    def residual(p):
        return p[0] - p[1] * np.log(t - t[0] + np.exp(p[2])) - y

    fit = least_squares(residual, [log_a, alpha, np.log(deltas[best])], method="lm", x_scale="jac")
    log_a, alpha, log_delta = fit.x
    dof = max(t.size - 3, 1)
    s2 = float(np.sum(fit.fun**2)) / dof
    try:
        cov = np.linalg.inv(fit.jac.T @ fit.jac) * s2
    except np.linalg.LinAlgError:
        cov = np.full((3, 3), np.inf)
    delta = float(np.exp(log_delta))
    at_bound = not (deltas[0] * 1.5 < delta < deltas[-1] / 1.5)
    return PowerLawFit(alpha=float(alpha), alpha_sigma=float(np.sqrt(max(cov[1, 1], 0.0))),
                       t0_s=float(t[0] - delta), t0_sigma_s=float(delta * np.sqrt(max(cov[2, 2], 0.0))),
                       amplitude_nm=float(np.exp(log_a)), rms_log_residual=float(np.sqrt(np.mean(fit.fun**2))),
                       points=int(t.size), t0_at_bound=bool(at_bound))
