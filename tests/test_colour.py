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
