"""Reflectance and transmittance of thin-film stacks (transfer-matrix optics).

Public names
------------
normal_wavevectors
    n·cos θ in every medium from Snell's law, on the decaying branch.
coherent_rt
    R and T of a coherent stack (general path, any layer thicknesses).
stack_rt
    R and T of a stack mixing coherent and incoherent (thick) layers.
thickness_sweep
    R and T while one layer's thickness varies (fast path).
cone_angles
    Quadrature angles and weights for a microscope objective's cone (NA).
stack_reflectance, reflectance_sweep, Reflectance
    The same for a :class:`filmcalc.stack.Stack`: spectra, and R over a
    thickness × angle × wavelength grid.

Conventions
-----------
Complex index N = n + i·k with k ≥ 0 in absorbing media, plane waves
exp(i(kz·z − ωt)), the same convention as Byrnes' ``tmm``. Wavelengths and
thicknesses in nm, angles in degrees at the public boundary. Arrays broadcast
in the numpy way; the caller lays the axes out (the stack module puts angle
first and wavelength last). ``polarisation`` is ``"s"`` or ``"p"``;
unpolarised reflectance is the mean of the s and p *reflectances*.

Method
------
For incidence from medium 0 at angle θ₀ the tangential index β = n₀ sin θ₀
is conserved, and in medium j the normal component is
q_j = N_j cos θ_j = √(N_j² − β²), taken with Im q ≥ 0 (Re q ≥ 0 when real)
so that the wave decays or travels away from the interface, which also
gives total reflection past the critical angle. Interface coefficients
(Fresnel, in the convention of Born & Wolf):

* s: r = (q_i − q_j)/(q_i + q_j),  t = 2q_i/(q_i + q_j)
* p: r = (N_j² q_i − N_i² q_j)/(N_j² q_i + N_i² q_j),  t = 2 N_i N_j q_i/(N_j² q_i + N_i² q_j)

A layer of thickness d adds the phase δ = 2π q d / λ. The general path
collapses the stack from the substrate up (Rouard's recursion, equivalent
to multiplying 2×2 transfer matrices but free of overflow in thick absorbing
layers): r ← (r_ij + r e^{2iδ}) / (1 + r_ij r e^{2iδ}),
t ← t_ij t e^{iδ} / (1 + r_ij r e^{2iδ}). Power transmittance is
T = |t|² Re(q_out)/Re(q_in) for s and |t|² Re(N_out* q_out/N_out)/Re(…in)
for p (Byrnes 2016, eqs. 21–22).

The thickness sweep splits the stack at the swept layer into an upper and a
lower part, reduces each to its scattering coefficients once per
(λ, θ, polarisation), and for each thickness adds only the phase factor:
r = r_a + t_a t_a′ r_b e^{2iδ} / (1 − r_a′ r_b e^{2iδ}).

Incoherent (thick) layers are combined in intensity with their single-pass
attenuation |e^{iδ}|² (net-radiation method), as in ``tmm.inc_tmm``.

References
----------
Born, M. & Wolf, E. (1999). Principles of Optics, 7th ed., §1.5 and §1.6.
Byrnes, S. J. (2016). Multilayer optical calculations. arXiv:1603.02720.
Macleod, H. A. (2010). Thin-Film Optical Filters, 4th ed., ch. 2.
Heavens, O. S. (1955). Optical Properties of Thin Solid Films (Rouard's method).
Centurioni, E. (2005). Generalized matrix method for calculation of internal
light energy flux in mixed coherent and incoherent multilayers. Appl. Opt. 44, 7532.
"""

from __future__ import annotations

import dataclasses

import numpy as np

from .errors import FilmcalcError

__all__ = [
    "normal_wavevectors",
    "coherent_rt",
    "stack_rt",
    "thickness_sweep",
    "cone_angles",
    "Reflectance",
    "stack_indices",
    "stack_reflectance",
    "reflectance_sweep",
]


def _check_polarisation(polarisation):
    if polarisation not in ("s", "p"):
        raise FilmcalcError(f"polarisation must be 's' or 'p' here (got {polarisation!r}).")


def _beta(n_ambient, angle_deg):
    """Conserved tangential index β = n₀ sin θ₀ (real)."""
    n0 = np.asarray(n_ambient)
    if np.iscomplexobj(n0):
        if np.any(np.abs(n0.imag) > 1e-12 * np.abs(n0.real)):
            raise FilmcalcError("The ambient (incidence) medium must be non-absorbing (k = 0).")
        n0 = n0.real
    theta = np.asarray(angle_deg, dtype=float)
    if np.any(theta < 0) or np.any(theta >= 90):
        raise FilmcalcError("Angles of incidence must lie in 0° ≤ θ < 90°.")
    return n0 * np.sin(np.deg2rad(theta))


def normal_wavevectors(indices, beta):
    """q = N cos θ in each medium, on the physical branch.

    Parameters
    ----------
    indices : sequence of array_like
        Complex indices N = n + i·k of each medium.
    beta : array_like
        Conserved tangential index n₀ sin θ₀.

    Returns
    -------
    list of numpy.ndarray
        q_j = √(N_j² − β²) with Im q ≥ 0, and Re q ≥ 0 when Im q = 0.
    """
    out = []
    b2 = np.asarray(beta, dtype=float) ** 2
    for n in indices:
        n = np.asarray(n, dtype=complex)
        q = np.sqrt(n * n - b2)
        # np.sqrt picks Re ≥ 0; a signed zero in Im(N² − β²) can put the root
        # on the growing branch, so flip any root with Im < 0.
        out.append(np.where(q.imag < 0, -q, q))
    return out


def _interface(n_i, n_j, q_i, q_j, polarisation):
    """Fresnel r and t for light going from medium i into medium j."""
    if polarisation == "s":
        den = q_i + q_j
        return (q_i - q_j) / den, 2 * q_i / den
    ni2, nj2 = n_i * n_i, n_j * n_j
    den = nj2 * q_i + ni2 * q_j
    return (nj2 * q_i - ni2 * q_j) / den, 2 * n_i * n_j * q_i / den


def _phase(q, d, wavelength_nm):
    """e^{iδ} with δ = 2π q d / λ."""
    return np.exp(2j * np.pi * q * np.asarray(d, dtype=float) / wavelength_nm)


def _rouard(n, q, d, wavelength_nm, polarisation):
    """r, t of a coherent stack lit from medium 0 (n, q: lists; d: inner thicknesses)."""
    r, t = _interface(n[-2], n[-1], q[-2], q[-1], polarisation)
    for j in range(len(n) - 2, 0, -1):
        e1 = _phase(q[j], d[j - 1], wavelength_nm)
        r_ij, t_ij = _interface(n[j - 1], n[j], q[j - 1], q[j], polarisation)
        e2r = e1 * e1 * r
        den = 1 + r_ij * e2r
        r, t = (r_ij + e2r) / den, t_ij * t * e1 / den
    return r, t


def _power_factor(n, q, polarisation):
    """The quantity whose real part carries the normal power flux (Byrnes 2016)."""
    return q if polarisation == "s" else np.conj(n) * q / n


def _transmittance(t2, n_in, q_in, n_out, q_out, polarisation):
    """T = |t|² Re(f_out)/Re(f_in), f the power-flux factor of each medium."""
    f_in = _power_factor(n_in, q_in, polarisation).real
    f_out = _power_factor(n_out, q_out, polarisation).real
    # An evanescent wave in the entry medium (possible only inside a stack,
    # beyond a thick layer past its critical angle) carries no power: T = 0.
    ratio = np.divide(f_out, f_in, out=np.zeros(np.broadcast(f_out, f_in).shape), where=f_in != 0)
    return t2 * ratio


def _power(r, t, n_in, q_in, n_out, q_out, polarisation):
    return np.abs(r) ** 2, _transmittance(np.abs(t) ** 2, n_in, q_in, n_out, q_out, polarisation)


def coherent_rt(indices, thicknesses_nm, wavelength_nm, angle_deg, polarisation):
    """Reflectance and transmittance of a fully coherent stack (general path).

    Parameters
    ----------
    indices : sequence of array_like
        N = n + i·k of each medium from the ambient (non-absorbing) to the
        substrate; each broadcasts against the wavelength array.
    thicknesses_nm : sequence of array_like
        Thickness of each inner layer, nm; any may be an array (a sweep).
    wavelength_nm : array_like
        Vacuum wavelength, nm.
    angle_deg : array_like
        Angle of incidence in the ambient, degrees, 0 ≤ θ < 90.
    polarisation : {"s", "p"}

    Returns
    -------
    R, T : numpy.ndarray
        Power reflectance and transmittance (fractions 0–1), broadcast over
        all inputs. Absorptance is 1 − R − T.

    Examples
    --------
    >>> R, T = coherent_rt([1.0, 1.5], [], 550.0, 0.0, "s")
    >>> round(float(R), 6)
    0.04
    """
    beta = _beta(indices[0], angle_deg)
    n = [np.asarray(x, dtype=complex) for x in indices]
    q = normal_wavevectors(n, beta)
    _check_polarisation(polarisation)
    r, t = _rouard(n, q, list(thicknesses_nm), wavelength_nm, polarisation)
    return _power(r, t, n[0], q[0], n[-1], q[-1], polarisation)


def _split_groups(coherent):
    """Indices of incoherent media (including both outer media) bounding coherent groups."""
    return [0] + [i + 1 for i, c in enumerate(coherent) if not c] + [len(coherent) + 1]


def _combine_incoherent(groups, attenuation):
    """Net-radiation combination of coherent groups separated by thick layers.

    ``groups``: list of (R, T, R_back, T_back) per group, top to bottom;
    ``attenuation``: single-pass intensity factor of each thick layer between them.
    """
    R, T = groups[-1][0], groups[-1][1]
    for (Ra, Ta, Rab, Tab), P in zip(groups[-2::-1], attenuation[::-1]):
        den = 1 - Rab * R * P * P
        # den = 0 only between two totally reflecting boundaries around a lossless
        # thick layer; then Tab = 0 and no light enters it: the terms vanish.
        safe = np.where(den > 0, den, 1.0)
        R, T = Ra + np.where(den > 0, Ta * Tab * R * P * P / safe, 0.0), np.where(den > 0, Ta * T * P / safe, 0.0)
    return R, T


def _group_rt(n, q, d, wavelength_nm, polarisation):
    """R, T from the front and R, T from the back of one coherent group."""
    r, t = _rouard(n, q, d, wavelength_nm, polarisation)
    rb, tb = _rouard(n[::-1], q[::-1], d[::-1], wavelength_nm, polarisation)
    R, T = _power(r, t, n[0], q[0], n[-1], q[-1], polarisation)
    Rb, Tb = _power(rb, tb, n[-1], q[-1], n[0], q[0], polarisation)
    return R, T, Rb, Tb


def _attenuations(n_all, q_all, d_all, wavelength_nm, bounds):
    return [np.abs(_phase(q_all[b], d_all[b - 1], wavelength_nm)) ** 2 for b in bounds[1:-1]]


def stack_rt(indices, thicknesses_nm, coherent, wavelength_nm, angle_deg, polarisation):
    """R and T of a stack with coherent and incoherent (thick) layers.

    Parameters
    ----------
    indices, thicknesses_nm, wavelength_nm, angle_deg, polarisation
        As in :func:`coherent_rt`.
    coherent : sequence of bool
        For each inner layer, whether it is thin (coherent) or thick
        (incoherent: combined in intensity, e.g. a 1 mm glass slide).

    Returns
    -------
    R, T : numpy.ndarray
    """
    _check_polarisation(polarisation)
    n = [np.asarray(x, dtype=complex) for x in indices]
    d = list(thicknesses_nm)
    coherent = list(coherent)
    if len(coherent) != len(d):
        raise FilmcalcError("Give one coherent/incoherent flag per inner layer.")
    beta = _beta(n[0], angle_deg)
    q = normal_wavevectors(n, beta)
    if all(coherent):
        r, t = _rouard(n, q, d, wavelength_nm, polarisation)
        return _power(r, t, n[0], q[0], n[-1], q[-1], polarisation)
    bounds = _split_groups(coherent)
    groups = [_group_rt(n[a:b + 1], q[a:b + 1], d[a:b - 1], wavelength_nm, polarisation)
              for a, b in zip(bounds[:-1], bounds[1:])]
    return _combine_incoherent(groups, _attenuations(n, q, d, wavelength_nm, bounds))


def thickness_sweep(indices, thicknesses_nm, coherent, film, film_thickness_nm, wavelength_nm,
                    angle_deg, polarisation, transmittance=True):
    """R and T as one layer's thickness varies: the fast path.

    Everything above and below the swept (coherent) layer is reduced once per
    (λ, θ, polarisation) to its scattering coefficients r_a, t_a, r_a′, r_b,
    t_b. With z = e^{2iδ} the film's round-trip phase factor,
    r = (r_a + B z)/(1 + C z), C = −r_a′ r_b, B = t_a t_a′ r_b + r_a C, so
    |r|² is a ratio of two expressions linear in Re z, Im z and |z|². On an
    evenly spaced thickness grid z itself factorises into a coarse and a
    fine phase table (z_m = E_{m div M} F_{m mod M}), so each (θ, d, λ) point
    costs a handful of real multiply–adds and no trigonometric function.

    Parameters
    ----------
    indices : sequence of array_like
        N of every medium, ambient first; each a scalar or shaped like
        ``wavelength_nm``.
    thicknesses_nm : sequence of float
        Thickness of each inner layer, nm (the swept layer's entry is ignored).
    coherent : sequence of bool
        Per inner layer: thin (coherent) or thick (incoherent).
    film : int
        Which inner layer is swept (0 = the first layer below the ambient).
    film_thickness_nm : array_like, shape (D,)
        Thicknesses of the swept layer, nm.
    wavelength_nm : array_like, shape (W,)
        Vacuum wavelengths, nm.
    angle_deg : array_like, shape (A,) or scalar
        Angles of incidence in the ambient, degrees.
    polarisation : {"s", "p"}
    transmittance : bool
        Also compute T (else ``None`` is returned for it).

    Returns
    -------
    R, T : numpy.ndarray, shape (A, D, W)
        Power reflectance and transmittance.
    """
    _check_polarisation(polarisation)
    d = [float(x) for x in thicknesses_nm]
    coherent = [bool(c) for c in coherent]
    if len(coherent) != len(d) or len(indices) != len(d) + 2:
        raise FilmcalcError("Give two outer media, and a thickness and coherent flag per inner layer.")
    if not 0 <= film < len(d):
        raise FilmcalcError(f"The swept layer must be one of the {len(d)} inner layers (got {film}).")
    if not coherent[film]:
        raise FilmcalcError("The swept film must be a coherent (thin) layer.")
    dz = np.atleast_1d(np.asarray(film_thickness_nm, dtype=float))
    wl = np.atleast_1d(np.asarray(wavelength_nm, dtype=float))
    angles = np.atleast_1d(np.asarray(angle_deg, dtype=float))
    if dz.ndim != 1 or wl.ndim != 1 or angles.ndim != 1:
        raise FilmcalcError("Film thicknesses, wavelengths and angles must each be 1-D here.")
    if np.any(dz < 0) or not np.all(np.isfinite(dz)):
        raise FilmcalcError("Film thicknesses must be finite and ≥ 0 nm.")
    need_back = not all(coherent)
    n = [np.broadcast_to(np.asarray(x, dtype=complex), wl.shape) for x in indices]
    R = np.empty((angles.size, dz.size, wl.size))
    T = np.empty_like(R) if (transmittance or need_back) else None
    coarse, fine = _thickness_tables(dz)
    co = _sweep_coefficients(n, d, coherent, film, wl, angles, polarisation, T is not None)
    # Chunks of angles keep each temporary near a megabyte (cache-sized).
    step = max(1, (1 << 17) // max(dz.size * wl.size, 1))
    for a0 in range(0, angles.size, step):
        sl = slice(a0, a0 + step)
        _sweep_fill(R[sl], None if T is None else T[sl], {k: v[sl] for k, v in co.items()},
                    coarse, fine, wl, polarisation)
    return R, (T if transmittance else None)


def _thickness_tables(dz):
    """Coarse and fine offsets with d_m = coarse[m // M] + fine[m % M].

    On an evenly spaced grid M is near √D (a divisor of D when one is close,
    so no padding is needed); otherwise every thickness is its own coarse
    entry and the fine table is [0].
    """
    D = dz.size
    if D >= 16:
        h = (dz[-1] - dz[0]) / (D - 1)
        if h > 0 and np.allclose(np.diff(dz), h, rtol=1e-12, atol=1e-12 * abs(dz[-1])):
            root = int(np.sqrt(D))
            M = next((m for m in range(root, 2 * root + 1) if D % m == 0), root + 1)
            return dz[0] + h * M * np.arange(-(-D // M)), h * np.arange(M)
    return dz, np.zeros(1)


def _sweep_coefficients(n, d, coherent, film, wl, angles, polarisation, want_t):
    """Everything of the sweep that does not depend on the film thickness, shape (A, W)."""
    beta = _beta(n[0][None, :], angles[:, None])
    q = normal_wavevectors(n, beta)
    bounds = _split_groups(coherent)
    j = film + 1  # medium index of the film
    g = next(i for i in range(len(bounds) - 1) if bounds[i] < j < bounds[i + 1])
    top, bottom = bounds[g], bounds[g + 1]
    # Upper part: media top..j (the film as exit medium); lower part: media j..bottom.
    nu, qu, du = n[top:j + 1], q[top:j + 1], d[top:j - 1]
    nl, ql, dl = n[j:bottom + 1], q[j:bottom + 1], d[j:bottom - 1]
    ra, ta = _rouard(nu, qu, du, wl, polarisation)
    rab, tab = _rouard(nu[::-1], qu[::-1], du[::-1], wl, polarisation)
    rb, tb = _rouard(nl, ql, dl, wl, polarisation)
    # With z = e^{2iδ}: r = r_a + t_a t_a′ r_b z / (1 − r_a′ r_b z) = (r_a + B z) / (1 + C z).
    C = -rab * rb
    co = {"k": 4j * np.pi * q[j] / wl, "ra": ra, "B": ta * tab * rb + ra * C, "C": C}
    if not want_t:
        return co
    shape = q[j].shape
    co.update(t2=np.abs(ta * tb) ** 2,
              f_down=_transmittance(np.ones(shape), n[top], q[top], n[bottom], q[bottom], polarisation),
              f_up=_transmittance(np.ones(shape), n[bottom], q[bottom], n[top], q[top], polarisation))
    if all(coherent):
        return co
    rbb, tbb = _rouard(nl[::-1], ql[::-1], dl[::-1], wl, polarisation)
    # r_back = r_b′ + t_b′ t_b r_a′ z / (1 − r_a′ r_b z): the same denominator.
    co.update(rbb=rbb, Bb=tbb * tb * rab + rbb * C, tb2=np.abs(tbb * tab) ** 2)
    for i, (a, b) in enumerate(zip(bounds[:-1], bounds[1:])):
        if i != g:
            for name, x in zip("R T Rb Tb".split(), _group_rt(n[a:b + 1], q[a:b + 1], d[a:b - 1], wl,
                                                                   polarisation)):
                co[f"g{i}_{name}"] = np.broadcast_to(x, shape)
    for i, x in enumerate(_attenuations(n, q, d, wl, bounds)):
        co[f"att{i}"] = np.broadcast_to(x, shape)
    return co


def _sweep_fill(R, T, co, coarse, fine, wl, polarisation):
    """Fill R (and T) of shape (A, D, W) for a few angles (see :func:`thickness_sweep`)."""
    A, D, W = R.shape
    Dc, M = coarse.size, fine.size
    # z = E·F: E on the coarse grid (A, Dc, 1, W), F on the fine grid (A, 1, M, W).
    k = co["k"][:, None, None, :]
    E = np.exp(k * coarse[None, :, None, None])
    F = np.exp(k * fine[None, None, :, None])
    Fr, Fi = np.ascontiguousarray(F.real), np.ascontiguousarray(F.imag)
    E2 = np.abs(E) ** 2
    F2 = None if not np.any(k.real) else np.abs(F) ** 2  # |F| = 1 for a lossless film
    work = np.empty((3, A, Dc, M, W))
    den, num, tmp = work

    def abs2_into(out, a, b):
        """out = |a + b z|² = |a|² + |b|²|z|² + 2 Re(ā b z), in place, viewed as (A, D, W)."""
        a = np.asarray(a)[:, None, None, :] if np.ndim(a) else a
        abE = np.conj(a) * b[:, None, None, :] * E
        b2E2 = (np.abs(b) ** 2)[:, None, None, :] * E2
        np.multiply(2 * abE.real, Fr, out=out)
        np.multiply(-2 * abE.imag, Fi, out=tmp)
        out += tmp
        if F2 is None:
            out += np.abs(a) ** 2 + b2E2
        else:
            np.multiply(b2E2, F2, out=tmp)
            out += tmp
            out += np.abs(a) ** 2
        return out.reshape(A, Dc * M, W)[:, :D]

    den_v = abs2_into(den, 1.0, co["C"])
    np.divide(abs2_into(num, co["ra"], co["B"]), den_v, out=R)
    if T is None:
        return
    # |t|² = |t_a t_b|² |e^{iδ}|² / |1 + C z|², and |e^{iδ}|² = |z|^{1/2}·|z|^{1/2} = |E|·|F|.
    if F2 is None:
        through = 1 / den_v
    else:
        through = (np.sqrt(E2) * np.sqrt(F2)).reshape(A, Dc * M, W)[:, :D] / den_v
    T[...] = (co["t2"] * co["f_down"])[:, None, :] * through
    if "rbb" not in co:
        return
    Rb = abs2_into(num, co["rbb"], co["Bb"]) / den_v
    Tb = (co["tb2"] * co["f_up"])[:, None, :] * through
    count = sum(key.startswith("att") for key in co) + 1
    groups = [tuple(co[f"g{i}_{name}"][:, None, :] for name in "R T Rb Tb".split()) if f"g{i}_R" in co
              else (R.copy(), T.copy(), Rb, Tb) for i in range(count)]
    att = [co[f"att{i}"][:, None, :] for i in range(count - 1)]
    R[...], T[...] = _combine_incoherent(groups, att)


def cone_angles(angle_deg, numerical_aperture, n_ambient=1.0, rings=6, spokes=12):
    """Angles and weights that average over an illumination cone.

    The cone is centred on ``angle_deg`` with half-angle
    α = asin(NA / n_ambient). The pupil is taken as uniformly filled (Köhler
    illumination of an aplanatic objective): equal weight per unit area in
    direction-cosine space, i.e. weight ∝ sin ψ cos ψ dψ dφ about the axis.
    Gauss–Legendre nodes in sin²ψ and equally spaced azimuths φ are used;
    each ray keeps its own plane of incidence, so s (p) here means s (p)
    relative to each ray (exact for unpolarised light).

    Parameters
    ----------
    angle_deg : float
        Axis of the cone, degrees from the surface normal.
    numerical_aperture : float
        NA = n_ambient · sin α (0 means a collimated beam).
    n_ambient : float
        Index of the immersion/ambient medium.
    rings, spokes : int
        Radial and azimuthal quadrature orders.

    Returns
    -------
    angles_deg, weights : numpy.ndarray
        Polar angles of the rays (degrees) and weights summing to 1.
    """
    na = float(numerical_aperture)
    theta_c = np.deg2rad(float(angle_deg))
    if na == 0:
        return np.array([float(angle_deg)]), np.array([1.0])
    if not 0 < na < n_ambient:
        raise FilmcalcError(f"Numerical aperture must lie in 0 ≤ NA < {n_ambient:g} (the ambient index).")
    alpha = np.arcsin(na / n_ambient)
    if theta_c + alpha >= np.pi / 2:
        raise FilmcalcError(
            f"A cone of NA {na:g} around {angle_deg:g}° reaches grazing incidence; lower the angle or the NA."
        )
    x, w = np.polynomial.legendre.leggauss(rings)
    s2 = (x + 1) / 2 * np.sin(alpha) ** 2  # nodes in sin²ψ
    w = w / 2
    psi = np.arcsin(np.sqrt(s2))
    if theta_c == 0:
        return np.rad2deg(psi), w / w.sum()
    phi = (np.arange(spokes) + 0.5) * np.pi / spokes  # half circle, by symmetry
    cos_theta = (np.cos(psi)[:, None] * np.cos(theta_c)
                 + np.sin(psi)[:, None] * np.cos(phi) * np.sin(theta_c))
    weights = np.repeat(w[:, None], spokes, axis=1) / spokes
    return np.rad2deg(np.arccos(np.clip(cos_theta, -1, 1))).ravel(), weights.ravel() / weights.sum()


# ---------------------------------------------------------------------------
# Stacks: the same engine driven by a :class:`filmcalc.stack.Stack`.


@dataclasses.dataclass
class Reflectance:
    """R and T of a stack for s and p light; the last axis is wavelength.

    Attributes
    ----------
    wavelength_nm : numpy.ndarray, shape (W,)
    R_s, R_p, T_s, T_p : numpy.ndarray
        Power reflectance / transmittance, fractions 0–1. For a sweep the
        shape is (angles, thicknesses, W); ``T_*`` may be None when not asked.
    warnings : list of str
        Material formulas used outside their published range, and the like.
    """

    wavelength_nm: np.ndarray
    R_s: np.ndarray
    R_p: np.ndarray
    T_s: np.ndarray | None = None
    T_p: np.ndarray | None = None
    warnings: list = dataclasses.field(default_factory=list)

    @property
    def R(self):
        """Unpolarised reflectance: the mean of the s and p reflectances."""
        return 0.5 * (self.R_s + self.R_p)

    @property
    def T(self):
        """Unpolarised transmittance."""
        return None if self.T_s is None else 0.5 * (self.T_s + self.T_p)

    @property
    def A(self):
        """Unpolarised absorptance 1 − R − T."""
        return None if self.T_s is None else 1 - self.R - self.T

    def reflectance(self, polarisation):
        """R for ``"s"``, ``"p"`` or ``"unpolarised"``."""
        if polarisation not in ("s", "p", "unpolarised"):
            raise FilmcalcError(f"polarisation must be s, p or unpolarised (got {polarisation!r}).")
        return self.R_s if polarisation == "s" else self.R_p if polarisation == "p" else self.R


def stack_indices(stack, wavelength_nm):
    """Complex indices of every medium, ambient first, and any range warnings.

    The ambient must be transparent: a k below 1e-4·n (such as a glass's
    residual absorption) is dropped there, a larger one is an error.
    """
    wl = np.asarray(wavelength_nm, dtype=float)
    indices, warnings = [], []
    for material in stack.media():
        indices.append(np.broadcast_to(material.index(wl), wl.shape))
        for w in material.range_warnings(wl):
            if w not in warnings:
                warnings.append(w)
    n0 = indices[0]
    if np.any(n0.imag > 1e-4 * n0.real):
        raise FilmcalcError(f"The ambient ({stack.ambient.name}) absorbs light; light must arrive through a "
                            "transparent medium. Put the absorbing medium in a layer instead.")
    indices[0] = n0.real.astype(complex)
    return indices, warnings


def _angle_nodes(stack, angle_deg, numerical_aperture, n_ambient):
    na = stack.light.numerical_aperture if numerical_aperture is None else numerical_aperture
    angle = stack.light.angle_deg if angle_deg is None else angle_deg
    return cone_angles(angle, na, float(np.min(n_ambient.real)))


def stack_reflectance(stack, wavelength_nm, film_thickness_nm=None, angle_deg=None, numerical_aperture=None):
    """R and T spectra of a stack (general transfer-matrix path).

    Parameters
    ----------
    stack : filmcalc.stack.Stack
    wavelength_nm : array_like, shape (W,)
        Vacuum wavelengths, nm.
    film_thickness_nm : float, optional
        Thickness of the unknown film, nm (the stack's own by default).
    angle_deg, numerical_aperture : float, optional
        Override the stack's light settings. With NA > 0 the result is
        averaged over the illumination cone (see :func:`cone_angles`).

    Returns
    -------
    Reflectance
        Arrays of shape (W,).
    """
    wl = np.atleast_1d(np.asarray(wavelength_nm, dtype=float))
    if film_thickness_nm is not None:
        stack = stack.with_film_thickness(film_thickness_nm)
    n, warnings = stack_indices(stack, wl)
    angles, weights = _angle_nodes(stack, angle_deg, numerical_aperture, n[0])
    d = [layer.thickness_nm for layer in stack.layers]
    coherent = [layer.coherent for layer in stack.layers]
    out = {}
    for pol in "sp":
        R, T = stack_rt(n, d, coherent, wl, angles[:, None], pol)
        out["R_" + pol], out["T_" + pol] = weights @ R, weights @ T
    return Reflectance(wl, warnings=warnings, **out)


def reflectance_sweep(stack, wavelength_nm, film_thickness_nm, angle_deg=None, numerical_aperture=None,
                      transmittance=False):
    """R (and T) over a grid of film thicknesses and angles: the fast path.

    Parameters
    ----------
    stack : filmcalc.stack.Stack
        Must mark one coherent layer ``unknown``.
    wavelength_nm : array_like, shape (W,)
    film_thickness_nm : array_like, shape (D,)
    angle_deg : array_like, shape (A,), optional
        The stack's own angle by default.
    numerical_aperture : float, optional
        The stack's own NA by default; NA > 0 averages each angle over its cone.
    transmittance : bool
        Also compute T.

    Returns
    -------
    Reflectance
        Arrays of shape (A, D, W).
    """
    wl = np.atleast_1d(np.asarray(wavelength_nm, dtype=float))
    film = stack.film_index
    if film is None:
        raise FilmcalcError(f"Stack {stack.name!r} marks no layer as unknown = true, so there is nothing to sweep.")
    dz = np.atleast_1d(np.asarray(film_thickness_nm, dtype=float))
    centres = np.atleast_1d(np.asarray(stack.light.angle_deg if angle_deg is None else angle_deg, dtype=float))
    n, warnings = stack_indices(stack, wl)
    d = [layer.thickness_nm for layer in stack.layers]
    coherent = [layer.coherent for layer in stack.layers]
    na = stack.light.numerical_aperture if numerical_aperture is None else numerical_aperture
    out = {}
    for pol in "sp":
        if na == 0:
            out["R_" + pol], out["T_" + pol] = thickness_sweep(n, d, coherent, film, dz, wl, centres, pol,
                                                               transmittance)
            continue
        R = np.empty((centres.size, dz.size, wl.size))
        T = np.empty_like(R) if transmittance else None
        for i, centre in enumerate(centres):
            angles, weights = _angle_nodes(stack, centre, na, n[0])
            Rc, Tc = thickness_sweep(n, d, coherent, film, dz, wl, angles, pol, transmittance)
            R[i] = np.tensordot(weights, Rc, axes=1)
            if transmittance:
                T[i] = np.tensordot(weights, Tc, axes=1)
        out["R_" + pol], out["T_" + pol] = R, T
    return Reflectance(wl, warnings=warnings, **out)
