"""Dashboard pages driven headlessly with Streamlit's AppTest."""

from pathlib import Path

import pytest
from streamlit.testing.v1 import AppTest

from filmcalc.links import DEMO_SCENARIOS, query_string
from filmcalc.links import PAGES as LINK_PAGES

ROOT = Path(__file__).resolve().parent.parent


def run_page(page, timeout=60):
    at = AppTest.from_file(str(ROOT / "filmcalc" / "ui" / page), default_timeout=timeout)
    return at.run()


def test_spectrum_page_every_demo():
    at = run_page("film_spectrum.py")
    assert not at.exception
    names = at.sidebar.selectbox[0].options
    assert len(names) >= 5
    for name in names:
        at.sidebar.selectbox[0].set_value(name).run()
        assert not at.exception, name
        assert not at.error, name
        assert any("#" in md.value for md in at.markdown), name  # the swatch hex


def test_spectrum_page_thickness_slider():
    at = run_page("film_spectrum.py")
    at.sidebar.slider[0].set_value(250.0).run()
    assert not at.exception
    assert any("250 nm" in str(el.proto) for el in at.get("plotly_chart"))


def test_entry_point_runs():
    at = AppTest.from_file(str(ROOT / "dashboard.py"), default_timeout=60).run()
    assert not at.exception


def test_safety_page():
    at = run_page("safety.py")
    assert not at.exception
    text = " ".join(md.value for md in at.markdown)
    assert "IEC 60825-1" in text and "fume hood" in text


def test_colour_charts_page_every_demo():
    at = run_page("colour_charts.py", timeout=120)
    assert not at.exception
    for name in at.sidebar.selectbox[0].options:
        at.sidebar.selectbox[0].set_value(name).run()
        assert not at.exception, name
        assert not at.error, name
        assert len(at.get("plotly_chart")) >= 4, name


def test_colour_charts_match_and_bad_colour():
    at = run_page("colour_charts.py", timeout=120)
    at.sidebar.selectbox[0].set_value("thermal oxide coupon on silicon").run()
    at.toggle(key="chart_auto").set_value(False).run()  # exposure 1: colours as beside a white card
    at.text_input(key="match_text").set_value("#5b6aa5").run()
    assert not at.exception and not at.error
    table = at.dataframe[0].value
    assert len(table) >= 2 and table["ΔE00"].is_monotonic_increasing  # candidates, best first
    at.text_input(key="match_text").set_value("bluish").run()
    assert not at.exception
    assert any("not understood" in e.value for e in at.error)


def test_bad_uploaded_stack_shows_error_not_traceback():
    at = AppTest.from_file(str(ROOT / "filmcalc" / "ui" / "film_spectrum.py"), default_timeout=60)
    at.session_state["uploaded_stack"] = ("broken.toml", "[ambient\nmaterial = 'air'")
    at.session_state["stack_choice_saved"] = "Uploaded: broken.toml"
    at.run()
    assert not at.exception
    assert any("broken.toml" in e.value and "line" in e.value for e in at.error)


def test_stack_builder_builds_and_shares():
    at = run_page("stack_builder.py")
    assert not at.exception and not at.error
    assert any("valid" in s.value for s in at.success)
    substrate = "builder::soap-film-loop.toml::substrate"
    at.text_input(key=substrate).set_value("unobtainium").run()
    assert any("Unknown material 'unobtainium'" in e.value for e in at.error)
    at.text_input(key=substrate).set_value("n=2.5, k=3.4").run()
    at.button[0].click().run()
    assert "k = 3.4" in at.session_state["builder_text"]


def test_photo_page_every_demo_photo():
    at = run_page("photo_map.py", timeout=120)
    assert not at.exception
    names = at.selectbox(key="photo_demo").options
    assert len(names) == 4
    for name in names:
        at.selectbox(key="photo_demo").set_value(name).run()
        assert not at.exception, name
        at.button(key="photo_run").click().run()
        assert not at.exception and not at.error, name
        assert any("mean thickness" in m.label for m in at.metric), name


def test_colour_charts_swatch_from_chart():
    at = run_page("colour_charts.py", timeout=120)
    at.sidebar.selectbox[0].set_value("thermal oxide coupon on silicon").run()
    at.number_input(key="match_swatch").set_value(120.0).run()
    assert not at.exception and not at.error
    table = at.dataframe[0].value
    assert abs(table.iloc[0, 1] - 120) <= 1 and table.iloc[0, 2] < 0.01  # the swatch itself, ΔE ≈ 0


def test_clicks_and_boxes_on_the_photo_become_pixels():
    # The selection Streamlit reports for a Plotly chart (points clicked, boxes dragged).
    from filmcalc.ui.common import pick_grid, picked_pixel, picked_rectangle

    click = {"points": [{"x": 150, "y": 90, "point_index": 3}], "point_indices": [3], "box": [], "lasso": []}
    assert picked_pixel(click, 300, 200) == (150, 90)
    assert picked_rectangle(click, 300, 200) is None
    box = {"points": [{"x": 1, "y": 1}, {"x": 4, "y": 4}], "box": [{"x": [90.4, 52.2], "y": [37.6, 73.1]}]}
    assert picked_rectangle(box, 300, 200) == (52, 38, 90, 73)
    assert picked_pixel(box, 300, 200) is None  # the points inside a box are not a click
    assert picked_rectangle({"box": [{"x": [-20, 500], "y": [150, 260]}]}, 300, 200) == (0, 150, 299, 199)
    assert picked_pixel({"points": [{"x": 400, "y": 5}]}, 300, 200) is None  # off the photo
    assert picked_pixel(None, 300, 200) is None and picked_rectangle({}, 300, 200) is None
    grid = pick_grid(4000, 6000, cells=200)
    assert len(grid.x) <= 201 * 201 and max(grid.x) < 6000 and max(grid.y) < 4000


def test_spectrum_fit_page_demos_and_bad_upload():
    at = run_page("spectrum_fit.py")
    assert not at.exception
    for name in at.selectbox(key="spec_demo").options:
        at.selectbox(key="spec_demo").set_value(name).run()
        assert not at.exception and not at.error, name
        assert any(m.label == "film thickness" for m in at.metric), name
    at.selectbox(key="spec_fit").set_value("thickness,cauchy").run()
    assert not at.exception


def test_spectrum_map_page_demo():
    at = run_page("spectrum_map.py")
    assert not at.exception and not at.error
    assert any(m.label == "non-uniformity" for m in at.metric)


def test_fringes_page_demos_map_and_line():
    at = run_page("fringe_analysis.py", timeout=120)
    assert not at.exception
    for name in at.selectbox(key="fr_demo").options:
        at.selectbox(key="fr_demo").set_value(name).run()
        assert not at.exception, name
        at.button(key="fr_run").click().run()
        assert not at.exception and not at.error, name
        assert any(m.label == "flagged pixels" for m in at.metric), name
    name = at.selectbox(key="fr_demo").options[0]
    at.selectbox(key="fr_demo").set_value(name).run()
    at.radio(key=f"fr_mode::{name}").set_value("along a line").run()
    at.button(key="fr_run").click().run()
    assert not at.exception and not at.error
    assert any(m.label == "fringe extrema crossed" for m in at.metric)


def test_film_over_time_page_demo_run_and_scrub():
    at = run_page("film_sequence.py", timeout=180)
    assert not at.exception and not at.error
    at.button(key="seq_run").click().run()
    assert not at.exception and not at.error
    metrics = {m.label: m.value for m in at.metric}
    assert metrics["frames mapped"].endswith("of 40")
    assert metrics["rupture"].startswith("t = ")
    assert metrics["thinning exponent α"] != "no fit"
    at.select_slider(key="seq_scrub").set_value(5).run()
    assert not at.exception and not at.error
    at.checkbox(key="seq_log").check().run()
    assert not at.exception
    at.button(key="seq_make_gif").click().run()
    assert not at.exception and not at.error


def test_film_over_time_page_bad_frame_range():
    at = run_page("film_sequence.py")
    name = at.selectbox(key="seq_demo").value
    at.text_input(key=f"seq_frames::{name}").input("100:200").run()
    assert not at.exception
    assert any("selects no frame" in e.value for e in at.error)


def test_film_over_time_page_on_local_dask_workers():
    at = run_page("film_sequence.py", timeout=180)
    name = at.selectbox(key="seq_demo").value
    at.text_input(key=f"seq_frames::{name}").input("0:12").run()
    at.radio(key="seq_where").set_value("local Dask workers").run()
    at.number_input(key="seq_workers").set_value(2).run()
    at.button(key="seq_run").click().run()
    assert not at.exception and not at.error
    assert {m.label: m.value for m in at.metric}["frames mapped"] == "12 of 12"


# --------------------------------------------------------------------------- navigation and shareable links

ENTRY = str(ROOT / "dashboard.py")
PAGE_FILES = {"film-spectrum": "filmcalc/ui/film_spectrum.py", "colour-charts": "filmcalc/ui/colour_charts.py",
              "photo-map": "filmcalc/ui/photo_map.py", "spectrum-fit": "filmcalc/ui/spectrum_fit.py",
              "spectrum-map": "filmcalc/ui/spectrum_map.py", "fringes": "filmcalc/ui/fringe_analysis.py",
              "film-over-time": "filmcalc/ui/film_sequence.py", "stack-builder": "filmcalc/ui/stack_builder.py",
              "cautions": "filmcalc/ui/safety.py", "saved-runs": "filmcalc/ui/saved_runs.py"}
SAMPLE_NAMES = {"oxide-coupon": "thermal oxide coupon on silicon", "soap-film-loop": "soap film in a wire loop"}


def open_link(page, query, timeout=120):
    """The dashboard as a browser opening ``/page?query`` (a shared link) in a new session."""
    at = AppTest.from_file(ENTRY, default_timeout=timeout)
    at.context["url"] = "http://lab-pc:8501"
    at.run()
    at.switch_page(PAGE_FILES[page])
    at.context["url"] = f"http://lab-pc:8501/{page}"
    at.query_params = dict(query)
    return at.run()


def link_shown(at):
    """The link to copy, as the page shows it."""
    return next(c.value for c in at.code if "lab-pc:8501" in c.value or c.value.startswith("/"))


def test_every_page_has_the_url_path_links_use():
    from filmcalc.ui.pages import PAGES, START

    url_paths = {url: file for url, (file, *_) in PAGES.items()} | {START[0]: START[1]}
    assert url_paths == PAGE_FILES | {"start": "filmcalc/ui/start.py"}
    assert set(url_paths) == set(LINK_PAGES)  # one list of link parameters per page, by URL path
    assert all((ROOT / file).is_file() for file in url_paths.values())
    text = (ROOT / "dashboard.py").read_text(encoding="utf-8")
    assert "default=True" in text and "START" in text and "PAGES.items()" in text  # the navigation is the table


def test_start_page_explains_and_opens_every_demo():
    at = AppTest.from_file(ENTRY, default_timeout=60).run()
    assert not at.exception and not at.error
    assert at.title[0].value == "filmcalc"
    text = " ".join(md.value for md in at.markdown)
    assert "estimate with an uncertainty" in text
    assert any("independent measurement" in c.value for c in at.caption)  # the measurement caution
    links_shown = {(link.proto.page, link.proto.query_string) for link in at.page_link}
    for scenario in DEMO_SCENARIOS:
        assert (scenario.page, query_string(scenario.query)) in links_shown, scenario.title


@pytest.mark.parametrize("scenario", DEMO_SCENARIOS, ids=[s.page for s in DEMO_SCENARIOS])
def test_each_demo_link_opens_its_page_with_the_demo_chosen(scenario):
    at = open_link(scenario.page, scenario.query)
    assert not at.exception and not at.error, scenario.title
    assert not at.warning or all("link" not in w.value for w in at.warning), [w.value for w in at.warning]
    assert at.sidebar.selectbox(key="stack_choice").value == SAMPLE_NAMES[scenario.query["sample"]]
    for name, value in scenario.query.items():  # the address bar keeps the demo's settings
        assert at.query_params[name] == value, name
    assert f"lab-pc:8501/{scenario.page}?" in link_shown(at)


def test_shared_film_spectrum_link_sets_sample_thickness_and_angle():
    at = open_link("film-spectrum", {"sample": "oxide-coupon", "thickness_nm": "250", "angle_deg": "30"})
    assert not at.exception and not at.error and not at.warning
    assert at.sidebar.selectbox(key="stack_choice").value == "thermal oxide coupon on silicon"
    assert at.sidebar.slider(key="thickness::oxide-coupon.toml").value == 250.0
    assert at.sidebar.slider(key="angle::oxide-coupon.toml").value == 30.0
    assert any("250 nm at 30" in str(el.proto) for el in at.get("plotly_chart"))
    shown = link_shown(at)
    assert shown.startswith("http://lab-pc:8501/film-spectrum?sample=oxide-coupon&thickness_nm=250&angle_deg=30&")
    # the URL follows the widgets
    at.sidebar.slider(key="thickness::oxide-coupon.toml").set_value(321.0).run()
    assert at.query_params["thickness_nm"] == "321" and at.query_params["angle_deg"] == "30"
    assert "thickness_nm=321" in link_shown(at)


@pytest.mark.parametrize("page, query, expected", [
    ("colour-charts", {"sample": "oxide-coupon", "t_max_nm": "1500", "unit": "um", "auto_exposure": "false",
                       "exposure": "4", "observer": "10", "diagram": "uv", "tolerance_de00": "2.5"},
     {"chart_tmax": 1500.0, "chart_unit": "µm", "chart_auto": False, "chart_exposure": 4.0, "chart_observer": "10",
      "chart_space": "uv", "match_tol": 2.5}),
    ("photo-map", {"photo": "oxide-coupon-steps", "sample": "oxide-coupon", "trend": "left", "t_max_nm": "900",
                   "use_reference": "false"},
     {"photo_demo": "oxide-coupon-steps.png", "trend::oxide-coupon-steps.png": "left",
      "hi::oxide-coupon-steps.png": 900.0, "useref::oxide-coupon-steps.png": False}),
    ("spectrum-fit", {"spectrum": "resist-counts", "sample": "resist-wafer", "fit": "thickness-cauchy",
                      "baseline": "scale-offset", "t_max_nm": "4000"},
     {"spec_demo": "resist-counts.csv", "spec_fit": "thickness,cauchy", "spec_baseline": "scale+offset",
      "spec_hi::resist-counts.csv": 4000.0}),
    ("spectrum-map", {"run": "wafer-map", "sample": "oxide-coupon", "baseline": "offset", "position_unit": "cm"},
     {"smap_demo": "wafer-map.csv", "smap_baseline": "offset", "smap_unit": "cm"}),
    ("fringes", {"photo": "soap-sodium", "sample": "soap-film-loop", "result": "line", "wavelength1_nm": "600",
                 "line": "150,3,150,150", "direction": "thinner"},
     {"fr_demo": "soap-sodium.png", "fr_mode::soap-sodium.png": "along a line", "fr_wl0::soap-sodium.png": 600.0,
      "fr_line3::soap-sodium.png": 150, "fr_dir::soap-sodium.png": "thinner"}),
    ("film-over-time", {"recording": "soap-loop-drainage", "sample": "soap-film-loop", "frames": "0:12", "fps": "20",
                        "run_on": "dask", "workers": "2", "point": "10,20"},
     {"seq_demo": "soap-loop-drainage.tif", "seq_frames::soap-loop-drainage.tif": "0:12",
      "seq_fps::soap-loop-drainage.tif": 20.0, "seq_where": "local Dask workers", "seq_workers": 2,
      "seq_px0::soap-loop-drainage.tif": 10, "seq_py0::soap-loop-drainage.tif": 20}),
    ("stack-builder", {"sample": "oxide-coupon"}, {"stack_choice": "thermal oxide coupon on silicon"}),
])
def test_each_page_honours_its_link(page, query, expected):
    at = open_link(page, query)
    assert not at.exception and not at.error, [e.value for e in at.error]
    assert not at.warning or all("link" not in w.value for w in at.warning), [w.value for w in at.warning]
    for key, value in expected.items():
        assert at.session_state[key] == value, key
    for name, value in query.items():  # and writes them back, so the address bar holds the view
        assert at.query_params[name] == value, name


def test_a_link_gives_the_photo_its_anchors():
    at = open_link("photo-map", {"photo": "oxide-coupon-steps", "sample": "oxide-coupon",
                                 "anchor": ["10,100,0", "120,50,95"]})
    assert not at.exception and not at.error
    rows = at.session_state["anchor_list::oxide-coupon-steps.png"]
    assert [(r["x"], r["y"], r["thickness (nm)"]) for r in rows] == [(10, 100, 0.0), (120, 50, 95.0)]
    assert at.query_params["anchor"] == ["10,100,0", "120,50,95"]


def test_bad_link_shows_a_short_notice_not_a_traceback():
    at = open_link("film-spectrum", {"sample": "oxide-coupon", "thickness_nm": "thick", "angle_deg": "95",
                                     "exposure": ["2", "3"], "zoom": "2", "polarisation": "nan"})
    assert not at.exception and not at.error
    notice = " ".join(w.value for w in at.warning)
    for name in ("thickness_nm", "angle_deg", "exposure", "zoom", "polarisation"):
        assert name in notice, name
    assert at.sidebar.selectbox(key="stack_choice").value == "thermal oxide coupon on silicon"  # the good part
    assert at.query_params["angle_deg"] == "0" and "zoom" not in at.query_params  # the URL is clean again
    # a pixel that does not fit this photo is refused by the page, with the reason
    at = open_link("photo-map", {"photo": "oxide-coupon-steps", "line": "0,0,5000,10"})
    assert not at.exception and not at.error
    assert any("line = 0,0,5000,10: outside the photo (300 × 200 px)" in w.value for w in at.warning)


def test_uploads_are_not_in_the_link_and_the_page_says_so():
    at = open_link("photo-map", {"photo": "upload"})
    assert not at.exception and not at.error
    assert at.radio(key="photo_source").value == "my photo"
    assert any("not in the link" in c.value for c in at.sidebar.caption)


def test_settings_survive_moving_between_pages():
    at = open_link("film-spectrum", {"sample": "oxide-coupon", "thickness_nm": "250"})
    at.sidebar.slider(key="angle::oxide-coupon.toml").set_value(20.0).run()
    at.switch_page("filmcalc/ui/safety.py")
    at.query_params = {}  # the navigation menu opens a page without a query
    at.run()
    assert not at.exception and at.title[0].value == "Cautions"
    at.switch_page(PAGE_FILES["film-spectrum"])
    at.query_params = {}
    at.run()
    assert at.sidebar.slider(key="thickness::oxide-coupon.toml").value == 250.0
    assert at.sidebar.slider(key="angle::oxide-coupon.toml").value == 20.0
    assert at.query_params["thickness_nm"] == "250"  # the address bar is filled again


# --------------------------------------------------------------------------- optional shared password

def test_password_keeps_every_page_closed_until_given(monkeypatch):
    monkeypatch.setenv("FILMCALC_PASSWORD", "drain-3 loop")
    at = AppTest.from_file(ENTRY, default_timeout=60).run()
    assert not at.exception
    assert at.text_input(key="access_typed").proto.type == at.text_input(key="access_typed").proto.PASSWORD
    assert not at.page_link and not at.subheader and not at.slider  # no page content behind the prompt
    at.text_input(key="access_typed").input("drain-3 Loop")
    at.form_submit_button[0].click().run()
    assert any("not the password" in e.value for e in at.error)
    assert not at.page_link
    at.text_input(key="access_typed").input("drain-3 loop")
    at.form_submit_button[0].click().run()
    assert not at.exception and not at.error
    assert at.title[0].value == "filmcalc" and len(at.page_link) >= len(DEMO_SCENARIOS)  # the start page
    assert "access_typed" not in at.session_state


def test_password_from_secrets_and_a_shared_link_waiting_behind_it(monkeypatch):
    monkeypatch.delenv("FILMCALC_PASSWORD", raising=False)
    at = AppTest.from_file(ENTRY, default_timeout=60)
    at.secrets["password"] = "ñandú"
    at.run()
    at.switch_page(PAGE_FILES["film-spectrum"])
    at.query_params = {"sample": "oxide-coupon", "thickness_nm": "250"}
    at.run()
    assert not at.slider and at.text_input(key="access_typed")
    at.text_input(key="access_typed").input("ñandú")
    at.form_submit_button[0].click().run()
    assert not at.exception and not at.error
    assert at.sidebar.slider(key="thickness::oxide-coupon.toml").value == 250.0


def test_no_password_no_prompt(monkeypatch):
    monkeypatch.delenv("FILMCALC_PASSWORD", raising=False)
    at = AppTest.from_file(ENTRY, default_timeout=60).run()  # and no secrets file: no error either
    assert not at.exception and not at.error
    assert not at.text_input and at.page_link


def test_unreadable_secrets_file_keeps_the_dashboard_closed(monkeypatch):
    """A broken secrets file must not silently open a dashboard meant to have a password."""
    import streamlit
    from streamlit.errors import StreamlitSecretNotFoundError

    class BrokenSecrets:
        def get(self, key, default=None):
            raise StreamlitSecretNotFoundError("Error parsing secrets file at {path}", path="secrets.toml",
                                               error_id="failed-parsing-secrets-file")

    monkeypatch.delenv("FILMCALC_PASSWORD", raising=False)
    monkeypatch.setattr(streamlit, "secrets", BrokenSecrets())
    at = AppTest.from_file(ENTRY, default_timeout=60).run()
    assert not at.exception
    assert any("stays closed" in e.value and "secrets.toml" in e.value for e in at.error)
    assert not at.page_link and not at.text_input
