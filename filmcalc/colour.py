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
XYZ_to_srgb, srgb_to_XYZ
    XYZ (Y = 100 scale) ↔ encoded sRGB in 0–1, the light's white adapted to
    D65 (Bradford), with an out-of-gamut mask.
XYZ_to_xy, XYZ_to_uv, XYZ_to_Lab, Lab_to_XYZ, XYZ_to_Oklab
    Chromaticity, CIELAB (relative to the light's white), Oklab.
delta_E_2000
    CIEDE2000 colour difference.
hue_family, HUE_ANCHORS
    Coarse hue names (red, orange, yellow, green, cyan, blue, violet, magenta)
    from the CIELAB hue angle.
parse_colour
    "#RRGGBB", "srgb:R,G,B" or "lab:L,a,b" → CIELAB under a given white.
CameraResponse, load_camera_csv, camera_kernel
    A linear camera given by its red/green/blue spectral sensitivities.

Light sources: CIE illuminants shipped by colour-science (``D65``, ``A``,
``FL2`` or the CIE's own ``F2``, ``LED-B3``, …), ``blackbody:5000`` (kelvin),
lines ``line:632.8`` or ``line:589.0,589.6`` (equal power), the named line
sets in :data:`LINE_SOURCES` (``sodium``, ``mercury``, ``hene``…), or a CSV
path with columns ``wavelength_nm,power``.

References
----------
CIE 015:2018, Colorimetry, 4th ed. (tristimulus integration §7, CIELAB §8).
Sharma, G., Wu, W. & Dalal, E. N. (2005). The CIEDE2000 color-difference
formula: implementation notes, supplementary test data, and mathematical
observations. Color Res. Appl. 30, 21–30.
Ottosson, B. (2020). A perceptual color space for image processing (Oklab).
IEC 61966-2-1:1999, sRGB (primaries, D65 white, transfer function).
Lam, K. M. (1985), Metamerism and colour constancy, PhD thesis, University
of Bradford (the Bradford chromatic adaptation transform).
"""

from __future__ import annotations

import dataclasses
import functools
import re
import warnings
from pathlib import Path

import numpy as np

from .errors import FilmcalcError
from .materials import AirIndex



@functools.cache
def _colour_science():
    """colour-science, imported on first use (its import takes most of a second, which processes
    that only map colours, such as sequence workers, need not pay)."""
    with warnings.catch_warnings():  # colour-science warns when matplotlib is absent
        warnings.simplefilter("ignore")
        import colour

    return colour

__all__ = ["ColourKernel", "colour_kernel", "light_spectrum", "reflectance_to_XYZ", "XYZ_to_srgb", "srgb_to_XYZ",
           "srgb_encode", "srgb_decode", "line_colour_srgb", "srgb_to_hex", "srgb_to_hex_array", "XYZ_to_xy", "XYZ_to_uv", "XYZ_to_Lab", "Lab_to_XYZ",
           "XYZ_to_Oklab", "delta_E_2000", "parse_colour", "CameraResponse", "load_camera_csv",
           "camera_kernel", "spectral_locus", "hue_family", "HUE_ANCHORS", "OBSERVERS", "DEFAULT_WAVELENGTHS_NM", "LINE_SOURCES"]

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
    for key in _colour_science().SDS_ILLUMINANTS:
        if key.lower() == name.lower():
            return key
    return None


# Named line sources, listed as spectroscopists do in air wavelengths (nm; NIST
# Atomic Spectra Database); converted below to the vacuum wavelengths the optics
# uses, with the Ciddor 1996 index of standard air. Equal power per line.
_LINES_IN_AIR = {
    "sodium": (588.995, 589.592),          # Na D₂, D₁
    "mercury": (404.656, 435.834, 546.074),  # Hg h, g, e
    "mercury-green": (546.074,),
    "helium-d": (587.562,),
    "hene": (632.8,),                      # He–Ne laser
    "hene-green": (543.5,),
}
_AIR = AirIndex()
LINE_SOURCES = {name: "line:" + ",".join(f"{w * _AIR.index(w).real:.4f}" for w in lines)
                for name, lines in _LINES_IN_AIR.items()}


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
        return _colour_science().colorimetry.planck_law(wl * 1e-9, temperature)
    name = _illuminant_name(source)
    if name is not None:
        sd = _colour_science().SDS_ILLUMINANTS[name]
        lo, hi = sd.wavelengths[0], sd.wavelengths[-1]
        if wl.min() < lo - 1e-6 or wl.max() > hi + 1e-6:
            raise FilmcalcError(f"Light {source!r} is tabulated for {lo:g}–{hi:g} nm only.")
        return np.interp(wl, sd.wavelengths, sd.values)
    if source.lower().endswith(".csv"):
        path = Path(source)
        if not path.is_absolute() and base_dir is not None:
            path = Path(base_dir) / path
        data = _numeric_csv(path, "Light file", "wavelength_nm,power", 2)
        if np.any(np.diff(data[:, 0]) <= 0) or np.any(data[:, 1] < 0):
            raise FilmcalcError(f"Light file {str(path)!r}: need increasing wavelength_nm and power ≥ 0.")
        if wl.min() < data[0, 0] or wl.max() > data[-1, 0]:
            raise FilmcalcError(f"Light file {str(path)!r} covers {data[0, 0]:g}–{data[-1, 0]:g} nm only.")
        return np.interp(wl, data[:, 0], data[:, 1])
    known = ", ".join(k for k in _colour_science().SDS_ILLUMINANTS if not k.startswith(("ISO", "FL3.")))
    raise FilmcalcError(
        f"Unknown light {source!r}. Use an illuminant ({known}; F1–F12 also accepted), "
        f"blackbody:5000, line:632.8, a named line set ({', '.join(LINE_SOURCES)}), "
        "or a CSV file wavelength_nm,power."
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
    cmfs = _colour_science().MSDS_CMFS[OBSERVERS[str(observer)]]
    source = LINE_SOURCES.get(source.strip().lower(), source)
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
    cat = _colour_science().adaptation.matrix_chromatic_adaptation_VonKries(np.asarray(white_XYZ) / white_XYZ[1],
                                                              _xy_to_XYZ(_D65_XY), transform="Bradford")
    return _XYZ_TO_SRGB @ cat


def srgb_encode(linear):
    """IEC 61966-2-1 transfer function (linear 0–1 → encoded 0–1)."""
    L = np.asarray(linear, dtype=float)
    return np.where(L <= 0.0031308, 12.92 * L, 1.055 * np.abs(L) ** (1 / 2.4) * np.sign(L) - 0.055)


def line_colour_srgb(XYZ, white_XYZ):
    """Display colour under line light: the line's own hue, scaled by luminance.

    A single line's white cannot be adapted to D65 (one cone sees nothing),
    so the film is shown as shades of the line's sRGB colour (the most
    saturated displayable one, brightest channel 1), scaled by Y / Y_white.
    """
    line = (np.asarray(white_XYZ, dtype=float) / white_XYZ[1]) @ _XYZ_TO_SRGB.T
    line = np.clip(line, 0, None)
    line = line / line.max()
    Y = np.asarray(XYZ, dtype=float)[..., 1:2] / white_XYZ[1]
    linear = Y * line
    out = np.any(linear > 1 + 1e-3, axis=-1)
    return srgb_encode(np.clip(linear, 0.0, 1.0)), out


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


def srgb_to_hex_array(srgb):
    """'#rrggbb' strings for an array of encoded sRGB triples (..., 3) → (...)."""
    rgb8 = np.rint(np.clip(np.asarray(srgb, dtype=float), 0, 1) * 255).astype(np.int64)
    codes = (rgb8[..., 0] << 16) | (rgb8[..., 1] << 8) | rgb8[..., 2]
    return np.array(["#%06x" % c for c in codes.ravel()], dtype="<U7").reshape(codes.shape)


def srgb_to_hex(srgb):
    """'#rrggbb' for one encoded sRGB triple in 0–1."""
    r, g, b = (int(round(float(np.clip(c, 0, 1)) * 255)) for c in srgb)
    return f"#{r:02x}{g:02x}{b:02x}"


def spectral_locus(observer="2", space="xy", wavelength_nm=None):
    """Chromaticities of monochromatic light: rows (λ nm, x, y) or (λ, u′, v′).

    Parameters
    ----------
    observer : {"2", "10"}
    space : {"xy", "uv"}
    wavelength_nm : array_like, optional
        Default 380–700 nm every 5 nm (beyond 700 nm the locus folds back on itself).
    """
    if str(observer) not in OBSERVERS:
        raise FilmcalcError(f"Observer must be '2' or '10', not {observer!r}.")
    cmfs = _colour_science().MSDS_CMFS[OBSERVERS[str(observer)]]
    wl = np.arange(380.0, 701.0, 5.0) if wavelength_nm is None else np.asarray(wavelength_nm, dtype=float)
    XYZ = np.stack([np.interp(wl, cmfs.wavelengths, cmfs.values[:, i]) for i in range(3)], -1)
    return np.column_stack([wl, XYZ_to_xy(XYZ) if space == "xy" else XYZ_to_uv(XYZ)])


def srgb_decode(encoded):
    """Inverse of :func:`srgb_encode` (IEC 61966-2-1)."""
    V = np.asarray(encoded, dtype=float)
    return np.where(V <= 0.04045, V / 12.92, ((np.abs(V) + 0.055) / 1.055) ** 2.4 * np.sign(V))


def srgb_to_XYZ(srgb, white_XYZ):
    """Encoded sRGB (0–1) → XYZ on the Y = 100 scale under the light whose white is ``white_XYZ``."""
    linear = srgb_decode(srgb)
    return 100.0 * linear @ np.linalg.inv(_adaptation_matrix(np.asarray(white_XYZ, float))).T


def XYZ_to_xy(XYZ):
    """CIE 1931 chromaticity (x, y); black maps to (0, 0)."""
    XYZ = np.asarray(XYZ, dtype=float)
    total = XYZ.sum(axis=-1, keepdims=True)
    return np.divide(XYZ[..., :2], total, out=np.zeros(XYZ.shape[:-1] + (2,)), where=total > 0)


def XYZ_to_uv(XYZ):
    """CIE 1976 UCS chromaticity (u′, v′) = (4X, 9Y) / (X + 15Y + 3Z)."""
    XYZ = np.asarray(XYZ, dtype=float)
    den = XYZ[..., 0] + 15 * XYZ[..., 1] + 3 * XYZ[..., 2]
    num = np.stack([4 * XYZ[..., 0], 9 * XYZ[..., 1]], axis=-1)
    return np.divide(num, den[..., None], out=np.zeros(num.shape), where=den[..., None] > 0)


_EPS, _KAPPA = 216 / 24389, 24389 / 27  # CIE 015:2018 eq. 8.4 constants


def XYZ_to_Lab(XYZ, white_XYZ):
    """CIELAB (L*, a*, b*) relative to the reference white (CIE 015:2018 §8.2.1).

    A white with a zero component (a single red line has Z = 0) gives that
    channel no opponent signal (it follows Y): under line light CIELAB then
    tells lightness and at most one opponent axis.
    """
    XYZ = np.asarray(XYZ, dtype=float)
    white = np.broadcast_to(np.asarray(white_XYZ, dtype=float), XYZ.shape)
    t = np.divide(XYZ, white, out=np.zeros(XYZ.shape), where=white > 0)
    t = np.where(white > 0, t, t[..., 1:2])  # a missing channel follows Y: no opponent signal from it
    f = np.where(t > _EPS, np.cbrt(t), (_KAPPA * t + 16) / 116)
    return np.stack([116 * f[..., 1] - 16, 500 * (f[..., 0] - f[..., 1]), 200 * (f[..., 1] - f[..., 2])], axis=-1)


def Lab_to_XYZ(Lab, white_XYZ):
    """Inverse of :func:`XYZ_to_Lab`."""
    Lab = np.asarray(Lab, dtype=float)
    fy = (Lab[..., 0] + 16) / 116
    f = np.stack([fy + Lab[..., 1] / 500, fy, fy - Lab[..., 2] / 200], axis=-1)
    t = np.where(f**3 > _EPS, f**3, (116 * f - 16) / _KAPPA)
    return t * np.asarray(white_XYZ, dtype=float)


_OKLAB_M1 = np.array([[0.8189330101, 0.3618667424, -0.1288597137],
                      [0.0329845436, 0.9293118715, 0.0361456387],
                      [0.0482003018, 0.2643662691, 0.6338517070]])
_OKLAB_M2 = np.array([[0.2104542553, 0.7936177850, -0.0040720468],
                      [1.9779984951, -2.4285922050, 0.4505937099],
                      [0.0259040371, 0.7827717662, -0.8086757660]])


def XYZ_to_Oklab(XYZ, white_XYZ):
    """Oklab (Ottosson 2020) after Bradford adaptation of the light's white to D65."""
    cat = _colour_science().adaptation.matrix_chromatic_adaptation_VonKries(np.asarray(white_XYZ) / white_XYZ[1],
                                                              _xy_to_XYZ(_D65_XY), transform="Bradford")
    xyz65 = (np.asarray(XYZ, dtype=float) / 100.0) @ cat.T
    return np.cbrt(xyz65 @ _OKLAB_M1.T) @ _OKLAB_M2.T


def delta_E_2000(Lab1, Lab2):
    """CIEDE2000 colour difference ΔE₀₀ (k_L = k_C = k_H = 1), Sharma, Wu & Dalal (2005)."""
    L1, a1, b1 = np.moveaxis(np.asarray(Lab1, dtype=float), -1, 0)
    L2, a2, b2 = np.moveaxis(np.asarray(Lab2, dtype=float), -1, 0)
    C_mean = (np.hypot(a1, b1) + np.hypot(a2, b2)) / 2
    G = 0.5 * (1 - np.sqrt(C_mean**7 / (C_mean**7 + 25.0**7)))
    a1p, a2p = (1 + G) * a1, (1 + G) * a2
    C1p, C2p = np.hypot(a1p, b1), np.hypot(a2p, b2)
    h1p = np.degrees(np.arctan2(b1, a1p)) % 360
    h2p = np.degrees(np.arctan2(b2, a2p)) % 360
    dLp = L2 - L1
    dCp = C2p - C1p
    dhp = h2p - h1p
    dhp = np.where(dhp > 180, dhp - 360, np.where(dhp < -180, dhp + 360, dhp))
    dhp = np.where(C1p * C2p == 0, 0.0, dhp)
    dHp = 2 * np.sqrt(C1p * C2p) * np.sin(np.radians(dhp / 2))
    Lp = (L1 + L2) / 2
    Cp = (C1p + C2p) / 2
    hsum = h1p + h2p
    hp = np.where(np.abs(h1p - h2p) <= 180, hsum / 2, np.where(hsum < 360, (hsum + 360) / 2, (hsum - 360) / 2))
    hp = np.where(C1p * C2p == 0, hsum, hp)
    T = (1 - 0.17 * np.cos(np.radians(hp - 30)) + 0.24 * np.cos(np.radians(2 * hp))
         + 0.32 * np.cos(np.radians(3 * hp + 6)) - 0.20 * np.cos(np.radians(4 * hp - 63)))
    d_theta = 30 * np.exp(-(((hp - 275) / 25) ** 2))
    R_C = 2 * np.sqrt(Cp**7 / (Cp**7 + 25.0**7))
    S_L = 1 + 0.015 * (Lp - 50) ** 2 / np.sqrt(20 + (Lp - 50) ** 2)
    S_C = 1 + 0.045 * Cp
    S_H = 1 + 0.015 * Cp * T
    R_T = -np.sin(np.radians(2 * d_theta)) * R_C
    return np.sqrt((dLp / S_L) ** 2 + (dCp / S_C) ** 2 + (dHp / S_H) ** 2 + R_T * (dCp / S_C) * (dHp / S_H))


def parse_colour(text, white_XYZ):
    """A colour typed by a user → CIELAB relative to ``white_XYZ``.

    Accepted: ``#RRGGBB`` (encoded sRGB, as a display shows it), ``srgb:R,G,B``
    with components 0–1, or ``lab:L,a,b``.
    """
    t = str(text).strip().lower()
    try:
        if re.fullmatch(r"#?[0-9a-f]{6}", t):
            h = t.lstrip("#")
            srgb = np.array([int(h[i:i + 2], 16) for i in (0, 2, 4)]) / 255.0
            return XYZ_to_Lab(srgb_to_XYZ(srgb, white_XYZ), white_XYZ)
        kind, _, values = t.partition(":")
        numbers = np.array([float(v) for v in values.split(",")])
        if numbers.size == 3 and kind == "srgb" and np.all((numbers >= 0) & (numbers <= 1)):
            return XYZ_to_Lab(srgb_to_XYZ(numbers, white_XYZ), white_XYZ)
        if numbers.size == 3 and kind == "lab" and np.all(np.isfinite(numbers)):
            return numbers
    except ValueError:
        pass
    raise FilmcalcError(f"Colour {text!r} not understood: write #RRGGBB, srgb:R,G,B (0–1) or lab:L,a,b.")


@dataclasses.dataclass(frozen=True)
class CameraResponse:
    """A linear camera: red, green and blue spectral sensitivities.

    Attributes
    ----------
    wavelength_nm : numpy.ndarray, shape (W,)
    sensitivity : numpy.ndarray, shape (W, 3)
        Relative sensitivities (any scale).
    name : str
    """

    wavelength_nm: np.ndarray
    sensitivity: np.ndarray
    name: str = "camera"


def _first_line(exc):
    return (str(exc).strip().splitlines() or [type(exc).__name__])[0][:120]


def _numeric_csv(path, what, form, columns):
    """The rows of a comma-separated file of numbers after a header line: (N, ``columns``) floats, all
    finite, or a FilmcalcError saying what is wrong."""
    try:
        data = np.loadtxt(path, delimiter=",", skiprows=1, ndmin=2, encoding="utf-8-sig")
    except (OSError, ValueError) as exc:  # includes UnicodeDecodeError and rows of uneven length
        raise FilmcalcError(f"{what} {str(path)!r} could not be read as {form} ({_first_line(exc)}).") from None
    if data.shape[0] == 0 or data.shape[1] < columns:
        raise FilmcalcError(f"{what} {str(path)!r}: every row needs {columns} numbers ({form}).")
    data = data[:, :columns]
    if not np.all(np.isfinite(data)):
        raise FilmcalcError(f"{what} {str(path)!r}: every value must be a finite number (no nan or inf).")
    return data


def load_camera_csv(path):
    """Read ``wavelength_nm,red,green,blue`` sensitivities into a :class:`CameraResponse`."""
    path = Path(path)
    try:
        with path.open(encoding="utf-8-sig") as fh:
            header = [h.strip().lower() for h in fh.readline().split(",")]
    except (OSError, ValueError) as exc:  # UnicodeDecodeError is a ValueError
        raise FilmcalcError(f"Camera file {str(path)!r} could not be read ({_first_line(exc)}); it must be "
                            "UTF-8 text.") from None
    if header[:4] != ["wavelength_nm", "red", "green", "blue"]:
        raise FilmcalcError(f"Camera file {str(path)!r}: the header must be wavelength_nm,red,green,blue.")
    data = _numeric_csv(path, "Camera file", "wavelength_nm,red,green,blue", 4)
    if data.shape[0] < 2 or np.any(np.diff(data[:, 0]) <= 0) or np.any(data[:, 1:4] < 0):
        raise FilmcalcError(f"Camera file {str(path)!r}: need increasing wavelengths and sensitivities ≥ 0.")
    return CameraResponse(data[:, 0], data[:, 1:4], path.stem)


def camera_kernel(camera, source="D65", wavelength_nm=None, white_balance=None, base_dir=None):
    """Weights turning reflectance into white-balanced linear camera RGB.

    RGB = Σ R(λ) S(λ) c̄(λ) Δλ per channel, then each channel is divided by its
    value for a perfect white reflector under the white-balance light (the
    scene's own light by default), so that white reads (1, 1, 1).

    Returns
    -------
    ColourKernel
        ``weights`` give camera RGB (not XYZ); ``white_XYZ`` is (1, 1, 1)·100 in
        camera units when balanced on the scene light.
    """
    wl = DEFAULT_WAVELENGTHS_NM if wavelength_nm is None else np.asarray(wavelength_nm, dtype=float)
    if wl.min() < camera.wavelength_nm[0] or wl.max() > camera.wavelength_nm[-1]:
        raise FilmcalcError(f"Camera {camera.name!r} covers {camera.wavelength_nm[0]:g}–"
                            f"{camera.wavelength_nm[-1]:g} nm; the colour grid needs {wl.min():g}–{wl.max():g} nm.")
    sens = np.stack([np.interp(wl, camera.wavelength_nm, camera.sensitivity[:, i]) for i in range(3)], -1)
    dl = np.gradient(wl)
    raw = (light_spectrum(source, wl, base_dir) * dl)[:, None] * sens
    balance_light = source if white_balance is None else white_balance
    ref = ((light_spectrum(balance_light, wl, base_dir) * dl)[:, None] * sens).sum(axis=0)
    if np.any(ref <= 0):
        raise FilmcalcError(f"Camera {camera.name!r} sees no light in one channel under {balance_light!r}.")
    weights = 100.0 * raw / ref
    return ColourKernel(wl, weights, weights.sum(axis=0), source, f"camera:{camera.name}", False)


# Hue families: each is anchored at the CIELAB hue angle (D65, 2°) of a CSS
# Color Module Level 4 named colour (W3C), and a colour belongs to the family
# whose anchor hue is nearest, so the boundaries fall midway between anchors.
# Chosen so that the trade's coarse colour words map onto an open standard's
# colour names rather than onto values picked by eye.
HUE_ANCHORS = {"red": "#ff0000", "orange": "#ffa500", "yellow": "#ffff00", "green": "#008000",
               "cyan": "#00ffff", "blue": "#4169e1", "violet": "#8a2be2", "magenta": "#ff00ff"}


@functools.cache
def _anchor_hues():
    d65 = _xy_to_XYZ(_D65_XY) * 100
    names = list(HUE_ANCHORS)
    labs = np.array([parse_colour(HUE_ANCHORS[n], d65) for n in names])
    return names, np.degrees(np.arctan2(labs[:, 2], labs[:, 1])) % 360


GREY_CHROMA = 4.0  # C*ab below which a colour is called grey (common practice, no source)


def hue_family(Lab):
    """Coarse hue name(s) of CIELAB colours: the family whose anchor hue is nearest, or grey.

    Parameters
    ----------
    Lab : array_like, shape (..., 3)

    Returns
    -------
    str or numpy.ndarray of str, shape (...)
    """
    Lab = np.asarray(Lab, dtype=float)
    names, anchors = _anchor_hues()
    h = np.degrees(np.arctan2(Lab[..., 2], Lab[..., 1])) % 360
    gap = np.abs((h[..., None] - anchors + 180) % 360 - 180)
    family = np.array(names)[np.argmin(gap, axis=-1)]
    named = np.where(np.hypot(Lab[..., 1], Lab[..., 2]) < GREY_CHROMA, "grey", family)
    return str(named) if named.ndim == 0 else named
