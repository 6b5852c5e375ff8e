"""Spectrum → colour: CIE XYZ of a reflectance under a light, and sRGB.

Public names
------------
ColourKernel, colour_kernel
    Per-wavelength weights W (W×3) with XYZ = exposure · Σ R(λ) W(λ), set so
    that a perfect white reflector has Y = 100 under the same light.
light_spectrum
    Relative spectral power of a light source on a wavelength grid.
reflectance_to_XYZ
    Apply a kernel to reflectance arrays (wavelength last).
XYZ_to_srgb
    XYZ (Y = 100 scale) → encoded sRGB in 0–1, white adapted to D65
    (Bradford), with an out-of-gamut mask.

Light sources: CIE illuminants shipped by colour-science (``D65``, ``A``,
``FL2`` or the CIE's own ``F2``, ``LED-B3``, …), ``blackbody:5000`` (kelvin),
lines ``line:632.8`` or ``line:589.0,589.6`` (equal power), or a CSV path
with columns ``wavelength_nm,power``.

References
----------
CIE 015:2018, Colorimetry, 4th ed. (tristimulus integration, §7).
IEC 61966-2-1:1999, sRGB (primaries, D65 white, transfer function).
Lam, K. M. (1985), Metamerism and colour constancy, PhD thesis, University
of Bradford (the Bradford chromatic adaptation transform).
"""

from __future__ import annotations

import dataclasses
import re
import warnings
from pathlib import Path

import numpy as np

from .errors import FilmcalcError

with warnings.catch_warnings():  # colour-science warns when matplotlib is absent
    warnings.simplefilter("ignore")
    import colour as _cs

__all__ = ["ColourKernel", "colour_kernel", "light_spectrum", "reflectance_to_XYZ", "XYZ_to_srgb", "srgb_encode", "srgb_to_hex",
           "OBSERVERS", "DEFAULT_WAVELENGTHS_NM"]

OBSERVERS = {"2": "CIE 1931 2 Degree Standard Observer", "10": "CIE 1964 10 Degree Standard Observer"}
DEFAULT_WAVELENGTHS_NM = np.arange(380.0, 781.0, 5.0)

# IEC 61966-2-1 primaries and D65 white (xy).
_SRGB_PRIMARIES = np.array([[0.64, 0.33], [0.30, 0.60], [0.15, 0.06]])
_D65_XY = np.array([0.3127, 0.3290])


def _xy_to_XYZ(xy):
    x, y = xy[..., 0], xy[..., 1]
    return np.stack([x / y, np.ones_like(x), (1 - x - y) / y], axis=-1)


def _rgb_to_xyz_matrix(primaries_xy, white_xy):
    """Normalised primary matrix (SMPTE RP 177-1993): linear RGB → XYZ, white → Y = 1."""
    P = _xy_to_XYZ(primaries_xy).T
    return P * np.linalg.solve(P, _xy_to_XYZ(white_xy))


_XYZ_TO_SRGB = np.linalg.inv(_rgb_to_xyz_matrix(_SRGB_PRIMARIES, _D65_XY))


def _illuminant_name(source):
    name = source.strip()
    if re.fullmatch(r"[Ff]\d{1,2}", name):  # the CIE writes F2; colour-science FL2
        name = "FL" + name[1:]
    for key in _cs.SDS_ILLUMINANTS:
        if key.lower() == name.lower():
            return key
    return None


def _parse_lines(source):
    try:
        lines = [float(x) for x in source.split(":", 1)[1].split(",")]
    except ValueError:
        raise FilmcalcError(f"Light {source!r}: write lines as line:632.8 or line:589.0,589.6 (nm).") from None
    if not lines or min(lines) <= 0:
        raise FilmcalcError(f"Light {source!r}: line wavelengths must be > 0 nm.")
    return np.array(lines)


def light_spectrum(source, wavelength_nm, base_dir=None):
    """Relative spectral power of a continuous light on a wavelength grid.

    Parameters
    ----------
    source : str
        Illuminant name, ``blackbody:T`` (K) or a CSV path (``wavelength_nm,power``).
    wavelength_nm : array_like
        Grid, nm. Illuminant tables are linearly interpolated; a grid
        outside a table's range is an error.

    Returns
    -------
    numpy.ndarray
        Power at each wavelength (arbitrary scale).
    """
    wl = np.asarray(wavelength_nm, dtype=float)
    if source.lower().startswith("blackbody:"):
        try:
            temperature = float(source.split(":", 1)[1])
        except ValueError:
            raise FilmcalcError(f"Light {source!r}: write blackbody:5000 (temperature in kelvin).") from None
        if not 500 <= temperature <= 50000:
            raise FilmcalcError(f"Light {source!r}: blackbody temperature must lie in 500–50000 K.")
        return _cs.colorimetry.planck_law(wl * 1e-9, temperature)
    name = _illuminant_name(source)
    if name is not None:
        sd = _cs.SDS_ILLUMINANTS[name]
        lo, hi = sd.wavelengths[0], sd.wavelengths[-1]
        if wl.min() < lo or wl.max() > hi:
            raise FilmcalcError(f"Light {source!r} is tabulated for {lo:g}–{hi:g} nm only.")
        return np.interp(wl, sd.wavelengths, sd.values)
    if source.lower().endswith(".csv"):
        path = Path(source)
        if not path.is_absolute() and base_dir is not None:
            path = Path(base_dir) / path
        try:
            data = np.loadtxt(path, delimiter=",", skiprows=1, ndmin=2)
        except (OSError, ValueError) as exc:
            raise FilmcalcError(f"Light file {str(path)!r} could not be read as wavelength_nm,power: {exc}") from None
        if data.shape[1] < 2 or np.any(np.diff(data[:, 0]) <= 0) or np.any(data[:, 1] < 0):
            raise FilmcalcError(f"Light file {str(path)!r}: need increasing wavelength_nm and power ≥ 0.")
        if wl.min() < data[0, 0] or wl.max() > data[-1, 0]:
            raise FilmcalcError(f"Light file {str(path)!r} covers {data[0, 0]:g}–{data[-1, 0]:g} nm only.")
        return np.interp(wl, data[:, 0], data[:, 1])
    known = ", ".join(k for k in _cs.SDS_ILLUMINANTS if not k.startswith(("ISO", "FL3.")))
    raise FilmcalcError(
        f"Unknown light {source!r}. Use an illuminant ({known}; F1–F12 also accepted), "
        "blackbody:5000, line:632.8, or a CSV file wavelength_nm,power."
    )


@dataclasses.dataclass(frozen=True)
class ColourKernel:
    """Weights turning a reflectance spectrum into CIE XYZ (Y = 100 for white).

    Attributes
    ----------
    wavelength_nm : numpy.ndarray, shape (W,)
        Where the reflectance must be evaluated (the line wavelengths for a
        line source).
    weights : numpy.ndarray, shape (W, 3)
    white_XYZ : numpy.ndarray, shape (3,)
        XYZ of a perfect white reflector under this light (Y = 100).
    source, observer : str
    monochromatic : bool
        True for line sources: colours are shades of the line colour(s).
    """

    wavelength_nm: np.ndarray
    weights: np.ndarray
    white_XYZ: np.ndarray
    source: str
    observer: str
    monochromatic: bool

    @property
    def white_xy(self):
        """Chromaticity of the light (xy)."""
        return self.white_XYZ[:2] / self.white_XYZ.sum()


def colour_kernel(source="D65", observer="2", wavelength_nm=None, base_dir=None):
    """Build the XYZ weights for a light and an observer.

    Parameters
    ----------
    source : str
        See :func:`light_spectrum`; also ``line:λ[,λ…]``.
    observer : {"2", "10"}
        CIE 1931 2° or CIE 1964 10° standard observer.
    wavelength_nm : array_like, optional
        Grid for continuous sources (default 380–780 nm every 5 nm). The
        integral is the plain sum Σ S(λ) x̄(λ) Δλ of CIE 015:2018 §7.

    Returns
    -------
    ColourKernel
    """
    if str(observer) not in OBSERVERS:
        raise FilmcalcError(f"Observer must be '2' (CIE 1931) or '10' (CIE 1964), not {observer!r}.")
    cmfs = _cs.MSDS_CMFS[OBSERVERS[str(observer)]]
    if source.lower().startswith("line:"):
        wl = _parse_lines(source)
        if wl.min() < cmfs.wavelengths[0] or wl.max() > cmfs.wavelengths[-1]:
            raise FilmcalcError(f"Light {source!r}: lines must lie in {cmfs.wavelengths[0]:g}–"
                                f"{cmfs.wavelengths[-1]:g} nm to have a colour.")
        spd = np.ones_like(wl)
        dl = np.ones_like(wl)
        monochromatic = True
    else:
        wl = DEFAULT_WAVELENGTHS_NM if wavelength_nm is None else np.asarray(wavelength_nm, dtype=float)
        if wl.ndim != 1 or wl.size < 2 or np.any(np.diff(wl) <= 0):
            raise FilmcalcError("The colour wavelength grid must be increasing, with at least two points.")
        spd = light_spectrum(source, wl, base_dir)
        dl = np.gradient(wl)
        monochromatic = False
    cmf = np.stack([np.interp(wl, cmfs.wavelengths, cmfs.values[:, i], left=0, right=0) for i in range(3)], -1)
    raw = (spd * dl)[:, None] * cmf
    y_white = raw[:, 1].sum()
    if y_white <= 0:
        raise FilmcalcError(f"Light {source!r} has no visible power for this observer.")
    weights = raw * (100.0 / y_white)
    return ColourKernel(wl, weights, weights.sum(axis=0), source, str(observer), monochromatic)


def reflectance_to_XYZ(reflectance, kernel, exposure=1.0):
    """CIE XYZ of reflectance spectra (Y = 100 for a perfect white at exposure 1).

    Parameters
    ----------
    reflectance : array_like, shape (..., W)
        Reflectance (0–1) at ``kernel.wavelength_nm``.
    kernel : ColourKernel
    exposure : float
        Multiplies the result (a brighter or dimmer view of the same light).

    Returns
    -------
    numpy.ndarray, shape (..., 3)
    """
    R = np.asarray(reflectance, dtype=float)
    if R.shape[-1] != kernel.wavelength_nm.size:
        raise FilmcalcError("Reflectance must be sampled at the colour kernel's wavelengths.")
    return exposure * (R @ kernel.weights)


def _adaptation_matrix(white_XYZ):
    """Bradford von Kries matrix from the light's white to D65, then XYZ → linear sRGB."""
    cat = _cs.adaptation.matrix_chromatic_adaptation_VonKries(np.asarray(white_XYZ) / white_XYZ[1],
                                                              _xy_to_XYZ(_D65_XY), transform="Bradford")
    return _XYZ_TO_SRGB @ cat


def srgb_encode(linear):
    """IEC 61966-2-1 transfer function (linear 0–1 → encoded 0–1)."""
    L = np.asarray(linear, dtype=float)
    return np.where(L <= 0.0031308, 12.92 * L, 1.055 * np.abs(L) ** (1 / 2.4) * np.sign(L) - 0.055)


def XYZ_to_srgb(XYZ, white_XYZ):
    """Encoded sRGB for display, with the light's white mapped to sRGB white.

    Parameters
    ----------
    XYZ : array_like, shape (..., 3)
        Tristimulus values on the Y = 100 scale.
    white_XYZ : array_like, shape (3,)
        The light's white (e.g. ``kernel.white_XYZ``); adapted to D65 with
        the Bradford transform (von Kries scaling in its cone space).

    Returns
    -------
    srgb : numpy.ndarray, shape (..., 3)
        Encoded sRGB in 0–1, clipped for display.
    out_of_gamut : numpy.ndarray of bool, shape (...)
        True where the linear value fell outside 0–1 by more than 1e-3 before
        clipping (display handling: each channel clipped).
    """
    linear = (np.asarray(XYZ, dtype=float) / 100.0) @ _adaptation_matrix(np.asarray(white_XYZ, float)).T
    out = np.any((linear < -1e-3) | (linear > 1 + 1e-3), axis=-1)
    return srgb_encode(np.clip(linear, 0.0, 1.0)), out


def srgb_to_hex(srgb):
    """'#rrggbb' for one encoded sRGB triple in 0–1."""
    r, g, b = (int(round(float(np.clip(c, 0, 1)) * 255)) for c in srgb)
    return f"#{r:02x}{g:02x}{b:02x}"
