"""Shareable links (filmcalc/links.py) and the dashboard's serving configuration (.streamlit/config.toml)."""

import json
import math
import tomllib
from pathlib import Path
from urllib.parse import parse_qs

import pytest
from hypothesis import given
from hypothesis import strategies as st

from filmcalc import links
from filmcalc.io import MAX_PIXELS

ROOT = Path(__file__).resolve().parent.parent
DEMO = ROOT / "demo_data"

# Run-time choices as the dashboard passes them: the demo files present (URL word → value).
OPTIONS = {
    "sample": {p.stem: p.stem for p in DEMO.glob("*.toml")},
    "photo": {**{p.stem: json.loads(p.read_text())["photo"] for p in (DEMO / "photos").glob("*.json")},
              **{p.stem: json.loads(p.read_text())["photo"] for p in (DEMO / "fringes").glob("*.json")},
              links.UPLOAD: links.UPLOAD},
    "spectrum": {"oxide-spot": "oxide-spot.csv", "resist-counts": "resist-counts.csv", links.UPLOAD: links.UPLOAD},
    "run": {"wafer-map": "wafer-map.csv", links.UPLOAD: links.UPLOAD},
    "recording": {p.stem: p.stem + ".tif" for p in (DEMO / "sequences").glob("*.json")} | {links.UPLOAD: links.UPLOAD},
}
PAGE_NAMES = list(links.PAGES)


def decode(page, query):
    return links.decode(page, query, OPTIONS)


# --------------------------------------------------------------------------- examples

def test_the_shared_film_spectrum_link():
    """The contract other tests and users rely on: sample, thickness and angle by these names."""
    found = decode("film-spectrum", {"sample": "oxide-coupon", "thickness_nm": "250", "angle_deg": "30"})
    assert found.values == {"sample": "oxide-coupon", "thickness_nm": 250.0, "angle_deg": 30.0}
    assert found.ignored == [] and found.notice() == ""


def test_every_page_has_its_url_path():
    assert set(links.PAGES) == {"start", "film-spectrum", "colour-charts", "photo-map", "spectrum-fit",
                                "spectrum-map", "fringes", "film-over-time", "stack-builder", "cautions",
                                "saved-runs"}
    for page, params in links.PAGES.items():
        names = [p.name for p in params]
        assert len(names) == len(set(names)), page  # one meaning per name on a page
        if params and page not in ("start", "cautions", "saved-runs"):  # a saved run carries its own stack
            assert "sample" in names, page  # the stack is called `sample` on every page that has one


def test_shared_parameters_mean_the_same_everywhere():
    """A name used on several pages has one kind and one range (a link is readable across pages)."""
    seen = {}
    for page, params in links.PAGES.items():
        for p in params:
            if p.name in ("anchor", "reference", "line", "photo"):  # per page by design: pixels of different inputs
                continue
            if p.name == "run" and page == "saved-runs":  # a saved run's id there; a demo mapping run elsewhere
                continue
            seen.setdefault(p.name, set()).add(type(p).__name__)
    assert all(len(kinds) == 1 for kinds in seen.values()), seen


@pytest.mark.parametrize("text, reason", [
    ("abc", "not a number"),
    ("nan", "not a number"),
    ("NaN", "not a number"),
    ("inf", "not a number"),
    ("-Infinity", "not a number"),
    ("1e400", "not a number"),             # overflows to inf
    ("1e300", "outside 0–80°"),
    ("-5", "outside 0–80°"),
    ("80.0001", "outside 0–80°"),
    ("1_0", "not a number"),               # Python's float() would take it; a link should not
    ("٣٠", "not a number"),                # Arabic-Indic digits: float() takes them too
    ("３０", "not a number"),               # full-width digits
    ("0x1e", "not a number"),
    ("30°", "not a number"),
    ("3" * 300, "longer than"),
])
def test_bad_numbers_are_left_out_with_a_reason(text, reason):
    found = decode("film-spectrum", {"angle_deg": text})
    assert "angle_deg" not in found.values
    assert len(found.ignored) == 1 and found.ignored[0].startswith("angle_deg") and reason in found.ignored[0]
    assert "Part of this link could not be used" in found.notice()


@pytest.mark.parametrize("text, value", [("30", 30.0), (" 30 ", 30.0), ("+30.5", 30.5), ("3e1", 30.0),
                                         (".5", 0.5), ("0", 0.0), ("-0", 0.0), ("80", 80.0)])
def test_plain_numbers_are_read(text, value):
    assert decode("film-spectrum", {"angle_deg": text}).values == {"angle_deg": value}


def test_unknown_repeated_and_empty_parameters():
    found = decode("film-spectrum", {"zoom": "2", "thickness_nm": ["100", "200"], "exposure": "",
                                     "polarisation": "circular", "sample": "no-such-sample", "angle_deg": "12"})
    assert found.values == {"angle_deg": 12.0}
    text = " | ".join(found.ignored)
    assert "zoom: not a setting of this page" in text
    assert "thickness_nm: given 2 times" in text
    assert "exposure: empty" in text
    assert "polarisation = circular: not one of unpolarised, s, p" in text
    assert "sample = no-such-sample: not one of" in text


def test_unicode_and_control_characters_are_reported_safely():
    found = decode("colour-charts", {"unit": "µm", "colour_text": "#5b6aa5\x00", "ünïcødé": "x",
                                     "position_unit": "mm"})
    assert found.values == {}
    text = " | ".join(found.ignored)
    assert "unit = µm: not one of nm, um, angstrom" in text  # the URL word is "um"
    assert "\\x00" in text  # shown escaped, never raw
    assert "ünïcødé: not a setting of this page" in text
    assert "position_unit: not a setting of this page" in text  # it belongs to another page


def test_streamlit_embedding_parameters_pass_silently():
    assert decode("start", {"embed": "true", "embed_options": "light_theme"}).ignored == []


def test_anchors_repeat_and_none_means_no_anchors():
    found = decode("photo-map", {"anchor": ["10,100,0", "150,20,95.5", "1,2", "3,4,-5"]})
    assert found.values == {"anchor": [(10, 100, 0.0), (150, 20, 95.5)]}
    assert len(found.ignored) == 2 and "not 3 numbers" in found.ignored[0] and "nm outside" in found.ignored[1]
    assert decode("photo-map", {"anchor": "none"}).values == {"anchor": []}
    assert links.encode("photo-map", {"anchor": []}) == {"anchor": ["none"]}
    assert "given 51 times" in decode("photo-map", {"anchor": ["1,1,1"] * 51}).ignored[0]
    assert decode("photo-map", {"anchor": "1.5,2,3"}).ignored == ["anchor = 1.5,2,3: x not a whole number"]


def test_choices_known_only_at_run_time():
    assert decode("photo-map", {"photo": "oxide-coupon-steps"}).values == {"photo": "oxide-coupon-steps.png"}
    assert decode("photo-map", {"photo": "upload"}).values == {"photo": links.UPLOAD}
    # without run-time choices nothing can be chosen, and the page says so rather than failing
    assert links.decode("photo-map", {"photo": "x"}).ignored == ["photo = x: no choices available here"]


def test_not_a_mapping_and_unknown_page():
    assert links.decode("film-spectrum", None).ignored  # a message, no exception
    with pytest.raises(ValueError, match="unknown page"):
        links.decode("no-such-page", {})


def test_encode_writes_in_page_order_and_leaves_out_what_it_cannot_read_back():
    encoded = links.encode("film-spectrum", {"exposure": 10.0, "sample": "oxide-coupon", "thickness_nm": 250.0,
                                             "angle_deg": float("nan"), "polarisation": None, "zoom": 3},
                           OPTIONS)
    assert list(encoded) == ["sample", "thickness_nm", "exposure"]
    assert encoded == {"sample": "oxide-coupon", "thickness_nm": "250", "exposure": "10"}
    assert links.query_string(encoded) == "sample=oxide-coupon&thickness_nm=250&exposure=10"
    assert links.encode("film-spectrum", {"thickness_nm": 2500.0}) == {}  # out of range: not written
    assert links.encode("colour-charts", {"colour_text": ""}) == {}       # empty text: the default
    assert links.query_string(links.encode("colour-charts", {"colour": "#5b6aa5", "unit": "µm"})) == \
        "unit=um&colour=%235b6aa5"


def test_every_demo_scenario_is_a_clean_link():
    pages_with_scenarios = {s.page for s in links.DEMO_SCENARIOS}
    assert {"film-spectrum", "photo-map", "spectrum-fit", "fringes", "film-over-time"} <= pages_with_scenarios
    for scenario in links.DEMO_SCENARIOS:
        found = decode(scenario.page, scenario.query)
        assert found.ignored == [], (scenario.title, found.ignored)
        assert set(found.values) == set(scenario.query)


def test_a_link_to_a_saved_run():
    """/saved-runs?run=ID opens a run; the ids are those the run store writes and accepts."""
    from filmcalc import runs

    assert links.RUN_ID == runs._RUN_ID.pattern
    assert decode("saved-runs", {"run": "3fa9c01b2d7e"}).values == {"run": "3fa9c01b2d7e"}
    assert links.query_string(links.encode("saved-runs", {"run": "3fa9c01b2d7e"})) == "run=3fa9c01b2d7e"
    for bad in ("../../etc/passwd", "3fa9 c01b", "abc", "-3fa9c01b2d7e", "3fa9c01b2d7e\x00"):
        found = decode("saved-runs", {"run": bad})
        assert found.values == {} and "not a run id" in found.ignored[0], bad
    assert "longer than 40 characters" in decode("saved-runs", {"run": "x" * 41}).ignored[0]
    assert "run: given 2 times" in decode("saved-runs", {"run": ["3fa9c01b2d7e", "0a1b2c3d4e5f"]}).ignored[0]


def test_a_link_to_compared_runs_and_a_sample_history():
    found = decode("saved-runs", {"compare": "3fa9c01b2d7e,0a1b2c3d4e5f", "history_by": "tag",
                                  "history_of": "anneal-B", "history_key": "statistics.mean_nm"})
    assert found.ignored == []
    assert found.values == {"compare": "3fa9c01b2d7e,0a1b2c3d4e5f", "history_by": "tag", "history_of": "anneal-B",
                            "history_key": "statistics.mean_nm"}
    assert decode("saved-runs", {"history_of": "Wafer 7 – après recuit"}).values["history_of"] == \
        "Wafer 7 – après recuit"  # sample names are free text
    ignored = " | ".join(decode("saved-runs", {"compare": "3fa9c01b2d7e", "history_by": "person",
                                               "history_of": "coupon\n3", "history_key": "mean nm"}).ignored)
    assert "compare = 3fa9c01b2d7e: not 2 to 12 run ids" in ignored  # one run is not a comparison
    assert "history_by = person: not one of sample, tag" in ignored
    assert "history_of = 'coupon\\n3': not a sample or tag name" in ignored
    assert "history_key = mean nm: not a summary key" in ignored
    assert decode("saved-runs", {"compare": ",".join(["3fa9c01b2d7e"] * 13)}).values == {}  # at most 12


# --------------------------------------------------------------------------- properties

def _valid_value(param):
    """A strategy for values a page could hold for ``param`` (what encode must carry and decode give back)."""
    if isinstance(param, links.Number):
        if param.integer:
            return st.integers(int(param.low), int(param.high))
        return st.floats(param.low, param.high, allow_nan=False, allow_infinity=False)
    if isinstance(param, links.Choice):
        choices = OPTIONS.get(param.name, param.choices) or {}
        return st.sampled_from(sorted(set(choices.values()), key=str))
    if isinstance(param, links.Flag):
        return st.booleans()
    if isinstance(param, links.Text):
        return st.from_regex(param.pattern, fullmatch=True).filter(param.valid)
    one = st.tuples(*[_valid_value(part) for part in param.parts])
    return st.lists(one, max_size=param.repeat) if param.repeat > 1 else one


@st.composite
def page_and_values(draw):
    page = draw(st.sampled_from([p for p in PAGE_NAMES if links.PAGES[p]]))
    params = links.PAGES[page]
    chosen = draw(st.lists(st.sampled_from(params), unique_by=lambda p: p.name))
    return page, {p.name: draw(_valid_value(p)) for p in chosen}


@given(page_and_values())
def test_encode_then_decode_gives_the_same_settings(case):
    page, values = case
    encoded = links.encode(page, values, OPTIONS)
    assert set(encoded) == set(values)
    # through a real query string, as a browser sends it back
    query = parse_qs(links.query_string(encoded), keep_blank_values=True)
    found = links.decode(page, query, OPTIONS)
    assert found.ignored == []
    assert found.values == {k: (list(v) if isinstance(v, list) else v) for k, v in values.items()}


texts = st.text(max_size=40)


@given(st.sampled_from(PAGE_NAMES),
       st.dictionaries(st.one_of(texts, st.sampled_from([p.name for ps in links.PAGES.values() for p in ps])),
                       st.one_of(texts, st.lists(texts, max_size=4),
                                 st.floats().map(repr), st.integers().map(str)), max_size=8))
def test_any_text_decodes_without_an_exception(page, query):
    """Whatever a link holds: valid values come out, everything else is named in a message."""
    found = links.decode(page, query, OPTIONS)
    params = {p.name: p for p in links.PAGES[page]}
    assert set(found.values) <= set(params)
    for name, value in found.values.items():
        param = params[name]
        if isinstance(param, links.Numbers) and param.repeat > 1:
            assert all(param.valid_one(v) for v in value)
        else:
            assert param.valid(value, OPTIONS), (name, value)
            if isinstance(value, float):
                assert math.isfinite(value)
    # every parameter given is either used or explained (Streamlit's own embed options aside)
    unused = [key for key, raw in query.items() if key not in found.values and key not in ("embed", "embed_options")
              and raw != []]
    assert len(found.ignored) >= len(unused)
    assert (found.notice() != "") == bool(found.ignored)


# --------------------------------------------------------------------------- serving configuration

def test_streamlit_config_for_a_lab_server():
    config = tomllib.loads((ROOT / ".streamlit" / "config.toml").read_text(encoding="utf-8"))
    # The largest photo accepted (filmcalc.io.MAX_PIXELS) as an uncompressed 16-bit RGB TIFF: 6 bytes a pixel.
    largest_upload_mb = 6 * MAX_PIXELS / 1e6
    assert largest_upload_mb <= config["server"]["maxUploadSize"] < largest_upload_mb + 100
    assert config["server"]["enableXsrfProtection"] is True
    assert config["server"]["address"] == "localhost"
    assert config["browser"]["gatherUsageStats"] is False
