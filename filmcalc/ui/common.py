"""Helpers shared by the dashboard pages: demo files, shareable links, cached computations, saved runs, cautions."""

from __future__ import annotations

import hashlib
import json
import os
from pathlib import Path
from urllib.parse import urlsplit, urlunsplit

import numpy as np
import streamlit as st

from filmcalc import links
from filmcalc.appearance import film_colours
from filmcalc.errors import FilmcalcError
from filmcalc.optics import reflectance_sweep, stack_reflectance
from filmcalc.runs import DATABASE_URL_ENV, RunStore, resolve_data_dir, safe_name, unique_name, validate_labels
from filmcalc.stack import load_stack, loads_stack

DEMO_DIR = Path(__file__).resolve().parents[2] / "demo_data"

MEASUREMENT_CAUTION = (
    "Thickness read from colour, fringes or a spectrum is an estimate. Its uncertainty is shown where filmcalc "
    "can compute it; "
    "confirm any value that matters with an independent measurement (spectroscopic reflectometry or "
    "ellipsometry, a stylus profiler)."
)


# Demo samples in the order a newcomer meets them; any other demo file follows.
DEMO_ORDER = ("soap-film-loop", "oxide-coupon", "resist-wafer", "oil-on-water", "lubricant-contact")


def demo_stacks():
    """Demo stack files by display name, in :data:`DEMO_ORDER`."""
    paths = sorted(DEMO_DIR.glob("*.toml"),
                   key=lambda p: (DEMO_ORDER.index(p.stem) if p.stem in DEMO_ORDER else len(DEMO_ORDER), p.stem))
    return {load_stack(path).name: path for path in paths}


BUILDER_CHOICE = "Your stack (from the Stack builder page)"
UPLOAD_CHOICE_PREFIX = "Uploaded: "


def _remember(key):
    st.session_state[key + "_saved"] = st.session_state[key]


def demo_sample_choices():
    """URL word (the demo stack file's stem) → the sample's display name, for links."""
    return {path.stem: name for name, path in demo_stacks().items()}


def stack_picker(link=None):
    """Sidebar control shared by the pages: which stack to work on.

    The choice, an uploaded file's text and the builder's stack live in
    session state, so they survive moving between pages. A new link's
    ``sample`` selects that demo sample; the choice goes back into the link
    when it is a demo sample (your own stack cannot travel in a link).

    Parameters
    ----------
    link : PageLink, optional
        The page's link, to read and write ``sample``.

    Returns
    -------
    text, base_dir, origin : str, str or None, str
        The stack file's text, the folder relative paths resolve against, and
        a name to show in messages.
    """
    demos = demo_stacks()
    options = list(demos)
    uploaded = st.session_state.get("uploaded_stack")
    if uploaded:
        options.append(UPLOAD_CHOICE_PREFIX + uploaded[0])
    if st.session_state.get("builder_text"):
        options.append(BUILDER_CHOICE)
    if link is not None and "sample" in link.given():
        st.session_state["stack_choice"] = st.session_state["stack_choice_saved"] = link.given()["sample"]
    saved = st.session_state.get("stack_choice_saved", options[0])
    if st.session_state.get("stack_choice_pending") in options:  # a stack file just uploaded: select it
        st.session_state["stack_choice"] = st.session_state.pop("stack_choice_pending")
    with st.sidebar:
        st.header("Stack")
        if st.session_state.get("stack_choice") not in options:
            st.session_state["stack_choice"] = saved if saved in options else options[0]
        choice = st.selectbox("Sample", options, key="stack_choice", on_change=_remember, args=("stack_choice",),
                              help="Demo samples are invented; their stack files are in demo_data/.")
        upload = st.file_uploader("Load a stack file (TOML)", type=["toml"], key="stack_upload",
                                  help="Used only in this browser session; not part of shared links.")
    if upload is not None and (not uploaded or uploaded[0] != upload.name):
        st.session_state["uploaded_stack"] = (upload.name, upload.getvalue().decode("utf-8", errors="replace"))
        st.session_state["stack_choice_saved"] = UPLOAD_CHOICE_PREFIX + upload.name
        st.session_state["stack_choice_pending"] = UPLOAD_CHOICE_PREFIX + upload.name
        st.rerun()
    if link is not None:
        link.keep("sample", choice if choice in demos else None)
        if choice not in demos:
            link.note("Your own stack is not in the link: share its stack file (Stack builder → Download), "
                      "and the link opens with a demo sample.")
    if choice == BUILDER_CHOICE:
        return st.session_state["builder_text"], None, "your stack"
    if choice.startswith(UPLOAD_CHOICE_PREFIX) and uploaded:
        return uploaded[1], None, uploaded[0]
    path = demos[choice]
    return path.read_text(encoding="utf-8"), str(path.parent), path.name


class PageLink:
    """A page's settings in the browser's address bar, so a copied link reproduces the view.

    Create it at the top of the page, after the title. Before each widget
    that defines the result, :meth:`attach` its parameter to the widget's
    key; after the widgets, :meth:`publish` writes the current values into
    the URL and shows the link to copy at the top of the sidebar (call it
    again after widgets drawn later on the page). The parameters and
    their checks are in :mod:`filmcalc.links`.

    A link seeds the widgets only when it is new to this page (opened from
    outside, from the start page, or by the browser's back button); while
    the user works on the page the widgets lead and the URL follows.
    Parameters a new link leaves out go back to the page's defaults.

    Parameters
    ----------
    page : str
        The page's URL path (a key of :data:`filmcalc.links.PAGES`).
    options : dict, optional
        Choices known only now, by parameter name (URL word → value), e.g.
        the demo input files; the demo samples are added here.
    """

    def __init__(self, page, options=None):
        self.page = page
        self.options = {"sample": demo_sample_choices(), **(options or {})}
        query = {name: st.query_params.get_all(name) for name in st.query_params}
        self._written_key = f"link_written::{page}"
        self.fresh = bool(query) and _as_lists(query) != st.session_state.get(self._written_key)
        if self.fresh:  # read once: even if the page stops before publishing, the next run is the user's
            st.session_state[self._written_key] = _as_lists(query)
        decoded = links.decode(page, query, self.options) if self.fresh else links.Decoded()
        self._given = decoded.values
        self._ignored = list(decoded.ignored)
        self._notice = st.empty()
        self._box = st.sidebar.empty()  # the link to copy, at the top of the sidebar
        self._attached = {}
        self._kept = {}
        self._notes = []
        self._show_notice()

    def given(self):
        """The values a new link gives (name → value); empty while the user works on the page."""
        return self._given if self.fresh else {}

    def attach(self, name, key, fits=None, misfit="does not fit here", convert=None):
        """Tie parameter ``name`` to the widget ``key`` (or a tuple of keys, one per part of the value).

        Call it just before the widget is drawn. When the link is new, its
        value goes into the widget (``convert`` turns it into the widget's
        type first); a parameter the link leaves out resets the widget to its
        default. ``fits(value)`` can refuse a value that is valid in general
        but not here (a pixel outside this photo): it is then left out and
        the notice names it with ``misfit``, the reason.
        """
        self._attached[name] = key
        if not self.fresh:
            return
        keys = key if isinstance(key, tuple) else (key,)
        if name not in self._given:
            for k in keys:
                st.session_state.pop(k, None)
            return
        value = self._given[name]
        if fits is not None and not fits(value):
            self.refuse(name, value, misfit)
            for k in keys:
                st.session_state.pop(k, None)
            return
        value = convert(value) if convert else value
        for k, v in zip(keys, value if isinstance(key, tuple) else (value,)):
            st.session_state[k] = v

    def refuse(self, name, value, reason):
        """Leave a link's value out after all, and say why in the notice."""
        self._given.pop(name, None)
        shown = ",".join(f"{v:g}" for v in value) if isinstance(value, tuple) else (
            f"{value:g}" if isinstance(value, float) else value)
        self._ignored.append(f"{name} = {shown}: {reason}")
        self._show_notice()

    def keep(self, name, value):
        """Put ``value`` (not a widget's) into the link under ``name``; None leaves it out."""
        self._kept[name] = value

    def note(self, text):
        """A sentence shown under the link (what it does not hold)."""
        if text not in self._notes:
            self._notes.append(text)

    def values(self):
        """The page's current settings, name → value, from the attached widgets and :meth:`keep`."""
        current = {}
        for name, key in self._attached.items():
            if isinstance(key, tuple):
                parts = [st.session_state.get(k) for k in key]
                current[name] = None if any(p is None for p in parts) else tuple(parts)
            else:
                current[name] = st.session_state.get(key)
        current.update(self._kept)
        return current

    def address(self):
        """The link to this view as the page currently is (what :meth:`publish` shows)."""
        return page_address(self.page, links.query_string(links.encode(self.page, self.values(), self.options)))

    def publish(self):
        """Write the current settings into the address bar and show the link to copy.

        Call it once the widgets that define the result are drawn, and again after any drawn later.
        """
        encoded = links.encode(self.page, self.values(), self.options)
        wanted = _as_lists(encoded)
        if wanted != _as_lists({name: st.query_params.get_all(name) for name in st.query_params}):
            st.query_params.from_dict(encoded)
        st.session_state[self._written_key] = wanted
        with self._box.container():
            st.caption(":material/link: **Link to this view**: copy it with the button at its right to share "
                       "these settings.")
            st.code(page_address(self.page, links.query_string(encoded)), language=None, wrap_lines=True)
            if self._notes:
                st.caption(" ".join(self._notes))

    def _show_notice(self):
        if self._ignored:
            self._notice.warning(links.Decoded(ignored=self._ignored).notice(), icon=":material/link_off:")


def _as_lists(query):
    """Query parameters with every value as a list of strings, to compare links."""
    return {name: [value] if isinstance(value, str) else list(value) for name, value in query.items()}


def page_address(page, query):
    """The full address of ``page`` with ``query`` (the browser's own address when known, else a path)."""
    base = st.context.url
    if not base:
        host = st.context.headers.get("Host") if st.context.headers else None
        base = f"http://{host}/{page}" if host else f"/{page}"
    return base.rstrip("/") + ("?" + query if query else "")


def address_of(page, query=""):
    """The full address of another page of the dashboard (``page`` is its URL path) with ``query``."""
    here = st.context.url
    if here:
        parts = urlsplit(here)
        path = parts.path.rstrip("/")
        head, _, last = path.rpartition("/")
        if last in links.PAGES:  # the page this session is on; the default page is served at the root
            path = head
        base = urlunsplit((parts.scheme, parts.netloc, f"{path}/{page}", "", ""))
    else:
        host = st.context.headers.get("Host") if st.context.headers else None
        base = f"http://{host}/{page}" if host else f"/{page}"
    return base + ("?" + query if query else "")


def choose_demo_stack(stack_file, marker):
    """Select the demo stack a demo input was made with, once per demo (the user may then pick another)."""
    stack_name = next((n for n, p in demo_stacks().items() if p.name == stack_file), None)
    if stack_name and st.session_state.get("demo_stack_marker") != marker:
        st.session_state["stack_choice_saved"] = st.session_state["stack_choice"] = stack_name
        st.session_state["demo_stack_marker"] = marker


def load_or_stop(text, base_dir, origin, need_film=True):
    """The parsed stack, or an error message on the page and a stop."""
    try:
        stack = stack_from_text(text, base_dir)
        if need_film and stack.film_index is None:
            raise FilmcalcError("This stack marks no layer as unknown = true; mark the film being measured.")
    except FilmcalcError as exc:
        st.error(f"{origin}: {exc}")
        st.stop()
    return stack


@st.cache_data(show_spinner=False)
def stack_from_text(text, base_dir):
    """Parse a stack file once per distinct text (errors propagate as FilmcalcError)."""
    return loads_stack(text, base_dir=base_dir)


@st.cache_data(show_spinner=False)
def spectrum_and_colour(text, base_dir, thickness_nm, angle_deg, polarisation="unpolarised", exposure=1.0):
    """Reflectance spectrum (380–780 nm, 1 nm) and the film's colour under the stack's light."""
    stack = loads_stack(text, base_dir=base_dir)
    wl = np.arange(380.0, 781.0, 1.0)
    spec = stack_reflectance(stack, wl, thickness_nm, angle_deg)
    colours = film_colours(stack, [thickness_nm], [angle_deg], exposure=exposure, polarisation=polarisation)
    return {
        "spectrum": spec, "warnings": spec.warnings, "XYZ": colours.XYZ[0, 0], "hex": str(colours.hex()[0, 0]),
        "out_of_gamut": bool(colours.out_of_gamut[0, 0]), "monochromatic": colours.monochromatic,
    }


def cautions_box():
    """The short caution shown on every page."""
    st.caption("⚠️ " + MEASUREMENT_CAUTION + " Lasers, UV lamps, furnaces and the solvents or etchants used "
               "to make films can hurt you: see the Cautions page and follow your local safety rules.")


RUN_CANCEL_HINT = ("While it runs, the Stop button at the top right of the page cancels it; your settings stay "
                   "as they are.")


@st.cache_data(show_spinner=False, max_entries=16)
def cached_colours(text, base_dir, thickness_range, angle_range, observer, polarisation, na):
    """Film colours (exposure 1) over a thickness × angle grid, cached by every input that defines them."""
    stack = loads_stack(text, base_dir=base_dir)
    thickness = np.linspace(*thickness_range)
    angles = np.linspace(*angle_range)
    return film_colours(stack, thickness, angles, observer=observer, polarisation=polarisation,
                        numerical_aperture=na)


@st.cache_data(show_spinner=False, max_entries=8)
def cached_reflectance_map(text, base_dir, thickness_range, angle_deg, na):
    """Reflectance over thickness × wavelength (380–780 nm every 2 nm) at one angle."""
    stack = loads_stack(text, base_dir=base_dir)
    return reflectance_sweep(stack, np.arange(380.0, 781.0, 2.0), np.linspace(*thickness_range), [angle_deg],
                             numerical_aperture=na)


@st.cache_data(show_spinner=False, max_entries=8)
def cached_bench_chart(text, base_dir, step_nm, top_nm, angle_deg, observer, exposure, polarisation, na, unit, paper):
    """The printable chart (PNG and PDF bytes), its colour table (CSV text) and the swatches' colours as arrays
    (``arrays``: the names ``filmcalc chart --save`` stores), cached by every input.

    Swatches every ``step_nm`` from 0 to ``top_nm`` (nm) at ``angle_deg`` (°), with the chart's exposure.
    """
    import csv
    import io
    import tempfile

    from filmcalc.charts import bench_chart, colour_table, save_bench_chart

    stack = loads_stack(text, base_dir=base_dir)
    thickness = np.arange(0.0, top_nm + step_nm / 2, step_nm)
    swatches = film_colours(stack, thickness, [angle_deg], observer=observer, exposure=exposure,
                            polarisation=polarisation, numerical_aperture=na)
    fig = bench_chart(swatches, stack, unit, paper)
    files = {"arrays": {"thickness_nm.npy": swatches.thickness_nm, "angle_deg.npy": swatches.angle_deg,
                        "srgb.npy": swatches.srgb, "Lab.npy": swatches.Lab, "XYZ.npy": swatches.XYZ},
             "light": swatches.source, "observer": swatches.observer, "exposure": float(swatches.exposure),
             "out_of_gamut_fraction": float(np.mean(swatches.out_of_gamut))}
    with tempfile.TemporaryDirectory() as tmp:
        for ext in ("png", "pdf"):
            path = Path(tmp) / f"chart.{ext}"
            save_bench_chart(fig, path)
            files[ext] = path.read_bytes()
    rows = colour_table(swatches)
    buffer = io.StringIO()
    writer = csv.DictWriter(buffer, fieldnames=list(rows[0]))
    writer.writeheader()
    writer.writerows(rows)
    files["csv"] = buffer.getvalue()
    return files


def pick_grid(height, width, cells=100):
    """An invisible scatter of points over an image, so clicks and box selections on it report pixels.

    One point every few pixels (at most ``cells`` a side); hovering shows the pixel.
    """
    import plotly.graph_objects as go

    step = max(1, int(np.ceil(max(height, width) / cells)))
    ys, xs = np.mgrid[0:height:step, 0:width:step]
    return go.Scattergl(x=xs.ravel(), y=ys.ravel(), mode="markers", marker={"size": 10, "opacity": 0},
                        hovertemplate="x %{x}, y %{y}<extra></extra>", showlegend=False, name="pixels")


def picked_pixel(selection, width, height):
    """The (x, y) pixel of a single clicked point in a Plotly selection, or None."""
    points = (selection or {}).get("points") or []
    if len(points) != 1 or (selection or {}).get("box"):
        return None
    x, y = int(round(points[0]["x"])), int(round(points[0]["y"]))
    return (x, y) if 0 <= x < width and 0 <= y < height else None


def picked_rectangle(selection, width, height):
    """The (x0, y0, x1, y1) pixel rectangle (inclusive, clipped to the image) of a box selection, or None."""
    boxes = (selection or {}).get("box") or []
    if not boxes:
        return None
    xs, ys = boxes[-1].get("x") or [], boxes[-1].get("y") or []
    if len(xs) < 2 or len(ys) < 2:
        return None
    x0, x1 = (int(np.clip(round(v), 0, width - 1)) for v in (min(xs), max(xs)))
    y0, y1 = (int(np.clip(round(v), 0, height - 1)) for v in (min(ys), max(ys)))
    return x0, y0, x1, y1


# --------------------------------------------------------------------------- saved runs

@st.cache_resource(show_spinner=False)
def _open_store(data_dir, database_url):
    return RunStore(data_dir, database_url)


def run_store():
    """The run store this dashboard process uses: ``FILMCALC_DATA`` (or the per-user data folder) and
    ``FILMCALC_DATABASE_URL`` when set, as the ``filmcalc`` command finds it. One per process and store.

    Raises
    ------
    FilmcalcError
        A database URL that cannot be used.
    """
    return _open_store(str(resolve_data_dir()), os.environ.get(DATABASE_URL_ENV) or None)


def stack_file_name(origin):
    """A stored name for the stack file a page used (its own file name, else ``stack.toml``)."""
    return safe_name(origin) if str(origin).lower().endswith(".toml") else "stack.toml"


def stored_inputs(roles):
    """A run's input files and which stored name plays which part, as ``filmcalc … --save`` stores them.

    Parameters
    ----------
    roles : dict
        Role (``photo``, ``stack``, ``spectrum``, ``input``…) → ``(file name, content)``, or
        ``(folder name, [(file name, content), ...])`` for a folder of frames; content is bytes, text
        or a path. None values are skipped.

    Returns
    -------
    files, names : dict, dict
        Stored name → content (for :meth:`RunStore.save`), and role → stored name (a folder's files
        are stored as ``FOLDER/NAME``, and the role names the folder).
    """
    files, names = {}, {}

    for role, value in roles.items():
        if value is None:
            continue
        name, content = value
        if isinstance(content, list):
            prefix = unique_name(safe_name(name, role), {n.split("/")[0] for n in files})
            for member, data in content:
                files[unique_name(f"{prefix}/{safe_name(member)}", files)] = data
            names[role] = prefix
        else:
            stored = unique_name(safe_name(name, role), files)
            files[stored] = Path(content) if isinstance(content, os.PathLike) else content
            names[role] = stored
    return files, names


def _result_token(kind, settings, summary):
    """A fingerprint of a result (its settings and summary numbers, timings aside)."""
    numbers = {k: v for k, v in (summary or {}).items() if k != "seconds"}
    text = json.dumps([kind, settings, numbers], sort_keys=True, default=str)
    return hashlib.sha256(text.encode()).hexdigest()


def save_run_panel(kind, *, inputs, outputs, settings, summary, provenance=None, link=None, key=None):
    """“Save as a run”: an expander under a result with the sample, tags, note and name typed in.

    The run holds what ``filmcalc … --save`` would: the input files (demo inputs too, so a link to the
    run works without an upload), the settings, the outputs under the command's names, the summary
    numbers and the provenance. After saving, the run's id and its link (``/saved-runs?run=ID``) are shown.

    Parameters
    ----------
    kind : str
        A kind of :data:`filmcalc.runs.KINDS`.
    inputs : dict
        Role → (file name, content), see :func:`stored_inputs`.
    outputs : dict
        Stored name → array, bytes, text or path, as the command names them.
    settings, summary, provenance : dict
        As the command stores them; ``settings["inputs"]`` (role → stored name) is added here, and
        the page's link to ``provenance["dashboard"]``.
    link : PageLink, optional
        The page's link, recorded in the provenance.
    key : str, optional
        Tells apart several panels on one page (default: the kind).
    """
    key = key or kind
    token = _result_token(kind, settings, summary)
    saved = st.session_state.setdefault("saved_run_ids", {})
    remembered = st.session_state.setdefault("saved_run_labels", {})
    with st.expander("Save as a run", icon=":material/bookmark_add:"):
        st.caption("Keeps this result with its inputs and settings in the run store, to open again on the "
                   "Saved runs page (or with `filmcalc runs show`) without computing it again. There are no "
                   "accounts: type your name.")
        with st.form(f"save_run::{key}", border=False, enter_to_submit=False):
            c1, c2, c3 = st.columns(3)
            sample = c1.text_input("Sample", remembered.get("sample", ""), max_chars=200, key=f"run_sample::{key}",
                                   placeholder="e.g. coupon 3")
            tags = c2.text_input("Tags (separated by commas)", ", ".join(remembered.get("tags", [])),
                                 key=f"run_tags::{key}", placeholder="e.g. anneal-B, weekly")
            saved_by = c3.text_input("Saved by", remembered.get("saved_by", ""), max_chars=100,
                                     key=f"run_saved_by::{key}", placeholder="your name")
            note = st.text_area("Note", "", max_chars=10_000, key=f"run_note::{key}", height=80)
            submitted = st.form_submit_button("Save", type="primary", icon=":material/save:")
        if submitted:
            try:
                labels = validate_labels(sample, tags.split(","), note, saved_by)
                files, names = stored_inputs(inputs)
                record = dict(provenance or {})
                if link is not None:
                    record["dashboard"] = {"page": link.page, "link": link.address()}
                with st.spinner("Saving…"):
                    run = run_store().save(kind, inputs=files, outputs=outputs, settings={**settings, "inputs": names},
                                           summary=summary, provenance=record, **labels)
            except FilmcalcError as exc:
                st.error(f"Not saved: {exc}")
            else:
                saved[token] = run.id
                remembered.update(sample=labels["sample"], tags=labels["tags"], saved_by=labels["saved_by"])
        if token in saved:
            run_id = saved[token]
            address = address_of("saved-runs", f"run={run_id}")
            st.success(f"Saved as run **{run_id}**. [Open it on the Saved runs page]({address}); its link, to "
                       "share:", icon=":material/check_circle:")
            st.code(address, language=None)
