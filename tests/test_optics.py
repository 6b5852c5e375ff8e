"""Optics checked against published formulas, values and independent libraries.

Sources are named beside each check. ``tmm`` (Byrnes 2016, arXiv:1603.02720)
and colour-science's ``multilayer_tmm`` serve as independent references; they
are never used by filmcalc itself.
"""

import warnings

import numpy as np
import pytest
import tmm
from hypothesis import given, settings
from hypothesis import strategies as st

from filmcalc.errors import FilmcalcError
from filmcalc.optics import (coherent_rt, cone_angles, reflectance_sweep, stack_reflectance, stack_rt,
                             thickness_sweep)
from filmcalc.stack import loads_stack

with warnings.catch_warnings():
    warnings.simplefilter("ignore")
    import colour


def unpolarised(n, d, wl, theta):
    return 0.5 * sum(coherent_rt(n, d, wl, theta, pol)[0] for pol in "sp")


# --- Closed-form results ---------------------------------------------------

def test_single_glass_surface_reflects_four_percent():
    # Fresnel at normal incidence, ((n-1)/(n+1))^2 = 0.04 for n = 1.5
    # (common practice; Hecht, Optics, 5th ed., §4.6).
    for pol in "sp":
        R, T = coherent_rt([1.0, 1.5], [], 550.0, 0.0, pol)
        assert R == pytest.approx(0.04, abs=1e-15)
        assert R + T == pytest.approx(1.0, abs=1e-15)


@pytest.mark.parametrize("n, r_single", [(1.5, 0.04), (1.333, 0.02037), (1.46, 0.03497)])
def test_fresnel_normal_incidence_values(n, r_single):
    # ((n-1)/(n+1))^2 (Born & Wolf, Principles of Optics, eq. 1.5(21)); values rounded as tabulated.
    assert coherent_rt([1.0, n], [], 500.0, 0.0, "s")[0] == pytest.approx(r_single, abs=5e-6)


def test_free_standing_plate_airy_extremes_and_mean():
    # Airy summation (Born & Wolf, Principles of Optics, §7.6.1):
    # R = F sin²δ/(1 + F sin²δ), F = 4R₁/(1−R₁)², max 4R₁/(1+R₁)² = 0.147929,
    # zero at n d = mλ/2, and the mean over a fringe (uniform in δ) 2R₁/(1+R₁) = 0.076923.
    n, wl = 1.5, 600.0
    period = wl / (2 * n)
    d = np.linspace(0, period, 20001)[:-1]  # one full fringe, uniform in phase
    R = 0.5 * sum(thickness_sweep([1.0, n, 1.0], [0], [True], 0, d, [wl], 0.0, p, False)[0] for p in "sp")
    R = R[0, :, 0]
    R1 = 0.04
    assert R.max() == pytest.approx(4 * R1 / (1 + R1) ** 2, abs=1e-9)
    assert R.max() == pytest.approx(0.147929, abs=1e-6)
    assert R[0] == pytest.approx(0.0, abs=1e-15)
    assert R.mean() == pytest.approx(2 * R1 / (1 + R1), abs=1e-9)
    assert R.mean() == pytest.approx(0.076923, abs=1e-6)
    # The two-beam approximation R ≈ |r₁ − r₁ e^{2iδ}|² = 2R₁(1 − cos 2δ) gives 16 % and 8 %.
    delta = 2 * np.pi * n * d / wl
    two_beam = 2 * R1 * (1 - np.cos(2 * delta))
    assert two_beam.max() == pytest.approx(0.16, abs=1e-9)
    assert two_beam.mean() == pytest.approx(0.08, abs=1e-9)


def test_brewster_angle():
    # tan θ_B = n₂/n₁: arctan(1.5) = 56.3099° (Hecht, Optics, §4.6.3).
    theta_b = np.rad2deg(np.arctan(1.5))
    assert theta_b == pytest.approx(56.3099, abs=1e-4)
    assert coherent_rt([1.0, 1.5], [], 550.0, theta_b, "p")[0] < 1e-30
    scan = np.linspace(50, 60, 10001)
    Rp = coherent_rt([1.0, 1.5], [], 550.0, scan, "p")[0]
    assert scan[np.argmin(Rp)] == pytest.approx(theta_b, abs=2e-3)


def test_quarter_wave_antireflection():
    # n_c = √(n₀ n_s), d = λ/(4 n_c) gives R = 0 at λ (Macleod, Thin-Film Optical Filters, §3.2).
    wl, ns = 550.0, 1.52
    nc = np.sqrt(ns)
    assert unpolarised([1.0, nc, ns], [wl / (4 * nc)], wl, 0.0) < 1e-30
    # MgF₂ (1.38) on glass (1.52): R = ((n₀n_s − n_c²)/(n₀n_s + n_c²))² = 0.01260, bare 0.04258 (same source).
    R = unpolarised([1.0, 1.38, ns], [wl / (4 * 1.38)], wl, 0.0)
    assert R == pytest.approx(((ns - 1.38**2) / (ns + 1.38**2)) ** 2, abs=1e-14)
    assert R == pytest.approx(0.01260, abs=5e-6)
    assert unpolarised([1.0, ns], [], wl, 0.0) == pytest.approx(0.04258, abs=5e-6)


def test_ultrathin_free_film():
    # Thin-film limit R ≈ [π(n²−1)d/λ]² (Born & Wolf §1.6.4 expansion): 4.92e-4 for
    # n = 1.333, d = 5 nm, λ = 550 nm; the expansion is good to order (nd/λ)².
    R = unpolarised([1.0, 1.333, 1.0], [5.0], 550.0, 0.0)
    approx = (np.pi * (1.333**2 - 1) * 5.0 / 550.0) ** 2
    assert approx == pytest.approx(4.92e-4, rel=2e-3)
    assert R == pytest.approx(approx, rel=0.01)


def test_adjacent_minima_give_thickness():
    # d = λ₁λ₂ / (2n(λ₁ − λ₂)) for adjacent minima of a free-standing film
    # (Heavens, Optical Properties of Thin Solid Films, ch. 4): n = 1.46, minima
    # at 600 and 500 nm → d = 1027.40 nm. The model's minima must sit there.
    d = 600 * 500 / (2 * 1.46 * 100)
    assert d == pytest.approx(1027.40, abs=0.01)
    wl = np.linspace(480, 620, 14001)
    R = unpolarised([1.0, 1.46, 1.0], [d], wl, 0.0)
    minima = wl[1:-1][(R[1:-1] < R[:-2]) & (R[1:-1] < R[2:])]
    assert minima == pytest.approx([500.0, 600.0], abs=0.02)


def test_total_internal_reflection_is_total_not_nan():
    # Past the critical angle asin(1/1.5) = 41.81° all light is reflected (Hecht §4.7).
    for theta in (41.9, 60.0, 89.0):
        for pol in "sp":
            R, T = coherent_rt([1.5, 1.0], [], 550.0, theta, pol)
            assert R == pytest.approx(1.0, abs=1e-12) and T == 0.0
    # Through a layer past its critical angle (frustrated total reflection): still finite.
    R, T = coherent_rt([1.5, 1.0, 1.5], [100.0], 550.0, 60.0, "s")
    assert np.isfinite(R) and np.isfinite(T) and R + T == pytest.approx(1.0, abs=1e-12)


def test_oxide_on_silicon_first_minimum():
    # Both reflections gain the same phase (n_film < n_Si), so minima fall at
    # 2nd = (m + ½)λ (Heavens, Optical Properties of Thin Solid Films, ch. 4);
    # 100 nm of n = 1.46 oxide on a dispersionless n = 3.88 substrate → 584 nm.
    # (With real silicon its dispersion moves the minimum of R by tens of nm.)
    stack = loads_stack('[ambient]\nmaterial = {n = 1.0}\n[[layers]]\nmaterial = {n = 1.46}\n'
                        'thickness_nm = 100\nunknown = true\n[substrate]\nmaterial = {n = 3.88}\n')
    wl = np.arange(450.0, 700.0, 0.05)
    R = stack_reflectance(stack, wl).R
    assert wl[np.argmin(R)] == pytest.approx(4 * 1.46 * 100, abs=0.05)


# --- Published regression values -----------------------------------------

def test_tmm_published_regression_values():
    # Byrnes, tmm/tests.py: N = [1, 2+4i, 3+0.3i, 1+0.1i], d = [∞, 2, 3, ∞],
    # θ₀ = 0.1 rad, λ = 100 (same length unit as d).
    n = [1, 2 + 4j, 3 + 0.3j, 1 + 0.1j]
    theta = np.rad2deg(0.1)
    Rs, Ts = coherent_rt(n, [2, 3], 100, theta, "s")
    Rp, Tp = coherent_rt(n, [2, 3], 100, theta, "p")
    assert Rs == pytest.approx(0.37273208839139516, abs=1e-12)
    assert Ts == pytest.approx(0.22604491247079261, abs=1e-12)
    assert Rp == pytest.approx(0.37016110373044969, abs=1e-12)
    assert Tp == pytest.approx(0.22824374314132009, abs=1e-12)


def test_colour_science_docstring_value():
    # colour-science docstring of thin_film_tmm: [1, 1.5, 1], 250 nm, 555 nm → R = 0.1215919.
    assert unpolarised([1.0, 1.5, 1.0], [250.0], 555.0, 0.0) == pytest.approx(0.1215919, abs=5e-8)


# --- Agreement with independent implementations ---------------------------

def random_stack(rng, absorbing):
    layers = int(rng.integers(1, 7))
    n = [1.0 + 0.6 * rng.random()]
    for _ in range(layers):
        k = rng.random() * 2.0 if absorbing and rng.random() < 0.5 else 0.0
        n.append(1.1 + 2.5 * rng.random() + 1j * k)
    k_sub = rng.random() * 3.0 if absorbing else 0.0
    n.append(1.0 + 3.0 * rng.random() + 1j * k_sub)
    d = list(rng.random(layers) * 600)
    return n, d


@pytest.mark.parametrize("absorbing", [False, True], ids=["lossless", "absorbing"])
@pytest.mark.parametrize("seed", range(40))
def test_coherent_agrees_with_tmm(seed, absorbing):
    rng = np.random.default_rng(seed)
    n, d = random_stack(rng, absorbing)
    theta, wl = rng.random() * 85, 300 + rng.random() * 700
    for pol in "sp":
        R, T = coherent_rt(n, d, wl, theta, pol)
        ref = tmm.coh_tmm(pol, n, [np.inf] + d + [np.inf], np.deg2rad(theta), wl)
        assert R == pytest.approx(ref["R"], abs=1e-9)
        assert T == pytest.approx(ref["T"], abs=1e-9)
        # Absorptance 1 − R − T against tmm's own layer-by-layer absorption.
        absorbed = sum(tmm.absorp_in_each_layer(ref)[1:-1])
        absorptance = 1 - R - T
        assert absorptance == pytest.approx(absorbed, abs=1e-9)


@pytest.mark.parametrize("seed", range(40))
def test_incoherent_agrees_with_tmm(seed):
    rng = np.random.default_rng(1000 + seed)
    n, d = random_stack(rng, True)
    coherent = [bool(rng.random() < 0.5) for _ in d]
    for i, c in enumerate(coherent):
        if not c:  # thick, weakly absorbing layer (a slide, a disc)
            d[i] = 5e3 + rng.random() * 1e6
            n[i + 1] = n[i + 1].real + 1j * min(n[i + 1].imag, 1e-4)
    theta, wl = rng.random() * 80, 300 + rng.random() * 700
    beta = n[0].real * np.sin(np.deg2rad(theta))
    # tmm.inc_tmm cannot handle an evanescent wave in a thick layer (it returns
    # R < 0 there); compare only where every thick layer carries a real wave.
    if any(beta >= n[i + 1].real for i, c in enumerate(coherent) if not c):
        theta = 0.0
    flags = ["i"] + ["c" if c else "i" for c in coherent] + ["i"]
    for pol in "sp":
        R, T = stack_rt(n, d, coherent, wl, theta, pol)
        ref = tmm.inc_tmm(pol, n, [np.inf] + d + [np.inf], flags, np.deg2rad(theta), wl)
        assert R == pytest.approx(ref["R"], abs=1e-9)
        assert T == pytest.approx(ref["T"], abs=1e-9)


@pytest.mark.parametrize("seed", range(15))
def test_agrees_with_colour_science_multilayer_tmm(seed):
    # colour-science 0.4.7 drops the imaginary part of complex refraction
    # angles, so it is a valid reference for lossless stacks at any angle and
    # for absorbing stacks at normal incidence only (for Cr at 45° and 550 nm
    # it gives R_s = 0.6498 where tmm and filmcalc give 0.6604).
    rng = np.random.default_rng(2000 + seed)
    wl = np.linspace(380, 780, 9)
    for absorbing, angles in ((False, [0.0, 20.0, 45.0, 70.0]), (True, [0.0])):
        n, d = random_stack(rng, absorbing)
        n[0] = 1.0  # colour-science returns NaN for evanescent waves: keep every wave real
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            ref_R, ref_T = colour.phenomena.multilayer_tmm(n, d, wl, angles)  # (W, A, 1, 2)
        for i, pol in enumerate("sp"):
            R, T = coherent_rt(n, d, wl, np.array(angles)[:, None], pol)
            assert R.T == pytest.approx(ref_R[:, :, 0, i], abs=1e-9)
            assert T.T == pytest.approx(ref_T[:, :, 0, i], abs=1e-9)


# --- The fast sweep equals the general path ---------------------------------

@pytest.mark.parametrize("seed", range(25))
def test_sweep_matches_general_path(seed):
    rng = np.random.default_rng(3000 + seed)
    n, d = random_stack(rng, True)
    coherent = [True] * len(d)
    if len(d) > 1 and rng.random() < 0.5:
        k = int(rng.integers(len(d)))
        coherent[k] = False
        d[k] = 2e4
        n[k + 1] = n[k + 1].real + 1e-5j
    film = int(rng.choice([i for i, c in enumerate(coherent) if c]))
    wl = np.sort(300 + 600 * rng.random(4))
    angles = rng.random(3) * 80
    beta = n[0].real * np.sin(np.deg2rad(angles.max()))
    # Uniform grids take the factorised phase path; a few points, the direct one.
    grids = [np.linspace(0, 1500 * rng.random() + 10, 37), np.array([0.0, 3.3, 250.0, 999.0])]
    for dz in grids:
        for pol in "sp":
            R, T = thickness_sweep(n, d, coherent, film, dz, wl, angles, pol)
            for ia, theta in enumerate(angles):
                for idz, thickness in enumerate(dz):
                    dd = list(d)
                    dd[film] = thickness
                    Rg, Tg = stack_rt(n, dd, coherent, wl, theta, pol)
                    assert R[ia, idz] == pytest.approx(Rg, abs=1e-10)
                    assert T[ia, idz] == pytest.approx(Tg, abs=1e-10)
    assert beta >= 0  # angles were valid


def test_sweep_rejects_bad_input():
    with pytest.raises(FilmcalcError, match="coherent"):
        thickness_sweep([1, 1.5, 1.5, 1], [10, 1e6], [True, False], 1, [1.0], [500], 0, "s")
    with pytest.raises(FilmcalcError, match="≥ 0"):
        thickness_sweep([1, 1.5, 1], [10], [True], 0, [-1.0], [500], 0, "s")
    with pytest.raises(FilmcalcError, match="Angles"):
        coherent_rt([1, 1.5], [], 500, 90.0, "s")
    with pytest.raises(FilmcalcError, match="non-absorbing"):
        coherent_rt([1 + 0.1j, 1.5], [], 500, 10.0, "s")


# --- Invariants (property tests) ---------------------------------------------

indices = st.floats(1.0, 4.0)
thick = st.floats(0.0, 2000.0)


@settings(max_examples=60, deadline=None)
@given(st.lists(st.tuples(indices, thick), min_size=1, max_size=5), indices, indices,
       st.floats(0.0, 89.0), st.floats(300.0, 1000.0), st.sampled_from("sp"))
def test_energy_conserved_without_absorption(layers, n0, ns, theta, wl, pol):
    # For lossless media R + T = 1 (Born & Wolf §1.5.3).
    n = [n0] + [x[0] for x in layers] + [ns]
    R, T = coherent_rt(n, [x[1] for x in layers], wl, theta, pol)
    assert 0 <= R <= 1 + 1e-12 and R + T == pytest.approx(1.0, abs=1e-10)


@settings(max_examples=60, deadline=None)
@given(st.lists(st.tuples(indices, thick), min_size=1, max_size=5), indices, indices, st.floats(300.0, 1000.0))
def test_same_reflectance_from_either_side(layers, n0, ns, wl):
    # Stokes reciprocity: a lossless stack reflects equally from both sides at
    # normal incidence (Born & Wolf §1.6.3; Heavens 1955).
    n = [n0] + [x[0] for x in layers] + [ns]
    d = [x[1] for x in layers]
    front = coherent_rt(n, d, wl, 0.0, "s")[0]
    back = coherent_rt(n[::-1], d[::-1], wl, 0.0, "s")[0]
    assert front == pytest.approx(back, abs=1e-10)


@settings(max_examples=60, deadline=None)
@given(st.lists(st.tuples(indices, st.floats(0.0, 2.0), thick), min_size=1, max_size=4),
       st.integers(0, 4), indices, st.floats(0.0, 80.0), st.sampled_from("sp"))
def test_zero_thickness_layer_changes_nothing(layers, where, n_extra, theta, pol):
    n = [1.0] + [x[0] + 1j * x[1] for x in layers] + [1.5 + 0.2j]
    d = [x[2] for x in layers]
    where = min(where, len(d))
    n2 = n[:where + 1] + [n_extra] + n[where + 1:]
    d2 = d[:where] + [0.0] + d[where:]
    assert coherent_rt(n2, d2, 550.0, theta, pol) == pytest.approx(coherent_rt(n, d, 550.0, theta, pol), abs=1e-12)


@settings(max_examples=60, deadline=None)
@given(indices, indices, indices, thick, st.floats(0.0, 80.0), st.floats(300.0, 1000.0), st.sampled_from("sp"))
def test_reflectance_periodic_in_thickness(n0, n1, ns, d, theta, wl, pol):
    # One lossless layer: period λ/(2 n₁ cos θ₁) in thickness (Born & Wolf §7.6.1).
    beta = n0 * np.sin(np.deg2rad(theta))
    if beta >= n1:
        return  # evanescent in the film: no periodicity to test
    period = wl / (2 * np.sqrt(n1**2 - beta**2))
    R1 = coherent_rt([n0, n1, ns], [d], wl, theta, pol)[0]
    R2 = coherent_rt([n0, n1, ns], [d + period], wl, theta, pol)[0]
    assert R1 == pytest.approx(R2, abs=1e-9)


# --- Numerical aperture ------------------------------------------------------

def test_cone_weights_and_normal_axis_average():
    # For a cone about the normal with a uniformly filled pupil the average is
    # ∫ R(θ) sinθ cosθ dθ / ∫ sinθ cosθ dθ over 0..α; check against a fine
    # midpoint rule, independent of the Gauss nodes.
    angles, w = cone_angles(0.0, 0.5)
    assert w.sum() == pytest.approx(1.0) and angles.max() < 30.0
    alpha = np.arcsin(0.5)
    th = (np.arange(200000) + 0.5) * alpha / 200000
    n, d, wl = [1.0, 1.46, 3.9 + 0.02j], [300.0], 550.0
    Rf = unpolarised(n, d, wl, np.rad2deg(th))
    ref = np.sum(Rf * np.sin(th) * np.cos(th)) / np.sum(np.sin(th) * np.cos(th))
    ours = w @ unpolarised(n, d, wl, angles)
    assert ours == pytest.approx(ref, abs=2e-5)


def test_tilted_cone_against_brute_force_pupil():
    # A tilted cone: compare with a fine grid over the pupil disc (uniform in
    # direction cosines), again independent of the quadrature used.
    centre, na = 30.0, 0.3
    angles, w = cone_angles(centre, na, rings=10, spokes=24)
    g = np.linspace(-na, na, 801)
    ux, uy = np.meshgrid(g, g)
    inside = ux**2 + uy**2 <= na**2
    ux, uy = ux[inside], uy[inside]
    uz = np.sqrt(1 - ux**2 - uy**2)
    c = np.deg2rad(centre)
    cos_theta = uz * np.cos(c) + ux * np.sin(c)
    theta = np.rad2deg(np.arccos(cos_theta))
    n, d, wl = [1.0, 1.46, 3.9 + 0.02j], [300.0], 550.0
    ref = unpolarised(n, d, wl, theta).mean()
    assert w @ unpolarised(n, d, wl, angles) == pytest.approx(ref, abs=5e-4)


def test_cone_rejects_grazing_and_bad_na():
    with pytest.raises(FilmcalcError, match="grazing"):
        cone_angles(80.0, 0.5)
    with pytest.raises(FilmcalcError, match="Numerical aperture"):
        cone_angles(0.0, 1.2)


# --- Stacks ----------------------------------------------------------------------

STACK = """
name = "test"
[ambient]
material = "air"
[[layers]]
material = "soda-lime-glass"
thickness_nm = 1000000
coherent = false
[[layers]]
material = "chromium"
thickness_nm = 8
[[layers]]
material = "mineral-oil"
thickness_nm = 150
unknown = true
[substrate]
material = {n = 2.5, k = 3.4}
[light]
angle_deg = 5
numerical_aperture = 0.25
"""


def test_stack_sweep_matches_stack_spectrum_with_na():
    stack = loads_stack(STACK)
    wl = np.linspace(400, 700, 7)
    dz = np.linspace(0, 600, 25)
    sweep = reflectance_sweep(stack, wl, dz, angle_deg=[5.0, 20.0], transmittance=True)
    for ia, angle in enumerate([5.0, 20.0]):
        for idz in (0, 7, 24):
            one = stack_reflectance(stack, wl, dz[idz], angle_deg=angle)
            assert sweep.R_s[ia, idz] == pytest.approx(one.R_s, abs=1e-10)
            assert sweep.R_p[ia, idz] == pytest.approx(one.R_p, abs=1e-10)
            assert sweep.T[ia, idz] == pytest.approx(one.T, abs=1e-10)
    assert np.all(sweep.A >= -1e-12)


def test_bare_silicon_reflectance():
    # Bare Si at 632.8 nm, normal incidence from vacuum: R ≈ 0.3485 with
    # N = 3.883 + 0.0196i (Aspnes & Studna 1983); our Green 2008 table gives
    # N ≈ 3.88 too, so the same R within the sources' spread.
    stack = loads_stack('[ambient]\nmaterial = {n = 1.0}\n[substrate]\nmaterial = "silicon"\n')
    assert stack_reflectance(stack, [632.8]).R[0] == pytest.approx(0.3485, abs=2e-3)


def test_thick_layer_between_total_reflections_is_finite():
    # A lossless thick layer between two totally reflecting boundaries (n = 1.5
    # ambient, 45°): no light enters it, so R = 1 and T = 0, not 0/0.
    n = [1.5, 1.0, 2.0, 1.5, 1.0]
    for pol in "sp":
        R, T = stack_rt(n, [1e6, 300.0, 1e6], [False, True, False], 550.0, 45.0, pol)
        assert np.isfinite(R) and np.isfinite(T)
        assert R == pytest.approx(1.0, abs=1e-9) and T == pytest.approx(0.0, abs=1e-9)
