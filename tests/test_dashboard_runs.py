"""Saved runs in the dashboard: saving from the analysis pages, the Saved runs page (list, filters, a run opened
again from its stored arrays, delete, compare, sample history) and links to a run. Driven with AppTest.

Sample names, tags and people here are invented.
"""

import contextlib
import io
import json
from pathlib import Path

import numpy as np
import plotly.graph_objects as go
import pytest
import streamlit as st
from streamlit.testing.v1 import AppTest

from filmcalc.cli import main as cli_main
from filmcalc.runs import RunStore

ROOT = Path(__file__).resolve().parent.parent
DEMO = ROOT / "demo_data"
ENTRY = str(ROOT / "dashboard.py")
PAGE_FILES = {"saved-runs": "filmcalc/ui/saved_runs.py", "photo-map": "filmcalc/ui/photo_map.py",
              "spectrum-fit": "filmcalc/ui/spectrum_fit.py", "spectrum-map": "filmcalc/ui/spectrum_map.py",
              "fringes": "filmcalc/ui/fringe_analysis.py", "film-over-time": "filmcalc/ui/film_sequence.py",
              "colour-charts": "filmcalc/ui/colour_charts.py"}
# What `filmcalc … --save` stores for each kind (filmcalc/cli.py): the dashboard must store the same names.
CLI_OUTPUTS = {
    "map": {"thickness_nm.npy", "sigma_nm.npy", "flags.npy", "residual_dE.npy"},
    "fit": {"wavelength_nm.npy", "data.npy", "model.npy", "landscape_nm.npy", "landscape_chi2.npy"},
    "fit-map": {"x.npy", "y.npy", "thickness_nm.npy", "sigma_nm.npy", "reduced_chi2.npy", "ambiguous.npy"},
    "fringes": {"thickness_nm.npy", "sigma_nm.npy", "flags.npy"},
    "fringes-line": {"distance_px.npy", "thickness_nm.npy", "sigma_nm.npy", "intensity.npy", "extrema_px.npy",
                     "extrema_nm.npy"},
    "sequence": {"cube.zarr.zip", "series.csv", "summary.json"},
    "chart": {"chart.png", "colours.csv", "thickness_nm.npy", "angle_deg.npy", "srgb.npy", "Lab.npy", "XYZ.npy"},
    "match": {"candidates.json"},
}

CIVIDIS = [list(c) for c in go.Heatmap(z=[[0]], colorscale="cividis").colorscale]


@pytest.fixture
def data_dir(tmp_path, monkeypatch):
    """An empty run store of this test's own, found by the dashboard through FILMCALC_DATA."""
    folder = tmp_path / "data"
    monkeypatch.setenv("FILMCALC_DATA", str(folder))
    monkeypatch.delenv("FILMCALC_DATABASE_URL", raising=False)
    monkeypatch.delenv("FILMCALC_PASSWORD", raising=False)
    st.cache_resource.clear()
    st.cache_data.clear()
    yield folder
    st.cache_resource.clear()


def open_link(page, query=None, timeout=120):
    """The dashboard as a browser opening ``/page?query`` in a new session."""
    at = AppTest.from_file(ENTRY, default_timeout=timeout)
    at.context["url"] = "http://lab-pc:8501"
    at.run()
    at.switch_page(PAGE_FILES[page])
    at.context["url"] = f"http://lab-pc:8501/{page}"
    at.query_params = dict(query or {})
    return at.run()


def cli(*argv):
    """`filmcalc ARGV` in this process; returns the saved run's id."""
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        status = cli_main([str(a) for a in argv])
    assert status == 0, err.getvalue()
    return [line for line in err.getvalue().splitlines() if line.startswith("saved run ")][-1].split()[2]


def save_from_page(at, key, sample="coupon 3", tags="weekly, anneal-B", saved_by="A. Lund", note=""):
    """Fill in the page's “Save as a run” form ``key`` and press Save."""
    at.text_input(key=f"run_sample::{key}").input(sample)
    at.text_input(key=f"run_tags::{key}").input(tags)
    at.text_input(key=f"run_saved_by::{key}").input(saved_by)
    at.text_area(key=f"run_note::{key}").input(note)
    submit = next(b for b in at.get("form_submit_button") if b.key == f"FormSubmitter:save_run::{key}-Save")
    submit.click()
    return at.run()


def metrics(at):
    return {m.label: m.value for m in at.metric}


def chart_keys(at):
    return [c.proto.id for c in at.get("plotly_chart")]


def figures(at):
    """The plotly figures on the page, as JSON text."""
    return [c.proto.spec for c in at.get("plotly_chart")]


def map_run(store, values, sample="coupon 3", **labels):
    """A photo-map run saved as `filmcalc map --save` saves one (the arrays by the same names)."""
    values = np.asarray(values, np.float32)
    good = values[np.isfinite(values)]
    return store.save("map", outputs={"thickness_nm.npy": values, "sigma_nm.npy": np.full_like(values, 1.5),
                                      "flags.npy": np.zeros(values.shape, np.uint16),
                                      "residual_dE.npy": np.zeros_like(values)},
                      summary={"mean_nm": float(good.mean()), "std_nm": float(good.std()), "min_nm": float(good.min()),
                               "max_nm": float(good.max()), "flagged_fraction": 0.0},
                      settings={"command": "map", "range": "0:1500"}, sample=sample, **labels)


# --------------------------------------------------------------------------- the page with no runs

def test_empty_store_says_where_it_is_and_how_to_save_a_first_run(data_dir):
    at = open_link("saved-runs")
    assert not at.exception and not at.error
    assert at.title[0].value == "Saved runs"
    assert any(str(data_dir) in c.value for c in at.caption)  # where the store lives
    message = " ".join(i.value for i in at.info)
    assert "No runs are saved here yet" in message and "Save as a run" in message and "--save" in message
    assert not data_dir.exists()  # looking creates nothing


# --------------------------------------------------------------------------- save on a page, open by link

def test_photo_map_saved_on_its_page_opens_from_the_run_link_without_recomputing(data_dir, monkeypatch):
    at = open_link("photo-map", {"photo": "oxide-coupon-steps", "sample": "oxide-coupon"})
    at.button(key="photo_run").click().run()
    assert not at.exception and not at.error
    computed = metrics(at)
    at = save_from_page(at, "map", note="after the 900 °C anneal")
    assert not at.exception and not at.error
    store = RunStore(data_dir)
    [info] = store.list_runs()
    run = store.get(info.id)
    assert any(f"saved-runs?run={run.id}" in s.value for s in at.success)
    assert any(c.value == f"http://lab-pc:8501/saved-runs?run={run.id}" for c in at.code)
    # what `filmcalc map --save` stores, under the same names, the demo photo included
    assert set(run.outputs) == CLI_OUTPUTS["map"]
    assert set(run.inputs) == {"oxide-coupon-steps.png", "oxide-coupon.toml"}
    assert run.settings["inputs"] == {"photo": "oxide-coupon-steps.png", "stack": "oxide-coupon.toml"}
    assert run.settings["command"] == "map" and run.settings["trend"] == "right"
    assert (run.sample, run.tags, run.saved_by, run.note) == ("coupon 3", ["anneal-B", "weekly"], "A. Lund",
                                                              "after the 900 °C anneal")
    assert run.provenance["dashboard"]["link"].startswith("http://lab-pc:8501/photo-map?photo=oxide-coupon-steps")

    # A colleague opens the link in a new session: nothing may be computed again.
    def no_recompute(*args, **kwargs):
        raise AssertionError("the saved run was computed again")

    import filmcalc.fringes
    import filmcalc.thickness
    monkeypatch.setattr(filmcalc.thickness, "thickness_map", no_recompute)
    monkeypatch.setattr(filmcalc.fringes, "fringe_map", no_recompute)
    at = open_link("saved-runs", {"run": run.id})
    assert not at.exception and not at.error and not at.warning
    assert at.selectbox(key="sr_open").value == run.id
    shown = metrics(at)
    for label in ("mean thickness", "σ across the map", "range", "flagged pixels"):
        assert shown[label] == computed[label], label
    assert f"sr_map::{run.id}" in " ".join(chart_keys(at))
    thickness = json.loads(next(f for k, f in zip(chart_keys(at), figures(at)) if f"sr_map::{run.id}" in k))
    heatmap = thickness["data"][0]
    assert [list(c) for c in heatmap["colorscale"]] == CIVIDIS  # colour-blind-safe, perceptually uniform
    assert heatmap["colorbar"]["title"]["text"] == "thickness (nm)"  # the colour bar says what and in which unit
    assert thickness["layout"]["xaxis"]["title"]["text"] == "x (px)"
    [photo] = at.get("image")  # the photo itself, read back from the store
    assert "oxide-coupon-steps.png, 300 × 200 px" in photo.proto.imgs[0].caption
    assert any(c.value == f"http://lab-pc:8501/saved-runs?run={run.id}" for c in at.code)  # the link to share
    assert at.query_params["run"] == run.id  # and the address bar holds it
    assert any("after the 900 °C anneal" in i.value for i in at.info)


def test_a_bad_run_in_the_link_gives_a_clear_message_not_a_traceback(data_dir):
    store = RunStore(data_dir)
    map_run(store, np.full((4, 5), 100.0))
    for value, reason in (("../../etc/passwd", "not a run id"), ("deadbeef0000", "no run with this id"),
                          ("x" * 300, "longer than")):
        at = open_link("saved-runs", {"run": value})
        assert not at.exception and not at.error, value
        assert any(reason in w.value and "run" in w.value for w in at.warning), [w.value for w in at.warning]
        assert at.selectbox(key="sr_open").value is None
        assert "run" not in at.query_params  # the address bar is clean again
    at = open_link("saved-runs", {"compare": "deadbeef0000,feedface0000"})
    assert not at.exception and any("compare" in w.value for w in at.warning)


def test_each_page_saves_its_result_under_the_commands_names_and_it_opens_again(data_dir):
    """Every analysis page saves a run the Saved runs page (and `filmcalc runs`) can open."""
    cases = [("spectrum-fit", {"spectrum": "oxide-spot", "sample": "oxide-coupon"}, None, "fit", "fit"),
             ("spectrum-map", {"run": "wafer-map", "sample": "oxide-coupon"}, None, "fit-map", "fit-map"),
             ("fringes", {"photo": "soap-sodium", "sample": "soap-film-loop"}, "fr_run", "fringes", "fringes"),
             ("fringes", {"photo": "soap-sodium", "sample": "soap-film-loop", "result": "line",
                          "line": "150,3,150,196", "use_anchor": "true", "anchor": "150,3,25"}, "fr_run", "fringes",
              "fringes-line"),
             ("colour-charts", {"sample": "oxide-coupon", "t_max_nm": "1000", "print_to_nm": "300",
                                "print_step_nm": "20"}, None, "chart", "chart"),
             ("colour-charts", {"sample": "oxide-coupon", "t_max_nm": "1000", "colour": "#5b6aa5"}, None, "match",
              "match"),
             ("film-over-time", {"recording": "soap-loop-drainage", "sample": "soap-film-loop", "frames": "0:6",
                                 "fps": "40"}, "seq_run", "sequence", "sequence")]
    store = RunStore(data_dir)
    for page, query, button, form, names in cases:
        kind = names.split("-line")[0]
        at = open_link(page, query, timeout=180)
        if button:
            at.button(key=button).click().run()
        assert not at.exception and not at.error, page
        at = save_from_page(at, form, sample=f"from {page}")
        assert not at.exception and not at.error, (page, [e.value for e in at.error])
        info = store.list_runs(limit=1)[0]
        run = store.get(info.id)
        assert run.kind == kind and run.sample == f"from {page}"
        assert set(run.outputs) == CLI_OUTPUTS[names] | ({"chart.pdf"} if kind == "chart" else set()), page
        assert run.settings["command"] == kind and "stack" in run.settings["inputs"]
        for name in run.settings["inputs"].values():  # every input is stored: the link works without an upload
            assert name in run.inputs or any(n.startswith(name + "/") for n in run.inputs), name
        opened = open_link("saved-runs", {"run": run.id}, timeout=180)
        assert not opened.exception and not opened.error, (page, [e.value for e in opened.error])
        assert opened.get("plotly_chart") or opened.get("image") or opened.dataframe, page
    assert sorted(r.summary.get("mode") for r in store.list_runs(kind="fringes")) == ["line", "map"]


def test_runs_saved_by_the_command_open_on_the_page(data_dir, tmp_path):
    """Runs of every kind saved with `filmcalc … --save` are drawn again on the page without an exception."""
    store = ["--save", "--data-dir", data_dir, "--sample", "spot 1", "--saved-by", "K. Osei"]
    oxide, soap = DEMO / "oxide-coupon.toml", DEMO / "soap-film-loop.toml"
    ids = {
        "spectrum": cli("spectrum", oxide, "--thickness", 100, "--json", *store),
        "colour": cli("colour", oxide, "--thickness", 120, "--json", *store),
        "match": cli("match", oxide, "--colour", "#5b6aa5", "--range", "0:1000", "--json", *store),
        "fit": cli("fit", DEMO / "spectra" / "oxide-spot.csv", oxide, "--json", *store),
        "fit-map": cli("fit-map", DEMO / "spectra" / "wafer-map.csv", oxide, "--out", tmp_path / "w.csv", "--json",
                       *store),
        "chart": cli("chart", oxide, "--to", 200, "--step", 20, "--out", tmp_path / "c.png", *store),
        "sequence": cli("sequence", DEMO / "sequences" / "soap-loop-drainage.tif", soap, "--out", tmp_path / "seq",
                        "--frames", "0:5", "--fps", 40, "--scheduler", "serial", "--json", *store),
    }
    expected = {"spectrum": "sr_spectrum", "fit": "sr_fit", "fit-map": "sr_fitmap", "sequence": "sr_thinning"}
    for kind, run_id in ids.items():
        at = open_link("saved-runs", {"run": run_id}, timeout=180)
        assert not at.exception and not at.error, (kind, [e.value for e in at.error])
        if kind in expected:
            assert f"{expected[kind]}::{run_id}" in " ".join(chart_keys(at)), kind
    at = open_link("saved-runs", {"run": ids["sequence"]})
    assert metrics(at)["frames mapped"] == "5 of 5"
    at = open_link("saved-runs", {"run": ids["chart"]})
    assert len(at.get("image")) == 1  # the printable chart


# --------------------------------------------------------------------------- the list and its filters

def test_filters_narrow_the_list(data_dir):
    store = RunStore(data_dir)
    map_run(store, np.full((3, 3), 100.0), sample="coupon 3", tags=["weekly"], saved_by="A. Lund")
    map_run(store, np.full((3, 3), 110.0), sample="coupon 3", tags=["weekly", "anneal-B"], saved_by="K. Osei",
            note="after the anneal")
    map_run(store, np.full((3, 3), 120.0), sample="coupon 4", saved_by="A. Lund")
    store.save("fit", summary={"thickness_nm": 741.99, "sigma_nm": 0.06}, sample="spot 1", saved_by="M. Ferri")
    at = open_link("saved-runs")
    assert not at.exception and not at.error
    table = at.dataframe[0].value
    assert len(table) == 4 and list(table.columns[:5]) == ["id", "saved (UTC)", "kind", "sample", "result"]
    assert "741.990 ± 0.060 nm" in set(table["result"])  # the key number with its unit (σ to 2 figures)
    assert "mean 110.0 nm, σ 0.0 nm" in set(table["result"])

    def rows(at):
        """How many runs the list shows, checked against what its caption says."""
        caption = next(c.value for c in at.caption if "saved runs" in c.value)
        count = int(caption.split()[0])
        listed = next((len(d.value) for d in at.dataframe if "saved by" in d.value.columns), 0)
        assert listed == count, (listed, caption)
        if count == 0:
            assert any("No saved run matches" in i.value for i in at.info)
        return count

    at.sidebar.selectbox(key="sr_sample").set_value("coupon 3").run()
    assert rows(at) == 2 and any("2 of 4 saved runs match" in c.value for c in at.caption)
    at.sidebar.multiselect(key="sr_tags").set_value(["anneal-B"]).run()
    assert rows(at) == 1
    at.sidebar.multiselect(key="sr_tags").set_value([]).run()
    at.sidebar.selectbox(key="sr_by").set_value("A. Lund").run()
    assert rows(at) == 1
    at.sidebar.selectbox(key="sr_sample").set_value(None).run()
    assert rows(at) == 2
    at.sidebar.multiselect(key="sr_kinds").set_value(["fit"]).run()
    assert rows(at) == 0
    at.sidebar.selectbox(key="sr_by").set_value(None).run()
    assert rows(at) == 1
    at.sidebar.multiselect(key="sr_kinds").set_value([]).run()
    at.sidebar.text_input(key="sr_text").input("ANNEAL").run()  # in the note, any case
    assert rows(at) == 1
    at.sidebar.text_input(key="sr_text").input("").run()
    import datetime as dt
    tomorrow = dt.datetime.now(dt.UTC).date() + dt.timedelta(days=1)
    at.sidebar.date_input(key="sr_since").set_value(tomorrow).run()
    assert rows(at) == 0
    at.sidebar.date_input(key="sr_since").set_value(None).run()
    at.sidebar.date_input(key="sr_until").set_value(tomorrow).run()
    assert rows(at) == 4
    assert not at.exception and not at.error


# --------------------------------------------------------------------------- delete and export

def test_delete_asks_for_confirmation_first(data_dir):
    store = RunStore(data_dir)
    keep = map_run(store, np.full((4, 5), 100.0), sample="coupon 3")
    run = map_run(store, np.full((4, 5), 101.0), sample="coupon 3")
    at = open_link("saved-runs", {"run": run.id})
    at.button(key="sr_delete").click().run()
    assert store.exists(run.id)  # only asked
    assert any("cannot be undone" in w.value and run.id in w.value for w in at.warning)
    at.button(key="sr_delete_no").click().run()
    assert store.exists(run.id) and not at.warning
    at.button(key="sr_delete").click().run()
    at.button(key="sr_delete_yes").click().run()
    assert not at.exception and not at.error
    assert not store.exists(run.id) and store.exists(keep.id)
    assert any(f"Run {run.id}" in s.value and "deleted" in s.value for s in at.success)
    assert at.selectbox(key="sr_open").value is None
    assert "run" not in at.query_params


def test_export_gives_the_runs_zip(data_dir):
    import zipfile

    store = RunStore(data_dir)
    run = map_run(store, np.full((4, 5), 100.0))
    at = open_link("saved-runs", {"run": run.id})
    at.button(key="sr_export").click().run()
    assert not at.exception and not at.error
    _, name, data = at.session_state["sr_export_zip"]
    assert name == f"filmcalc-run-{run.id}.zip"
    with zipfile.ZipFile(io.BytesIO(data)) as zf:
        assert "manifest.json" in zf.namelist() and "outputs/thickness_nm.npy" in zf.namelist()
    assert any(b.label.startswith(f"Download filmcalc-run-{run.id}.zip") for b in at.get("download_button"))


# --------------------------------------------------------------------------- compare

def test_comparing_two_map_runs_shows_one_scale_and_their_difference(data_dir):
    store = RunStore(data_dir)
    base = np.tile(np.linspace(100.0, 200.0, 30, dtype=np.float32), (20, 1))
    first = map_run(store, base, sample="coupon 3")
    second = map_run(store, base + 5.0, sample="coupon 3")
    other_size = map_run(store, np.full((5, 5), 150.0), sample="coupon 9")
    at = open_link("saved-runs", {"compare": f"{first.id},{second.id}"})
    assert not at.exception and not at.error and not at.warning
    assert at.multiselect(key="sr_compare").value == [first.id, second.id]
    keys = " ".join(chart_keys(at))
    assert f"sr_cmp_map::{first.id}" in keys and f"sr_cmp_map::{second.id}" in keys
    assert f"sr_cmp_diff::{second.id}" in keys
    maps = {k: f for k, f in zip(chart_keys(at), figures(at))}
    one = next(f for k, f in maps.items() if f"sr_cmp_map::{first.id}" in k)
    two = next(f for k, f in maps.items() if f"sr_cmp_map::{second.id}" in k)
    assert '"zmin":100' in one.replace(" ", "") and '"zmax":205' in one.replace(" ", "")  # one shared scale
    assert '"zmin":100' in two.replace(" ", "") and '"zmax":205' in two.replace(" ", "")
    difference = next(t for t in (d.value for d in at.dataframe) if "mean difference (nm)" in t.columns)
    assert difference["mean difference (nm)"].iloc[0] == pytest.approx(5.0, abs=1e-3)
    assert difference["pixels compared"].iloc[0] == 600
    assert at.query_params["compare"] == f"{first.id},{second.id}"
    # maps of different sizes: a message, no difference map
    at.multiselect(key="sr_compare").set_value([first.id, other_size.id]).run()
    assert not at.exception and not at.error
    assert any("same size" in w.value for w in at.warning)


def test_comparing_fits_overlays_the_spectra(data_dir):
    oxide = DEMO / "oxide-coupon.toml"
    spot = DEMO / "spectra" / "oxide-spot.csv"
    first = cli("fit", spot, oxide, "--json", "--save", "--data-dir", data_dir, "--sample", "spot 1")
    second = cli("fit", spot, oxide, "--window", "450:700", "--json", "--save", "--data-dir", data_dir,
                 "--sample", "spot 1")
    at = open_link("saved-runs", {"compare": f"{first},{second}"})
    assert not at.exception and not at.error
    overlay = next(f for k, f in zip(chart_keys(at), figures(at)) if "sr_cmp_fits" in k)
    for run_id in (first, second):
        assert f"{run_id} (" in overlay and "measured" in overlay and "model" in overlay
    assert "reflectance (%)" in overlay and "wavelength (nm)" in overlay


# --------------------------------------------------------------------------- sample history

def test_history_marks_the_run_outside_the_control_limits(data_dir):
    store = RunStore(data_dir)
    values = [221.1, 220.4, 222.0, 221.3, 219.9, 221.8, 220.7, 221.5, 236.0, 221.0]
    runs = [store.save("map", summary={"mean_nm": v}, sample="coupon 7", tags=["weekly"]) for v in values]
    store.save("map", summary={"mean_nm": 500.0}, sample="coupon 8")  # another sample: not in this history
    at = open_link("saved-runs", {"history_of": "coupon 7"})
    assert not at.exception and not at.error
    assert at.selectbox(key="sr_hist_of").value == "coupon 7" and at.selectbox(key="sr_hist_key").value == "mean_nm"
    shown = metrics(at)
    assert shown["runs"] == "10" and shown["outside the limits"] == "1"
    # mean 222.57 nm; the nine moving ranges average 37.7 / 9 = 4.189 nm, σ = 4.189 / 1.128 = 3.714 nm,
    # limits 222.57 ± 11.14 nm (the individuals chart of filmcalc.runs.history_table)
    assert shown["mean"] == "222.6 nm"
    assert shown["upper limit (mean + 3σ)"] == "233.7 nm" and shown["lower limit (mean − 3σ)"] == "211.4 nm"
    figure = next(f for k, f in zip(chart_keys(at), figures(at)) if "sr_history" in k)
    assert "outside the limits" in figure and "236" in figure and runs[8].id in figure
    table = next(t for t in (d.value for d in at.dataframe) if "outside the limits" in t.columns)
    assert list(table.loc[table["outside the limits"] != "", "run"]) == [runs[8].id]
    assert table["mean_nm (nm)"].iloc[8] == 236.0
    # the same runs followed by their tag, with the limits set by the first five runs only
    at.radio(key="sr_hist_by").set_value("tag").run()
    at.number_input(key="sr_hist_baseline").set_value(5).run()
    assert not at.exception and not at.error
    assert metrics(at)["runs"] == "10" and int(metrics(at)["outside the limits"]) >= 1
    assert at.query_params["history_by"] == "tag"
