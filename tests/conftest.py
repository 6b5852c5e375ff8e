"""Test configuration: property tests are derandomised so every run checks the same cases."""

from hypothesis import settings

settings.register_profile("filmcalc", derandomize=True, deadline=None, print_blob=True)
settings.load_profile("filmcalc")

from pathlib import Path  # noqa: E402

import pytest  # noqa: E402


@pytest.fixture(scope="session")
def demo_dir():
    """The repository's demo_data folder (invented scenarios)."""
    return Path(__file__).resolve().parent.parent / "demo_data"


def pytest_configure(config):
    """Register the marker of the real-browser tests (tests/test_browser.py); deselect them with -m "not browser"."""
    config.addinivalue_line("markers", "browser: drives the dashboard in Chromium (needs /usr/bin/chromium)")
