"""Shareable links: each dashboard page's settings as URL query parameters.

A page's settings (the sample, the light, the thickness range, the view…) are
written into the address bar, so a copied link opens the same view for anyone
who can reach the dashboard. This module holds, for every page, a declarative
list of its parameters and two pure functions:

* :func:`decode` turns the query strings of a link into validated values.
  Anything it cannot use (an unknown name, a value that is not a number, out
  of range, not finite, not one of the choices, given twice…) is left out and
  described in a short human message; it never raises for what a link holds.
* :func:`encode` turns values back into query strings, in the page's order.

Uploaded files are never part of a link. No Streamlit here: the dashboard's
``filmcalc.ui.common`` reads and writes ``st.query_params`` with these.

Public names
------------
Number, Choice, Flag, Text, Numbers
    Kinds of parameter (a number in a range; one of a set of words; yes/no;
    short free text; a few numbers written ``a,b,c``). Each has
    ``parse(text, options)`` → ``(value, None)`` or ``(None, problem)``,
    ``format(value, options)`` → text, and ``valid(value, options)``.
PAGES
    Every page's URL path and its parameters, in the order links show them.
decode, encode, query_string, Decoded
    Link → values and values → link.
DEMO_SCENARIOS, Scenario
    The demos the start page opens in one click, as links.
UPLOAD, NONE
    The URL words for "the user's own file" (a page's input choice) and for
    an empty list of a repeatable parameter (no anchors).
"""

from __future__ import annotations

import math
import numbers
import re
from collections.abc import Mapping
from dataclasses import dataclass, field
from urllib.parse import quote, urlencode

__all__ = ["Number", "Choice", "Flag", "Text", "Numbers", "PAGES", "Decoded", "decode", "encode", "query_string",
           "Scenario", "DEMO_SCENARIOS", "UPLOAD", "NONE"]

UPLOAD = "upload"
NONE = "none"                # an empty list of a repeatable parameter (no anchors)
MAX_VALUE_CHARS = 200        # longer values are ignored unread
_SHOWN_CHARS = 24            # how much of a bad value a message repeats
_NUMBER = re.compile(r"[+-]?(?:[0-9]+(?:\.[0-9]*)?|\.[0-9]+)(?:[eE][+-]?[0-9]+)?")
_TRUE, _FALSE = ("true", "yes", "on", "1"), ("false", "no", "off", "0")
# Streamlit's own parameters (embedding options): never ours, never reported.
_PASSED_THROUGH = ("embed", "embed_options")


def _shown(text):
    """A value as a message may repeat it: short and with control characters escaped."""
    text = text if len(text) <= _SHOWN_CHARS else text[:_SHOWN_CHARS] + "…"
    return repr(text) if any(not c.isprintable() for c in text) or not text.strip() else text


def _number_text(value):
    """A number in the shortest text that reads back to the same float: 250, 0.5, 1e-05."""
    value = float(value)
    if value.is_integer() and abs(value) < 1e15:
        return str(int(value))
    return repr(value)


def _parse_number(text):
    """A finite float from plain decimal text (no NaN, inf, underscores or non-ASCII digits), else None."""
    text = text.strip()
    if not _NUMBER.fullmatch(text):
        return None
    value = float(text)
    return value if math.isfinite(value) else None


def _range_text(low, high, unit):
    gap = "" if unit in ("", "°", "×") else " "
    return f"{_number_text(low)}–{_number_text(high)}{gap}{unit}"


@dataclass(frozen=True)
class Number:
    """One number between ``low`` and ``high`` (inclusive), in ``unit``.

    Parameters
    ----------
    name : str
        Query parameter name, with its unit where it has one (``thickness_nm``).
    low, high : float
        Allowed range; the page's widget must accept all of it.
    unit : str
        Unit shown in messages ("nm", "°", "×", "µm"…; "" for a pure number).
    integer : bool
        Whole numbers only (returned as int).
    """

    name: str
    low: float
    high: float
    unit: str = ""
    integer: bool = False

    def parse(self, text, options=None):
        value = _parse_number(text)
        if value is None:
            return None, "not a number"
        if self.integer and not value.is_integer():
            return None, "not a whole number"
        if not self.low <= value <= self.high:
            return None, f"outside {_range_text(self.low, self.high, self.unit)}"
        return (int(value) if self.integer else value), None

    def format(self, value, options=None):
        return _number_text(value)

    def valid(self, value, options=None):
        if isinstance(value, bool) or not isinstance(value, numbers.Real) or not math.isfinite(value):
            return False
        if self.integer and not float(value).is_integer():
            return False
        return self.low <= value <= self.high


@dataclass(frozen=True)
class Choice:
    """One of a set of words, each standing for a value the page uses.

    Parameters
    ----------
    name : str
        Query parameter name.
    choices : mapping of str to object, or None
        URL word → the value the page uses (``{"um": "µm"}``). None: the
        choices are given when decoding (``options``), e.g. the demo files
        present.
    """

    name: str
    choices: Mapping[str, object] | None = None

    def _choices(self, options):
        found = (options or {}).get(self.name, self.choices)
        return dict(found or {})

    def parse(self, text, options=None):
        choices = self._choices(options)
        word = text.strip()
        if word in choices:
            return choices[word], None
        listed = ", ".join(choices) if len(choices) <= 8 else ", ".join(list(choices)[:8]) + ", …"
        return None, f"not one of {listed}" if choices else "no choices available here"

    def format(self, value, options=None):
        return next(word for word, v in self._choices(options).items() if v == value)

    def valid(self, value, options=None):
        return any(v == value for v in self._choices(options).values())


@dataclass(frozen=True)
class Flag:
    """Yes or no; links write ``true`` / ``false`` and read also yes/no, on/off, 1/0."""

    name: str

    def parse(self, text, options=None):
        word = text.strip().lower()
        if word in _TRUE:
            return True, None
        if word in _FALSE:
            return False, None
        return None, "not true or false"

    def format(self, value, options=None):
        return "true" if value else "false"

    def valid(self, value, options=None):
        return isinstance(value, bool)


@dataclass(frozen=True)
class Text:
    """Short free text matching ``pattern`` (a regular expression for the whole value).

    Parameters
    ----------
    name : str
        Query parameter name.
    pattern : str
        What the text must look like; the default allows printable ASCII.
    what : str
        What the text should be, for messages ("#RRGGBB").
    max_chars : int
        Longest text accepted.
    """

    name: str
    pattern: str = r"[ -~]*"
    what: str = "printable text"
    max_chars: int = 40

    def parse(self, text, options=None):
        if len(text) > self.max_chars:
            return None, f"longer than {self.max_chars} characters"
        if not re.fullmatch(self.pattern, text):
            return None, f"not {self.what}"
        return text, None

    def format(self, value, options=None):
        return value

    def valid(self, value, options=None):
        return (isinstance(value, str) and value.strip() != "" and len(value) <= self.max_chars
                and bool(re.fullmatch(self.pattern, value)))


@dataclass(frozen=True)
class Numbers:
    """A few numbers written together, ``a,b,c`` (a pixel and its thickness, a line's two ends).

    Parameters
    ----------
    name : str
        Query parameter name.
    parts : tuple of Number
        One :class:`Number` per position (its ``name`` labels it in messages).
    repeat : int
        How many times the parameter may appear (anchors: several); values
        then come as a list of tuples, and the word ``none`` stands for an
        empty list. 1: a single tuple.
    """

    name: str
    parts: tuple
    repeat: int = 1

    def parse_one(self, text):
        pieces = text.split(",")
        if len(pieces) != len(self.parts):
            return None, f"not {len(self.parts)} numbers ({','.join(p.name for p in self.parts)})"
        values = []
        for part, piece in zip(self.parts, pieces):
            value, problem = part.parse(piece)
            if problem:
                return None, f"{part.name} {problem}"
            values.append(value)
        return tuple(values), None

    def parse(self, text, options=None):
        return self.parse_one(text)

    def format_one(self, value):
        return ",".join(part.format(v) for part, v in zip(self.parts, value))

    def format(self, value, options=None):
        if self.repeat > 1:  # only the items a link can carry, at most ``repeat``
            return [self.format_one(v) for v in value if self.valid_one(v)][:self.repeat] or [NONE]
        return self.format_one(value)

    def valid_one(self, value):
        return (isinstance(value, (tuple, list)) and len(value) == len(self.parts)
                and all(part.valid(v) for part, v in zip(self.parts, value)))

    def valid(self, value, options=None):
        if self.repeat > 1:
            return isinstance(value, (tuple, list))
        return self.valid_one(value)


def _pixel(low=0, high=100_000):
    return Number("x", low, high, "px", integer=True), Number("y", low, high, "px", integer=True)


# Parameters several pages share, under the same names everywhere.
SAMPLE = Choice("sample")                  # a demo stack file's stem; choices: the demo files present
POLARISATION = Choice("polarisation", {"unpolarised": "unpolarised", "s": "s", "p": "p"})
TREND = Choice("trend", {"unknown": "not known", "right": "right", "left": "left", "down": "down", "up": "up"})
BASELINE = Choice("baseline", {"none": "none", "offset": "offset", "scale-offset": "scale+offset"})
_X0Y0X1Y1 = (Number("x0", 0, 100_000, "px", integer=True), Number("y0", 0, 100_000, "px", integer=True),
             Number("x1", 0, 100_000, "px", integer=True), Number("y1", 0, 100_000, "px", integer=True))
LINE = Numbers("line", _X0Y0X1Y1)
# A saved run's id, as filmcalc.runs writes and accepts them.
RUN_ID = r"[A-Za-z0-9][A-Za-z0-9_-]{3,39}"


def _range(high):
    return Number("t_min_nm", 0.0, high, "nm"), Number("t_max_nm", 1.0, high, "nm")


PAGES = {
    "start": (),
    "film-spectrum": (
        SAMPLE,
        Number("thickness_nm", 0.0, 2000.0, "nm"),
        Number("angle_deg", 0.0, 80.0, "°"),
        POLARISATION,
        Number("exposure", 0.5, 30.0, "×"),
    ),
    "colour-charts": (
        SAMPLE,
        Number("t_max_nm", 50.0, 20000.0, "nm"),
        Choice("t_points", {str(n): n for n in (201, 501, 1001, 2001, 4001)}),
        Number("angle_max_deg", 0.0, 80.0, "°"),
        Choice("unit", {"nm": "nm", "um": "µm", "angstrom": "Å"}),
        POLARISATION,
        Flag("auto_exposure"),
        Number("exposure", 0.5, 30.0, "×"),
        Choice("observer", {"2": "2", "10": "10"}),
        Number("na", 0.0, 0.9),
        Number("angle_deg", 0.0, 80.0, "°"),
        Choice("diagram", {"xy": "xy", "uv": "uv"}),
        Number("spectrum_nm", 0.0, 20000.0, "nm"),
        Text("colour", r"#[0-9a-fA-F]{6}", "a colour #RRGGBB", 7),
        Text("colour_text", r"[ -~]*", "printable text (#RRGGBB, srgb:R,G,B or lab:L,a,b)", 60),
        Number("swatch_nm", 0.0, 20000.0, "nm"),
        Number("tolerance_de00", 0.5, 15.0, "ΔE00"),
        Number("print_step_nm", 1.0, 500.0, "nm"),
        Number("print_to_nm", 1.0, 20000.0, "nm"),
        Choice("paper", {"A4": "A4", "Letter": "Letter"}),
    ),
    "photo-map": (
        Choice("photo"),                   # a demo photo's stem or UPLOAD
        SAMPLE,
        *_range(50000.0),
        TREND,
        Number("pixel_um", 0.0, 10000.0, "µm"),
        Numbers("anchor", (*_pixel(), Number("nm", 0.0, 50000.0, "nm")), repeat=50),
        Flag("use_reference"),
        Numbers("reference", (*_X0Y0X1Y1, Number("nm", 0.0, 50000.0, "nm"))),
        LINE,
    ),
    "spectrum-fit": (
        Choice("spectrum"),                # a demo spectrum's stem or UPLOAD
        SAMPLE,
        *_range(100000.0),
        Choice("scale", {"auto": "auto", "percent": "percent", "fraction": "fraction"}),
        Choice("fit", {"thickness": "thickness", "thickness-cauchy": "thickness,cauchy"}),
        BASELINE,
        Numbers("window_nm", (Number("from", 0.0, 100000.0, "nm"), Number("to", 0.0, 100000.0, "nm"))),
    ),
    "spectrum-map": (
        Choice("run"),                     # a demo mapping run's stem or UPLOAD
        SAMPLE,
        *_range(100000.0),
        BASELINE,
        Text("position_unit", r"[^\x00-\x1f\x7f\ud800-\udfff]*", "a short unit name", 12),
    ),
    "fringes": (
        Choice("photo"),
        SAMPLE,
        Flag("two_wavelengths"),
        Number("wavelength1_nm", 200.0, 2000.0, "nm"),
        Choice("channel1", {c: c for c in ("grey", "red", "green", "blue")}),
        Number("wavelength2_nm", 200.0, 2000.0, "nm"),
        Choice("channel2", {c: c for c in ("grey", "red", "green", "blue")}),
        Choice("result", {"map": "map", "line": "along a line"}),
        *_range(50000.0),
        Flag("use_anchor"),
        Numbers("anchor", (Number("x", -1e6, 1e6, "px"), Number("y", -1e6, 1e6, "px"),
                           Number("nm", -1e6, 1e6, "nm"))),
        TREND,
        LINE,
        Choice("direction", {"thicker": "thicker", "thinner": "thinner"}),
    ),
    "film-over-time": (
        Choice("recording"),               # a demo recording's stem or UPLOAD
        SAMPLE,
        Number("fps", 0.0, 1e7, "frames/s"),
        Text("frames", r" *[0-9]{0,9} *(: *[0-9]{0,9} *){0,2}", "START:STOP:STEP (e.g. 0:40:2)", 40),
        *_range(50000.0),
        Number("pixel_um", 0.0, 1e6, "µm"),
        Flag("use_anchor"),
        Numbers("anchor", (*_pixel(), Number("nm", 0.0, 50000.0, "nm"))),
        Numbers("point", _pixel()),
        LINE,
        Choice("run_on", {"process": "this process", "dask": "local Dask workers"}),
        Number("workers", 1, 64, integer=True),
        Flag("same_scale"),
        Flag("log_log"),
    ),
    "stack-builder": (SAMPLE,),
    "cautions": (),
    "saved-runs": (
        Text("run", RUN_ID, "a run id (letters and digits, as the list of runs shows them)", 40),
        Text("compare", rf"{RUN_ID}(?:,{RUN_ID}){{1,11}}", "2 to 12 run ids separated by commas", 200),
        Choice("history_by", {"sample": "sample", "tag": "tag"}),
        Text("history_of", r"[^\x00-\x1f\x7f\ud800-\udfff]*", "a sample or tag name", 200),
        Text("history_key", r"[A-Za-z0-9_]+(?:\.[A-Za-z0-9_]+){0,5}", "a summary key such as mean_nm", 100),
    ),
}


@dataclass
class Decoded:
    """What a link gave a page.

    Attributes
    ----------
    values : dict
        Parameter name → validated value, for the parameters the link gave
        usably.
    ignored : list of str
        One short message per parameter left out, saying what was wrong
        (``"angle_deg = 95: outside 0–80°"``).
    """

    values: dict = field(default_factory=dict)
    ignored: list = field(default_factory=list)

    def notice(self):
        """One sentence for the page listing what was ignored, or "" when nothing was."""
        if not self.ignored:
            return ""
        return ("Part of this link could not be used and was left at the page's defaults: "
                + "; ".join(self.ignored) + ".")


def _as_strings(raw):
    """A query value as a list of strings (a repeated key gives several)."""
    if isinstance(raw, str):
        return [raw]
    if isinstance(raw, (list, tuple)):
        return [item if isinstance(item, str) else str(item) for item in raw]
    return [str(raw)]


def _schema(page):
    try:
        return {param.name: param for param in PAGES[page]}
    except KeyError:
        raise ValueError(f"unknown page {page!r}; pages: {', '.join(PAGES)}") from None


def decode(page, query, options=None):
    """Validated settings from a link's query parameters.

    Parameters
    ----------
    page : str
        The page's URL path, a key of :data:`PAGES`.
    query : mapping of str to str or list of str
        The query parameters as the browser sent them (a repeated key as a
        list).
    options : mapping, optional
        Choices known only at run time, by parameter name: URL word → value
        (the demo samples and input files present).

    Returns
    -------
    Decoded
        The usable values and a message per parameter left out. Never raises
        for anything in ``query``.

    Examples
    --------
    >>> found = decode("film-spectrum", {"thickness_nm": "250", "angle_deg": "95", "zoom": "2"})
    >>> found.values
    {'thickness_nm': 250.0}
    >>> found.ignored
    ['angle_deg = 95: outside 0–80°', 'zoom: not a setting of this page']
    """
    params = _schema(page)
    result = Decoded()
    if not isinstance(query, Mapping):
        result.ignored.append("the link's settings could not be read")
        return result
    for key, raw in query.items():
        name = key if isinstance(key, str) else str(key)
        if name in _PASSED_THROUGH:
            continue
        param = params.get(name)
        if param is None:
            result.ignored.append(f"{_shown(name)}: not a setting of this page")
            continue
        texts = _as_strings(raw)
        limit = getattr(param, "repeat", 1)
        if not texts:
            continue
        if len(texts) > limit:
            result.ignored.append(f"{name}: given {len(texts)} times (at most {limit})" if limit > 1
                                  else f"{name}: given {len(texts)} times, so which one is meant is unclear")
            continue
        if limit > 1 and [text.strip() for text in texts] == [NONE]:
            result.values[name] = []
            continue
        values = []
        for text in texts:
            if not text.strip():
                result.ignored.append(f"{name}: empty")
                continue
            if len(text) > MAX_VALUE_CHARS:
                result.ignored.append(f"{name} = {_shown(text)}: longer than {MAX_VALUE_CHARS} characters")
                continue
            value, problem = param.parse(text, options)
            if problem:
                result.ignored.append(f"{name} = {_shown(text)}: {problem}")
            else:
                values.append(value)
        if limit > 1 and values:
            result.values[name] = values
        elif values:
            result.values[name] = values[0]
    return result


def encode(page, values, options=None):
    """Query parameters for a page's settings, in the page's order.

    Parameters
    ----------
    page : str
        The page's URL path, a key of :data:`PAGES`.
    values : mapping
        Parameter name → value as :func:`decode` returns it. Names the page
        does not have, None, and values outside what :func:`decode` accepts
        are left out (a link never carries what it could not read back).
    options : mapping, optional
        Run-time choices, as for :func:`decode`.

    Returns
    -------
    dict of str to str or list of str
        Ready for ``st.query_params.from_dict`` or :func:`query_string`.

    Examples
    --------
    >>> query_string(encode("film-spectrum", {"angle_deg": 30.0, "thickness_nm": 250.0, "exposure": float("nan")}))
    'thickness_nm=250&angle_deg=30'
    """
    _schema(page)
    encoded = {}
    for param in PAGES[page]:
        value = values.get(param.name)
        if value is None or not param.valid(value, options):
            continue
        encoded[param.name] = param.format(value, options)
    return encoded


def query_string(encoded):
    """The text after ``?`` in a link, from :func:`encode`'s result (commas, colons and # kept readable)."""
    return urlencode(encoded, doseq=True, quote_via=quote, safe=",:")


@dataclass(frozen=True)
class Scenario:
    """A demo the start page opens in one click.

    Attributes
    ----------
    title, text : str
        What the link says and a line about what the demo shows.
    page : str
        The page's URL path.
    query : dict of str to str
        The link's query parameters as written in the URL (demo sample and
        input by their file stems); :func:`decode` must accept all of them.
    """

    title: str
    text: str
    page: str
    query: dict


DEMO_SCENARIOS = (
    Scenario("Soap film in a wire loop", "Reflectance and colour of a draining soap film 400 nm thick, exposed "
             "10× as a camera would be for so weak a reflection.", "film-spectrum",
             {"sample": "soap-film-loop", "thickness_nm": "400", "exposure": "10"}),
    Scenario("Colour chart of an oxidised coupon", "Thermal oxide on silicon under fluorescent light: colour "
             "over thickness and angle, and a chart to print for the bench.", "colour-charts",
             {"sample": "oxide-coupon", "t_max_nm": "1500"}),
    Scenario("Photo of an oxide coupon", "A photo of etched oxide steps becomes a thickness map with its "
             "uncertainty.", "photo-map", {"photo": "oxide-coupon-steps", "sample": "oxide-coupon"}),
    Scenario("Reflectance spectrum of an oxide spot", "A measured spectrum fitted for the film's thickness, "
             "with its 1σ and the other thicknesses that fit as well.", "spectrum-fit",
             {"spectrum": "oxide-spot", "sample": "oxide-coupon"}),
    Scenario("Map of a 150 mm wafer", "49 spectra across a wafer fitted at once, with the uniformity figures.",
             "spectrum-map", {"run": "wafer-map", "sample": "oxide-coupon"}),
    Scenario("Soap film under a sodium lamp", "Monochromatic fringes counted from the black film at the top.",
             "fringes", {"photo": "soap-sodium", "sample": "soap-film-loop"}),
    Scenario("Draining soap film, 40 frames", "A recording mapped frame by frame: thinning law and rupture.",
             "film-over-time", {"recording": "soap-loop-drainage", "sample": "soap-film-loop"}),
)
