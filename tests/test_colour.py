"""Colour basics used by the dashboard swatch (the full colour engine has its own issue)."""

import warnings

import numpy as np
import pytest

from filmcalc.colour import XYZ_to_srgb, colour_kernel, reflectance_to_XYZ, srgb_encode
from filmcalc.errors import FilmcalcError

with warnings.catch_warnings():
    warnings.simplefilter("ignore")
    import colour


def test_d65_white_point():
    # CIE 015:2018 Table 11.3: D65, 2° observer, xy = (0.31272, 0.32903) (1 nm steps;
    # colour-science ships D65 to 780 nm, which moves xy by under 1e-5).
    k = colour_kernel("D65", "2", np.arange(360.0, 781.0, 1.0))
    assert k.white_xy == pytest.approx([0.31272, 0.32903], abs=2e-5)
    assert k.white_XYZ[1] == pytest.approx(100.0)


@pytest.mark.parametrize("source", ["D65", "D50", "A", "F2", "FL11", "LED-B3", "blackbody:3200"])
def test_perfect_white_is_srgb_white(source):
    # A perfect reflector under any light, adapted to D65, is sRGB (1, 1, 1) (IEC 61966-2-1 white).
    k = colour_kernel(source)
    srgb, out = XYZ_to_srgb(reflectance_to_XYZ(np.ones(k.wavelength_nm.size), k), k.white_XYZ)
    assert srgb == pytest.approx([1, 1, 1], abs=1e-6) and not out


def test_srgb_transfer_function():
    # IEC 61966-2-1: V = 1.055 L^(1/2.4) − 0.055 above 0.0031308, 12.92 L below; L = 0.18 → 0.461356.
    assert srgb_encode(0.18) == pytest.approx(0.461356, abs=1e-6)
    assert srgb_encode(0.002) == pytest.approx(12.92 * 0.002)


def test_xyz_agrees_with_colour_science_integration():
    # colour.sd_to_XYZ (ASTM E308 weighting) on a film-like spectrum at 5 nm steps.
    wl = np.arange(380.0, 781.0, 5.0)
    R = 0.3 + 0.25 * np.sin(wl / 23.0)
    k = colour_kernel("D65", "2", wl)
    sd = colour.SpectralDistribution(dict(zip(wl, R)))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref = colour.sd_to_XYZ(sd, colour.MSDS_CMFS["CIE 1931 2 Degree Standard Observer"],
                               colour.SDS_ILLUMINANTS["D65"])
    assert reflectance_to_XYZ(R, k) == pytest.approx(ref, rel=5e-3)


def test_line_source_and_errors():
    k = colour_kernel("line:589.0,589.6")
    assert k.monochromatic and k.wavelength_nm.tolist() == [589.0, 589.6]
    with pytest.raises(FilmcalcError, match="Unknown light"):
        colour_kernel("sunshine")
    with pytest.raises(FilmcalcError, match="line:632.8"):
        colour_kernel("line:red")


def test_srgb_matrix_matches_iec_table():
    # IEC 61966-2-1:1999 §5.2 XYZ → linear sRGB matrix, printed to 4 decimals
    # (values from memory of the standard; our matrix is derived from its primaries).
    from filmcalc.colour import _XYZ_TO_SRGB
    iec = [[3.2406, -1.5372, -0.4986], [-0.9689, 1.8758, 0.0415], [0.0557, -0.2040, 1.0570]]
    assert _XYZ_TO_SRGB == pytest.approx(np.array(iec), abs=6e-4)


# --- CIELAB, Oklab, CIEDE2000 ---------------------------------------------------------

from filmcalc.colour import (XYZ_to_Lab, XYZ_to_Oklab, Lab_to_XYZ, XYZ_to_uv, XYZ_to_xy, CameraResponse,  # noqa: E402
                             camera_kernel, delta_E_2000, hue_family, parse_colour, spectral_locus, srgb_to_XYZ)

D65_XYZ = np.array([95.047, 100.0, 108.883])


@pytest.mark.parametrize("lab1, lab2, expected", [
    pytest.param((50, 2.6772, -79.7751), (50, 0, -82.7485), 2.0425, id="Sharma 2005 pair 1"),
    pytest.param((50, 0, 0), (50, -1, 2), 2.3669, id="Sharma 2005 pair 7"),
    pytest.param((50, 2.5, 0), (73, 25, -18), 27.1492, id="Sharma 2005 pair 17"),
    pytest.param((2.0776, 0.0795, -1.1350), (0.9033, -0.0636, -0.5514), 0.9082, id="Sharma 2005 pair 34"),
])
def test_ciede2000_published_pairs(lab1, lab2, expected):
    # Sharma, Wu & Dalal 2005, Color Res. Appl. 30, 21, Table 1.
    assert delta_E_2000(lab1, lab2) == pytest.approx(expected, abs=1e-4)
    assert delta_E_2000(lab2, lab1) == pytest.approx(expected, abs=1e-4)


def test_ciede2000_hue_wraparound_against_colour_science():
    # Random pairs, including hue angles on both sides of 0°/360° (Sharma pairs 9–12
    # exercise the same branch), against colour-science's independent implementation.
    rng = np.random.default_rng(7)
    a = rng.uniform([0, -100, -100], [100, 100, 100], (2000, 3))
    b = a + rng.normal(0, 8, a.shape)
    b[:200, 1:] = -a[:200, 1:] * 0.1  # near-opposite hues, small chroma
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref = colour.delta_E(a, b, method="CIE 2000")
    assert delta_E_2000(a, b) == pytest.approx(ref, abs=1e-9)


def test_cielab_and_oklab_against_colour_science():
    # CIE 015:2018 §8.2.1 CIELAB and Ottosson 2020 Oklab, both against colour-science.
    rng = np.random.default_rng(8)
    XYZ = rng.uniform(0.1, 100, (200, 3))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        lab_ref = colour.XYZ_to_Lab(XYZ / 100, colour.XYZ_to_xy(D65_XYZ / 100))
        ok_ref = colour.XYZ_to_Oklab(XYZ / 100)
    assert XYZ_to_Lab(XYZ, D65_XYZ) == pytest.approx(lab_ref, abs=1e-9)
    assert Lab_to_XYZ(XYZ_to_Lab(XYZ, D65_XYZ), D65_XYZ) == pytest.approx(XYZ, rel=1e-12)
    # Our Oklab adapts the light's white to the sRGB D65 (0.3127, 0.3290): pass exactly that white.
    white = np.array([0.3127 / 0.3290, 1.0, (1 - 0.3127 - 0.3290) / 0.3290]) * 100
    assert XYZ_to_Oklab(XYZ, white) == pytest.approx(ok_ref, abs=1e-6)


def test_chromaticity_coordinates():
    # CIE 015:2018 eqs. 7.3 and 8.1 on the D65 white: xy (0.3127, 0.3290), u'v' (0.1978, 0.4683).
    assert XYZ_to_xy(D65_XYZ) == pytest.approx([0.3127, 0.3290], abs=1e-4)
    assert XYZ_to_uv(D65_XYZ) == pytest.approx([0.1978, 0.4683], abs=1e-4)
    locus = spectral_locus("2")
    assert locus[locus[:, 0] == 520.0, 1:][0] == pytest.approx([0.0743, 0.8338], abs=1e-3)  # CIE 1931 table value, from memory


def test_srgb_round_trip_in_gamut():
    rng = np.random.default_rng(9)
    srgb = rng.uniform(0.02, 0.98, (100, 3))
    k = colour_kernel("A")
    XYZ = srgb_to_XYZ(srgb, k.white_XYZ)
    back, out = XYZ_to_srgb(XYZ, k.white_XYZ)
    assert back == pytest.approx(srgb, abs=1e-9) and not out.any()


def test_parse_colour():
    assert parse_colour("#ffffff", D65_XYZ) == pytest.approx([100, 0, 0], abs=0.05)
    assert parse_colour("lab:50,10,-20", D65_XYZ).tolist() == [50, 10, -20]
    assert parse_colour("srgb:1,1,1", D65_XYZ) == pytest.approx([100, 0, 0], abs=0.05)
    with pytest.raises(FilmcalcError, match="#RRGGBB"):
        parse_colour("blue-ish", D65_XYZ)


def test_hue_families_from_css_anchors():
    # The anchors are CSS Color 4 named colours; each must fall in its own family,
    # and an orange-red between red and orange goes to the nearer anchor.
    assert hue_family(parse_colour("#ff0000", D65_XYZ)) == "red"
    assert hue_family(parse_colour("#4169e1", D65_XYZ)) == "blue"
    assert hue_family(parse_colour("#008000", D65_XYZ)) == "green"
    assert hue_family(parse_colour("#c71585", D65_XYZ)) == "magenta"  # medium violet red
    assert hue_family(parse_colour("#ffd700", D65_XYZ)) == "yellow"  # gold


def test_light_names():
    assert np.allclose(colour_kernel("F2").weights, colour_kernel("FL2").weights)  # CIE name vs colour-science's
    # Na D lines, 588.995 and 589.592 nm in air (NIST ASD), in vacuum ×n_air ≈ 1.000277 (Ciddor 1996).
    assert colour_kernel("sodium").wavelength_nm == pytest.approx([589.158, 589.755], abs=2e-3)
    assert colour_kernel("mercury").wavelength_nm.size == 3
    assert colour_kernel("D65", "10").white_xy == pytest.approx([0.31382, 0.33100], abs=2e-4)  # CIE 015 Table 11.3 (from memory)


def test_camera_with_cie_sensitivities_is_von_kries_xyz():
    # A "camera" whose sensitivities are the CIE 1931 functions, balanced on the
    # scene light, reads XYZ divided channel-wise by the white's XYZ.
    cmfs = colour.MSDS_CMFS["CIE 1931 2 Degree Standard Observer"]
    cam = CameraResponse(cmfs.wavelengths, cmfs.values, "cie")
    k = colour_kernel("A")
    ck = camera_kernel(cam, "A")
    R = 0.3 + 0.2 * np.cos(k.wavelength_nm / 30)
    assert reflectance_to_XYZ(R, ck) == pytest.approx(100 * reflectance_to_XYZ(R, k) / k.white_XYZ, rel=1e-9)
    assert reflectance_to_XYZ(np.ones(k.wavelength_nm.size), ck) == pytest.approx([100, 100, 100])


def test_line_light_colours_and_lab():
    from filmcalc.colour import line_colour_srgb
    k = colour_kernel("line:650")
    # CIELAB of the line's own white is (100, 0, 0) even though its Z is 0.
    assert XYZ_to_Lab(k.white_XYZ, k.white_XYZ) == pytest.approx([100, 0, 0], abs=1e-9)
    half = reflectance_to_XYZ(np.array([0.5]), k)
    srgb, _ = line_colour_srgb(np.stack([k.white_XYZ, half]), k.white_XYZ)
    assert srgb[0, 0] == pytest.approx(1.0) and srgb[0, 0] > srgb[0, 1]  # red line shows red
    assert srgb[1] == pytest.approx(srgb_encode(0.5 * srgb_decode_for_test(srgb[0])), abs=1e-9)
    assert hue_family([50.0, 1.0, 1.0]) == "grey"


def srgb_decode_for_test(v):
    from filmcalc.colour import srgb_decode
    return srgb_decode(v)


def test_user_light_and_camera_files(tmp_path):
    from filmcalc.colour import load_camera_csv
    # A user CSV light equal to D65 gives D65's white (the file route against the built-in table).
    d65 = colour.SDS_ILLUMINANTS["D65"]
    wl = np.arange(380.0, 781.0, 5.0)
    light = tmp_path / "lamp.csv"
    light.write_text("wavelength_nm,power\n" + "\n".join(f"{w:g},{d65[w]:.6f}" for w in wl))
    assert colour_kernel(str(light)).white_xy == pytest.approx(colour_kernel("D65").white_xy, abs=1e-9)
    bad = tmp_path / "bad.csv"
    bad.write_text("wavelength_nm,power\n500,1\n400,1\n")
    with pytest.raises(FilmcalcError, match="increasing"):
        colour_kernel(str(bad))
    # A camera file: header checked, sensitivities read, white balanced to (100, 100, 100).
    cam = tmp_path / "cam.csv"
    cam.write_text("wavelength_nm,red,green,blue\n" + "\n".join(
        f"{w:g},{np.exp(-((w - 600) / 40) ** 2):.6f},{np.exp(-((w - 540) / 40) ** 2):.6f},"
        f"{np.exp(-((w - 450) / 30) ** 2):.6f}" for w in wl))
    k = camera_kernel(load_camera_csv(cam), "A")
    assert reflectance_to_XYZ(np.ones(k.wavelength_nm.size), k) == pytest.approx([100, 100, 100])
    wrong = tmp_path / "wrong.csv"
    wrong.write_text("nm,r,g,b\n400,1,1,1\n500,1,1,1\n")
    with pytest.raises(FilmcalcError, match="header"):
        load_camera_csv(wrong)
