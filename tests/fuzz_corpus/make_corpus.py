"""Write the crafted bad-input corpus of tests/fuzz_corpus/ (run: .venv/bin/python tests/fuzz_corpus/make_corpus.py).

Every file is invented here, deterministically (seeded, no clock), and is under 50 kB. ``CORPUS`` lists
each file with what is wrong with it and what filmcalc must do with it:

* ``"error"``: refuse it with a FilmcalcError whose message says what is wrong;
* ``"ok"``: read it (the file is odd but valid, e.g. UTF-16 text or a planar TIFF).

The inputs too big to keep in the repository (10⁶-character strings, 10⁵ columns, a CSV field over the
csv module's limit) are made at test time by :func:`write_large_cases`, in a temporary folder.

The file name's prefix names the parser that reads it (``stack_`` → load_stack, ``mat_`` →
load_material_csv, ``spec_`` → read_spectrum, ``map_`` → read_spectrum_map, ``cam_`` → load_camera_csv,
``light_`` → a light-source CSV, ``png_``/``jpeg_``/``gif_``/``eps_``/``image_`` → load_photo, ``tiff_`` →
load_photo and open_frames, ``video_``/``frames_`` → open_frames; ``pickle_``/``zip_`` go to every parser
of their suffix). tests/fuzz_corpus/README.md is written from the same list.
"""

from __future__ import annotations

import io
import random
import shutil
import struct
import sys
import zipfile
import zlib
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent

# A pickle that, if anything ever unpickled it, would create the folder "unpickled-canary" in the current
# working directory (os.mkdir). Harmless, and visible: the tests run every parser in an empty folder and
# check that nothing appears there.
CANARY_PICKLE = b"cos\nmkdir\n(S'unpickled-canary'\ntR."

GOOD_STACK = """name = "invented oxide"
[ambient]
material = "air"
[[layers]]
material = "fused-silica"
thickness_nm = 120
unknown = true
[substrate]
material = "silicon"
"""

WL = np.arange(400, 801, 10)


def _stack_with(layer_material=None, thickness=None, light=None, extra=""):
    text = GOOD_STACK
    if layer_material is not None:
        text = text.replace('material = "fused-silica"', f"material = {layer_material}")
    if thickness is not None:
        text = text.replace("thickness_nm = 120", f"thickness_nm = {thickness}")
    if light is not None:
        text += "[light]\n" + light
    return text + extra


def _material_csv(rows, header="wavelength_nm,n,k", sep=","):
    return (header + "\n" + "\n".join(sep.join(str(v) for v in row) for row in rows) + "\n")


def _spectrum_csv(values, header="wavelength_nm,reflectance", wavelengths=WL):
    return header + "\n" + "\n".join(f"{w:g},{v}" for w, v in zip(wavelengths, values)) + "\n"


def _reflectance():
    return [f"{0.3 + 0.1 * np.sin(w / 30):.4f}" for w in WL]


# --- images -------------------------------------------------------------------------------------------

def _png_chunk(kind, body):
    return struct.pack(">I", len(body)) + kind + body + struct.pack(">I", zlib.crc32(kind + body) & 0xFFFFFFFF)


def _png_header_only(width, height):
    """A PNG that declares a size and holds almost no data (a decompression-bomb header)."""
    return (b"\x89PNG\r\n\x1a\n" + _png_chunk(b"IHDR", struct.pack(">IIBBBBB", width, height, 8, 2, 0, 0, 0))
            + _png_chunk(b"IDAT", zlib.compress(b"\x00" * 64)) + _png_chunk(b"IEND", b""))


def _pil(array_or_image, fmt, mode=None, **kwargs):
    from PIL import Image

    im = array_or_image if isinstance(array_or_image, Image.Image) else Image.fromarray(array_or_image)
    if mode:
        im = im.convert(mode)
    buffer = io.BytesIO()
    im.save(buffer, fmt, **kwargs)
    return buffer.getvalue()


def _tifffile(array, **kwargs):
    import tifffile

    buffer = io.BytesIO()
    tifffile.imwrite(buffer, array, **kwargs)
    return buffer.getvalue()


def _tiff(width, height, samples=1, bits=8, offset=None, count=None, photometric=1, planar=1, sample_format=1,
          first_ifd=8, data=b""):
    """A little-endian classic TIFF with one IFD, built tag by tag so that any tag can lie."""
    tags = [(256, 4, [width]), (257, 4, [height]), (258, 3, [bits] * samples), (259, 3, [1]),
            (262, 3, [photometric]), (273, 4, [0]), (277, 3, [samples]), (278, 4, [height]),
            (279, 4, [count if count is not None else width * height * samples * bits // 8]),
            (284, 3, [planar]), (339, 3, [sample_format] * samples)]
    n = len(tags)
    extra_base = first_ifd + 2 + 12 * n + 4
    extra = b""
    entries = []
    for tag, kind, values in tags:
        fmt = "H" if kind == 3 else "I"
        payload = struct.pack("<" + fmt * len(values), *values)
        if len(payload) <= 4:
            entries.append(struct.pack("<HHI", tag, kind, len(values)) + payload.ljust(4, b"\0"))
        else:
            entries.append(struct.pack("<HHII", tag, kind, len(values), extra_base + len(extra)))
            extra += payload
    data_offset = extra_base + len(extra) if offset is None else offset
    entries[5] = struct.pack("<HHII", 273, 4, 1, data_offset)
    ifd = struct.pack("<H", n) + b"".join(entries) + struct.pack("<I", 0)
    head = b"II*\x00" + struct.pack("<I", first_ifd)
    return head + b"\0" * (first_ifd - 8) + ifd + extra + data


def _tiff_ifd_loop():
    """A valid 8 × 8 grey TIFF whose 'next IFD' points back at its own IFD (an endless page list)."""
    data = bytearray(_tiff(8, 8, data=bytes(range(64))))
    n = struct.unpack_from("<H", data, 8)[0]
    struct.pack_into("<I", data, 8 + 2 + 12 * n, 8)
    return bytes(data)


def _png_bad_crc():
    good = bytearray(_pil(np.full((4, 4, 3), 90, np.uint8), "PNG"))
    at = good.index(b"IDAT")
    length = struct.unpack(">I", good[at - 4:at])[0]
    good[at + 4 + length] ^= 0xFF  # first byte of the IDAT chunk's CRC
    return bytes(good)


def _png_corrupt_data():
    good = bytearray(_pil((np.random.default_rng(3).random((16, 16, 3)) * 255).astype(np.uint8), "PNG"))
    at = good.index(b"IDAT")
    for i in range(at + 8, at + 40):  # scramble the start of the zlib stream, keep the chunk's length
        good[i] ^= 0x5A
    body = bytes(good[at:at + 4 + struct.unpack(">I", good[at - 4:at])[0]])
    good[at + len(body):at + len(body) + 4] = struct.pack(">I", zlib.crc32(body) & 0xFFFFFFFF)
    return bytes(good)


def _jpeg_odd_exif():
    from PIL import Image

    im = Image.fromarray(np.full((6, 4, 3), 120, np.uint8))
    exif = im.getexif()
    exif[0x0112] = 77  # orientation is 1–8; 77 means nothing
    return _pil(im, "JPEG", exif=exif.tobytes())


def _gif_animated():
    from PIL import Image

    frames = [Image.fromarray(np.full((8, 8, 3), 40 * i, np.uint8)) for i in range(3)]
    buffer = io.BytesIO()
    frames[0].save(buffer, "GIF", save_all=True, append_images=frames[1:], duration=100, loop=0)
    return buffer.getvalue()


def _npy_object_pickle():
    """An .npy file of dtype object: numpy would unpickle its payload (the canary) if allow_pickle=True."""
    header = "{'descr': '|O', 'fortran_order': False, 'shape': (1,), }"
    header = header + " " * (63 - (10 + len(header)) % 64) + "\n"
    return b"\x93NUMPY\x01\x00" + struct.pack("<H", len(header)) + header.encode("latin-1") + CANARY_PICKLE


def _zip(member, text):
    buffer = io.BytesIO()
    with zipfile.ZipFile(buffer, "w") as archive:
        info = zipfile.ZipInfo(member, date_time=(2020, 1, 1, 0, 0, 0))
        archive.writestr(info, text)
    return buffer.getvalue()


def _random_bytes(seed, n):
    return random.Random(seed).randbytes(n)


def _frames_one_bad(folder):
    folder.mkdir()
    (folder / "f0.png").write_bytes(_pil(np.full((4, 6, 3), 100, np.uint8), "PNG"))
    (folder / "f1.png").write_bytes(b"this frame is text, not an image")
    (folder / "f2.png").write_bytes(_pil(np.full((5, 6, 3), 100, np.uint8), "PNG"))  # another size
    (folder / "f3.png").write_bytes(_pil(np.full((4, 6, 3), 120, np.uint8), "PNG")[:40])  # truncated


def _frames_first_bad(folder):
    folder.mkdir()
    (folder / "f0.png").write_bytes(b"")
    (folder / "f1.png").write_bytes(_pil(np.full((4, 6, 3), 100, np.uint8), "PNG"))


def _map_folder_traversal(folder):
    folder.mkdir()
    (folder / "s1.csv").write_text(_spectrum_csv(_reflectance()))
    (folder / "positions.csv").write_text("file,x,y\ns1.csv,0,0\n../../etc/passwd,1,1\n")


def _map_folder_bad_xy(folder):
    folder.mkdir()
    (folder / "s1.csv").write_text(_spectrum_csv(_reflectance()))
    (folder / "positions.csv").write_text("file,x,y\ns1.csv,left,top\n")


def _cp1252(text):
    return text.encode("cp1252")


# (name, expect, what is wrong, bytes or a function that writes a folder)
CORPUS = [
    # --- stack files (TOML) ---
    ("stack_traversal_material.toml", "error", "a layer's material is the CSV path ../../etc/passwd.csv, outside "
     "the stack file's folder", _stack_with('"../../etc/passwd.csv"').encode()),
    ("stack_traversal_name.toml", "error", "a layer's material is ../../etc/passwd (no .csv: taken as a "
     "material name, never opened)", _stack_with('"../../etc/passwd"').encode()),
    ("stack_absolute_material.toml", "error", "a layer's material is the absolute path /etc/passwd.csv",
     _stack_with('"/etc/passwd.csv"').encode()),
    ("stack_light_outside.toml", "error", "the light source is the CSV path ../lamp.csv, outside the folder",
     _stack_with(light='source = "../lamp.csv"\n').encode()),
    ("stack_missing_table.toml", "error", "a layer's material is a CSV file next to the stack that does not exist",
     _stack_with('"no-such-table.csv"').encode()),
    ("stack_deep_nesting.toml", "error", "an array nested 3000 deep (the TOML reader recurses)",
     ("x = " + "[" * 3000 + "]" * 3000 + "\n" + GOOD_STACK).encode()),
    ("stack_nan_thickness.toml", "error", "thickness_nm = nan", _stack_with(thickness="nan").encode()),
    ("stack_inf_thickness.toml", "error", "thickness_nm = inf", _stack_with(thickness="inf").encode()),
    ("stack_overflow_thickness.toml", "error", "thickness_nm = 1e400 (overflows to infinity)",
     _stack_with(thickness="1e400").encode()),
    ("stack_huge_integers.toml", "error", "integers of 400 digits for a thickness and an index (too large for a "
     "float)", _stack_with("{n = " + "9" * 400 + "}", thickness="9" * 400).encode()),
    ("stack_negative_thickness.toml", "error", "thickness_nm = -5", _stack_with(thickness="-5").encode()),
    ("stack_text_thickness.toml", "error", 'thickness_nm = "120" (text, not a number)',
     _stack_with(thickness='"120"').encode()),
    ("stack_nan_angle.toml", "error", "light.angle_deg = nan", _stack_with(light="angle_deg = nan\n").encode()),
    ("stack_unknown_key.toml", "error", "a misspelt key (thikness_nm)",
     GOOD_STACK.replace("thickness_nm", "thikness_nm").encode()),
    ("stack_unknown_material.toml", "error", "a material name that is not built in",
     _stack_with('"unobtainium"').encode()),
    ("stack_nan_cauchy.toml", "error", "Cauchy coefficients nan and inf",
     _stack_with("{cauchy = [nan, inf]}").encode()),
    ("stack_nan_sellmeier.toml", "error", "Sellmeier coefficients nan",
     _stack_with("{sellmeier_b = [nan], sellmeier_c = [0.01]}").encode()),
    ("stack_negative_k.toml", "error", "an inline material with k < 0", _stack_with("{n = 1.5, k = -0.1}").encode()),
    ("stack_two_unknown.toml", "error", "two layers marked unknown = true",
     (GOOD_STACK + '[[layers]]\nmaterial = "pmma"\nthickness_nm = 50\nunknown = true\n').encode()),
    ("stack_layers_not_tables.toml", "error", "layers = [1, 2] instead of [[layers]] tables",
     GOOD_STACK.split("[[layers]]")[0].replace("[ambient]", "layers = [1, 2]\n[ambient]").encode()
     + b'[substrate]\nmaterial = "silicon"\n'),
    ("stack_bad_syntax.toml", "error", "TOML syntax error (an unclosed string)",
     GOOD_STACK.replace('"air"', '"air').encode()),
    ("stack_empty.toml", "error", "an empty file (no [ambient], no [substrate])", b""),
    ("stack_cp1252.toml", "error", "Windows-1252 text (é as one byte), not UTF-8",
     _cp1252(GOOD_STACK.replace("invented oxide", "oxyde épais"))),
    ("stack_utf16.toml", "error", "UTF-16 text with a byte-order mark", GOOD_STACK.encode("utf-16")),
    ("stack_bom.toml", "ok", "UTF-8 with a byte-order mark (valid)", b"\xef\xbb\xbf" + GOOD_STACK.encode()),
    ("stack_binary.toml", "error", "a PNG image named .toml", None),  # filled in below
    ("pickle_canary.toml", "error", "pickle bytes named .toml (unpickling would create a folder)", CANARY_PICKLE),
    # --- material tables (CSV) ---
    ("mat_header_only.csv", "error", "the header and no rows", b"wavelength_nm,n,k\n"),
    ("mat_single_row.csv", "error", "one row (a table needs two)", _material_csv([(500, 1.5, 0)]).encode()),
    ("mat_nan.csv", "error", "n = nan on a row", _material_csv([(400, "nan", 0), (500, 1.5, 0)]).encode()),
    ("mat_inf_wavelength.csv", "error", "a wavelength of inf", _material_csv([(400, 1.5, 0), ("inf", 1.5, 0)]).encode()),
    ("mat_nan_wavelength.csv", "error", "a wavelength of nan", _material_csv([("nan", 1.5, 0), (500, 1.5, 0)]).encode()),
    ("mat_negative_wavelength.csv", "error", "a negative wavelength",
     _material_csv([(-400, 1.5, 0), (500, 1.5, 0)]).encode()),
    ("mat_unsorted.csv", "error", "wavelengths not increasing", _material_csv([(500, 1.5, 0), (400, 1.5, 0)]).encode()),
    ("mat_duplicate.csv", "error", "a repeated wavelength", _material_csv([(400, 1.5, 0), (400, 1.6, 0)]).encode()),
    ("mat_negative_k.csv", "error", "k < 0 (the n − ik sign convention)",
     _material_csv([(400, 1.5, -0.1), (500, 1.5, -0.1)]).encode()),
    ("mat_text_cells.csv", "error", "text in a number column", _material_csv([(400, 1.5, 0), (500, "abc", 0)]).encode()),
    ("mat_wrong_columns.csv", "error", "a header without wavelength_nm and n",
     _material_csv([(400, 1.5, 0), (500, 1.5, 0)], header="lambda,index,ext").encode()),
    ("mat_short_row.csv", "error", "a row with one cell", b"wavelength_nm,n,k\n400,1.5,0\n500\n"),
    ("mat_mixed_separators.csv", "error", "commas in the header, semicolons in the rows",
     b"wavelength_nm,n,k\n400;1.5;0\n500;1.5;0\n"),
    ("mat_decimal_comma.csv", "error", "semicolon-separated with decimal commas",
     b"wavelength_nm;n;k\n400;1,5;0\n500;1,5;0\n"),
    ("mat_bom.csv", "ok", "UTF-8 with a byte-order mark (valid)",
     b"\xef\xbb\xbf" + _material_csv([(400, 1.5, 0), (500, 1.49, 0)]).encode()),
    ("mat_utf16.csv", "ok", "UTF-16 with a byte-order mark (valid text)",
     _material_csv([(400, 1.5, 0), (500, 1.49, 0)]).encode("utf-16")),
    ("mat_cp1252.csv", "error", "Windows-1252 text (µ and ° as single bytes in a comment)",
     _cp1252("# measured at 20 °C, wavelengths in nm (not µm)\n" + _material_csv([(400, 1.5, 0), (500, 1.49, 0)]))),
    ("mat_unclosed_quote.csv", "error", "an unclosed quote that swallows the rest of the file",
     b'wavelength_nm,n,k\n"400,1.5,0\n500,1.5,0\n'),
    ("pickle_canary.csv", "error", "pickle bytes named .csv (unpickling would create a folder)", CANARY_PICKLE),
    ("zip_archive.csv", "error", "a zip archive named .csv",
     _zip("table.csv", _material_csv([(400, 1.5, 0), (500, 1.5, 0)]))),
    # --- spectra (CSV) ---
    ("spec_single_row.csv", "error", "one data row", b"wavelength_nm,reflectance\n500,0.3\n"),
    ("spec_header_only.csv", "error", "a header and no numbers", b"wavelength_nm,reflectance\n"),
    ("spec_all_nan.csv", "error", "every reflectance is nan", _spectrum_csv(["nan"] * WL.size).encode()),
    ("spec_inf.csv", "error", "reflectance inf and -inf on most rows",
     _spectrum_csv(["inf", "-inf"] * (WL.size // 2) + ["0.3"]).encode()),
    ("spec_one_column.csv", "error", "wavelengths only", ("\n".join(f"{w}" for w in WL) + "\n").encode()),
    ("spec_out_of_range.csv", "error", "values 150–300 (not a fraction; as percent still over 100 %)",
     _spectrum_csv([f"{150 + w / 4:.1f}" for w in WL]).encode()),
    ("spec_micrometres.csv", "error", "wavelengths in µm (0.40–0.80), not nm",
     _spectrum_csv(_reflectance(), wavelengths=WL / 1000).encode()),
    ("spec_ragged.csv", "error", "a row with three cells among rows of two",
     _spectrum_csv(_reflectance()).replace("\n500,", "\n500,0.1,").encode()),
    ("spec_text_in_data.csv", "error", "a word among the numbers",
     _spectrum_csv(_reflectance()).replace("\n600,", "\nsix hundred,").encode()),
    ("spec_mixed_separators.csv", "error", "commas, then semicolons",
     _spectrum_csv(_reflectance()).replace(",0.3", ";0.3").replace(",0.2", ";0.2").encode()),
    ("spec_unsorted_duplicates.csv", "ok", "rows out of order and a repeated wavelength (sorted and averaged, "
     "with a note)", ("wavelength_nm,reflectance\n" + "\n".join(
         f"{w},{r}" for w, r in sorted(zip(list(WL) + [500], _reflectance() + ["0.31"]), key=lambda p: -p[0]))
         + "\n").encode()),
    ("spec_percent.csv", "ok", "reflectance in percent (read as percent, with a note)",
     _spectrum_csv([f"{100 * float(r):.2f}" for r in _reflectance()]).encode()),
    ("spec_bom.csv", "ok", "UTF-8 with a byte-order mark and no header (valid)",
     b"\xef\xbb\xbf" + "\n".join(f"{w},{r}" for w, r in zip(WL, _reflectance())).encode()),
    ("spec_utf16.csv", "ok", "UTF-16 with a byte-order mark (valid text)",
     _spectrum_csv(_reflectance()).encode("utf-16")),
    ("spec_cp1252.csv", "ok", "Windows-1252 text in the header comment (read; the bad bytes are only in a comment)",
     _cp1252("# Reflexionsgrad, Einfallswinkel 0°\n" + _spectrum_csv(_reflectance()))),
    ("spec_counts_dark_above_reference.csv", "error", "raw counts whose dark level is above the reference",
     ("wavelength_nm,sample,reference,dark\n" + "\n".join(f"{w},100,50,80" for w in WL) + "\n").encode()),
    ("spec_binary.csv", "error", "a PNG image named .csv", None),  # filled in below
    ("map_missing_points.csv", "error", "a mapping run where one point lacks some wavelengths",
     ("x,y,wavelength_nm,reflectance\n" + "\n".join(
         f"{x},{y},{w},0.3" for x in (0, 1) for y in (0, 1) for w in WL if not (x == 1 and y == 1 and w > 600))
      + "\n").encode()),
    ("map_no_header.csv", "error", "a mapping run without the header naming x, y, wavelength, reflectance",
     ("\n".join(f"{x},{y},{w},0.3" for x in (0, 1) for y in (0, 1) for w in WL) + "\n").encode()),
    ("map_folder_traversal", "error", "a folder of spectra whose positions.csv names ../../etc/passwd",
     _map_folder_traversal),
    ("map_folder_bad_xy", "error", "a folder of spectra whose positions.csv has words for x and y",
     _map_folder_bad_xy),
    # --- camera responses and light sources (CSV, read by filmcalc.colour) ---
    ("cam_bad_header.csv", "error", "a camera file whose header is not wavelength_nm,red,green,blue",
     ("nm,r,g,b\n" + "\n".join(f"{w},1,1,1" for w in WL) + "\n").encode()),
    ("cam_missing_columns.csv", "error", "a camera file with the right header but only two numbers per row",
     ("wavelength_nm,red,green,blue\n" + "\n".join(f"{w},1" for w in WL) + "\n").encode()),
    ("cam_nan.csv", "error", "a camera file with nan sensitivities",
     ("wavelength_nm,red,green,blue\n" + "\n".join(f"{w},nan,1,1" for w in WL) + "\n").encode()),
    ("cam_utf16.csv", "error", "a camera file in UTF-16",
     ("wavelength_nm,red,green,blue\n" + "\n".join(f"{w},1,1,1" for w in WL) + "\n").encode("utf-16")),
    ("light_nan.csv", "error", "a light-source file whose power is nan",
     ("wavelength_nm,power\n" + "\n".join(f"{w},nan" for w in range(300, 901, 10)) + "\n").encode()),
    # --- photos ---
    ("png_bomb_header.png", "error", "a 100 000 × 100 000 PNG header with no data (decompression bomb)",
     _png_header_only(100_000, 100_000)),
    ("png_over_limit.png", "error", "a 9000 × 9000 PNG header: over filmcalc's limit, under twice Pillow's",
     _png_header_only(9000, 9000)),
    ("png_zero_size.png", "error", "a PNG header declaring 0 × 0 pixels", _png_header_only(0, 0)),
    ("png_truncated.png", "error", "a 32 × 32 PNG cut in half",
     _pil((np.random.default_rng(1).random((32, 32, 3)) * 255).astype(np.uint8), "PNG")[:1600]),
    ("png_bad_crc.png", "ok", "a wrong checksum on intact image data (Pillow does not check it when decoding; "
     "the pixels are read as stored)", _png_bad_crc()),
    ("png_corrupt_data.png", "error", "a PNG whose compressed image data is damaged", _png_corrupt_data()),
    ("png_1x1.png", "ok", "one pixel (valid)", _pil(np.array([[[200, 100, 50]]], np.uint8), "PNG")),
    ("png_palette.png", "ok", "a palette (indexed-colour) PNG (valid)",
     _pil(np.full((4, 4, 3), (10, 200, 30), np.uint8), "PNG", mode="P")),
    ("png_16bit_grey.png", "ok", "16-bit greyscale (valid)",
     _pil(np.arange(16, dtype=np.uint16).reshape(4, 4) * 4000, "PNG")),
    ("jpeg_cmyk.jpg", "ok", "a CMYK JPEG (valid; converted to RGB)",
     _pil(np.full((4, 4, 3), (10, 200, 30), np.uint8), "JPEG", mode="CMYK")),
    ("jpeg_truncated.jpg", "error", "a JPEG cut after its headers",
     _pil((np.random.default_rng(2).random((32, 32, 3)) * 255).astype(np.uint8), "JPEG")[:700]),
    ("jpeg_odd_exif.jpg", "ok", "EXIF orientation 77 (not 1–8): ignored", _jpeg_odd_exif()),
    ("gif_animated.gif", "error", "an animated GIF (not a format filmcalc reads)", _gif_animated()),
    ("eps_named_png.png", "error", "PostScript named .png (Pillow would hand it to Ghostscript)",
     b"%!PS-Adobe-3.0 EPSF-3.0\n%%BoundingBox: 0 0 10 10\nnewpath 0 0 moveto 10 10 lineto stroke\nshowpage\n"),
    ("image_random_bytes.png", "error", "4 kB of random bytes named .png", _random_bytes(7, 4096)),
    ("image_text.jpg", "error", "text named .jpg", b"This is a note, not a photo.\n"),
    ("pickle_canary.png", "error", "pickle bytes named .png", CANARY_PICKLE),
    ("pickle_canary.npy", "error", "an .npy array of dtype object whose payload is the canary pickle",
     _npy_object_pickle()),
    ("tiff_zero_pages.tif", "error", "a TIFF header whose first-page offset is 0 (no pages)",
     b"II*\x00\x00\x00\x00\x00"),
    ("tiff_bad_ifd_offset.tif", "error", "a TIFF whose first-page offset points far past the end",
     _tiff(8, 8, first_ifd=8)[:4] + struct.pack("<I", 0x7FFFFFF0) + _tiff(8, 8)[8:]),
    ("tiff_bad_strip_offset.tif", "error", "a TIFF whose pixel data offset points past the end",
     _tiff(8, 8, offset=10**8)),
    ("tiff_bomb_header.tif", "error", "a TIFF declaring 100 000 × 100 000 pixels with one byte of data",
     _tiff(100_000, 100_000, count=1, data=b"\0")),
    ("tiff_samples_bomb.tif", "error", "7000 × 7000 pixels × 255 samples declared (12 GB), one byte stored",
     _tiff(7000, 7000, samples=255, count=1, data=b"\0")),
    ("tiff_zero_size.tif", "error", "a TIFF declaring 0 × 0 pixels", _tiff(0, 0, count=0)),
    ("tiff_bad_sample_format.tif", "error", "SampleFormat 9 (no such format)",
     _tiff(8, 8, sample_format=9, data=bytes(64))),
    ("tiff_signed_int8.tif", "error", "signed 8-bit samples", _tiff(8, 8, sample_format=2, data=bytes(64))),
    ("tiff_12bit.tif", "error", "12-bit packed samples", _tiff(8, 8, bits=12, data=bytes(96))),
    ("tiff_int32.tif", "error", "32-bit integer samples", _tifffile(np.arange(64, dtype=np.int32).reshape(8, 8))),
    ("tiff_float_nan.tif", "error", "float samples that are all nan", _tifffile(np.full((8, 8), np.nan, np.float32))),
    ("tiff_cmyk.tif", "error", "a CMYK (separated) TIFF",
     _tifffile(np.full((8, 8, 4), 60, np.uint8), photometric="separated")),
    ("tiff_palette.tif", "error", "a palette TIFF (indices, not colours)",
     _tifffile(np.arange(64, dtype=np.uint8).reshape(8, 8), photometric="palette",
               colormap=np.tile(np.arange(256, dtype=np.uint16) * 256, (3, 1)))),
    ("tiff_miniswhite.tif", "error", "a grey TIFF where 0 means white", _tiff(8, 8, photometric=0, data=bytes(64))),
    ("tiff_two_channels.tif", "ok", "two samples per pixel, grey (valid: grey plus an extra sample such as "
     "alpha; read as grey)",
     _tifffile(np.zeros((8, 8, 2), np.uint8), photometric="minisblack", planarconfig="contig")),
    ("tiff_grey_extra_samples.tif", "ok", "grey with three extra samples per pixel, stored as planes (valid; "
     "read as grey from the first sample, not as RGB)",
     _tifffile(np.stack([np.full((8, 8), v, np.uint8) for v in (50, 200, 0, 90)]), photometric="minisblack",
               planarconfig="separate")),
    ("tiff_planar_rgb.tif", "ok", "RGB stored as three planes (valid; must read as 8 × 8, not 3 × 8)",
     _tifffile(np.stack([np.full((8, 8), v, np.uint8) for v in (10, 20, 30)]), photometric="rgb",
               planarconfig="separate")),
    ("tiff_ifd_loop.tif", "ok", "a valid page whose next-page pointer points back to itself", _tiff_ifd_loop()),
    ("tiff_pages_differ.tif", "ok", "two pages of different sizes (the second is skipped as a frame)",
     None),  # filled in below
    ("bigtiff_header_only.tif", "error", "a BigTIFF header and nothing else", b"II+\x00\x08\x00\x00\x00" + bytes(16)),
    # --- recordings ---
    ("video_random.mp4", "error", "2 kB of random bytes named .mp4", _random_bytes(11, 2048)),
    ("video_empty.avi", "error", "an empty .avi", b""),
    ("frames_one_bad", "ok", "a folder of frames: one text file, one of another size, one truncated "
     "(each skipped with a reason)", _frames_one_bad),
    ("frames_first_bad", "error", "a folder whose first frame is an empty file", _frames_first_bad),
]


def _fill_in():
    png = _pil(np.full((4, 4, 3), 77, np.uint8), "PNG")
    import tifffile

    pages = io.BytesIO()
    with tifffile.TiffWriter(pages) as tif:
        tif.write(np.zeros((8, 8, 3), np.uint8), photometric="rgb")
        tif.write(np.zeros((6, 8, 3), np.uint8), photometric="rgb")
    fills = {"stack_binary.toml": png, "spec_binary.csv": png, "tiff_pages_differ.tif": pages.getvalue()}
    for i, entry in enumerate(CORPUS):
        if entry[0] in fills:
            CORPUS[i] = entry[:3] + (fills[entry[0]],)


_fill_in()


def write_corpus(folder=HERE):
    """Write every corpus entry into ``folder`` (files and small folders), replacing older copies."""
    folder = Path(folder)
    for name, _, _, content in CORPUS:
        target = folder / name
        if target.is_dir():
            shutil.rmtree(target)
        if callable(content):
            content(target)
        else:
            target.write_bytes(content)
    write_readme(folder / "README.md")


def write_readme(path):
    lines = ["# Crafted bad inputs (fuzz corpus)", "",
             "Invented files that filmcalc's readers must refuse with a clear message (**error**) or read "
             "correctly (**ok**), never with a traceback, never unpickling or running anything, never writing "
             "a file. `tests/test_fuzz.py` runs every entry through the parser for its type (the name's "
             "prefix). Regenerate with `.venv/bin/python tests/fuzz_corpus/make_corpus.py`.", "",
             "`pickle_canary.*` holds a pickle that would create the folder `unpickled-canary` in the working "
             "directory if anything unpickled it; the tests check that it never appears.", "",
             "Readers by prefix: `stack_` load_stack; `mat_` load_material_csv; `spec_` read_spectrum; `map_` "
             "read_spectrum_map; `cam_` load_camera_csv; `light_` a light-source CSV (light_spectrum); `png_`, "
             "`jpeg_`, `gif_`, `eps_`, `image_` load_photo; `tiff_`, `bigtiff_` load_photo and open_frames; "
             "`video_`, `frames_` open_frames; `pickle_` and `zip_` every reader of their suffix.", "",
             "| file | expected | what is wrong with it |", "|---|---|---|"]
    for name, expect, what, _ in CORPUS:
        lines.append(f"| `{name}` | {expect} | {what} |")
    lines += ["", "Made at test time by `write_large_cases()` (too big to keep here):", "",
              "| file | expected | what is wrong with it |", "|---|---|---|"]
    for name, expect, what, _ in LARGE:
        lines.append(f"| `{name}` | {expect} | {what} |")
    Path(path).write_text("\n".join(lines) + "\n", encoding="utf-8")


# The big inputs, built at test time: (name, expect, what is wrong, text).
LARGE = [
    ("stack_long_name.toml", "ok", "a stack whose name is 10⁶ characters long (valid: a name is any text)",
     lambda: GOOD_STACK.replace("invented oxide", "n" * 10**6)),
    ("stack_long_material.toml", "error", "a material name 10⁶ characters long",
     lambda: _stack_with('"' + "m" * 10**6 + '"')),
    ("stack_long_key.toml", "error", "an unknown key 10⁶ characters long", lambda: "k" * 10**6 + " = 1\n" + GOOD_STACK),
    ("stack_long_csv_path.toml", "error", "a material CSV path 10⁶ characters long",
     lambda: _stack_with('"' + "p" * 10**6 + '.csv"')),
    ("mat_wide.csv", "error", "10⁵ columns (wavelength_nm, n and 99 998 others), two rows of one cell",
     lambda: ",".join(["wavelength_nm", "n"] + [f"c{i}" for i in range(99_998)]) + "\n400\n500\n"),
    ("mat_huge_field.csv", "error", "one quoted cell of 200 000 characters (over the csv module's limit)",
     lambda: 'wavelength_nm,n\n"' + "9" * 200_000 + '",1.5\n500,1.5\n'),
    ("spec_wide.csv", "ok", "10⁵ columns on every row (valid: columns after the second are ignored, with a note)",
     lambda: "\n".join(
        ",".join([str(w)] + ["0.3"] * 99_999) for w in WL[:12]) + "\n"),
    ("spec_huge_field.csv", "error", "one quoted cell of 200 000 characters",
     lambda: 'wavelength_nm,reflectance\n400,"' + "1" * 200_000 + '"\n'),
    ("spec_many_rows.csv", "ok", "10⁵ rows at 0.004 nm steps (valid)",
     lambda: "wavelength_nm,reflectance\n" + "\n".join(f"{400 + 0.004 * i:.3f},0.3" for i in range(100_000))),
]


def write_large_cases(folder):
    """Write the LARGE entries into ``folder``; returns {name: path}."""
    folder = Path(folder)
    paths = {}
    for name, _, _, make in LARGE:
        paths[name] = folder / name
        paths[name].write_text(make(), encoding="utf-8")
    return paths


if __name__ == "__main__":
    write_corpus()
    sizes = sorted(((p.stat().st_size, p.name) for p in HERE.rglob("*") if p.is_file()), reverse=True)
    print(f"wrote {len(CORPUS)} entries to {HERE}; largest file {sizes[0][1]} ({sizes[0][0]:,} bytes)",
          file=sys.stderr)
