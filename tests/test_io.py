"""Reading photos with guard rails, and the exports."""

import io
import json

import numpy as np
import pytest
from PIL import Image

from filmcalc.errors import FilmcalcError
from filmcalc.io import (load_photo, save_map_csv, save_map_npy, save_map_png, save_map_tiff, save_provenance)


def png_bytes(array, mode=None, **kwargs):
    buffer = io.BytesIO()
    Image.fromarray(array, mode).save(buffer, format=kwargs.pop("format", "PNG"), **kwargs)
    return buffer.getvalue()


def test_rgb_png_and_rgba():
    rgb = (np.arange(24, dtype=np.uint8).reshape(2, 4, 3) * 10)
    photo = load_photo(png_bytes(rgb), name="a.png")
    assert photo.rgb.shape == (2, 4, 3) and photo.rgb.dtype == np.float32
    assert photo.rgb[0, 0] == pytest.approx(rgb[0, 0] / 255) and not photo.greyscale and photo.bit_depth == 8
    rgba = np.dstack([rgb, np.full((2, 4), 128, np.uint8)])
    assert load_photo(png_bytes(rgba)).rgb == pytest.approx(photo.rgb)


def test_sixteen_bit_tiff_and_greyscale():
    import tifffile
    buffer = io.BytesIO()
    data = (np.arange(12, dtype=np.uint16).reshape(2, 2, 3) * 5000)
    tifffile.imwrite(buffer, data)
    photo = load_photo(buffer.getvalue(), name="x.tif")
    assert photo.bit_depth == 16 and photo.rgb[1, 1, 2] == pytest.approx(55000 / 65535, rel=1e-6)
    grey = load_photo(png_bytes(np.full((3, 3), 100, np.uint8)))
    assert grey.greyscale and grey.rgb.shape == (3, 3, 3)


def test_exif_orientation_is_honoured():
    rgb = np.zeros((2, 4, 3), np.uint8)
    rgb[0, 0] = 255
    im = Image.fromarray(rgb)
    exif = im.getexif()
    exif[0x0112] = 6  # rotate 90° clockwise on display
    buffer = io.BytesIO()
    im.save(buffer, format="JPEG", exif=exif, quality=100)
    photo = load_photo(buffer.getvalue())
    assert photo.rgb.shape == (4, 2, 3)


@pytest.mark.parametrize("data, message", [
    (b"", "empty"),
    (b"this is text, not an image", "not a readable"),
])
def test_bad_files(data, message):
    with pytest.raises(FilmcalcError, match=message):
        load_photo(data, name="thing.png")


def test_truncated_jpeg():
    good = png_bytes(np.random.default_rng(0).integers(0, 255, (64, 64, 3), dtype=np.uint8), format="JPEG")
    with pytest.raises(FilmcalcError, match="not a readable|cut short"):
        load_photo(good[: len(good) // 2], name="cut.jpg")


def test_huge_declared_size_is_refused_before_decoding():
    # A PNG header declaring 100 000 × 100 000 pixels (a decompression bomb), with no data.
    import struct
    import zlib
    def chunk(kind, body):
        return struct.pack(">I", len(body)) + kind + body + struct.pack(">I", zlib.crc32(kind + body))

    data = (b"\x89PNG\r\n\x1a\n" + chunk(b"IHDR", struct.pack(">IIBBBBB", 100_000, 100_000, 8, 2, 0, 0, 0))
            + chunk(b"IDAT", zlib.compress(b"\x00" * 64)) + chunk(b"IEND", b""))
    with pytest.raises(FilmcalcError, match="over the limit|larger than"):
        load_photo(data, name="bomb.png")


def test_exports(tmp_path):
    t = np.array([[1.5, np.nan], [300.25, 12.0]], dtype=np.float32)
    sigma = np.full(t.shape, 2.0, np.float32)
    flags = np.array([[0, 4], [0, 1]], np.uint8)
    save_map_npy(tmp_path / "m.npy", t)
    assert np.array_equal(np.load(tmp_path / "m.npy"), t, equal_nan=True)
    save_map_tiff(tmp_path / "m.tif", t, pixel_size_um=0.5)
    import tifffile
    with tifffile.TiffFile(tmp_path / "m.tif") as tif:
        assert tif.is_imagej and tif.imagej_metadata["unit"] == "um"
        assert tif.pages[0].dtype == np.float32
        x_res = tif.pages[0].tags["XResolution"].value
        assert x_res[0] / x_res[1] == pytest.approx(2.0)  # pixels per µm
        assert np.array_equal(tif.asarray(), t, equal_nan=True)
    save_map_csv(tmp_path / "m.csv", t, sigma, flags)
    rows = (tmp_path / "m.csv").read_text().splitlines()
    assert rows[0] == "x,y,thickness_nm,sigma_nm,flags" and rows[3].startswith("0,1,300.250")
    save_map_png(tmp_path / "m.png", t)
    assert (tmp_path / "m.png").read_bytes()[:4] == b"\x89PNG"
    save_provenance(tmp_path / "p.json", {"a": np.float32(1.5), "b": np.arange(3)})
    assert json.loads((tmp_path / "p.json").read_text()) == {"a": 1.5, "b": [0, 1, 2]}
    with pytest.raises(FilmcalcError, match="must end in"):
        save_map_npy(tmp_path / "m.txt", t)
    with pytest.raises(FilmcalcError, match="does not exist"):
        save_map_npy(tmp_path / "nope" / "m.npy", t)
