"""Fringes → thickness.

Fringe spacing is checked against textbook thin-film optics (source beside
each check). Profiles and maps are self-consistency checks of the inversion:
invented films rendered with the forward model (the model itself is checked
against published values in test_optics.py), with tolerances stated per test.
"""

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from filmcalc.colour import srgb_encode
from filmcalc.errors import FilmcalcError
from filmcalc.fringes import (
    fringe_map,
    fringe_spacing_nm,
    line_profile_thickness,
    synthetic_wavelength,
    unambiguous_span_nm,
)
from filmcalc.optics import reflectance_sweep
from filmcalc.stack import loads_stack
from filmcalc.synthetic import dome, wedge

# A free-standing soap film: constant index 1.333 (water's at visible wavelengths), air on both sides.
SOAP = loads_stack('name = "soap film"\n[ambient]\nmaterial = "air"\n[[layers]]\nmaterial = {n = 1.333, k = 0}\n'
                   'thickness_nm = 100\nunknown = true\n[substrate]\nmaterial = "air"\n')
OXIDE = loads_stack('name = "oxide"\n[ambient]\nmaterial = "air"\n[[layers]]\nmaterial = "fused-silica"\n'
                    'thickness_nm = 100\nunknown = true\n[substrate]\nmaterial = "silicon"\n')
SODIUM, MERCURY_GREEN = 589.0, 546.1  # nm: the sodium D line and the mercury e line (from memory)


def render(stack, thickness_nm, wavelength_nm, noise=0.005, seed=0):
    """A monochrome 8-bit image of a film: 0.1 + 0.8 R(d)/max R, plus Gaussian noise."""
    t = np.asarray(thickness_nm, dtype=float)
    grid = np.arange(0.0, t.max() + 1.0, 0.25)
    R = reflectance_sweep(stack, [wavelength_nm], grid).R[0, :, 0]
    image = 0.1 + 0.8 * np.interp(t, grid, R) / R.max()
    image = image + np.random.default_rng(seed).normal(0.0, noise, image.shape)
    return np.rint(np.clip(image, 0, 1) * 255) / 255


def minima_of_reflectance(stack, wavelength_nm, top_nm, angle_deg=None):
    """Thicknesses of the dark fringes of the forward model (grid 0.01 nm)."""
    d = np.arange(0.0, top_nm, 0.01)
    R = reflectance_sweep(stack, [wavelength_nm], d, None if angle_deg is None else [angle_deg]).R[0, :, 0]
    inner = np.flatnonzero((R[1:-1] < R[:-2]) & (R[1:-1] <= R[2:])) + 1
    return d[inner]


# --- Fringe spacing -----------------------------------------------------------------------------


def test_dark_bands_of_a_soap_film_under_red_light():
    # Hecht, Optics, 5th ed. (2017), §9.4: a free-standing film (a π phase change at one face only)
    # is dark where 2 n d = m λ, so dark bands lie λ / (2n) apart: about 244 nm at 650 nm, n = 1.333.
    spacing = fringe_spacing_nm(SOAP, 650.0)
    assert spacing == pytest.approx(650.0 / (2 * 1.333), rel=1e-12)
    assert abs(spacing - 244.0) < 0.5
    # The transfer-matrix reflectance puts its dark fringes exactly there.
    minima = minima_of_reflectance(SOAP, 650.0, 1000.0)
    assert minima == pytest.approx(spacing * np.arange(1, 5), abs=0.02)


@pytest.mark.parametrize("angle_deg", [0.0, 30.0, 60.0])
def test_spacing_grows_as_one_over_cos_of_the_refraction_angle(angle_deg):
    # Snell's law, n_air sin θ = n sin θ_t (air's index from the stack), and the path difference
    # 2 n d cos θ_t (Hecht 2017, §9.4): dark bands λ / (2 n cos θ_t) apart.
    n_air = float(SOAP.ambient.index(650.0).real)
    cos_t = np.sqrt(1 - (n_air * np.sin(np.radians(angle_deg)) / 1.333) ** 2)
    spacing = fringe_spacing_nm(SOAP, 650.0, angle_deg)
    assert spacing == pytest.approx(650.0 / (2 * 1.333 * cos_t), rel=1e-9)
    assert spacing / fringe_spacing_nm(SOAP, 650.0) == pytest.approx(1 / cos_t, rel=1e-9)
    minima = minima_of_reflectance(SOAP, 650.0, 3.5 * spacing, angle_deg)
    assert minima == pytest.approx(spacing * np.arange(1, 4), abs=0.02)


@given(wavelength=st.floats(400, 1000), angle=st.floats(0, 70), thickness=st.floats(0, 2000))
def test_reflectance_repeats_after_one_fringe_spacing(wavelength, angle, thickness):
    # Invariant: a transparent film's round-trip phase 4π n d cos θ_t / λ repeats every fringe
    # spacing, whatever the substrate (Born & Wolf 1999, §1.6).
    spacing = fringe_spacing_nm(OXIDE, wavelength, angle)
    R = reflectance_sweep(OXIDE, [wavelength], [thickness, thickness + spacing], [angle]).R[0, :, 0]
    assert R[1] == pytest.approx(R[0], abs=1e-9)


# --- Two wavelengths ----------------------------------------------------------------------------


def test_synthetic_wavelength_of_sodium_and_mercury_lines():
    # Λ = λ₁λ₂ / |λ₁ − λ₂| (Wyant 1971, Appl. Opt. 10, 2113; from memory).
    expected = 589.0 * 546.1 / (589.0 - 546.1)
    assert synthetic_wavelength(SODIUM, MERCURY_GREEN) == pytest.approx(expected, rel=1e-12)
    assert 7497 < expected < 7498
    assert synthetic_wavelength(MERCURY_GREEN, SODIUM) == pytest.approx(expected, rel=1e-12)
    with pytest.raises(FilmcalcError, match="equal"):
        synthetic_wavelength(SODIUM, SODIUM)


def test_two_wavelengths_extend_the_unambiguous_span():
    # The pair's pattern repeats after a thickness Λ / (2 n); intensities give each phase only up to
    # its sign, which halves that: Λ / (4 n) ≈ 1406 nm here (our derivation from Wyant 1971).
    # One wavelength repeats (mirrored) within one fringe spacing.
    one = unambiguous_span_nm(SOAP, SODIUM)
    two = unambiguous_span_nm(SOAP, [SODIUM, MERCURY_GREEN])
    limit = synthetic_wavelength(SODIUM, MERCURY_GREEN) / (4 * 1.333)
    assert one < fringe_spacing_nm(SOAP, SODIUM)
    assert 0.9 * limit < two <= 1.01 * limit


# --- Line profiles ------------------------------------------------------------------------------


def terrace(x):
    """5 → 400 nm over 150 px, flat at 400 nm for 100 px, then 400 → 800 nm over 150 px."""
    return np.interp(x, [0, 150, 250, 400], [5.0, 400.0, 400.0, 800.0])


def test_line_profile_counts_fringes_and_interpolates_by_phase():
    x = np.arange(401.0)
    image = render(SOAP, np.tile(terrace(x), (21, 1)), 650.0, noise=0.01)
    profile = line_profile_thickness(image, (0, 10, 400, 10), 650.0, SOAP, 5.0, "thicker")
    quarter = 650.0 / (4 * 1.333)
    # Hecht 2017, §9.4: bright and dark bands alternate every λ / (4 n) of thickness, starting dark
    # (the black film) at zero thickness: six between 5 and 800 nm, bright first.
    assert profile.extrema_nm == pytest.approx(quarter * np.arange(1, 7), abs=0.1)
    assert list(profile.extrema_kind) == ["max", "min"] * 3
    truth = terrace(profile.distance_px)
    err = profile.thickness_nm - truth
    assert np.sqrt(np.mean(err**2)) < 3.0
    # On the terrace the film sits between a bright and a dark band: the phase, not a straight line
    # between the two bands (365.7 → 487.6 nm), gives its thickness.
    flat = (profile.distance_px > 160) & (profile.distance_px < 240)
    assert np.all(np.abs(profile.thickness_nm[flat] - 400.0) < 5.0)
    assert abs(profile.thickness_nm[0] - 5.0) < 10.0
    assert np.mean(np.abs(err) <= 2 * profile.sigma_nm + 1.0) > 0.9
    assert profile.warnings == []


def test_line_profile_follows_the_anchor():
    # The same image anchored one fringe spacing thicker reads one spacing thicker everywhere.
    x = np.arange(401.0)
    image = render(SOAP, np.tile(terrace(x), (21, 1)), 650.0)
    spacing = fringe_spacing_nm(SOAP, 650.0)
    low = line_profile_thickness(image, (0, 10, 400, 10), 650.0, SOAP, 5.0)
    high = line_profile_thickness(image, (0, 10, 400, 10), 650.0, SOAP, 5.0 + spacing)
    assert high.thickness_nm - low.thickness_nm == pytest.approx(np.full(x.size, spacing), abs=0.5)


def test_line_profile_on_silicon_starts_bright():
    # Macleod, Thin-Film Optical Filters, 4th ed. (2010), ch. 2 (from memory): a quarter-wave layer of
    # lower index than its substrate lowers the reflectance, so oxide on silicon darkens first, at λ / (4 n).
    x = np.arange(301.0)
    truth = 600.0 * x / 300
    image = render(OXIDE, np.tile(truth, (11, 1)), 650.0)
    profile = line_profile_thickness(image, (0, 5, 300, 5), 650.0, OXIDE, 0.0)
    n_oxide = float(OXIDE.film.material.index(650.0).real)
    assert profile.extrema_kind[0] == "min"
    assert profile.extrema_nm[0] == pytest.approx(650.0 / (4 * n_oxide), abs=1.0)
    assert np.sqrt(np.mean((profile.thickness_nm - truth) ** 2)) < 3.0


def test_line_profile_of_a_thinning_film():
    x = np.arange(301.0)
    truth = 900.0 - 880.0 * x / 300
    image = render(SOAP, np.tile(truth, (11, 1)), 589.0)
    profile = line_profile_thickness(image, (0, 5, 300, 5), 589.0, SOAP, 900.0, "thinner")
    assert np.sqrt(np.mean((profile.thickness_nm - truth) ** 2)) < 3.0
    # Seven bands between 900 and 20 nm cannot appear on a film thinning from 150 nm.
    with pytest.raises(FilmcalcError, match="more than a film thinning from 150 nm"):
        line_profile_thickness(image, (0, 5, 300, 5), 589.0, SOAP, 150.0, "thinner")


def test_line_profile_warns_when_the_anchor_does_not_fit():
    # The line starts on a bright band, but a 5 nm soap film is black.
    x = np.arange(301.0)
    image = render(SOAP, np.tile(122.0 + 600.0 * x / 300, (11, 1)), 650.0)
    profile = line_profile_thickness(image, (0, 5, 300, 5), 650.0, SOAP, 5.0)
    assert any("should look dark" in w for w in profile.warnings)


def test_fading_fringes_are_all_counted_or_a_miss_is_reported():
    # Contrast fading from 100 % to 30 % of its start along the line (e.g. a film thickening past
    # the light's coherence): eight bands between 5 and 1000 nm (Hecht 2017, §9.4: every λ / (4 n)).
    x = np.arange(401.0)
    truth = 5.0 + 995.0 * x / 400
    fade = 0.3 + 0.7 / (1 + np.exp((x - 200) / 10))
    image = np.clip(0.5 + (render(SOAP, np.tile(truth, (11, 1)), 650.0, noise=0.003) - 0.5) * fade, 0, 1)
    profile = line_profile_thickness(image, (0, 5, 400, 5), 650.0, SOAP, 5.0)
    assert profile.extrema_px.size == int(1000.0 // (650.0 / (4 * 1.333))) == 8
    assert np.sqrt(np.mean((profile.thickness_nm - 5.0 - 995.0 * profile.distance_px / 400) ** 2)) < 5.0
    assert profile.warnings == []
    # Asking for more prominence than the faded bands have loses them, and the profile says so.
    strict = line_profile_thickness(image, (0, 5, 400, 5), 650.0, SOAP, 5.0, prominence=0.5)
    assert strict.extrema_px.size < 8
    assert any("may have been missed" in w for w in strict.warnings)


def test_encoded_photos_are_decoded_first():
    x = np.arange(401.0)
    linear = render(SOAP, np.tile(terrace(x), (21, 1)), 650.0, noise=0.0)
    encoded = srgb_encode(linear)
    reference = line_profile_thickness(linear, (0, 10, 400, 10), 650.0, SOAP, 5.0).thickness_nm
    decoded = line_profile_thickness(encoded, (0, 10, 400, 10), 650.0, SOAP, 5.0, encoded=True).thickness_nm
    taken_as_linear = line_profile_thickness(encoded, (0, 10, 400, 10), 650.0, SOAP, 5.0).thickness_nm
    assert np.sqrt(np.mean((decoded - reference) ** 2)) < 0.5
    assert np.sqrt(np.mean((taken_as_linear - reference) ** 2)) > 5.0


# --- Maps ---------------------------------------------------------------------------------------

SHAPE = (120, 240)


def order_errors(result, truth, period_nm):
    """Fraction of unflagged pixels more than a quarter fringe spacing off, and their RMS error."""
    good = result.flags == 0
    err = (result.thickness_nm - truth)[good]
    return np.mean(np.abs(err) > period_nm / 4), np.sqrt(np.mean(err**2)), good.mean()


def test_map_of_a_wedge_from_an_anchor_and_a_trend():
    truth = wedge(SHAPE, 5.0, 1500.0)
    calls = []
    result = fringe_map(render(SOAP, truth, SODIUM, noise=0.01), SOAP, SODIUM, anchor=(0, 60, 5.0),
                        trend="right", progress=lambda fraction, message: calls.append(fraction))
    wrong, rmse, coverage = order_errors(result, truth, fringe_spacing_nm(SOAP, SODIUM))
    assert wrong == 0 and coverage > 0.97
    assert rmse < 3.0
    good = result.flags == 0
    err = np.abs(result.thickness_nm - truth)[good]
    assert np.mean(err <= 2 * result.sigma_nm[good] + 0.5) > 0.85  # σ is calibrated, 2σ covers most
    assert np.median(result.sigma_nm[good]) < 5 * max(np.median(err), 0.2)  # ... and not inflated
    assert result.statistics["good_pixels"] == good.sum() and 700 < result.statistics["mean_nm"] < 800
    assert calls[-1] == 1.0 and calls == sorted(calls)


def test_one_wavelength_needs_an_anchor():
    image = render(SOAP, wedge(SHAPE, 5.0, 1500.0), SODIUM)
    with pytest.raises(FilmcalcError, match="without an anchor"):
        fringe_map(image, SOAP, SODIUM)


def test_fringes_too_dense_are_flagged():
    # A gentle slope, then 60 nm per pixel: under 2 px per half fringe at 589 nm.
    x = np.arange(300.0)
    truth = np.tile(np.where(x < 200, 20.0 + 3.0 * x, 620.0 + 60.0 * (x - 200)), (100, 1))
    result = fringe_map(render(SOAP, truth, SODIUM), SOAP, SODIUM, anchor=(0, 50, 20.0), trend="right",
                        range_nm=(0.0, 7000.0))
    dense = result.flag_mask("dense")
    assert dense[:, 210:].mean() > 0.95 and not dense[:, :190].any()
    wrong, _, _ = order_errors(result, truth, fringe_spacing_nm(SOAP, SODIUM))
    assert wrong == 0
    assert any("too dense" in w for w in result.warnings)


def test_faint_fringes_are_flagged():
    # The right half shows fringes at 0.5 % contrast, under the 0.5 % noise. (Contrast is judged
    # over about two fringes, so the first hundred pixels or so past the edge still see the bright ones.)
    truth = wedge((100, 400), 20.0, 1990.0)
    image = render(SOAP, truth, SODIUM, noise=0.0)
    image[:, 200:] = 0.5 + 0.005 * (image[:, 200:] - 0.5)
    image = image + np.random.default_rng(1).normal(0.0, 0.005, image.shape)
    result = fringe_map(np.clip(image, 0, 1), SOAP, SODIUM, anchor=(0, 50, 20.0), trend="right")
    faint = result.flag_mask("faint")
    assert faint[:, 300:].mean() > 0.95 and not faint[:, :150].any()


def test_two_wavelengths_need_no_anchor_within_their_span():
    truth = wedge(SHAPE, 100.0, 1250.0)
    images = [render(SOAP, truth, SODIUM, seed=1), render(SOAP, truth, MERCURY_GREEN, seed=2)]
    assert unambiguous_span_nm(SOAP, [SODIUM, MERCURY_GREEN]) > 1300.0
    result = fringe_map(images, SOAP, [SODIUM, MERCURY_GREEN], range_nm=(0.0, 1300.0))
    wrong, rmse, coverage = order_errors(result, truth, fringe_spacing_nm(SOAP, MERCURY_GREEN))
    assert wrong == 0 and coverage > 0.97
    assert rmse < 3.0
    assert result.warnings == []


def test_two_wavelengths_resolve_closed_fringes():
    # Under one wavelength the closed fringes of a dome look the same as those of a dip; the pair
    # tells them apart, here without an anchor and a little past the unambiguous span (warned).
    truth = dome((160, 160), 50.0, 1500.0)
    images = [render(SOAP, truth, SODIUM, seed=3), render(SOAP, truth, MERCURY_GREEN, seed=4)]
    result = fringe_map(images, SOAP, [SODIUM, MERCURY_GREEN], range_nm=(0.0, 1600.0))
    wrong, rmse, coverage = order_errors(result, truth, fringe_spacing_nm(SOAP, MERCURY_GREEN))
    assert wrong == 0 and coverage > 0.97
    assert rmse < 3.0
    assert any("nearly repeat" in w for w in result.warnings)


# --- Bad input ----------------------------------------------------------------------------------

IMAGE = render(SOAP, wedge(SHAPE, 5.0, 1500.0), SODIUM)
FLAT = np.clip(np.random.default_rng(0).normal(0.5, 0.01, (60, 60)), 0, 1)  # noise, no fringes
NO_FILM = loads_stack('[ambient]\nmaterial = "air"\n[[layers]]\nmaterial = "water"\nthickness_nm = 100\n'
                      '[substrate]\nmaterial = "air"\n')


@pytest.mark.parametrize("call, message", [
    (lambda: fringe_spacing_nm(SOAP, 150.0), "outside 200–2000 nm"),
    (lambda: fringe_map(IMAGE, SOAP, 2500.0, anchor=(0, 60, 5.0)), "outside 200–2000 nm"),
    (lambda: fringe_spacing_nm(NO_FILM, 589.0), "unknown = true"),
    (lambda: fringe_map(IMAGE, NO_FILM, SODIUM, anchor=(0, 60, 5.0)), "unknown = true"),
    (lambda: line_profile_thickness(IMAGE, (0, 10, 239, 10), SODIUM, NO_FILM, 5.0), "unknown = true"),
    (lambda: line_profile_thickness(IMAGE, (0, 10, 999, 10), SODIUM, SOAP, 5.0), "outside the 240 × 120 image"),
    (lambda: line_profile_thickness(IMAGE, (0, 10, 3, 10), SODIUM, SOAP, 5.0), "only 3.0 px long"),
    (lambda: line_profile_thickness(IMAGE, (0, 10, 9, 10), SODIUM, SOAP, 5.0), "fewer than one bright and one dark"),
    (lambda: line_profile_thickness(IMAGE, (0, 10, 239, 10), SODIUM, SOAP, 5.0, "up"), "'thicker' or 'thinner'"),
    (lambda: line_profile_thickness(np.stack([IMAGE] * 3, -1), (0, 10, 239, 10), SODIUM, SOAP, 5.0), "2-D array"),
    (lambda: line_profile_thickness(IMAGE * 255, (0, 10, 239, 10), SODIUM, SOAP, 5.0), "scale them to 0–1"),
    (lambda: line_profile_thickness(FLAT, (0, 10, 59, 10), SODIUM, SOAP, 5.0), "flat within the noise"),
    (lambda: fringe_map(FLAT, SOAP, SODIUM, anchor=(25, 25, 100.0)), "no fringes"),
    (lambda: fringe_map(IMAGE, SOAP, SODIUM, anchor=(500, 5, 10.0)), "outside the 240 × 120 image"),
    (lambda: fringe_map(IMAGE, SOAP, SODIUM, anchor=(5, 5, 5000.0)), "outside the range"),
    (lambda: fringe_map(IMAGE, SOAP, SODIUM, anchor=(5, 5)), r"\(x, y, thickness_nm\)"),
    (lambda: fringe_map(IMAGE, SOAP, SODIUM, anchor=(0, 60, 5.0), trend="north"), "trend must be one of"),
    (lambda: fringe_map([IMAGE, IMAGE], SOAP, SODIUM, anchor=(0, 60, 5.0)), "one 2-D image per wavelength"),
    (lambda: fringe_map([IMAGE, IMAGE[:, :100]], SOAP, [SODIUM, MERCURY_GREEN]), "differ in size"),
    (lambda: fringe_map([IMAGE, IMAGE], SOAP, [SODIUM, SODIUM]), "equal"),
    (lambda: fringe_map(IMAGE, SOAP, SODIUM, anchor=(0, 60, 5.0), range_nm=(500.0, 100.0)), "0 ≤ min < max"),
])
def test_bad_input_is_explained(call, message):
    with pytest.raises(FilmcalcError, match=message):
        call()


def test_dome_under_one_line_from_a_corner_anchor():
    # Regression: closed ring fringes of a dome under one wavelength, anchored at a corner, once
    # came out a whole fringe order off everywhere, unflagged. The anchor must hold and the rest follow.
    from filmcalc.stack import load_stack
    from filmcalc.synthetic import dome

    from pathlib import Path

    oil = load_stack(Path(__file__).resolve().parent.parent / "demo_data" / "oil-on-water.toml")
    truth = dome((160, 320), 60, 650)
    grid = np.arange(0.0, 700.0, 0.25)
    r = reflectance_sweep(oil, [632.8], grid).R[0, :, 0]
    image = np.interp(truth, grid, r) / r.max() * 0.9 + np.random.default_rng(0).normal(0, 0.01, truth.shape)
    result = fringe_map([image], oil, [632.8], anchor=(0, 0, float(truth[0, 0])), range_nm=(0, 1000))
    good = result.flags == 0
    err = np.abs(result.thickness_nm - truth)
    assert good.mean() > 0.9
    assert np.median(err[good]) < 5 and np.mean(err[good] > fringe_spacing_nm(oil, 632.8) / 4) < 0.02
