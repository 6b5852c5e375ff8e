"""Spectrum fitting and maps of spectra, checked against outside references.

``tmm`` (Byrnes 2016, arXiv:1603.02720) computes the reference spectra, an
implementation independent of filmcalc's optics; the two-extrema formula is
the textbook one (Hecht, Optics, 5th ed., 2017, §9.4).
"""

import numpy as np
import pytest
import tmm

from filmcalc.errors import FilmcalcError
from filmcalc.optics import stack_indices, stack_reflectance
from filmcalc.spectra import (Spectrum, fit_map, fit_spectrum, fringe_frequency_thickness, read_spectrum,
                              read_spectrum_map, SpectrumMap, uniformity)
from filmcalc.stack import loads_stack

OXIDE = loads_stack('[ambient]\nmaterial = "air"\n[[layers]]\nmaterial = "fused-silica"\nthickness_nm = 100\n'
                    'unknown = true\n[substrate]\nmaterial = "silicon"\n')
POLYMER = loads_stack('[ambient]\nmaterial = "air"\n[[layers]]\nmaterial = "pmma"\nthickness_nm = 100\n'
                      'unknown = true\n[substrate]\nmaterial = "soda-lime-glass"\n')
WL = np.linspace(400.0, 800.0, 401)


def tmm_spectrum(stack, d, wl=WL):
    """Normal-incidence R of ambient / film / substrate from the tmm package."""
    n, _ = stack_indices(stack, wl)
    return np.array([tmm.coh_tmm("s", [n[0][i], n[1][i], n[2][i]], [np.inf, d, np.inf], 0, wl[i])["R"]
                     for i in range(wl.size)])


@pytest.mark.parametrize("stack, thickness", [(OXIDE, 50.0), (OXIDE, 437.0), (OXIDE, 985.0), (OXIDE, 1650.0),
                                              (OXIDE, 2980.0), (POLYMER, 120.0), (POLYMER, 760.0)])
def test_thickness_from_tmm_spectra_with_noise(stack, thickness):
    # Noise 0.4 % of the spectrum's peak reflectance (a plain CCD spectrometer, common practice, no source).
    clean = tmm_spectrum(stack, thickness)
    y = clean + np.random.default_rng(int(thickness)).normal(0, 0.004 * clean.max(), WL.size)
    fit = fit_spectrum(Spectrum(WL, y), stack, (0, 3000))
    tolerance = 0.5 if thickness < 1000 else 2.0  # the 0.5 nm below 1 µm
    assert abs(fit.thickness_nm - thickness) < tolerance
    assert 0.5 < fit.reduced_chi2 < 2.0  # white noise of the right size
    assert fit.sigma_nm < tolerance


def test_reported_sigma_matches_the_scatter_over_noisy_draws():
    clean = tmm_spectrum(OXIDE, 612.0)
    rng = np.random.default_rng(5)
    fits = [fit_spectrum(Spectrum(WL, clean + rng.normal(0, 0.004, WL.size)), OXIDE, (0, 1500)) for _ in range(60)]
    errors = np.array([f.thickness_nm - 612.0 for f in fits])
    sigmas = np.array([f.sigma_nm for f in fits])
    # The scatter of the errors and the mean reported σ agree within sampling error (60 draws: ±~20 %).
    assert 0.7 < errors.std() / sigmas.mean() < 1.4
    assert np.mean(np.abs(errors) < 2 * sigmas) > 0.85


def test_two_extrema_formula_agrees_with_the_fit():
    # Lossless film of constant index on a constant-index substrate: adjacent reflectance maxima at
    # λ1 > λ2 satisfy 2 n d = m λ1 = (m + 1) λ2, so d = λ1 λ2 / (2 n (λ1 − λ2)) (Hecht, §9.4).
    stack = loads_stack('[ambient]\nmaterial = "air"\n[[layers]]\nmaterial = {n = 1.46, k = 0}\nthickness_nm = 1\n'
                        'unknown = true\n[substrate]\nmaterial = {n = 3.9, k = 0}\n')
    wl = np.linspace(400, 800, 8001)
    y = tmm_spectrum(stack, 1234.0, wl)
    peaks = np.flatnonzero((y[1:-1] > y[:-2]) & (y[1:-1] >= y[2:])) + 1
    refined = []
    for p in peaks[-2:]:  # the two longest-wavelength maxima, refined by a parabola
        a, b, c = y[p - 1:p + 2]
        refined.append(wl[p] + 0.5 * (wl[1] - wl[0]) * (a - c) / (a - 2 * b + c))
    l2, l1 = refined
    d_formula = l1 * l2 / (2 * 1.46 * (l1 - l2))
    fit = fit_spectrum(Spectrum(wl[::20], y[::20]), stack, (0, 3000))
    assert d_formula == pytest.approx(1234.0, rel=1e-3)
    assert fit.thickness_nm == pytest.approx(d_formula, rel=1e-3)


def test_thick_film_fringe_frequency_estimate():
    y = tmm_spectrum(OXIDE, 2750.0) + np.random.default_rng(2).normal(0, 0.002, WL.size)
    fit = fit_spectrum(Spectrum(WL, y), OXIDE, (0, 3000))
    assert fit.fft_thickness_nm is not None
    # Independent of the fit, and far finer than its nominal resolution thanks to the peak
    # interpolation: within 15 nm. With the phase index n instead of the group index n_g the
    # estimate would be ~50 nm off (fused silica's dispersion, Malitson 1965).
    assert abs(fit.fft_thickness_nm - 2750.0) < 15.0
    n = OXIDE.film.material.index(np.array([533.3]))[0].real
    assert abs(fringe_frequency_thickness(WL, y, n)[0] - 2750.0) > 30.0


def test_ambiguous_fits_list_their_alternatives():
    # A narrow window on a thin film: several thicknesses explain it, and the fit says so.
    wl = np.linspace(600, 620, 21)
    y = tmm_spectrum(OXIDE, 800.0, wl) + np.random.default_rng(3).normal(0, 0.01, wl.size)
    fit = fit_spectrum(Spectrum(wl, y), OXIDE, (0, 3000))
    assert fit.alternatives and fit.alternatives[0]["reduced_chi2"] < 3 * max(fit.reduced_chi2, 1)
    assert any("fits almost as well" in w for w in fit.warnings)
    assert fit.landscape_chi2.shape == fit.landscape_nm.shape
    # The map applies the same test (Δχ² below 9) and flags the point.
    mapped = fit_map(SpectrumMap(wl, y[None], np.zeros(1), np.zeros(1)), OXIDE, (0, 3000))
    assert mapped.ambiguous[0]
    # A full window leaves no doubt.
    full = tmm_spectrum(OXIDE, 800.0) + np.random.default_rng(3).normal(0, 0.01, WL.size)
    assert not fit_map(SpectrumMap(WL, full[None], np.zeros(1), np.zeros(1)), OXIDE, (0, 3000)).ambiguous[0]
    assert not any("almost as well" in w for w in fit_spectrum(Spectrum(WL, full), OXIDE, (0, 3000)).warnings)


def test_cauchy_coefficients_fitted_with_the_thickness():
    truth = loads_stack('[ambient]\nmaterial = "air"\n[[layers]]\nmaterial = {cauchy = [1.585, 0.0095, 0.0003]}\n'
                        'thickness_nm = 1\nunknown = true\n[substrate]\nmaterial = "silicon"\n')
    y = stack_reflectance(truth, WL, 845.0).R + np.random.default_rng(4).normal(0, 0.001, WL.size)
    start = loads_stack('[ambient]\nmaterial = "air"\n[[layers]]\nmaterial = {cauchy = [1.56, 0.008, 0]}\n'
                        'thickness_nm = 1\nunknown = true\n[substrate]\nmaterial = "silicon"\n')
    fit = fit_spectrum(Spectrum(WL, y), start, (700, 1000), fit="thickness,cauchy")
    assert fit.thickness_nm == pytest.approx(845.0, abs=5.0)
    assert fit.parameters["cauchy_A"][0] == pytest.approx(1.585, abs=0.01)
    assert 0.5 < fit.reduced_chi2 < 2.0


def test_baseline_offset_handled_or_flagged():
    y = tmm_spectrum(OXIDE, 520.0) + 0.05 + np.random.default_rng(6).normal(0, 0.002, WL.size)
    plain = fit_spectrum(Spectrum(WL, y), OXIDE, (0, 1500))
    assert any("baseline" in w for w in plain.warnings)
    fixed = fit_spectrum(Spectrum(WL, y), OXIDE, (0, 1500), baseline="offset")
    assert fixed.thickness_nm == pytest.approx(520.0, abs=0.5)
    assert fixed.baseline["offset"] == pytest.approx(0.05, abs=0.003)
    scaled = fit_spectrum(Spectrum(WL, 0.9 * (y - 0.05)), OXIDE, (0, 1500), baseline="scale+offset")
    assert scaled.thickness_nm == pytest.approx(520.0, abs=0.5) and scaled.baseline["scale"] == pytest.approx(0.9, 0.02)


def test_range_end_tiny_range_and_duplicates():
    y = tmm_spectrum(OXIDE, 505.0) + np.random.default_rng(8).normal(0, 0.002, WL.size)
    capped = fit_spectrum(Spectrum(WL, y), OXIDE, (0, 500))
    assert any("end of the searched range" in w for w in capped.warnings) and capped.reduced_chi2 > 5
    mapped = fit_map(SpectrumMap(WL, y[None], np.zeros(1), np.zeros(1)), OXIDE, (0, 500))
    assert any("end of the searched range" in w for w in mapped.warnings) and mapped.reduced_chi2[0] > 5
    tiny = fit_map(SpectrumMap(WL, y[None], np.zeros(1), np.zeros(1)), OXIDE, (504.8, 505.3))
    assert abs(tiny.thickness_nm[0] - 505.0) < 0.3
    rows = [(w, r) for w, r in zip(WL, y)] + [(WL[3], y[3] + 0.01)]
    doubled = read_spectrum(_csv(rows))
    assert doubled.wavelength_nm.size == WL.size and any("repeated" in n for n in doubled.notes)
    assert doubled.reflectance[3] == pytest.approx(y[3] + 0.005)


def test_map_baselines_and_their_sigma():
    # Spectra scaled by 0.9 and shifted by 0.02 (a reference error): the scale+offset fit recovers the
    # thickness, and its reported 1σ matches the scatter over noisy copies (as fit_spectrum's does).
    clean = tmm_spectrum(OXIDE, 150.0)
    rng = np.random.default_rng(9)
    spectra = 0.9 * clean + 0.02 + rng.normal(0, 0.003, (80, WL.size))
    result = fit_map(SpectrumMap(WL, spectra, np.arange(80.0), np.zeros(80)), OXIDE, (0, 1000),
                     baseline="scale+offset")
    errors = result.thickness_nm - 150.0
    assert abs(np.mean(errors)) < 3 * errors.std() / np.sqrt(80)
    assert 0.7 < errors.std() / np.mean(result.sigma_nm) < 1.4
    single = fit_spectrum(Spectrum(WL, spectra[0]), OXIDE, (0, 1000), baseline="scale+offset")
    assert single.sigma_nm == pytest.approx(result.sigma_nm[0], rel=0.25)
    offset = fit_map(SpectrumMap(WL, clean[None] + 0.05, np.zeros(1), np.zeros(1)), OXIDE, (0, 1000),
                     baseline="offset")
    assert abs(offset.thickness_nm[0] - 150.0) < 0.5


def _csv(rows, header="wavelength_nm,reflectance"):
    return (header + "\n" + "\n".join(",".join(str(v) for v in r) for r in rows)).encode()


def test_reading_percent_nan_unsorted_and_counts():
    r = tmm_spectrum(OXIDE, 300.0)
    percent = read_spectrum(_csv(zip(WL, 100 * r)), name="p.csv")
    assert np.allclose(percent.reflectance, r) and any("percent" in n for n in percent.notes)
    rows = list(zip(WL, r))
    rows[10] = (WL[10], float("nan"))
    shuffled = [rows[i] for i in np.random.default_rng(0).permutation(len(rows))]
    messy = read_spectrum(_csv(shuffled), name="m.csv")
    assert np.all(np.diff(messy.wavelength_nm) > 0) and messy.wavelength_nm.size == WL.size - 1
    assert any("sorted" in n for n in messy.notes) and any("NaN" in n for n in messy.notes)
    # Raw counts against a bare-silicon reference: R = (S − D) / (Ref − D) · R_Si.
    r_si = stack_reflectance(loads_stack('[ambient]\nmaterial = "air"\n[substrate]\nmaterial = "silicon"\n'), WL).R
    dark, ref = 100.0, 100.0 + 5000.0 * np.ones_like(WL)
    sample = dark + (ref - dark) * r / r_si
    counts = read_spectrum(_csv(zip(WL, sample, ref, np.full_like(WL, dark)), "wavelength,sample,reference,dark"))
    assert np.allclose(counts.reflectance, r, atol=1e-9)
    tsv = read_spectrum("\n".join(f"{a}\t{b}" for a, b in zip(WL, r)).encode())
    assert np.allclose(tsv.reflectance, r)
    # A dim film in percent (all values below 1.05 %) needs saying so: auto reads fractions, and says so.
    dim = read_spectrum(_csv(zip(WL, np.full(WL.size, 0.9))))
    assert any("fractions" in n for n in dim.notes)
    assert np.allclose(read_spectrum(_csv(zip(WL, np.full(WL.size, 0.9))), scale="percent").reflectance, 0.009)
    # Three unnamed columns are wavelength, reflectance and something else (not counts).
    third = read_spectrum("\n".join(f"{a},{b},0.01" for a, b in zip(WL, r)).encode())
    assert np.allclose(third.reflectance, r) and any("ignored" in n for n in third.notes)


@pytest.mark.parametrize("content, message", [
    (b"", "no data"),
    (b"wavelength,reflectance\n", "no rows"),
    (b"400,0.1\n500,abc\n", "not a row of numbers"),
    (b"400,0.1\n410,0.2\n", "at least 10"),
    (b"\x89PNG\r\n\x1a\n\x00\x00", "binary"),
    ("\n".join(f"{w},{v}" for w, v in zip(range(400, 420), range(300, 320))).encode(), "expected 0–1"),
    ("\n".join(f"{w / 1000},{0.1}" for w in range(400, 420)).encode(), "nanometres"),
])
def test_bad_spectrum_files(content, message):
    with pytest.raises(FilmcalcError, match=message):
        read_spectrum(content, name="bad.csv")


def test_bad_fit_requests():
    s = Spectrum(WL, tmm_spectrum(OXIDE, 300.0))
    with pytest.raises(FilmcalcError, match="range"):
        fit_spectrum(s, OXIDE, (500, 100))
    with pytest.raises(FilmcalcError, match="window"):
        fit_spectrum(s, OXIDE, window_nm=(700, 705))
    with pytest.raises(FilmcalcError, match="Unknown fit parameter"):
        fit_spectrum(s, OXIDE, fit="thickness,colour")
    with pytest.raises(FilmcalcError, match="baseline"):
        fit_spectrum(s, OXIDE, baseline="tilt")


def test_uniformity_hand_computed():
    # Non-uniformity (max − min) / (2 · mean): common practice for wafer maps, no source.
    # Hand computation: mean 100, range 4 → 2 %; sample σ = √(10 / 4) = 1.5811.
    u = uniformity([100.0, 102.0, 98.0, 101.0, 99.0, np.nan])
    assert u["points"] == 5 and u["mean_nm"] == pytest.approx(100.0) and u["range_nm"] == pytest.approx(4.0)
    assert u["nonuniformity_pct"] == pytest.approx(2.0) and u["std_nm"] == pytest.approx(np.sqrt(2.5))


def _wafer(points=120, seed=0):
    rng = np.random.default_rng(seed)
    r = np.sqrt(rng.random(points)) * 70
    a = rng.random(points) * 2 * np.pi
    x, y = r * np.cos(a), r * np.sin(a)
    truth = 480 + 0.004 * (x**2 + y**2) + 0.1 * x
    table = stack_reflectance  # general path: independent of the fast sweep the map fit uses
    spectra = np.array([table(OXIDE, WL, d).R for d in truth]) + rng.normal(0, 0.002, (points, WL.size))
    return SpectrumMap(WL, spectra, x, y), truth


def test_map_fit_recovers_a_wafer():
    smap, truth = _wafer()
    result = fit_map(smap, OXIDE, (0, 3000))
    assert np.max(np.abs(result.thickness_nm - truth)) < 0.5
    assert not result.ambiguous.any()
    assert 0.5 < np.median(result.reduced_chi2) < 2.0
    assert result.statistics["mean_nm"] == pytest.approx(truth.mean(), abs=0.2)
    single = fit_spectrum(Spectrum(WL, smap.reflectance[0]), OXIDE, (0, 3000))
    assert result.thickness_nm[0] == pytest.approx(single.thickness_nm, abs=0.05)
    assert result.sigma_nm[0] == pytest.approx(single.sigma_nm, rel=0.2)


def test_map_files_long_and_folder(tmp_path):
    smap, truth = _wafer(points=6, seed=1)
    lines = ["x_mm,y_mm,wavelength_nm,reflectance"]
    for i in range(6):
        lines += [f"{smap.x[i]},{smap.y[i]},{w},{r}" for w, r in zip(WL, smap.reflectance[i])]
    path = tmp_path / "run.csv"
    path.write_text("\n".join(lines))
    long = read_spectrum_map(path)
    assert long.reflectance.shape == (6, WL.size)
    folder = tmp_path / "spots"
    folder.mkdir()
    pos = ["file,x,y"]
    for i in range(6):
        (folder / f"s{i}.csv").write_text("\n".join(f"{w},{r}" for w, r in zip(WL, smap.reflectance[i])))
        pos.append(f"s{i}.csv,{smap.x[i]},{smap.y[i]}")
    (folder / "positions.csv").write_text("\n".join(pos))
    from_folder = read_spectrum_map(folder)
    for m in (long, from_folder):
        fitted = fit_map(m, OXIDE, (0, 3000))
        order = [int(np.argmin(np.hypot(m.x - x, m.y - y))) for x, y in zip(smap.x, smap.y)]
        assert np.allclose(fitted.thickness_nm[order], truth, atol=0.5)
    (folder / "positions.csv").write_text("file,x,y\n../../etc/passwd,0,0\n")
    with pytest.raises(FilmcalcError, match="inside the folder"):
        read_spectrum_map(folder)
    with pytest.raises(FilmcalcError, match="header"):
        read_spectrum_map(b"1,2,400,0.1\n1,2,410,0.1\n")


def test_a_second_layer_fitted_with_the_film():
    # Resist (unknown) on an oxide whose thickness is also free: both come back from a tmm spectrum.
    stack = loads_stack('[ambient]\nmaterial = "air"\n[[layers]]\nmaterial = "pmma"\nthickness_nm = 1\nunknown = true\n'
                        '[[layers]]\nmaterial = "fused-silica"\nthickness_nm = 90\n[substrate]\nmaterial = "silicon"\n')
    n, _ = stack_indices(stack, WL)
    y = np.array([tmm.coh_tmm("s", [n[0][i], n[1][i], n[2][i], n[3][i]], [np.inf, 410.0, 105.0, np.inf], 0,
                              WL[i])["R"] for i in range(WL.size)])
    y = y + np.random.default_rng(10).normal(0, 0.001, WL.size)
    fit = fit_spectrum(Spectrum(WL, y), stack, (300, 500), fit="thickness,layer:2")
    assert fit.thickness_nm == pytest.approx(410.0, abs=3.0)
    assert fit.parameters["layer2_nm"][0] == pytest.approx(105.0, abs=3.0)
    assert 0.5 < fit.reduced_chi2 < 2.0
