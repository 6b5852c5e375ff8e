"""Dashboard pages driven headlessly with Streamlit's AppTest."""

from pathlib import Path

import pytest
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
