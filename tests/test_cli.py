"""The command line: output formats and error handling."""

import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from filmcalc.cli import main
from filmcalc.optics import stack_reflectance
from filmcalc.stack import load_stack

OXIDE = str(Path(__file__).parent.parent / "demo_data" / "oxide-coupon.toml")


def test_spectrum_csv(capsys):
    assert main(["spectrum", OXIDE, "--thickness", "100", "--angle", "20"]) == 0
    lines = capsys.readouterr().out.strip().splitlines()
    assert lines[0] == "wavelength_nm,R_s,R_p,R"
    rows = np.array([[float(x) for x in line.split(",")] for line in lines[1:]])
    assert rows.shape == (81, 4) and rows[0, 0] == 380 and rows[-1, 0] == 780
    ref = stack_reflectance(load_stack(OXIDE), rows[:, 0], 100.0, angle_deg=20.0)
    assert rows[:, 3] == pytest.approx(ref.R, abs=1e-8)
    assert rows[:, 3] == pytest.approx((rows[:, 1] + rows[:, 2]) / 2, abs=1e-8)


def test_spectrum_json(capsys):
    assert main(["spectrum", OXIDE, "--thickness", "250", "--polarisation", "s", "--json",
                 "--wavelengths", "400:700:10"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert data["wavelength_nm"][0] == 400 and len(data["R"]) == 31
    assert data["R"] == data["R_s"] and data["film_thickness_nm"] == 250


def test_errors_are_one_line(tmp_path, capsys):
    bad = tmp_path / "bad.toml"
    bad.write_text('[ambient]\nmaterial = "air"\n[substrate]\nmaterial = "unobtainium"\n')
    assert main(["spectrum", str(bad)]) == 2
    err = capsys.readouterr().err
    assert "Unknown material 'unobtainium'" in err and "Traceback" not in err
    assert main(["spectrum", OXIDE, "--wavelengths", "700:400:5"]) == 2


def test_module_entry_point():
    out = subprocess.run([sys.executable, "-m", "filmcalc", "spectrum", OXIDE, "--thickness", "50"],
                         capture_output=True, text=True, check=True).stdout
    assert out.startswith("wavelength_nm,R_s,R_p,R")
