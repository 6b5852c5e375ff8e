"""Reading photos safely and writing thickness maps.

Public names
------------
Photo, load_photo
    An RGB photo as floats 0–1 (still encoded unless declared linear), with
    guard rails: size limit, EXIF orientation, 8/16-bit, RGBA, greyscale.
MAX_PIXELS
    Largest image accepted (decompression-bomb guard).
save_map_npy, save_map_tiff, save_map_csv, save_map_png, save_provenance, file_sha256
    Exports: float32 NPY, ImageJ-compatible float32 TIFF (unit nm, pixel
    size), CSV rows, a PNG with a colour bar, and a JSON provenance record.

Reading files lives here, away from the algorithms, which take arrays.
"""

from __future__ import annotations

import dataclasses
import hashlib
import io
import json
from pathlib import Path

import numpy as np

from .errors import FilmcalcError

__all__ = ["Photo", "load_photo", "MAX_PIXELS", "save_map_npy", "save_map_tiff", "save_map_csv", "save_map_png",
           "save_provenance", "file_sha256", "rgb_of_samples", "tiff_page_samples"]

MAX_PIXELS = 60_000_000  # a 24-megapixel camera with room to spare; larger images are refused
TIFF_MAGIC = (b"II*\x00", b"MM\x00*", b"II+\x00", b"MM\x00+")  # classic TIFF and BigTIFF, read by tifffile
# The only Pillow decoders tried (JPEG covers the MPO variant some cameras write). Naming them keeps Pillow
# from handing a file to any other plugin, some of which run external programs (EPS: Ghostscript).
PIL_FORMATS = ("PNG", "JPEG")


@dataclasses.dataclass
class Photo:
    """A photo's pixels and what is known about them.

    Attributes
    ----------
    rgb : numpy.ndarray, shape (H, W, 3), float32
        Values 0–1 as stored (sRGB-encoded unless ``linear``).
    bit_depth : int
        8 or 16.
    linear : bool
        True for raw-like linear data.
    greyscale : bool
        The file held one channel (replicated into three here).
    name : str
    sha256 : str
        Hash of the file's bytes (for the provenance record).
    """

    rgb: np.ndarray
    bit_depth: int
    linear: bool
    greyscale: bool
    name: str
    sha256: str

    @property
    def shape(self):
        return self.rgb.shape[:2]


def file_sha256(data):
    """SHA-256 hex digest of bytes."""
    return hashlib.sha256(data).hexdigest()


def load_photo(source, name=None, linear=False, max_pixels=MAX_PIXELS):
    """Read a PNG, JPEG or TIFF photo (8 or 16 bit, RGB, RGBA or greyscale).

    Parameters
    ----------
    source : str, path-like or bytes
    name : str, optional
        Shown in messages (the file name by default).
    linear : bool
        Declare the data linear (raw-like) instead of sRGB-encoded.
    max_pixels : int
        Refuse larger images before decoding them.

    Returns
    -------
    Photo

    Raises
    ------
    FilmcalcError
        Empty, truncated, unreadable or oversized files, with what to do.
    """
    from PIL import Image, ImageOps, UnidentifiedImageError

    if isinstance(source, (bytes, bytearray)):
        data, name = bytes(source), name or "uploaded image"
    else:
        path = Path(source)
        name = _short(name or path.name)
        try:
            data = path.read_bytes()
        except (OSError, ValueError) as exc:  # ValueError: a NUL character in the path
            raise FilmcalcError(f"Cannot read {name!r}: {getattr(exc, 'strerror', None) or exc}.") from None
    name = _short(name)
    if not data:
        raise FilmcalcError(f"{name!r} is empty.")
    digest = file_sha256(data)
    if data[:4] in TIFF_MAGIC:
        return _load_tiff(data, name, linear, max_pixels, digest)
    previous = Image.MAX_IMAGE_PIXELS
    try:
        Image.MAX_IMAGE_PIXELS = max_pixels
        with Image.open(io.BytesIO(data), formats=PIL_FORMATS) as im:
            w, h = im.size
            if w * h > max_pixels:
                raise FilmcalcError(f"{name!r} is {w} × {h} pixels, over the limit of {max_pixels:,}; "
                                    "crop or downscale it first.")
            im = ImageOps.exif_transpose(im)
            im.load()
            mode = im.mode
            if mode in ("I;16", "I;16B", "I;16L", "I"):
                arr = np.asarray(im, dtype=np.float32) / 65535.0
                arr, depth, grey = np.repeat(arr[..., None], 3, axis=2), 16, True
            elif mode in ("L", "LA", "1"):
                arr = np.asarray(im.convert("L"), dtype=np.float32) / 255.0
                arr, depth, grey = np.repeat(arr[..., None], 3, axis=2), 8, True
            else:
                arr = np.asarray(im.convert("RGB"), dtype=np.float32) / 255.0
                depth, grey = 8, False
                if mode == "P":
                    grey = bool(np.allclose(arr[..., 0], arr[..., 1]) and np.allclose(arr[..., 1], arr[..., 2]))
    except FilmcalcError:
        raise
    except Image.DecompressionBombError:
        raise FilmcalcError(f"{name!r} declares an image larger than {max_pixels:,} pixels; refused.") from None
    except UnidentifiedImageError:
        raise FilmcalcError(f"{name!r} is not a readable PNG, JPEG or TIFF image: its contents are in none of "
                            "these formats. Export the photo as PNG, JPEG or TIFF.") from None
    except Exception as exc:  # Pillow's decoders raise many types for damaged files
        raise FilmcalcError(f"{name!r} is not a readable PNG, JPEG or TIFF image ({_why(exc)}). If it was cut "
                            "short while copying, copy it again.") from None
    finally:
        Image.MAX_IMAGE_PIXELS = previous
    return Photo(np.ascontiguousarray(arr), depth, linear, grey, name, digest)


def _load_tiff(data, name, linear, max_pixels, digest):
    import tifffile

    try:
        with tifffile.TiffFile(io.BytesIO(data)) as tif:
            if not len(tif.pages):
                raise FilmcalcError(f"{name!r} is a TIFF file with no readable image in it (no page, or a damaged "
                                    "directory); export it again.")
            arr = tiff_page_samples(tif.pages[0], name, max_pixels)
    except FilmcalcError:
        raise
    except Exception as exc:  # tifffile raises many types for damaged files
        raise FilmcalcError(f"{name!r} is not a readable TIFF ({_why(exc)}).") from None
    scaled, depth, grey = rgb_of_samples(arr, name)
    return Photo(scaled, depth, linear, grey, name, digest)


def _short(name, limit=80):
    """A name for messages, cut to ``limit`` characters."""
    name = str(name)
    return name if len(name) <= limit else name[:limit - 1] + "…"


def _why(exc):
    """A library's exception as a short clause for a message: its first line, at most 120 characters."""
    text = (str(exc).strip().splitlines() or [type(exc).__name__])[0]
    return _short(text, 120)


def tiff_page_samples(page, name, max_pixels=MAX_PIXELS):
    """A TIFF page's samples, (H, W) or (H, W, S), after the guard rails: pixel and sample counts checked
    before decoding, grey or RGB colour only, samples moved last (planar files store them first)."""
    h, w = int(page.imagelength), int(page.imagewidth)
    if h * w > max_pixels:
        raise FilmcalcError(f"{name!r} is {w} × {h} pixels, over the limit of {max_pixels:,}; "
                            "crop or downscale it first.")
    if h * w == 0:
        raise FilmcalcError(f"{name!r} holds an image of {w} × {h} pixels: there is nothing to read.")
    if page.size > 4 * max_pixels:
        raise FilmcalcError(f"{name!r} declares {page.size:,} samples for {w} × {h} pixels, over the limit; "
                            "save one greyscale or RGB image per page.")
    photometric = page.photometric
    if photometric not in (1, 2) and not (photometric == 6 and page.compression in (6, 7)):
        kind = getattr(photometric, "name", str(photometric)).lower()
        raise FilmcalcError(f"{name!r}: TIFF colour model {kind!r} is not supported (it would be read as wrong "
                            "colours); save the image as a greyscale or RGB TIFF, or as PNG.")
    axes = page.axes
    if set(axes) - set("YXS"):
        raise FilmcalcError(f"{name!r}: a TIFF page holding several images or a volume (axes {axes}) is not "
                            "supported; save one image per page.")
    arr = page.asarray()
    if "S" in axes and arr.ndim == len(axes):
        arr = np.moveaxis(arr, axes.index("S"), -1)
        if photometric == 1:  # grey plus extra samples (alpha, ...): the grey level is the first
            arr = arr[..., 0]
    return arr


def rgb_of_samples(arr, name):
    """Image samples as stored (uint8, uint16 or float; 1, 3 or 4 channels) → (RGB float32 0–1 (H, W, 3),
    bit depth, whether the image was greyscale)."""
    if arr.ndim not in (2, 3) or 0 in arr.shape:
        raise FilmcalcError(f"{name!r}: expected a 2-D image, found samples of shape {arr.shape}.")
    if arr.dtype == np.uint16:
        scaled, depth = arr.astype(np.float32) / 65535.0, 16
    elif arr.dtype == np.uint8:
        scaled, depth = arr.astype(np.float32) / 255.0, 8
    elif arr.dtype.kind == "f":
        with np.errstate(over="ignore", invalid="ignore"):
            scaled, depth = np.clip(arr.astype(np.float32), 0, None), 16
        if not np.all(np.isfinite(scaled)):
            raise FilmcalcError(f"{name!r}: the image holds NaN, infinite or huge (beyond 32-bit float) samples; "
                                "replace them (for example with 0) and save it again.")
    else:
        raise FilmcalcError(f"{name!r}: TIFF sample type {arr.dtype} is not supported (use 8 or 16 bit).")
    grey = scaled.ndim == 2 or scaled.shape[2] == 1
    if scaled.ndim == 2:
        scaled = np.repeat(scaled[..., None], 3, axis=2)
    elif scaled.shape[2] == 1:
        scaled = np.repeat(scaled, 3, axis=2)
    elif scaled.shape[2] >= 3:
        scaled = scaled[..., :3]
    else:
        raise FilmcalcError(f"{name!r}: expected 1, 3 or 4 channels, found {scaled.shape[2]}.")
    return np.ascontiguousarray(scaled), depth, grey


def _out_path(path, suffixes):
    path = Path(path)
    if path.suffix.lower() not in suffixes:
        raise FilmcalcError(f"Output {str(path)!r} must end in {' or '.join(suffixes)}.")
    if not path.parent.exists():
        raise FilmcalcError(f"The folder {str(path.parent)!r} does not exist.")
    return path


def save_map_npy(path, thickness_nm):
    """Float32 NPY of the thickness map (nm; NaN where no thickness was assigned)."""
    np.save(_out_path(path, (".npy",)), np.asarray(thickness_nm, dtype=np.float32))


def save_map_tiff(path, thickness_nm, pixel_size_um=None):
    """Float32 TIFF that ImageJ/Fiji opens with unit and pixel size set.

    Values are nm; the spatial calibration is µm per pixel when known.
    """
    import tifffile

    path = _out_path(path, (".tif", ".tiff"))
    data = np.asarray(thickness_nm, dtype=np.float32)
    metadata = {"unit": "um" if pixel_size_um else "pixel", "Info": "filmcalc thickness map; values in nm",
                "Labels": ["thickness (nm)"]}
    kwargs = {}
    if pixel_size_um:
        kwargs["resolution"] = (1.0 / pixel_size_um, 1.0 / pixel_size_um)
    tifffile.imwrite(path, data, imagej=True, metadata=metadata, **kwargs)


def save_map_csv(path, thickness_nm, sigma_nm, flags, residual=None):
    """CSV rows x, y, thickness_nm, sigma_nm, flags (x = column, y = row from top-left)."""
    path = _out_path(path, (".csv",))
    t = np.asarray(thickness_nm)
    ys, xs = np.indices(t.shape)
    cols = [xs.ravel(), ys.ravel(), t.ravel(), np.asarray(sigma_nm).ravel(), np.asarray(flags).ravel()]
    header = "x,y,thickness_nm,sigma_nm,flags"
    fmt = ["%d", "%d", "%.3f", "%.3f", "%d"]
    if residual is not None:
        cols.append(np.asarray(residual).ravel())
        header += ",residual_dE00"
        fmt.append("%.3f")
    np.savetxt(path, np.column_stack(cols), delimiter=",", header=header, comments="", fmt=fmt)


def save_map_png(path, thickness_nm, title="", label="thickness (nm)", pixel_size_um=None):
    """A PNG of a map with a colour bar (cividis: perceptually uniform, colour-blind safe)."""
    import matplotlib

    matplotlib.use("Agg")
    from matplotlib.figure import Figure

    path = _out_path(path, (".png",))
    data = np.asarray(thickness_nm, dtype=float)
    fig = Figure(figsize=(7, 5.5))
    ax = fig.add_subplot()
    h, w = data.shape
    extent = None if not pixel_size_um else (0, w * pixel_size_um, h * pixel_size_um, 0)
    image = ax.imshow(np.ma.masked_invalid(data), cmap="cividis", extent=extent, interpolation="nearest")
    ax.set_xlabel("x (µm)" if pixel_size_um else "x (pixel)")
    ax.set_ylabel("y (µm)" if pixel_size_um else "y (pixel)")
    ax.set_title(title)
    fig.colorbar(image, ax=ax, label=label)
    fig.savefig(path, dpi=150, bbox_inches="tight")


def save_provenance(path, record):
    """A JSON provenance record (inputs, settings, calibration, version)."""
    path = _out_path(path, (".json",))
    path.write_text(json.dumps(record, indent=1, default=_jsonable), encoding="utf-8")


def _jsonable(value):
    if isinstance(value, np.ndarray):
        return value.tolist()
    if isinstance(value, (np.floating, np.integer)):
        return value.item()
    if isinstance(value, Path):
        return str(value)
    raise TypeError(f"not JSON serialisable: {type(value).__name__}")
