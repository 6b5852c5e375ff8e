"""What a film looks like: its colour over thickness and angle, and back.

Public names
------------
FilmColours, film_colours
    Colours of the stack's film over a thickness × angle grid (XYZ, sRGB,
    CIELAB, hex), computed with the fast thickness sweep and, for a
    microscope objective, averaged over its illumination cone.
fringe_order
    Interference order 2 n d cos θ_t / λ of the film at a reference wavelength.
match_colour
    Every thickness in a range whose colour lies within a ΔE₀₀ tolerance of a
    target colour, grouped into separate candidates with their fringe order.

This module joins the optics and colour modules; it holds no physics of its
own beyond arranging them.
"""

from __future__ import annotations

import dataclasses

import numpy as np

from .colour import XYZ_to_Lab, XYZ_to_srgb, XYZ_to_xy, colour_kernel, delta_E_2000, srgb_to_hex_array
from .errors import FilmcalcError
from .optics import cone_angles, stack_indices, thickness_sweep

__all__ = ["FilmColours", "film_colours", "fringe_order", "match_colour", "REFERENCE_WAVELENGTH_NM"]

# Wavelength at which fringe orders are counted (near the eye's peak sensitivity;
# common practice, no source).
REFERENCE_WAVELENGTH_NM = 550.0

# Angular step of the grid from which cone averages are interpolated, degrees.
_CONE_GRID_STEP_DEG = 1.0


@dataclasses.dataclass
class FilmColours:
    """Colours of a film over thickness and angle.

    Attributes
    ----------
    thickness_nm : numpy.ndarray, shape (D,)
    angle_deg : numpy.ndarray, shape (A,)
    XYZ : numpy.ndarray, shape (A, D, 3)
        Tristimulus values, Y = 100 for a perfect white at exposure 1.
    white_XYZ : numpy.ndarray, shape (3,)
        The light's white (the CIELAB reference white).
    srgb : numpy.ndarray, shape (A, D, 3)
        Encoded sRGB 0–1 for display (each channel clipped).
    out_of_gamut : numpy.ndarray of bool, shape (A, D)
    Lab : numpy.ndarray, shape (A, D, 3)
        CIELAB relative to ``white_XYZ``.
    Y_reflectance : numpy.ndarray, shape (A, D)
        Luminous reflectance in percent (Y at exposure 1).
    source, observer, polarisation : str
    exposure, numerical_aperture : float
    monochromatic : bool
        Line light: the colours are shades of the line colour (fringes).
    warnings : list of str
    """

    thickness_nm: np.ndarray
    angle_deg: np.ndarray
    XYZ: np.ndarray
    white_XYZ: np.ndarray
    srgb: np.ndarray
    out_of_gamut: np.ndarray
    Lab: np.ndarray
    Y_reflectance: np.ndarray
    source: str
    observer: str
    polarisation: str
    exposure: float
    numerical_aperture: float
    monochromatic: bool
    warnings: list

    @property
    def xy(self):
        """CIE 1931 chromaticity, shape (A, D, 2)."""
        return XYZ_to_xy(self.XYZ)

    def with_exposure(self, exposure):
        """The same film at another exposure (colours recomputed from XYZ)."""
        if not np.isfinite(exposure) or exposure <= 0:
            raise FilmcalcError(f"Exposure must be a number > 0 (got {exposure}).")
        XYZ = self.XYZ * (exposure / self.exposure)
        srgb, out = XYZ_to_srgb(XYZ, self.white_XYZ)
        return dataclasses.replace(self, XYZ=XYZ, srgb=srgb, out_of_gamut=out, Lab=XYZ_to_Lab(XYZ, self.white_XYZ),
                                   exposure=float(exposure))

    def auto_exposure(self, target_Y=90.0, largest=30.0):
        """Exposure that brings the brightest colour on the grid to Y = ``target_Y`` (at most ``largest``)."""
        brightest = float(np.max(self.Y_reflectance))
        return float(min(largest, target_Y / brightest)) if brightest > 0 else 1.0

    def at_angle(self, index):
        """The same colours for one angle only (index into ``angle_deg``)."""
        keep = slice(index, index + 1)
        return dataclasses.replace(self, angle_deg=self.angle_deg[keep], XYZ=self.XYZ[keep], srgb=self.srgb[keep],
                                   out_of_gamut=self.out_of_gamut[keep], Lab=self.Lab[keep],
                                   Y_reflectance=self.Y_reflectance[keep])

    def hex(self, rows=slice(None), cols=slice(None)):
        """'#rrggbb' strings, shape (A, D), or for the given angle rows and thickness columns."""
        return srgb_to_hex_array(self.srgb[rows][:, cols])


def _sweep_xyz(n, d, coherent, film, dz, wl, angles, weights, polarisation):
    """XYZ over (angles, thickness), without keeping the full spectral cube."""
    out = np.zeros((angles.size, dz.size, 3))
    pols = ("s", "p") if polarisation == "unpolarised" else (polarisation,)
    # Chunks of about 1 M reflectances (8 MB) are reused by the allocator from one
    # chunk to the next, so memory stays small and no time goes on fresh pages.
    step = max(1, (1 << 20) // max(dz.size * wl.size, 1))
    for a0 in range(0, angles.size, step):
        sl = slice(a0, a0 + step)
        for pol in pols:
            R = thickness_sweep(n, d, coherent, film, dz, wl, angles[sl], pol, transmittance=False)[0]
            out[sl] += (R @ weights) / len(pols)
    return out


def _cone_matrix(centres, na, n_ambient):
    """Averaging over each centre's cone, as a matrix acting on a uniform angle grid.

    Returns the grid (degrees) and K (centres × grid): each centre's quadrature
    nodes (:func:`filmcalc.optics.cone_angles`) linearly interpolated on the grid.
    """
    nodes = [cone_angles(c, na, n_ambient) for c in centres]
    lo = min(a.min() for a, _ in nodes)
    hi = max(a.max() for a, _ in nodes)
    count = max(2, int(np.ceil((hi - lo) / _CONE_GRID_STEP_DEG)) + 1)
    grid = np.linspace(lo, hi, count)
    K = np.zeros((len(centres), grid.size))
    for i, (angles, w) in enumerate(nodes):
        pos = np.clip((angles - lo) / (grid[1] - grid[0]), 0, grid.size - 1 - 1e-12)
        j = np.floor(pos).astype(int)
        f = pos - j
        np.add.at(K[i], j, w * (1 - f))
        np.add.at(K[i], np.minimum(j + 1, grid.size - 1), w * f)
    return grid, K


def film_colours(stack, thickness_nm, angle_deg=None, *, observer="2", exposure=1.0, polarisation=None,
                 numerical_aperture=None, wavelength_nm=None):
    """Colours of the stack's unknown film over thicknesses and angles.

    Parameters
    ----------
    stack : filmcalc.stack.Stack
        Its light source, polarisation and NA are used unless overridden.
    thickness_nm : array_like, shape (D,)
        Film thicknesses, nm.
    angle_deg : array_like, shape (A,), optional
        Angles of incidence, degrees (the stack's own by default).
    observer : {"2", "10"}
    exposure : float
        Multiplies the reflected light before it becomes a colour (a camera's
        exposure; 1 = shown next to a perfect white).
    polarisation : {"unpolarised", "s", "p"}, optional
    numerical_aperture : float, optional
        With NA > 0 each angle is averaged over its illumination cone; the
        cone average is interpolated linearly from a 1° angle grid (colour
        error below ΔE₀₀ 0.02 for films up to 2 µm; see the tests).
    wavelength_nm : array_like, optional
        Colour integration grid for continuous light (default 380–780 nm, 5 nm).

    Returns
    -------
    FilmColours
    """
    film = stack.film_index
    if film is None:
        raise FilmcalcError(f"Stack {stack.name!r} marks no layer as unknown = true.")
    if not np.isfinite(exposure) or exposure <= 0:
        raise FilmcalcError(f"Exposure must be a number > 0 (got {exposure}).")
    base_dir = None if stack.source_path is None else stack.source_path.parent
    kernel = colour_kernel(stack.light.source, observer, wavelength_nm, base_dir)
    pol = stack.light.polarisation if polarisation is None else polarisation
    if pol not in ("unpolarised", "s", "p"):
        raise FilmcalcError(f"polarisation must be unpolarised, s or p (got {pol!r}).")
    na = stack.light.numerical_aperture if numerical_aperture is None else float(numerical_aperture)
    dz = np.atleast_1d(np.asarray(thickness_nm, dtype=float))
    centres = np.atleast_1d(np.asarray(stack.light.angle_deg if angle_deg is None else angle_deg, dtype=float))
    wl = kernel.wavelength_nm
    n, warnings = stack_indices(stack, wl)
    d = [layer.thickness_nm for layer in stack.layers]
    coherent = [layer.coherent for layer in stack.layers]
    if na > 0:
        grid, K = _cone_matrix(centres, na, float(np.min(n[0].real)))
        XYZ = np.tensordot(K, _sweep_xyz(n, d, coherent, film, dz, wl, grid, kernel.weights, pol), axes=1)
    else:
        XYZ = _sweep_xyz(n, d, coherent, film, dz, wl, centres, kernel.weights, pol)
    Y = XYZ[..., 1].copy()
    XYZ *= exposure
    srgb, out = XYZ_to_srgb(XYZ, kernel.white_XYZ)
    return FilmColours(dz, centres, XYZ, kernel.white_XYZ, srgb, out, XYZ_to_Lab(XYZ, kernel.white_XYZ), Y,
                       stack.light.source, str(observer), pol, float(exposure), na, kernel.monochromatic,
                       warnings)


def fringe_order(stack, thickness_nm, angle_deg=None, wavelength_nm=REFERENCE_WAVELENGTH_NM):
    """Interference order m = 2 n d cos θ_t / λ of the film (real part of n).

    One order is one thickness period λ / (2 n cos θ_t) of the reflectance at
    ``wavelength_nm``.
    """
    n, _ = stack_indices(stack, np.array([wavelength_nm]))
    theta = np.deg2rad(stack.light.angle_deg if angle_deg is None else angle_deg)
    beta = n[0].real[0] * np.sin(theta)
    nf = n[stack.film_index + 1].real[0]
    cos_t = np.sqrt(np.maximum(1 - (beta / nf) ** 2, 0))
    return 2 * nf * np.asarray(thickness_nm, dtype=float) * cos_t / wavelength_nm


def match_colour(target_Lab, colours, tolerance=5.0, stack=None):
    """Thicknesses whose colour lies within ``tolerance`` ΔE₀₀ of a target.

    Parameters
    ----------
    target_Lab : array_like, shape (3,)
        CIELAB relative to ``colours.white_XYZ``.
    colours : FilmColours
        For one angle (the first is used).
    tolerance : float
        Largest ΔE₀₀ accepted.
    stack : filmcalc.stack.Stack, optional
        To label candidates with their fringe order at 550 nm.

    Returns
    -------
    list of dict
        One per separate thickness interval inside the tolerance, best first:
        ``thickness_nm`` (best), ``delta_E``, ``from_nm``, ``to_nm``, ``order``
        (integer fringe order, or None), ``hex``.
    """
    if tolerance <= 0:
        raise FilmcalcError("The ΔE tolerance must be > 0.")
    dE = delta_E_2000(np.asarray(target_Lab, dtype=float), colours.Lab[0])
    inside = dE <= tolerance
    if not inside.any():
        return []
    edges = np.flatnonzero(np.diff(np.concatenate([[0], inside.astype(int), [0]])))
    starts, stops = edges[::2], edges[1::2]
    orders = None if stack is None else fringe_order(stack, colours.thickness_nm, colours.angle_deg[0])
    hexes = colours.hex()[0]
    found = []
    for a, b in zip(starts, stops):
        best = a + int(np.argmin(dE[a:b]))
        found.append({
            "thickness_nm": float(colours.thickness_nm[best]), "delta_E": float(dE[best]),
            "from_nm": float(colours.thickness_nm[a]), "to_nm": float(colours.thickness_nm[b - 1]),
            "order": None if orders is None else int(np.floor(orders[best])) + 1, "hex": str(hexes[best]),
        })
    return sorted(found, key=lambda c: c["delta_E"])
