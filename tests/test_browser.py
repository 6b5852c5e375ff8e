"""The dashboard in a real browser: Chromium driven through Playwright.

A module fixture starts ``streamlit run dashboard.py`` on a free loopback port
and stops its whole process group afterwards. The tests then

* open a shared link to the film-spectrum page and check that its settings
  (sample, thickness, angle) arrive in the widgets and the figure;
* upload a demo photo on the photo page, compute its thickness map, compare
  the mean read off the page with the photo's invented truth, download the
  TIFF and check it against the page;
* open every page at a wide and a narrow window, in the light and the dark
  theme, check that it runs without an exception box and save a screenshot
  of the whole page under ``test-artifacts/browser/`` (gitignored) for a
  person to look at;
* save a photo map as a run with ``filmcalc map … --save`` into the server's
  store and open its link, ``/saved-runs?run=ID``, in two separate browser
  sessions: both show the same result, photo included.

They need Debian's Chromium at /usr/bin/chromium (``make test`` installs it
with apt when it can; Playwright's own browser download is not used) and skip,
saying why, when it is missing or does not start. Deselect them with
``pytest -m "not browser"``.
"""

from __future__ import annotations

import json
import os
import re
import time
import tomllib
from pathlib import Path

import numpy as np
import pytest
from dashboard_server import free_port, start_server, stop_server

pytestmark = pytest.mark.browser

ROOT = Path(__file__).resolve().parent.parent
DEMO = ROOT / "demo_data"
ARTIFACTS = ROOT / "test-artifacts" / "browser"
CHROMIUM = "/usr/bin/chromium"
# Chromium as root in a container, with nothing that phones home or updates itself.
LAUNCH_ARGS = ["--no-sandbox", "--disable-gpu", "--disable-background-networking", "--disable-component-update",
               "--disable-sync", "--no-first-run"]
# Every page and its URL path (the dashboard's contract with shared links and bookmarks). The start
# page is the default page, which Streamlit serves at the root URL whatever its url_path.
PAGES = {"start": "", **{slug: slug for slug in ("film-spectrum", "colour-charts", "photo-map", "spectrum-fit",
                                                 "spectrum-map", "fringes", "film-over-time", "saved-runs",
                                                 "stack-builder", "cautions")}}
VIEWPORTS = {"wide": (1280, 800), "narrow": (420, 900)}
SERVER_START_S = 60       # Streamlit imports numpy, plotly, scipy... on a busy 2-core machine
PAGE_RUN_S = 90           # the slowest page script on a cold cache (colour charts) takes a few seconds
MAP_RUN_S = 120           # the 300 × 200 demo map takes well under a second; generous for a loaded CI box

EXCEPTION = '[data-testid="stException"]'
RUNNING = '[data-testid="stStatusWidget"]'
CONTENT = '[data-testid="stMain"] [data-testid="stElementContainer"]'
# True once the app's background is dark (arg "dark") or light (arg "light").
THEME_IS = """theme => {
    const app = document.querySelector('[data-testid="stApp"]');
    const rgb = app ? getComputedStyle(app).backgroundColor.match(/\\d+/g).map(Number) : null;
    return rgb !== null && ((rgb[0] + rgb[1] + rgb[2]) / 3 < 128) === (theme === "dark");
}"""


# --------------------------------------------------------------------------- fixtures

@pytest.fixture(scope="module")
def browser():
    """One headless Chromium for the module (skips when Playwright or Chromium is missing or cannot start)."""
    sync_api = pytest.importorskip("playwright.sync_api", reason="playwright is not installed (pip install -r "
                                   "requirements.txt)")
    if not os.access(CHROMIUM, os.X_OK):
        pytest.skip(f"{CHROMIUM} is missing: `make test` installs Debian's chromium with apt when it runs as root "
                    "with apt available; otherwise run `apt-get install chromium` (Playwright's own browser "
                    "download is not used)")
    playwright = sync_api.sync_playwright().start()
    try:
        chromium = playwright.chromium.launch(executable_path=CHROMIUM, args=LAUNCH_ARGS, timeout=60_000)
    except Exception as exc:  # noqa: BLE001 - any launch failure means: no usable browser here
        playwright.stop()
        pytest.skip(f"{CHROMIUM} does not start: {str(exc).splitlines()[0]}")
    try:
        yield chromium
    finally:
        chromium.close()
        playwright.stop()


@pytest.fixture(scope="module")
def dashboard_data(tmp_path_factory):
    """The run store's folder (FILMCALC_DATA) of the dashboard the tests start: this test run's own."""
    return tmp_path_factory.mktemp("filmcalc-data")


@pytest.fixture(scope="module")
def dashboard(browser, dashboard_data):
    """The dashboard's base URL (http://127.0.0.1:PORT), served by `streamlit run dashboard.py` from this venv."""
    ARTIFACTS.mkdir(parents=True, exist_ok=True)
    port = free_port()
    log_path = ARTIFACTS / "streamlit-server.log"
    # The server's shared password is off and its saved runs go to a store of this test run's own.
    try:
        proc = start_server(port, log_path, dashboard_data, SERVER_START_S)
    except RuntimeError as exc:
        pytest.fail(f"{exc}:\n{log_path.read_text()[-3000:]}")
    try:
        yield f"http://127.0.0.1:{port}"
    finally:
        stop_server(proc)


# --------------------------------------------------------------------------- helpers

def settle(page, timeout_s=PAGE_RUN_S, quiet_s=0.75):
    """Wait until the page shows content and its script has stopped running for ``quiet_s`` in a row."""
    page.wait_for_selector(CONTENT, timeout=timeout_s * 1000)
    deadline = time.monotonic() + timeout_s
    quiet_since = None
    while time.monotonic() < deadline:
        if page.locator(RUNNING).count():
            quiet_since = None
        elif quiet_since is None:
            quiet_since = time.monotonic()
        elif time.monotonic() - quiet_since >= quiet_s:
            return
        page.wait_for_timeout(100)
    raise AssertionError(f"{page.url} still running after {timeout_s} s")


def open_page(context, url):
    page = context.new_page()
    page.set_default_timeout(30_000)
    page.goto(url, wait_until="domcontentloaded", timeout=60_000)
    settle(page)
    return page


def page_not_found(page):
    return page.get_by_text("Page not found", exact=True).count() > 0


def choose(page, label, option):
    """Pick ``option`` in the selectbox labelled ``label``; returns what the box shows afterwards."""
    # Typed and confirmed with Enter, as a keyboard user would: clicking the option failed now and
    # then, when a box low in the sidebar opened its list below the window's edge.
    box = page.get_by_role("combobox", name=label)
    box.scroll_into_view_if_needed()
    box.click()
    box.fill(option)
    page.get_by_role("option", name=option, exact=True).wait_for(timeout=10_000)
    box.press("Enter")
    settle(page)
    return box.input_value()


def screenshot_whole_page(page, path, viewport):
    """Screenshot of the whole page: Streamlit scrolls inside stMain, so the window is made as tall as it."""
    height = page.evaluate("() => { const m = document.querySelector('[data-testid=\"stMain\"]');"
                           " return m ? m.scrollHeight : document.documentElement.scrollHeight; }")
    page.set_viewport_size({"width": viewport[0], "height": int(min(max(height, viewport[1]), 12_000))})
    page.wait_for_timeout(300)  # plotly redraws on resize
    page.screenshot(path=str(path))
    page.set_viewport_size({"width": viewport[0], "height": viewport[1]})


def number(text):
    """The first number in a metric's text ("221.2 nm" -> 221.2)."""
    match = re.search(r"-?\d+(?:\.\d+)?", text.replace(",", ""))
    assert match, f"no number in {text!r}"
    return float(match.group())


# --------------------------------------------------------------------------- tests

def test_shared_link_restores_film_spectrum_settings(browser, dashboard):
    """A shared link opens the film-spectrum page with its sample, thickness and angle already set."""
    sample_name = tomllib.loads((DEMO / "oxide-coupon.toml").read_text(encoding="utf-8"))["name"]
    context = browser.new_context(viewport={"width": 1280, "height": 800})
    try:
        page = open_page(context, f"{dashboard}/film-spectrum?sample=oxide-coupon&thickness_nm=250&angle_deg=30")
        page.screenshot(path=str(ARTIFACTS / "film-spectrum-shared-link_1280x800_light.png"))
        assert not page_not_found(page), "/film-spectrum is not a page of the dashboard"
        assert page.locator(EXCEPTION).count() == 0, page.locator(EXCEPTION).first.inner_text()
        assert page.get_by_role("combobox", name="Sample").input_value() == sample_name

        # plotly draws the title as SVG text; the slider thumbs show their values.
        titles = page.locator(".js-plotly-plot .gtitle").all_text_contents()
        thumbs = page.locator('[data-testid="stSidebar"] [data-testid="stSliderThumbValue"]').all_inner_texts()
        in_title = any("250 nm at 30°" in t for t in titles)
        in_sliders = "250 nm" in thumbs and any(re.fullmatch(r"30(\.0+)?°", t) for t in thumbs)
        assert in_title or in_sliders, f"figure titles {titles}, slider values {thumbs}"
    finally:
        context.close()


def test_photo_upload_to_thickness_map_and_tiff(browser, dashboard, tmp_path):
    """Upload a demo photo, compute its map, compare with the invented truth, download the TIFF and check it."""
    import tifffile
    from PIL import Image

    photo = DEMO / "photos" / "oxide-coupon-steps.png"
    known = json.loads(photo.with_suffix(".json").read_text(encoding="utf-8"))
    truth = np.load(DEMO / "photos" / "oxide-coupon-steps-truth.npz")["thickness_nm"]
    sample_name = tomllib.loads((DEMO / known["stack"]).read_text(encoding="utf-8"))["name"]
    with Image.open(photo) as im:
        photo_shape = (im.height, im.width)

    context = browser.new_context(viewport={"width": 1280, "height": 800}, accept_downloads=True,
                                  color_scheme="light")
    try:
        page = open_page(context, f"{dashboard}/photo-map")
        assert not page_not_found(page), "/photo-map is not a page of the dashboard"
        page.get_by_text("my photo", exact=True).click()
        settle(page)
        page.locator('[data-testid="stMain"] [data-testid="stFileUploader"] input[type="file"]').set_input_files(photo)
        settle(page)
        # What the (invented) lab knows, entered as a user would: the stack, the direction in which
        # the oxide gets thicker, and a reference region on the bare silicon at the left edge (the
        # page's default box, x 0–20, y 0–20, 0 nm, lies inside the json's reference 2–40 × 2–197).
        assert choose(page, "Sample", sample_name) == sample_name
        assert choose(page, "Film gets thicker towards", known["trend"]) == known["trend"]
        page.locator('[data-testid="stCheckbox"]').filter(has_text="Reference region").locator("label").click()
        settle(page)
        assert page.get_by_role("checkbox", name=re.compile("Reference region")).is_checked()

        page.get_by_role("button", name="Compute the thickness map").click()
        metric = page.locator('[data-testid="stMetric"]')
        mean_box = metric.filter(has_text="mean thickness").locator('[data-testid="stMetricValue"]')
        mean_box.wait_for(timeout=MAP_RUN_S * 1000)
        settle(page, MAP_RUN_S)
        assert page.locator(EXCEPTION).count() == 0, page.locator(EXCEPTION).first.inner_text()
        for theme in ("light", "dark"):
            page.emulate_media(color_scheme=theme)
            page.wait_for_function(THEME_IS, arg=theme, timeout=10_000)
            screenshot_whole_page(page, ARTIFACTS / f"photo-map-result_1280x800_{theme}.png", (1280, 800))
        mean_nm = number(mean_box.inner_text())
        flagged = number(metric.filter(has_text="flagged pixels").locator('[data-testid="stMetricValue"]')
                         .inner_text()) / 100
        low_nm, high_nm = map(float, re.findall(r"\d+", metric.filter(has_text="range")
                                                .locator('[data-testid="stMetricValue"]').inner_text())[:2])

        # The truth is five etched steps of 0, 95, 210, 330 and 470 nm, each a fifth of the photo:
        # mean 221 nm. A fringe-order slip on one step moves its pixels by half a fringe, about
        # 550 nm / (2 × 1.46) ≈ 190 nm, and the mean by a fifth of that (≈ 38 nm); pixel noise
        # (1σ ≈ 1 nm, shown on the page) averages away over 60,000 pixels and the gains fitted on
        # the reference leave a bias of a few nm at most. ±10 nm passes a correct map on any
        # platform and fails one with an order slip or the wrong stack.
        assert abs(mean_nm - float(truth.mean())) <= 10.0, (mean_nm, float(truth.mean()))

        page.get_by_role("tab", name="Downloads").click()
        with page.expect_download(timeout=60_000) as info:
            page.get_by_role("button", name="TIFF", exact=True).click()
        download = info.value
        assert download.suggested_filename.endswith((".tif", ".tiff")), download.suggested_filename
        tiff_path = tmp_path / download.suggested_filename
        download.save_as(tiff_path)
    finally:
        context.close()

    thickness = tifffile.imread(tiff_path)
    assert thickness.shape == photo_shape
    assert thickness.dtype == np.float32
    finite = thickness[np.isfinite(thickness)]
    assert finite.size > 0.9 * thickness.size
    # The page's mean and range are over unflagged pixels; the TIFF also holds flagged pixels that got a
    # value. Their share f moves the mean by at most f times the largest distance of a value from the
    # mean; 0.05 nm and 0.05 % are the page's rounding.
    spread = max(float(finite.max()) - mean_nm, mean_nm - float(finite.min()))
    assert abs(float(finite.mean()) - mean_nm) <= 0.05 + (flagged + 0.0005) * spread, (finite.mean(), mean_nm)
    assert finite.min() <= low_nm + 0.5 and finite.max() >= high_nm - 0.5, (finite.min(), finite.max())
    # Pixel by pixel against the truth: almost every pixel within a few nm, hardly any order slip.
    error = np.abs(thickness - truth)[np.isfinite(thickness)]
    assert np.median(error) < 5.0, np.median(error)
    assert np.mean(error > 40.0) < 0.02, np.mean(error > 40.0)


def _pages_settled(pending, timeout_s=PAGE_RUN_S, quiet_s=0.75):
    """Wait for several pages at once (they load in parallel); each must show content and stop running."""
    deadline = time.monotonic() + timeout_s
    quiet_since = {key: None for key in pending}
    while quiet_since:
        assert time.monotonic() < deadline, f"still running after {timeout_s} s: {sorted(quiet_since)}"
        for key in list(quiet_since):
            page = pending[key]
            if not page.locator(CONTENT).count() or page.locator(RUNNING).count():
                quiet_since[key] = None
            elif quiet_since[key] is None:
                quiet_since[key] = time.monotonic()
            elif time.monotonic() - quiet_since[key] >= quiet_s:
                del quiet_since[key]
        time.sleep(0.1)


def test_every_page_renders(browser, dashboard):
    """Every page (those in PAGES and any other the sidebar lists), wide and narrow, light and dark, runs
    without an exception box.

    A screenshot of each whole page (the window kept 1280 or 420 px wide and made as tall as the
    page) goes to test-artifacts/browser/PAGE_WIDTHxHEIGHT_THEME.png for a person to look at. The
    wide and the narrow view of a page load in parallel, in a light-scheme browser context each; the
    dark screenshot follows from switching the same page's colour scheme (Streamlit follows the
    system theme as it changes), which halves the work of the server.
    """
    contexts = {size: browser.new_context(viewport=dict(zip(("width", "height"), VIEWPORTS[size])),
                                          color_scheme="light") for size in VIEWPORTS}
    problems = []
    todo = list(PAGES.items())  # and, once the start page is open, any other page its sidebar lists
    try:
        for slug, path in todo:
            pages = {}
            try:
                for size, context in contexts.items():
                    page = pages[size] = context.new_page()
                    page.set_default_timeout(30_000)
                    page.goto(f"{dashboard}/{path}", wait_until="commit", timeout=60_000)
                _pages_settled(pages)
                if slug == "start":
                    listed = pages["wide"].locator('[data-testid="stSidebarNav"] a').evaluate_all(
                        "links => links.map(a => new URL(a.href).pathname.replace(/^\\/+/, ''))")
                    todo += [(extra, extra) for extra in listed if extra not in PAGES.values()]
                for size, page in pages.items():
                    if page_not_found(page):
                        problems.append(f"/{path} ({size}): page not found")
                    if page.locator(EXCEPTION).count():
                        problems.append(f"/{path} ({size}): {page.locator(EXCEPTION).first.inner_text()[:500]}")
                    width, height = VIEWPORTS[size]
                    for theme in ("light", "dark"):
                        page.emulate_media(color_scheme=theme)
                        page.wait_for_function(THEME_IS, arg=theme, timeout=10_000)
                        screenshot_whole_page(page, ARTIFACTS / f"{slug}_{width}x{height}_{theme}.png",
                                              (width, height))
            finally:
                for page in pages.values():
                    page.close()
    finally:
        for context in contexts.values():
            context.close()
    assert not problems, "\n".join(problems)


def test_a_run_link_opens_the_same_result_in_a_second_session(browser, dashboard, dashboard_data, tmp_path):
    """A run saved with `filmcalc map … --save` into the server's store opens from its link in two browser
    sessions of their own (as for two colleagues): the same numbers, the thickness map and the photo itself."""
    import contextlib
    import io

    from filmcalc.cli import main

    photo = DEMO / "photos" / "oxide-coupon-steps.png"
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        status = main(["map", str(photo), str(DEMO / "oxide-coupon.toml"), "--out", str(tmp_path / "coupon.npy"),
                       "--reference", "2,2,40,197,0", "--anchor", "10,100,0", "--trend", "right", "--json", "--save",
                       "--sample", "coupon 3", "--tag", "weekly", "--saved-by", "A. Lund",
                       "--data-dir", str(dashboard_data)])
    assert status == 0, err.getvalue()
    record = json.loads(out.getvalue())
    run_id, mean_nm = record["saved_run"], record["statistics"]["mean_nm"]

    seen = []
    for session, theme in ((1, "light"), (2, "dark")):  # two contexts: two sessions sharing nothing
        context = browser.new_context(viewport={"width": 1280, "height": 800}, color_scheme=theme)
        try:
            page = open_page(context, f"{dashboard}/saved-runs?run={run_id}")
            assert not page_not_found(page), "/saved-runs is not a page of the dashboard"
            assert page.locator(EXCEPTION).count() == 0, page.locator(EXCEPTION).first.inner_text()
            page.locator(".js-plotly-plot").first.wait_for(timeout=PAGE_RUN_S * 1000)
            settle(page)
            screenshot_whole_page(page, ARTIFACTS / f"saved-run-link_session{session}_1280x800_{theme}.png",
                                  (1280, 800))
            values = page.locator('[data-testid="stMetric"]').evaluate_all(
                "boxes => boxes.map(b => [b.querySelector('[data-testid=\"stMetricLabel\"]').innerText.trim(), "
                "b.querySelector('[data-testid=\"stMetricValue\"]').innerText.trim()])")
            metrics = dict(values)
            assert metrics.get("mean thickness") == f"{mean_nm:.1f} nm", metrics
            # the photo, read back from the store: a loaded image of the photo's own size
            widths = page.locator('[data-testid="stImage"] img').evaluate_all(
                "imgs => imgs.map(i => i.complete ? i.naturalWidth : 0)")
            assert 300 in widths, widths
            assert page.get_by_text("oxide-coupon-steps.png, 300 × 200 px", exact=False).count() >= 1
            assert f"run={run_id}" in page.url  # the address bar keeps the link
            seen.append(values)
        finally:
            context.close()
    assert seen[0] == seen[1]  # the same result in both sessions


# A crafted bad file for every page that takes an upload (see tests/fuzz_corpus/README.md), opened in its
# upload mode through the page's link.
BAD_UPLOADS = [
    ("photo-map?photo=upload", "png_bomb_header.png"),
    ("photo-map?photo=upload", "png_truncated.png"),
    ("fringes?photo=upload", "tiff_bad_strip_offset.tif"),
    ("spectrum-fit?spectrum=upload", "spec_binary.csv"),
    ("spectrum-map?run=upload", "map_no_header.csv"),
    ("film-over-time?recording=upload", "video_random.mp4"),
]


def test_bad_uploads_show_a_message_not_a_traceback(browser, dashboard):
    """A crafted bad file uploaded on each page gives an error message on the page, never an exception box,
    and the page keeps working (its title and the sidebar stay)."""
    corpus = ROOT / "tests" / "fuzz_corpus"
    context = browser.new_context(viewport={"width": 1280, "height": 800})
    try:
        for path, name in BAD_UPLOADS:
            page = open_page(context, f"{dashboard}/{path}")
            page.locator('[data-testid="stMain"] [data-testid="stFileUploader"] input[type="file"]').first \
                .set_input_files(corpus / name)
            settle(page)
            page.screenshot(path=str(ARTIFACTS / f"bad-upload_{name}.png"))
            page.wait_for_selector('[data-testid="stAlertContentError"]', timeout=30_000)
            assert page.locator(EXCEPTION).count() == 0, (path, name, page.locator(EXCEPTION).first.inner_text())
            message = page.locator('[data-testid="stAlertContentError"]').first.inner_text()
            assert "Traceback" not in message and len(message) > 10, (path, name, message)
            assert page.locator('[data-testid="stSidebar"]').count() == 1
            page.close()
        # A broken stack file uploaded in the sidebar: a message naming the file, no exception.
        page = open_page(context, f"{dashboard}/film-spectrum")
        page.locator('[data-testid="stSidebar"] [data-testid="stFileUploader"] input[type="file"]').first \
            .set_input_files(corpus / "stack_bad_syntax.toml")
        settle(page)
        page.screenshot(path=str(ARTIFACTS / "bad-upload_stack_bad_syntax.toml.png"))
        page.wait_for_selector('[data-testid="stAlertContentError"]', timeout=30_000)
        assert page.locator(EXCEPTION).count() == 0
        assert "stack_bad_syntax.toml" in page.locator('[data-testid="stAlertContentError"]').first.inner_text()
    finally:
        context.close()
