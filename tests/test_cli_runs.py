"""`--save` on every analysis command and the `filmcalc runs` commands, on the demo data.

Sample names, tags and people here are invented.
"""

import contextlib
import io
import json
import zipfile
from pathlib import Path

import numpy as np
import pytest

from filmcalc.cli import main
from filmcalc.runs import KINDS, RunStore

DEMO = Path(__file__).resolve().parent.parent / "demo_data"
OXIDE = str(DEMO / "oxide-coupon.toml")
SOAP = str(DEMO / "soap-film-loop.toml")


def run_cli(*argv):
    """main(argv) → (exit status, stdout, stderr)."""
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        status = main([str(a) for a in argv])
    return status, out.getvalue(), err.getvalue()


def saved_id(stderr):
    line = [ln for ln in stderr.splitlines() if ln.startswith("saved run ")][-1]
    return line.split()[2]


@pytest.fixture(scope="module")
def saved(tmp_path_factory):
    """Every kind of analysis run once from the command line with --save; {kind: (run id, what it wrote)}."""
    import tifffile
    from PIL import Image

    work = tmp_path_factory.mktemp("cli-runs")
    data = work / "data"
    store = ["--data-dir", data]
    made = {}

    def save(kind, *argv, sample="Coupon 3", extra=()):
        status, out, err = run_cli(*argv, "--save", "--sample", sample, "--tag", "demo", "--tag", kind,
                                   "--saved-by", "L. Moreau", "--note", f"{kind} from the demo", *extra, *store)
        assert status == 0, err
        made[kind] = (saved_id(err), out)

    save("spectrum", "spectrum", OXIDE, "--thickness", 100, "--json")
    save("colour", "colour", OXIDE, "--thickness", 120, "--json")
    save("chart", "chart", OXIDE, "--to", 300, "--step", 10, "--out", work / "chart.png", "--csv", work / "chart.csv")
    save("match", "match", OXIDE, "--colour", "#5b6aa5", "--range", "0:1000", "--json")
    save("map", "map", DEMO / "photos" / "oxide-coupon-steps.png", OXIDE, "--out", work / "coupon.npy",
         "--reference", "2,2,40,197,0", "--anchor", "10,100,0", "--trend", "right", "--json")
    save("fit", "fit", DEMO / "spectra" / "oxide-spot.csv", OXIDE, "--json", sample="Spot 1")
    spectra = work / "spot map"  # a folder of spectra with positions.csv
    spectra.mkdir()
    for k in range(3):
        (spectra / f"spot {k}.csv").write_bytes((DEMO / "spectra" / "oxide-spot.csv").read_bytes())
    (spectra / "positions.csv").write_text("file,x,y\n" + "".join(f"spot {k}.csv,{k},0\n" for k in range(3)))
    save("fit-map", "fit-map", spectra, OXIDE, "--out", work / "spots.csv", "--json")
    save("fringes", "fringes", DEMO / "fringes" / "soap-sodium.png", SOAP, "--wavelength", 589.3, "--anchor",
         "150,3,25", "--trend", "down", "--out", work / "soap.npy", "--json", sample="Loop 2")
    made["fringes-line"] = made["fringes"]
    save("fringes", "fringes", DEMO / "fringes" / "soap-sodium.png", SOAP, "--wavelength", 589.3, "--anchor",
         "150,3,25", "--line", "150,3,150,196", "--out", work / "line.csv", sample="Loop 2")
    made["fringes-line"], made["fringes"] = made["fringes"], made["fringes-line"]
    frames = work / "frames"  # a folder of frames, from the demo recording
    frames.mkdir()
    for k, page in enumerate(tifffile.imread(DEMO / "sequences" / "soap-loop-drainage.tif")[:5]):
        Image.fromarray(page).save(frames / f"frame {k:03d}.png")
    save("sequence", "sequence", frames, SOAP, "--out", work / "drainage", "--fps", 40, "--range", "0:1300",
         "--scheduler", "serial", "--json", sample="Loop 2")
    return {"work": work, "data": data, "store": store, "made": made}


def test_every_kind_is_saved_and_reopened(saved):
    work, made = saved["work"], saved["made"]
    assert set(KINDS) <= set(made)
    with RunStore(saved["data"]) as s:
        runs = {kind: s.get(run_id) for kind, (run_id, _) in made.items()}
        for kind, run in runs.items():
            assert run.kind == kind.split("-line")[0] and run.saved_by == "L. Moreau"
            assert "demo" in run.tags and run.note.endswith("from the demo")
            assert run.provenance["command_line"][0] == run.kind
            stack_name = run.settings["inputs"]["stack"]
            stack_file = OXIDE if stack_name == "oxide-coupon.toml" else SOAP
            assert s.read_bytes(run, stack_name, "input") == Path(stack_file).read_bytes()
            json_out = made[kind][1]
            if json_out.startswith("{"):
                assert json.loads(json_out)["saved_run"] == run.id
        # spectrum: the arrays are the JSON output
        spectrum = json.loads(made["spectrum"][1])
        np.testing.assert_allclose(s.load_array(runs["spectrum"], "R.npy"), spectrum["R"])
        assert runs["spectrum"].settings["thickness"] == 100.0
        # colour: the summary is the JSON output
        assert runs["colour"].summary["hex"] == json.loads(made["colour"][1])["hex"]
        # chart: the chart itself and the table
        assert s.read_bytes(runs["chart"], "chart.png") == (work / "chart.png").read_bytes()
        assert s.read_bytes(runs["chart"], "colours.csv") == (work / "chart.csv").read_bytes()
        assert s.load_array(runs["chart"], "srgb.npy").shape == (1, 31, 3)
        # match: the candidates
        candidates = json.loads(s.read_bytes(runs["match"], "candidates.json"))
        assert candidates == json.loads(made["match"][1])["candidates"]
        # map: the thickness map equals the exported one; the photo is stored as given
        np.testing.assert_array_equal(s.load_array(runs["map"], "thickness_nm.npy"), np.load(work / "coupon.npy"))
        photo = runs["map"].settings["inputs"]["photo"]
        assert s.read_bytes(runs["map"], photo, "input") == (DEMO / "photos" / "oxide-coupon-steps.png").read_bytes()
        assert runs["map"].summary["mean_nm"] == json.loads(made["map"][1])["statistics"]["mean_nm"]
        # fit: thickness in the summary, data and model stored
        assert runs["fit"].summary["thickness_nm"] == pytest.approx(742.0, abs=0.5)
        assert s.load_array(runs["fit"], "model.npy").shape == s.load_array(runs["fit"], "data.npy").shape
        # fit-map: a folder of spectra is stored file by file under the folder's name
        inputs = sorted(runs["fit-map"].inputs)
        assert inputs == ["oxide-coupon.toml", "spot_map/positions.csv", "spot_map/spot_0.csv", "spot_map/spot_1.csv",
                          "spot_map/spot_2.csv"]
        assert len({f.sha256 for f in runs["fit-map"].files if f.name.startswith("spot_map/spot")}) == 1
        rows = np.loadtxt(work / "spots.csv", delimiter=",", skiprows=1)
        np.testing.assert_allclose(np.sort(s.load_array(runs["fit-map"], "thickness_nm.npy")), np.sort(rows[:, 2]),
                                   atol=1e-3)
        # fringes: a map and a line
        np.testing.assert_array_equal(s.load_array(runs["fringes"], "thickness_nm.npy"), np.load(work / "soap.npy"))
        line = np.loadtxt(work / "line.csv", delimiter=",", skiprows=1)
        np.testing.assert_allclose(s.load_array(runs["fringes-line"], "thickness_nm.npy"), line[:, 1], atol=0.01)
        assert runs["fringes-line"].summary["mode"] == "line"
        # sequence: every frame file, the cube (read in place from the store) and the series
        assert len([n for n in runs["sequence"].inputs if n.startswith("frames/")]) == 5
        arrays, attrs = s.open_cube(runs["sequence"])
        from filmcalc.sequence import open_cube
        original, _ = open_cube(work / "drainage")
        np.testing.assert_array_equal(arrays["thickness_nm"].compute(), original["thickness_nm"].compute())
        assert attrs["frames"] == [f"frame {k:03d}.png" for k in range(5)]
        assert s.read_bytes(runs["sequence"], "series.csv") == (work / "drainage" / "series.csv").read_bytes()
        assert runs["sequence"].summary["frames_mapped"] == 5
        assert s.check().ok


def test_runs_list_show_and_filters(saved):
    store = saved["store"]
    status, out, _ = run_cli("runs", "list", "--json", *store)
    listed = json.loads(out)
    assert status == 0 and len(listed) == len(saved["made"])
    status, out, _ = run_cli("runs", "list", "--sample", "Loop 2", "--tag", "fringes", "--json", *store)
    assert {r["id"] for r in json.loads(out)} == {saved["made"]["fringes"][0], saved["made"]["fringes-line"][0]}
    status, out, _ = run_cli("runs", "list", "--kind", "map", *store)
    lines = out.splitlines()
    assert lines[0].split()[:3] == ["id", "saved", "(UTC)"] and saved["made"]["map"][0] in lines[1]
    run_id = saved["made"]["map"][0]
    status, out, _ = run_cli("runs", "show", run_id, *store)
    assert status == 0 and f"run {run_id}: map" in out and "thickness_nm.npy" in out and "sample: Coupon 3" in out
    status, out, _ = run_cli("runs", "show", run_id, "--json", *store)
    shown = json.loads(out)
    assert shown["id"] == run_id and {f["name"] for f in shown["files"]} >= {"thickness_nm.npy", "oxide-coupon.toml"}
    status, _, err = run_cli("runs", "show", "0123456789ab", *store)
    assert status == 2 and "No run '0123456789ab'" in err and "Traceback" not in err
    status, out, err = run_cli("runs", "list", "--sample", "nobody", *store)
    assert status == 0 and out == "" and "No saved runs match" in err


def test_runs_history(saved):
    store = saved["store"]
    status, out, _ = run_cli("runs", "history", "--sample", "Coupon 3", *store)
    assert status == 0 and "mean_nm" in out
    status, out, _ = run_cli("runs", "history", "--tag", "demo", "--kind", "map", "--key", "mean_nm", "--json", *store)
    table = json.loads(out)
    assert [r["run_id"] for r in table["rows"]] == [saved["made"]["map"][0]] and table["mean"] is None
    status, _, err = run_cli("runs", "history", "--sample", "Coupon 3", "--key", "no_such_number", *store)
    assert status == 2 and "choose one of" in err
    assert run_cli("runs", "history", "--key", "mean_nm", *store)[0] == 2


def test_export_import_delete_and_check(saved, tmp_path):
    store, run_id = saved["store"], saved["made"]["map"][0]
    out = tmp_path / "map-run.zip"
    assert run_cli("runs", "export", run_id, "--out", out, *store)[0] == 0
    with zipfile.ZipFile(out) as zf:
        names = set(zf.namelist())
    assert {"manifest.json", "inputs/oxide-coupon-steps.png", "outputs/thickness_nm.npy"} <= names
    other = ["--data-dir", tmp_path / "other"]
    status, text, _ = run_cli("runs", "import", out, *other)
    assert status == 0 and f"imported run {run_id}" in text
    status, _, err = run_cli("runs", "import", out, *other)
    assert status == 2 and "--new-id" in err
    status, text, _ = run_cli("runs", "import", out, "--new-id", "--json", *other)
    copy_id = json.loads(text)["id"]
    assert copy_id != run_id
    with RunStore(tmp_path / "other") as a, RunStore(saved["data"]) as b:
        for name in ("oxide-coupon-steps.png", "oxide-coupon.toml"):
            assert a.read_bytes(run_id, name, "input") == b.read_bytes(run_id, name, "input")
    status, text, _ = run_cli("runs", "delete", copy_id, *other)
    assert status == 0 and f"deleted run {copy_id}" in text
    status, text, _ = run_cli("runs", "check", *other)
    assert status == 0 and "store is sound" in text
    # an orphan (as a killed save leaves) makes check fail until it is removed
    orphan = tmp_path / "other" / "files" / "ab" / ("ab" + "0" * 62)
    orphan.parent.mkdir(exist_ok=True)
    orphan.write_bytes(b"left over")
    status, text, _ = run_cli("runs", "check", *other)
    assert status == 1 and "orphan: files/ab/ab000" in text and "--delete-orphans" in text
    status, text, _ = run_cli("runs", "check", "--json", *other)
    assert status == 1 and json.loads(text)["orphans"][0]["size"] == 9
    status, text, _ = run_cli("runs", "check", "--delete-orphans", *other)
    assert status == 0 and not orphan.exists()
    assert run_cli("runs", "delete", run_id, *other)[0] == 0
    assert run_cli("runs", "list", "--json", *other)[1].strip() == "[]"


def test_save_options_are_checked_before_any_work(tmp_path):
    status, _, err = run_cli("colour", OXIDE, "--thickness", 120, "--sample", "Wafer 1")
    assert status == 2 and "add --save" in err
    status, _, err = run_cli("colour", OXIDE, "--thickness", 120, "--save", "--tag", "a,b", "--data-dir", tmp_path)
    assert status == 2 and "without commas" in err and not (tmp_path / "runs.sqlite").exists()
    status, out, _ = run_cli("colour", OXIDE, "--thickness", 120, "--json")  # no --save: nothing stored, no key
    assert status == 0 and "saved_run" not in json.loads(out)


def test_data_dir_from_the_environment(tmp_path, monkeypatch):
    monkeypatch.setenv("FILMCALC_DATA", str(tmp_path / "env-store"))
    status, _, err = run_cli("colour", OXIDE, "--thickness", 50, "--save")
    assert status == 0 and str(tmp_path / "env-store") in err
    status, out, _ = run_cli("runs", "list", "--json")
    assert [r["kind"] for r in json.loads(out)] == ["colour"]
