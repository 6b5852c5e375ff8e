"""Photo → thickness: recovery of invented fields rendered with the forward model.

These are self-consistency checks of the inversion (the forward model itself
is checked against published values and independent libraries in
test_optics.py and test_appearance.py). Tolerances are stated per test.
"""

import numpy as np
import pytest

from filmcalc.errors import FilmcalcError
from filmcalc.stack import loads_stack
from filmcalc.synthetic import CameraSettings, dome, render_photo, steps, wedge
from filmcalc.thickness import build_lookup, thickness_map

OXIDE = loads_stack('name = "oxide"\n[ambient]\nmaterial = "air"\n[[layers]]\nmaterial = "fused-silica"\n'
                    'thickness_nm = 100\nunknown = true\n[substrate]\nmaterial = "silicon"\n[light]\nsource = "F2"\n')
SHAPE = (90, 150)


@pytest.fixture(scope="module")
def lookup():
    return build_lookup(OXIDE, (0.0, 1500.0))


def errors(result, truth):
    err = result.thickness_nm - truth
    good = np.isfinite(err)
    return err[good], good.mean()


def test_wedge_recovered(lookup):
    truth = wedge(SHAPE, 20, 1100)
    result = thickness_map(render_photo(OXIDE, truth), OXIDE, lookup=lookup)
    err, coverage = errors(result, truth)
    assert coverage > 0.99
    assert np.mean(np.abs(err) > 25) == 0  # no wrong fringe order
    assert np.sqrt(np.mean(err**2)) < 2.0
    assert result.order.max() == 6 and result.order[:, 0].max() == 1


def test_dome_with_camera_errors(lookup):
    # White balance off by 10 %, exposure off by 20 %: the self-calibration finds the gains.
    truth = dome(SHAPE, 100, 1000)
    gains = np.array([1.1, 1.0, 0.9]) * 0.8
    photo = render_photo(OXIDE, truth, CameraSettings(gains=tuple(gains / 0.8), exposure=0.8))
    result = thickness_map(photo, OXIDE, lookup=lookup)
    err, _ = errors(result, truth)
    assert np.mean(np.abs(err) > 25) < 0.005 and np.sqrt(np.mean(err**2)) < 5
    assert result.camera.gains == pytest.approx(gains, rel=0.03)
    assert result.calibration["method"] == "self-calibration"


def test_reference_region_gives_gains(lookup):
    truth = steps(SHAPE, [0.0, 150.0, 300.0])
    photo = render_photo(OXIDE, truth, CameraSettings(gains=(1.2, 1.0, 0.85)))
    result = thickness_map(photo, OXIDE, reference=(2, 2, 30, 80, 0.0), anchors=[(10, 45, 0.0)], lookup=lookup)
    assert result.camera.gains == pytest.approx([1.2, 1.0, 0.85], rel=0.01)
    assert result.calibration["method"] == "reference region"


def test_steps_stay_sharp_and_anchor_is_respected(lookup):
    # Steps of 120–150 nm (most of a fringe period, 188 nm) cannot be ordered from
    # continuity alone; an anchor on the bare band and the trend ("thicker to the
    # right") are what a user of an etched step coupon knows.
    levels = [0.0, 120.0, 250.0, 400.0, 560.0, 700.0]
    truth = steps(SHAPE, levels)
    result = thickness_map(render_photo(OXIDE, truth), OXIDE, anchors=[(5, 45, 0.0)], trend="right",
                           lookup=lookup)
    err, _ = errors(result, truth)
    assert np.mean(np.abs(err) > 25) == 0
    # The anchor's pixel gets its thickness, and each band is flat right up to its edges.
    # (near 0 nm the colour path is flat, so the tolerance is the reported 2σ there)
    assert abs(result.thickness_nm[45, 5]) <= max(5.0, 2 * result.sigma_nm[45, 5])
    row = result.thickness_nm[45]
    edges = np.flatnonzero(np.diff(truth[45]))
    for e in edges:
        assert abs(row[e] - truth[45, e]) < 10 and abs(row[e + 1] - truth[45, e + 1]) < 10


def test_uncertainty_and_flags(lookup):
    truth = wedge(SHAPE, 50, 900)
    photo = render_photo(OXIDE, truth, CameraSettings(noise=0.004, seed=3))
    photo[:10, :10] = 1.0  # a blown-out corner
    photo[-10:, -10:] = 0.0  # a black corner
    result = thickness_map(photo, OXIDE, lookup=lookup)
    assert result.flag_mask("saturated")[:10, :10].all() and result.flag_mask("dark")[-10:, -10:].all()
    assert np.isnan(result.thickness_nm[0, 0]) and np.isnan(result.thickness_nm[-1, -1])
    good = result.flags == 0
    err = np.abs(result.thickness_nm - truth)[good]
    sigma = result.sigma_nm[good]
    # Calibrated 1σ: most errors within 2σ, and σ is not vastly larger than the errors.
    assert np.mean(err <= 2 * sigma + 0.5) > 0.9
    assert np.median(sigma) < 10 * max(np.median(err), 0.5)
    assert np.nanmax(result.residual_dE) < 10
    assert 0 < result.statistics["mean_nm"] < 1000 and result.statistics["good_pixels"] > 0.8 * truth.size


@pytest.mark.parametrize("photo, message", [
    (np.full((20, 20, 3), 0.5), "greyscale"),
    (np.zeros((20, 20, 3)), "greyscale|saturated or nearly black"),
])
def test_bad_photos(photo, message, lookup):
    with pytest.raises(FilmcalcError, match=message):
        thickness_map(photo, OXIDE, lookup=lookup)


def test_no_possible_solution():
    # A saturated pure green no film of this stack can show: a clear message, not a guess.
    photo = np.zeros((20, 20, 3))
    photo[..., 1] = 0.9
    photo[..., 0] = 0.05
    with pytest.raises(FilmcalcError, match="No pixel matches"):
        thickness_map(photo, OXIDE, (0.0, 100.0), self_calibrate=False)


def test_bad_anchor_and_reference(lookup):
    photo = render_photo(OXIDE, wedge(SHAPE, 20, 500))
    with pytest.raises(FilmcalcError, match="outside the 150 × 90 photo"):
        thickness_map(photo, OXIDE, anchors=[(500, 5, 10.0)], lookup=lookup)
    with pytest.raises(FilmcalcError, match="outside the range"):
        thickness_map(photo, OXIDE, anchors=[(5, 5, 5000.0)], lookup=lookup)
    with pytest.raises(FilmcalcError, match="Reference rectangle"):
        thickness_map(photo, OXIDE, reference=(0, 0, 999, 5, 0.0), lookup=lookup)


def test_washed_out_colours_are_flagged_not_guessed():
    # Thick resist loses its colours past about 1.0–1.2 µm in white light: pixels there are
    # flagged (as washed out, or as a region the anchor does not tie to: the limit is reported),
    # and a thin part of the same photo is not.
    resist = loads_stack('[ambient]\nmaterial = "air"\n[[layers]]\nmaterial = "photoresist"\nthickness_nm = 1\n'
                         'unknown = true\n[substrate]\nmaterial = "silicon"\n[light]\nsource = "D65"\n')
    truth = wedge(SHAPE, 300, 2500)
    result = thickness_map(render_photo(resist, truth), resist, (0.0, 3000.0), anchors=[(0, 45, 300.0)])
    limit = result.calibration["washout_nm"]
    assert limit is not None and 900 < limit < 1600
    washed = result.flag_mask("washed_out")
    assert (result.flags != 0)[truth > limit + 200].mean() > 0.9
    assert not washed[truth < limit - 300].any()


def test_disconnected_patches_are_flagged_unless_anchored(lookup):
    # Two patches of film separated by a dark band: each is resolved, and only the one an anchor
    # ties (or, without anchors, the larger one) is unflagged.
    truth = dome(SHAPE, 150, 600)
    photo = render_photo(OXIDE, truth)
    photo[:, 95:105] = 0.0
    alone = thickness_map(photo, OXIDE, lookup=lookup)
    assert alone.flag_mask("unanchored")[:, 110:].mean() > 0.9
    assert not alone.flag_mask("unanchored")[:, :90].any()
    tied = thickness_map(photo, OXIDE, anchors=[(120, 45, float(truth[45, 120]))], lookup=lookup)
    assert tied.flag_mask("unanchored")[:, :90].mean() > 0.9
    assert not tied.flag_mask("unanchored")[:, 110:].any()
    err = tied.thickness_nm[:, 110:] - truth[:, 110:]
    assert np.nanmax(np.abs(err)) < 25


def test_anchor_gives_gains_on_a_nearly_uniform_film(lookup):
    # A flat film shows one colour: a colour cast cannot be told from a thickness change, but a
    # pixel of known thickness calibrates the per-channel gains.
    truth = np.full(SHAPE, 420.0)
    photo = render_photo(OXIDE, truth, CameraSettings(gains=(1.1, 1.0, 0.9), exposure=0.8))
    result = thickness_map(photo, OXIDE, anchors=[(75, 45, 420.0)], lookup=lookup)
    assert result.camera.gains == pytest.approx(np.array([1.1, 1.0, 0.9]) * 0.8, rel=0.02)
    assert np.nanmax(np.abs(result.thickness_nm - truth)) < 3


def test_steep_wedge_with_a_non_colorimetric_camera():
    # A real camera (measured sensitivities, colour-corrected on a colour checker) shifts film
    # colours by a few ΔE: order resolution continues the local slope over several pixels, so
    # the wedge keeps its fringe orders; the limit reported beyond which colours are unreadable
    # for this camera is respected.
    from pathlib import Path

    from filmcalc.stack import load_stack
    from filmcalc.synthetic import measured_camera_lookup

    coupon = load_stack(Path(__file__).resolve().parent.parent / "demo_data" / "oxide-coupon.toml")
    truth = wedge((100, 300), 20, 1200)
    measured, _ = measured_camera_lookup(coupon, (0, 1201))
    result = thickness_map(render_photo(coupon, truth, lookup=measured), coupon, (0.0, 1500.0))
    covered = np.isfinite(result.thickness_nm) & (result.flags == 0)
    assert covered.mean() > 0.8
    assert np.mean(np.abs(result.thickness_nm - truth)[covered] > 25) < 0.02


def test_line_profile():
    from filmcalc.thickness import line_profile

    values = np.arange(20.0)[None, :].repeat(10, axis=0)  # value = x
    distance, samples = line_profile(values, 2, 5, 12, 5)
    assert distance[0] == 0 and distance[-1] == pytest.approx(10.0)
    assert samples.tolist() == list(range(2, 13))
    distance, samples = line_profile(values, 0, 0, 9, 9)  # a diagonal, one sample per pixel of length
    assert distance[-1] == pytest.approx(np.hypot(9, 9)) and samples.size == 14 and samples[-1] == 9
    with pytest.raises(FilmcalcError, match="outside"):
        line_profile(values, 0, 0, 25, 3)
