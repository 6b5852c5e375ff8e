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


def test_colour_json(capsys):
    assert main(["colour", OXIDE, "--thickness", "120", "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert data["hex"].startswith("#") and len(data["hex"]) == 7
    assert len(data["XYZ"]) == 3 and 0 < data["XYZ"][1] < 100  # Y = 100 scale
    assert len(data["CIELAB"]) == 3 and len(data["sRGB"]) == 3


def test_chart_writes_image_and_csv(tmp_path, capsys):
    out, table = tmp_path / "chart.png", tmp_path / "chart.csv"
    assert main(["chart", OXIDE, "--from", "0", "--to", "300", "--step", "10", "--out", str(out),
                 "--csv", str(table)]) == 0
    assert out.read_bytes()[:4] == b"\x89PNG"
    lines = table.read_text().splitlines()
    header = lines[0].split(",")
    assert {"thickness_nm", "angle_deg", "hex", "L", "a", "b"} <= set(header) and len(lines) == 32
    assert main(["chart", OXIDE, "--to", "300", "--step", "5", "--angles", "0:40:10", "--out",
                 str(tmp_path / "g.pdf"), "--csv", str(table)]) == 0
    assert len(table.read_text().splitlines()) == 1 + 61 * 5


def test_match(capsys):
    assert main(["colour", OXIDE, "--thickness", "300", "--json"]) == 0
    hex_colour = json.loads(capsys.readouterr().out)["hex"]
    assert main(["match", OXIDE, "--colour", hex_colour, "--range", "0:1000", "--tolerance", "3", "--json"]) == 0
    found = json.loads(capsys.readouterr().out)["candidates"]
    assert abs(found[0]["thickness_nm"] - 300) <= 2 and found[0]["delta_E"] < 1.0
    assert main(["match", OXIDE, "--colour", "purple"]) == 2


def test_map_on_a_demo_photo(tmp_path, capsys):
    import tifffile
    photo = str(Path(__file__).parent.parent / "demo_data" / "photos" / "oxide-coupon-steps.png")
    out = tmp_path / "coupon.tiff"
    assert main(["map", photo, OXIDE, "--out", str(out), "--reference", "2,2,40,197,0", "--anchor", "10,100,0",
                 "--trend", "right", "--pixel-size", "2.0", "--json"]) == 0
    record = json.loads(capsys.readouterr().out)
    assert record["calibration"]["method"] == "reference region"
    assert record["statistics"]["flagged_fraction"] < 0.05 and len(record["photo"]["sha256"]) == 64
    assert sorted(p.name for p in tmp_path.iterdir()) == ["coupon.json", "coupon.tiff"]  # nothing else written
    truth = np.load(Path(photo).with_name("oxide-coupon-steps-truth.npz"))["thickness_nm"]
    result = tifffile.imread(out)
    good = np.isfinite(result)
    assert np.mean(np.abs(result[good] - truth[good]) > 25) < 0.01


def test_map_bad_inputs(tmp_path, capsys):
    text = tmp_path / "not-an-image.png"
    text.write_text("hello")
    assert main(["map", str(text), OXIDE, "--out", str(tmp_path / "m.npy")]) == 2
    assert "not a readable" in capsys.readouterr().err
    empty = tmp_path / "empty.png"
    empty.write_bytes(b"")
    assert main(["map", str(empty), OXIDE, "--out", str(tmp_path / "m.npy")]) == 2
    photo = str(Path(__file__).parent.parent / "demo_data" / "photos" / "oil-on-water.png")
    assert main(["map", photo, OXIDE, "--out", str(tmp_path / "m.txt")]) == 2
    assert main(["map", photo, OXIDE, "--out", str(tmp_path / "m.npy"), "--anchor", "1,2"]) == 2
    assert not (tmp_path / "m.npy").exists()


DEMO = Path(__file__).parent.parent / "demo_data"


def test_fit_on_the_demo_spectra(capsys):
    # The demo spectra are rendered from invented truths (demo_data/make_demo_spectra.py): 742.0 and 2430 nm.
    assert main(["fit", str(DEMO / "spectra" / "oxide-spot.csv"), OXIDE, "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["thickness_nm"] == pytest.approx(742.0, abs=0.5)
    assert {"sigma_nm", "reduced_chi2", "alternatives"} <= set(out)
    assert main(["fit", str(DEMO / "spectra" / "resist-counts.csv"), str(DEMO / "resist-wafer.toml"),
                 "--range", "0:5000"]) == 0
    text = capsys.readouterr().out
    assert "2430.0" in text and "fringe-frequency estimate" in text


def test_fit_map_on_the_demo_wafer(tmp_path, capsys):
    out = tmp_path / "wafer.csv"
    assert main(["fit-map", str(DEMO / "spectra" / "wafer-map.csv"), OXIDE, "--out", str(out), "--json"]) == 0
    summary = json.loads(capsys.readouterr().out)
    truth = np.load(DEMO / "spectra" / "wafer-map-truth.npz")
    rows = np.loadtxt(out, delimiter=",", skiprows=1)
    assert summary["points"] == 49 and rows.shape == (49, 6)
    order = [int(np.argmin(np.hypot(rows[:, 0] - x, rows[:, 1] - y))) for x, y in zip(truth["x_mm"], truth["y_mm"])]
    assert np.max(np.abs(rows[order, 2] - truth["thickness_nm"])) < 0.5
    assert main(["fit-map", str(DEMO / "spectra" / "wafer-map.csv"), OXIDE, "--out", str(tmp_path / "w.png")]) == 0
    assert (tmp_path / "w.png").read_bytes()[:4] == b"\x89PNG"
    assert main(["fit-map", str(DEMO / "spectra" / "wafer-map.csv"), OXIDE, "--out", str(tmp_path / "w.xls")]) == 2
    assert "--out must end" in capsys.readouterr().err
    assert main(["fit", str(tmp_path / "missing.csv"), OXIDE]) == 2


def test_fringes_map_and_line_on_the_demo_photos(tmp_path, capsys):
    # Demo fringe photos are rendered from invented truths (demo_data/make_demo_fringes.py).
    soap, soap_stack = DEMO / "fringes" / "soap-sodium.png", str(DEMO / "soap-film-loop.toml")
    out = tmp_path / "soap.npy"
    assert main(["fringes", str(soap), soap_stack, "--wavelength", "589.3", "--anchor", "150,3,25", "--trend", "down",
                 "--out", str(out), "--json"]) == 0
    record = json.loads(capsys.readouterr().out)
    truth = np.load(DEMO / "fringes" / "soap-sodium-truth.npz")["thickness_nm"]
    est = np.load(out)
    good = np.isfinite(est)
    assert good.mean() > 0.9 and np.median(np.abs(est - truth)[good]) < 15
    assert record["settings"]["wavelengths_nm"] == [589.3] and (tmp_path / "soap.json").exists()
    line = tmp_path / "line.csv"
    assert main(["fringes", str(soap), soap_stack, "--wavelength", "589.3", "--anchor", "150,3,25",
                 "--line", "150,3,150,196", "--out", str(line)]) == 0
    rows = np.loadtxt(line, delimiter=",", skiprows=1)
    assert abs(rows[-1, 1] - truth[196, 150]) < 30
    two = tmp_path / "oil.npy"
    assert main(["fringes", str(DEMO / "fringes" / "oil-two-lines.png"), str(DEMO / "oil-on-water.toml"),
                 "--wavelength", "632.8", "--wavelength", "488", "--range", "0:1000", "--out", str(two)]) == 0
    oil = np.load(two)
    oil_truth = np.load(DEMO / "fringes" / "oil-two-lines-truth.npz")["thickness_nm"]
    assert np.median(np.abs(oil - oil_truth)[np.isfinite(oil)]) < 15
    capsys.readouterr()
    assert main(["fringes", str(soap), soap_stack, "--wavelength", "589.3", "--line", "0,0,5,5",
                 "--out", str(tmp_path / "x.csv")]) == 2
    assert "--line needs --anchor" in capsys.readouterr().err
