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

from .colour import (XYZ_to_Lab, XYZ_to_srgb, XYZ_to_xy, colour_kernel, delta_E_2000, line_colour_srgb,
                     srgb_to_hex_array)
from .errors import FilmcalcError
from .optics import cone_angles, stack_indices, thickness_sweep

__all__ = ["FilmColours", "film_colours", "fringe_order", "match_colour", "REFERENCE_WAVELENGTH_NM"]

# Wavelength at which fringe orders are counted (near the eye's peak sensitivity;
# common practice, no source).
REFERENCE_WAVELENGTH_NM = 550.0


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
        srgb, out = _display(XYZ, self.white_XYZ, self.monochromatic)
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


def _display(XYZ, white_XYZ, monochromatic):
    """sRGB for display: adapted to D65, or shades of the line colour under line light."""
    return (line_colour_srgb if monochromatic else XYZ_to_srgb)(XYZ, white_XYZ)


def _sweep_xyz(n, d, coherent, film, dz, wl, angles, weights, polarisation):
    """XYZ over (angles, thickness), without keeping the full spectral cube.

    Chunks of about 1 M reflectances (8 MB), split over angles and, for long
    thickness grids, over evenly spaced pieces of the grid, are reused by the
    allocator from one chunk to the next: memory stays small.
    """
    out = np.zeros((angles.size, dz.size, 3))
    pols = ("s", "p") if polarisation == "unpolarised" else (polarisation,)
    budget = 1 << 20
    per_piece = max(16, budget // max(wl.size, 1))
    pieces = [slice(i, i + per_piece) for i in range(0, dz.size, per_piece)]
    step = max(1, budget // max(min(dz.size, per_piece) * wl.size, 1))
    for a0 in range(0, angles.size, step):
        sl = slice(a0, a0 + step)
        for piece in pieces:
            for pol in pols:
                R = thickness_sweep(n, d, coherent, film, dz[piece], wl, angles[sl], pol, transmittance=False)[0]
                out[sl, piece] += (R @ weights) / len(pols)
    return out


def _colour_grid(stack, thickness_nm):
    """Wavelength step fine enough for the thickest film: Δλ ≤ λ²/(8 n d), 0.5–5 nm.

    A film of thickness d has reflectance fringes λ²/(2nd) apart in
    wavelength; four samples per fringe keep the colour integral true.
    """
    d_max = float(np.max(thickness_nm)) if np.size(thickness_nm) else 0.0
    n_film = float(np.max(stack.film.material.index(np.array([380.0, 550.0, 780.0])).real))
    need = 380.0**2 / (8 * n_film * d_max) if d_max > 0 else 5.0
    step = next((s for s in (5.0, 2.5, 2.0, 1.0, 0.5) if s <= need), 0.5)
    return np.arange(380.0, 780.0 + step / 2, step)


def _cone_resolution(d_max, na):
    """Angle-grid step (degrees) and quadrature rings for cone averages of films up to d_max.

    Chosen so that the film's round-trip phase changes little between nodes:
    1° and 6 rings suffice to 2 µm at NA 0.3 (tested); both scale with d·NA.
    """
    step = float(np.clip(2000.0 / max(d_max, 1.0), 0.1, 1.0))
    rings = int(np.clip(np.ceil(6 * d_max * na / 600.0), 6, 24))
    return step, rings


def _cone_matrix(centres, na, n_ambient, grid_step_deg=1.0, rings=6):
    """Averaging over each centre's cone, as a matrix acting on a uniform angle grid.

    Returns the grid (degrees) and K (centres × grid): each centre's quadrature
    nodes (:func:`filmcalc.optics.cone_angles`) linearly interpolated on the grid.
    """
    nodes = [cone_angles(c, na, n_ambient, rings=rings, spokes=2 * rings) for c in centres]
    lo = min(a.min() for a, _ in nodes)
    hi = max(a.max() for a, _ in nodes)
    count = max(2, int(np.ceil((hi - lo) / grid_step_deg)) + 1)
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
        cone average is interpolated linearly from a grid of angles (1° up to
        2 µm, finer for thicker films; colour error below ΔE₀₀ 0.02 up to
        2 µm at NA 0.3, see the tests).
    wavelength_nm : array_like, optional
        Colour integration grid for continuous light (default 380–780 nm every
        5 nm, finer for films thicker than about 2.5 µm; see ``_colour_grid``).

    Returns
    -------
    FilmColours
    """
    film = stack.film_index
    if film is None:
        raise FilmcalcError(f"Stack {stack.name!r} marks no layer as unknown = true.")
    if not np.isfinite(exposure) or exposure <= 0:
        raise FilmcalcError(f"Exposure must be a number > 0 (got {exposure}).")
    base_dir = stack.base_dir
    dz = np.atleast_1d(np.asarray(thickness_nm, dtype=float))
    if wavelength_nm is None:
        wavelength_nm = _colour_grid(stack, dz)
    kernel = colour_kernel(stack.light.source, observer, wavelength_nm, base_dir)
    pol = stack.light.polarisation if polarisation is None else polarisation
    if pol not in ("unpolarised", "s", "p"):
        raise FilmcalcError(f"polarisation must be unpolarised, s or p (got {pol!r}).")
    na = stack.light.numerical_aperture if numerical_aperture is None else float(numerical_aperture)
    centres = np.atleast_1d(np.asarray(stack.light.angle_deg if angle_deg is None else angle_deg, dtype=float))
    wl = kernel.wavelength_nm
    n, warnings = stack_indices(stack, wl)
    d = [layer.thickness_nm for layer in stack.layers]
    coherent = [layer.coherent for layer in stack.layers]
    if na > 0:
        step, rings = _cone_resolution(float(dz.max()), na)
        grid, K = _cone_matrix(centres, na, float(np.min(n[0].real)), step, rings)
        XYZ = np.tensordot(K, _sweep_xyz(n, d, coherent, film, dz, wl, grid, kernel.weights, pol), axes=1)
    else:
        XYZ = _sweep_xyz(n, d, coherent, film, dz, wl, centres, kernel.weights, pol)
    Y = XYZ[..., 1].copy()
    XYZ *= exposure
    srgb, out = _display(XYZ, kernel.white_XYZ, kernel.monochromatic)
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
        Largest ΔE₀₀ accepted (under line light: largest difference in L*).
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
    target = np.asarray(target_Lab, dtype=float)
    # Under line light only lightness carries information; compare L* alone.
    dE = np.abs(colours.Lab[0, :, 0] - target[0]) if colours.monochromatic else delta_E_2000(target, colours.Lab[0])
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
