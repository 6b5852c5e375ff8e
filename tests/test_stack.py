"""The stack file: demo files load and round-trip; bad files get clear errors."""

from pathlib import Path

import pytest

from filmcalc.errors import FilmcalcError
from filmcalc.stack import dumps_stack, load_stack, loads_stack, save_stack

DEMO = sorted((Path(__file__).parent.parent / "demo_data").glob("*.toml"))

GOOD = """
name = "thermal oxide on silicon"
[ambient]
material = "air"
[[layers]]
material = "fused-silica"
thickness_nm = 120
unknown = true
[substrate]
material = "silicon"
[light]
source = "D65"
angle_deg = 0
polarisation = "unpolarised"
numerical_aperture = 0.0
"""


def test_demo_stacks_exist_and_round_trip(tmp_path):
    assert len(DEMO) >= 5
    for path in DEMO:
        stack = load_stack(path)
        assert stack.film_index is not None, path.name
        again = tmp_path / path.name
        save_stack(stack, again)
        assert dumps_stack(load_stack(again)) == dumps_stack(stack)


def test_issue_example_keys():
    stack = loads_stack(GOOD)
    assert stack.name == "thermal oxide on silicon"
    assert stack.film.thickness_nm == 120.0 and stack.film.material.name == "fused-silica"
    assert stack.light.source == "D65" and stack.light.angle_deg == 0.0
    assert stack.with_film_thickness(55).film.thickness_nm == 55.0
    assert stack.film.thickness_nm == 120.0  # the original is unchanged


@pytest.mark.parametrize("change, message", [
    (("thickness_nm = 120", "thicknes_nm = 120"), "Did you mean 'thickness_nm'"),
    (("thickness_nm = 120", "thickness_nm = -5"), "thickness_nm must be a number ≥ 0"),
    (("thickness_nm = 120", "thickness_nm = \"thin\""), "thickness_nm must be a number"),
    (('material = "silicon"', 'material = "silcon"'), "substrate.material: Unknown material 'silcon'"),
    (('polarisation = "unpolarised"', 'polarisation = "circular"'), "polarisation must be one of"),
    (("angle_deg = 0", "angle_deg = 95"), "angle_deg must be a number"),
    (("unknown = true", "unknown = \"yes\""), "unknown must be true or false"),
    (("[substrate]", "[substrat]"), "Unknown key 'substrat'"),
    (("[ambient]", "[ambient"), "line 3"),
])
def test_bad_file_names_the_problem(change, message):
    with pytest.raises(FilmcalcError, match=message):
        loads_stack(GOOD.replace(*change))


def test_two_unknown_layers_rejected():
    text = GOOD.replace("[substrate]", "[[layers]]\nmaterial = \"pmma\"\nthickness_nm = 5\nunknown = true\n[substrate]")
    with pytest.raises(FilmcalcError, match="Only one layer"):
        loads_stack(text)


def test_unknown_film_must_be_thin():
    with pytest.raises(FilmcalcError, match="coherent"):
        loads_stack(GOOD.replace("unknown = true", "unknown = true\ncoherent = false"))


def test_missing_file_and_relative_csv(tmp_path):
    with pytest.raises(FilmcalcError, match="Cannot read stack file"):
        load_stack(tmp_path / "nope.toml")
    (tmp_path / "film.csv").write_text("wavelength_nm,n,k\n300,1.5,0\n900,1.5,0\n")
    path = tmp_path / "s.toml"
    path.write_text(GOOD.replace('"fused-silica"', '"film.csv"'))
    stack = load_stack(path)
    assert stack.film.material.index(500.0) == 1.5
    assert 'material = "film.csv"' in dumps_stack(stack)
