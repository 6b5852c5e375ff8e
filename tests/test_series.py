"""Numbers over time: the thinning-law fit, rupture, per-frame measures."""

import numpy as np
import pytest
from scipy.optimize import curve_fit

from filmcalc.errors import FilmcalcError
from filmcalc.series import fit_power_law, frame_measures, rupture_frame, thinning_rate


def test_power_law_matches_scipy_curve_fit():
    # Reference: scipy.optimize.curve_fit (its own Levenberg–Marquardt and covariance), on the same
    # model ln h = ln A − α ln(t − t0) with noisy invented data.
    rng = np.random.default_rng(3)
    t = np.linspace(0.0, 3.0, 60)
    h = 800 * (t + 0.4) ** -0.55 * np.exp(rng.normal(0, 0.01, t.size))
    fit = fit_power_law(t, h)
    p, cov = curve_fit(lambda t, la, al, t0: la - al * np.log(t - t0), t, np.log(h), p0=[np.log(800), 0.5, -0.3])
    assert fit.alpha == pytest.approx(p[1], rel=1e-6)
    assert fit.alpha_sigma == pytest.approx(np.sqrt(cov[1, 1]), rel=1e-3)
    assert fit.t0_s == pytest.approx(p[2], abs=1e-6)
    assert fit.t0_sigma_s == pytest.approx(np.sqrt(cov[2, 2]), rel=1e-3)
    assert abs(fit.alpha - 0.55) < 3 * fit.alpha_sigma


def test_power_law_recovers_exact_data_from_a_far_start():
    t = np.linspace(5.0, 9.0, 30)
    fit = fit_power_law(t, 120.0 * (t - 1.0) ** -0.25)
    assert fit.alpha == pytest.approx(0.25, rel=1e-6)
    assert fit.t0_s == pytest.approx(1.0, abs=1e-5)
    assert fit.amplitude_nm == pytest.approx(120.0, rel=1e-5)
    assert fit.thickness_nm(6.0) == pytest.approx(120.0 * 5.0**-0.25)
    assert fit.rate_nm_per_s(6.0) == pytest.approx(0.25 * 120.0 * 5.0**-1.25)


def test_power_law_needs_points():
    with pytest.raises(FilmcalcError, match="at least 4"):
        fit_power_law([0, 1, 2], [3, 2, 1])
    with pytest.raises(FilmcalcError, match="increase"):
        fit_power_law([0, 2, 1, 3], [4, 3, 2, 1])


def test_thinning_rate_of_a_straight_line():
    t = np.linspace(0, 2, 11)
    np.testing.assert_allclose(thinning_rate(t, 500 - 40 * t), 40.0)


def test_rupture():
    assert rupture_frame([0.9, 0.92, 0.9, 0.91]) is None
    assert rupture_frame([0.9, 0.9, 0.9, 0.3, 0.0, 0.0]) == 3
    # A dark frame in the middle is not a rupture: the film comes back.
    assert rupture_frame([0.9, 0.9, 0.0, 0.9, 0.9]) is None
    # Unreadable frames after the rupture neither hide it nor move it.
    assert rupture_frame([0.9, 0.9, 0.1, 0.0, 0.9], readable=[1, 1, 1, 1, 0]) == 2
    assert rupture_frame([0.0, 0.0]) is None


def test_frame_measures_volume_points_regions_line():
    t = np.full((10, 12), 100.0)
    t[0, 0] = np.nan
    m = frame_measures(t, pixel_size_um=2.0, points=[(5, 5), (0, 0)], regions=[(0, 0, 3, 3)], line=(0, 5, 11, 5))
    # 119 pixels × 100 nm × (2 µm)² = 119 × 0.1 µm × 4 µm² = 47.6 µm³ = 4.76e-5 nL (1 nL = 1e6 µm³).
    assert m["volume_nL"] == pytest.approx(4.76e-5)
    assert m["coverage"] == pytest.approx(119 / 120)
    assert m["points_nm"] == [100.0, 100.0] and m["regions_nm"] == [100.0]
    assert m["line_nm"].shape == (12,)
