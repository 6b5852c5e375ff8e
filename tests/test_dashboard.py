"""Dashboard pages driven headlessly with Streamlit's AppTest."""

from pathlib import Path

from streamlit.testing.v1 import AppTest

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
