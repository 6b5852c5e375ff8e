"""Invented thickness fields and photos rendered from them with the forward model.

Public names
------------
wedge, dome, steps, draining_soap_film, edge_bead, oil_lens
    Ground-truth thickness fields (nm) on a pixel grid.
CameraSettings, render_photo
    Render a field as a camera would record it: film colour, camera
    correction (white-balance and exposure errors, a colour matrix), noise,
    clipping, sRGB encoding, optional JPEG compression.
measured_camera_lookup
    The film's colours as a real, non-colorimetric camera records them:
    rendered through measured spectral sensitivities (colour-science ships
    them) and colour-corrected by a 3 × 3 matrix fitted on a colour checker,
    as camera pipelines do.

Used by the demo-data script, the tests and the benchmarks; every random
number is seeded. The fields are invented, not measurements.
"""

from __future__ import annotations

import dataclasses
import io

import numpy as np

from .colour import srgb_encode
from .thickness import build_lookup

__all__ = ["wedge", "dome", "steps", "draining_soap_film", "edge_bead", "oil_lens", "CameraSettings",
           "render_photo", "measured_camera_lookup", "thinning_film", "render_sequence"]


def _grid(shape):
    h, w = shape
    y, x = np.mgrid[0:h, 0:w]
    return x / max(w - 1, 1), y / max(h - 1, 1)


def wedge(shape, lo_nm, hi_nm):
    """Thickness rising linearly from left to right."""
    x, _ = _grid(shape)
    return lo_nm + (hi_nm - lo_nm) * x


def dome(shape, base_nm, peak_nm):
    """A smooth dome, thickest in the middle."""
    x, y = _grid(shape)
    r2 = ((x - 0.5) ** 2 + (y - 0.5) ** 2) / 0.5
    return base_nm + (peak_nm - base_nm) * np.exp(-3 * r2)


def steps(shape, levels_nm):
    """Vertical bands of constant thickness with sharp edges (an etched step coupon)."""
    x, _ = _grid(shape)
    index = np.minimum((x * len(levels_nm)).astype(int), len(levels_nm) - 1)
    return np.asarray(levels_nm, dtype=float)[index]


def draining_soap_film(shape, black_nm=30.0, bottom_nm=1200.0, black_fraction=0.12, seed=0):
    """A vertical soap film: a thin black film at the top, thickening downwards, with gentle swirls."""
    x, y = _grid(shape)
    rng = np.random.default_rng(seed)
    phase = rng.uniform(0, 2 * np.pi, 3)
    swirl = 0.04 * np.sin(6 * x + phase[0]) * np.sin(4 * y + phase[1]) + 0.02 * np.sin(11 * x + 3 * y + phase[2])
    s = np.clip((y - black_fraction) / (1 - black_fraction) + swirl, 0, 1)
    thickness = black_nm + (bottom_nm - black_nm) * s**1.6
    return np.where(y < black_fraction + swirl * 0.5, black_nm, thickness)


def thinning_film(shape, t_s, amplitude_nm=500.0, t0_s=-0.5, alpha=0.5, seed=0):
    """A vertical film thinning by a power law: mean thickness A·(t − t₀)^−α (nm, t in s).

    The film is thinner at the top and thicker at the bottom, with gentle swirls: the field is
    a fixed profile (mean 1) times the law, so its mean follows the law exactly.
    """
    x, y = _grid(shape)
    rng = np.random.default_rng(seed)
    phase = rng.uniform(0, 2 * np.pi, 2)
    profile = 0.7 + 0.6 * y + 0.05 * np.sin(5 * x + phase[0]) * np.sin(3 * y + phase[1])
    profile /= profile.mean()
    return profile * amplitude_nm * (float(t_s) - t0_s) ** -alpha


def render_sequence(stack, shape, times_s, rupture_s=None, camera=None, background=0.02, lookup=None, **law):
    """Frames (encoded sRGB, 0–1) of a :func:`thinning_film` that ruptures at ``rupture_s``.

    At the first frame at or after ``rupture_s`` a hole covering most of the film has opened
    (it shows the dark background); every later frame is background only. Yields
    ``(time_s, frame, thickness_nm)`` with NaN thickness where there is no film.
    """
    camera = camera or CameraSettings()
    x, y = _grid(shape)
    hole = (x - 0.3) ** 2 + (y - 0.4) ** 2 < 0.45**2
    ruptured_at = None
    for i, t in enumerate(times_s):
        field = thinning_film(shape, t, **law)
        cam = dataclasses.replace(camera, seed=camera.seed + i)
        frame = render_photo(stack, field, cam, lookup)
        if rupture_s is not None and t >= rupture_s:
            ruptured_at = t if ruptured_at is None else ruptured_at
            gone = hole if t == ruptured_at else np.ones(shape, bool)
            frame[gone] = background
            field = np.where(gone, np.nan, field)
        yield t, frame, field


def edge_bead(shape, flat_nm=900.0, bead_nm=1400.0, width=0.08):
    """A spin-coated layer, flat in the middle and thicker at the right-hand edge."""
    x, _ = _grid(shape)
    return flat_nm + (bead_nm - flat_nm) * np.exp(-((1 - x) / width) ** 2)


def oil_lens(shape, rim_nm=50.0, centre_nm=700.0):
    """An oil lens spreading on water: thick in the middle, thinning to the rim."""
    x, y = _grid(shape)
    r = np.sqrt((x - 0.5) ** 2 + (y - 0.5) ** 2) / 0.5
    return rim_nm + (centre_nm - rim_nm) * np.clip(1 - r**2, 0, 1)


@dataclasses.dataclass
class CameraSettings:
    """How the synthetic camera departs from an ideal colorimetric one.

    Attributes
    ----------
    gains : (float, float, float)
        White-balance error per channel (1 = none).
    exposure : float
        Overall exposure factor.
    matrix : array_like, optional
        A 3 × 3 colour matrix on linear RGB (a non-colorimetric camera).
    noise : float
        Standard deviation of additive noise on linear values.
    jpeg_quality : int, optional
        Compress as JPEG at this quality.
    seed : int
    """

    gains: tuple = (1.0, 1.0, 1.0)
    exposure: float = 1.0
    matrix: np.ndarray | None = None
    noise: float = 0.0
    jpeg_quality: int | None = None
    seed: int = 0


def render_photo(stack, thickness_nm, camera=None, lookup=None):
    """Encoded sRGB photo (H, W, 3) in 0–1 of a film with the given thickness field."""
    camera = camera or CameraSettings()
    t = np.asarray(thickness_nm, dtype=float)
    lookup = lookup or build_lookup(stack, (0.0, float(np.ceil(t.max())) + 1.0), 0.25)
    linear = np.stack([np.interp(t, lookup.thickness_nm, lookup.linear_rgb[:, i]) for i in range(3)], -1)
    if camera.matrix is not None:
        linear = linear @ np.asarray(camera.matrix).T
    linear = linear * np.asarray(camera.gains) * camera.exposure
    if camera.noise:
        linear = linear + np.random.default_rng(camera.seed).normal(0, camera.noise, linear.shape)
    encoded = srgb_encode(np.clip(linear, 0, 1))
    if camera.jpeg_quality:
        from PIL import Image

        buffer = io.BytesIO()
        Image.fromarray(np.rint(encoded * 255).astype(np.uint8)).save(buffer, format="JPEG",
                                                                      quality=camera.jpeg_quality)
        encoded = np.asarray(Image.open(buffer).convert("RGB"), dtype=float) / 255.0
    else:
        encoded = np.rint(encoded * 255) / 255.0  # 8-bit, like a saved photo
    return encoded


def measured_camera_lookup(stack, range_nm, camera_name="Nikon 5100 (NPL)", checker="BabelColor Average",
                           step_nm=0.25):
    """A colour lookup as a non-colorimetric camera would record the film.

    The camera's raw RGB (measured sensitivities, white-balanced on the scene
    light) is mapped to linear sRGB by the least-squares 3 × 3 matrix that
    best reproduces the checker's 24 patches under the same light; film
    colours, far more saturated than the patches, then come out shifted in
    hue and chroma, as in a real camera.

    Returns
    -------
    ColourLookup, numpy.ndarray
        The lookup (``linear_rgb`` as the camera outputs it) and the fitted matrix.
    """
    import warnings

    from .appearance import fringe_order
    from .colour import _adaptation_matrix, _colour_science, camera_kernel, CameraResponse, colour_kernel, reflectance_to_XYZ
    from .optics import reflectance_sweep
    from .thickness import ColourLookup

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        sens = _colour_science().MSDS_CAMERA_SENSITIVITIES[camera_name]
        patches = _colour_science().SDS_COLOURCHECKERS[checker]
    camera = CameraResponse(sens.wavelengths, sens.values, camera_name)
    wl = np.arange(380.0, 781.0, 5.0)
    cam = camera_kernel(camera, stack.light.source, wl)
    eye = colour_kernel(stack.light.source, "2", wl)
    refl = np.array([np.interp(wl, sd.wavelengths, sd.values) for sd in patches.values()])
    raw = reflectance_to_XYZ(refl, cam) / 100.0
    target = (reflectance_to_XYZ(refl, eye) / 100.0) @ _adaptation_matrix(eye.white_XYZ).T
    ccm, *_ = np.linalg.lstsq(raw, target, rcond=None)
    thickness = np.arange(range_nm[0], range_nm[1] + step_nm / 2, step_nm)
    R = reflectance_sweep(stack, wl, thickness).R[0]
    linear = (reflectance_to_XYZ(R, cam) / 100.0) @ ccm
    orders = fringe_order(stack, np.append(thickness, 1.0), stack.light.angle_deg)
    return ColourLookup(thickness, linear, np.floor(orders[:-1]).astype(int) + 1, float(1 / orders[-1])), ccm.T
