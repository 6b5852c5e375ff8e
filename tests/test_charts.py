"""Charts: the figures carry the right data, units and readouts; printable files are written."""

import numpy as np
import pytest

from filmcalc.appearance import film_colours
from filmcalc.charts import (bench_chart, chromaticity_figure, colour_strip_figure, colour_table,
                             reflectance_map_figure, save_bench_chart, spectrum_figure, thickness_angle_chart_image,
                             thickness_angle_figure, thickness_unit)
from filmcalc.errors import FilmcalcError
from filmcalc.optics import reflectance_sweep, stack_reflectance
from filmcalc.stack import loads_stack

STACK = loads_stack('name = "oxide"\n[ambient]\nmaterial = "air"\n[[layers]]\nmaterial = "fused-silica"\n'
                    'thickness_nm = 100\nunknown = true\n[substrate]\nmaterial = "silicon"\n[light]\nsource = "F2"\n')


@pytest.fixture(scope="module")
def grid():
    return film_colours(STACK, np.linspace(0, 1000, 501), np.linspace(0, 60, 31))


@pytest.fixture(scope="module")
def strip():
    return film_colours(STACK, np.linspace(0, 1000, 501), [0.0])


def test_units():
    assert thickness_unit("um") == ("µm", 1e-3)
    assert thickness_unit("A") == ("Å", 10.0)
    with pytest.raises(FilmcalcError, match="unit"):
        thickness_unit("mil")


def test_thickness_angle_figure(grid):
    fig = thickness_angle_figure(grid, STACK, unit="µm")
    image, overlay = fig.data
    assert image.type == "image" and image.source.startswith("data:image/png;base64,")
    from PIL import Image
    import base64, io
    png = Image.open(io.BytesIO(base64.b64decode(image.source.split(",", 1)[1])))
    assert png.size == (501, 31)
    assert image.x0 == 0 and image.dx == pytest.approx(0.002)  # µm per column
    assert "L* %{customdata[1]}" in overlay.hovertemplate and "µm" in overlay.hovertemplate
    assert overlay.customdata[0][0][0].startswith("#")
    assert "µm" in fig.layout.xaxis.title.text


def test_colour_strip_marks_orders(strip):
    fig = colour_strip_figure(strip, STACK)
    labels = [a.text for a in fig.layout.annotations]
    # 1000 nm of oxide at 550 nm is 5.3 orders (188.4 nm each): boundaries 1…5.
    assert sum("order" in t for t in labels) == 5
    assert "188.4 nm" in fig.layout.xaxis.title.text


def test_chromaticity_and_spectrum_and_map(strip):
    fig = chromaticity_figure(strip, "uv", label_every_nm=200)
    assert [t.name for t in fig.data][:2] == ["spectral locus", "colour path"]
    assert list(fig.data[3].text) == ["0", "200", "400", "600", "800", "1000"]
    spec = spectrum_figure(stack_reflectance(STACK, np.arange(400.0, 701.0), 120), "s")
    assert [t.line.width for t in spec.data] == [3, 1.2, 1.2]
    r = reflectance_sweep(STACK, np.arange(400.0, 701.0, 10), np.linspace(0, 500, 51), [0.0])
    heat = reflectance_map_figure(r, np.linspace(0, 500, 51), STACK).data[0]
    assert np.asarray(heat.z).shape == (31, 51) and np.nanmax(heat.z) <= 100


def test_colour_table(strip):
    rows = colour_table(strip)
    assert len(rows) == 501
    assert {"thickness_nm", "angle_deg", "hex", "L", "a", "b", "X", "Y", "Z"} <= set(rows[0])


def test_bench_chart_files(tmp_path):
    c = film_colours(STACK, np.arange(0.0, 601.0, 10.0), [0.0])
    fig = bench_chart(c, STACK, unit="nm", paper="Letter", date="2026-01-01")
    texts = " ".join(t.get_text() for t in fig.texts)
    assert "2026-01-01" in texts and "F2" in texts and "printer" in texts
    assert tuple(fig.get_size_inches()) == (8.5, 11.0)
    save_bench_chart(fig, tmp_path / "c.pdf")
    save_bench_chart(fig, tmp_path / "c.png")
    assert (tmp_path / "c.pdf").read_bytes()[:4] == b"%PDF"
    assert (tmp_path / "c.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    with pytest.raises(FilmcalcError, match=".png or .pdf"):
        save_bench_chart(fig, tmp_path / "c.svg")
    with pytest.raises(FilmcalcError, match="larger step"):
        bench_chart(film_colours(STACK, np.arange(0.0, 1000.0, 2.0), [0.0]), STACK)


def test_printable_thickness_angle_chart(grid, tmp_path):
    fig = thickness_angle_chart_image(grid, STACK, paper="A4")
    save_bench_chart(fig, tmp_path / "g.pdf")
    assert (tmp_path / "g.pdf").stat().st_size > 1000


def test_map_of_spectra_figures_survive_line_scans_and_gaps(tmp_path):
    # A line scan (collinear points) and a point with no thickness: no contour, no crash.
    from filmcalc.charts import spectrum_map_figure, spectrum_map_figure_image
    from filmcalc.spectra import MapFit, uniformity

    t = np.array([100.0, 101.0, np.nan, 103.0, 104.0])
    result = MapFit(np.arange(5.0), np.zeros(5), t, np.full(5, 0.1), np.ones(5), np.zeros(5, bool), uniformity(t), [],
                    0.0)
    fig = spectrum_map_figure(result)
    assert [trace.type for trace in fig.data] == ["scatter"]
    spectrum_map_figure_image(result, "line scan", tmp_path / "line.png")
    assert (tmp_path / "line.png").stat().st_size > 1000
