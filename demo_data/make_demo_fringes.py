"""Write the demo fringe photos from invented ground truth (a fictional lab's samples).

* ``soap-sodium.png`` — the demo soap film draining in its loop, seen under a
  sodium lamp (589.3 nm) through a narrow filter: a greyscale photo of dark and
  bright bands; black film (about 25 nm) at the top.
* ``oil-two-lines.png`` — the demo oil lens on water under two lines at once
  (a red 632.8 nm and a blue 488.0 nm source), recorded by a colour camera: red
  channel = the red fringes, blue channel = the blue ones.

Each photo has ``NAME.json`` (what the invented lab knows) and ``NAME-truth.npz``.
Run: ``python demo_data/make_demo_fringes.py`` (deterministic).
"""

import json
from pathlib import Path

import numpy as np
from PIL import Image

from filmcalc.colour import srgb_encode
from filmcalc.optics import reflectance_sweep
from filmcalc.stack import load_stack
from filmcalc.synthetic import draining_soap_film, oil_lens

HERE = Path(__file__).resolve().parent
SHAPE = (200, 300)


def intensity(stack, truth, wavelength_nm, peak, rng, noise=0.01):
    """Linear camera signal 0–1 under one line: R(d) at the line, scaled so the brightest fringe reads ``peak``."""
    grid = np.arange(0.0, float(truth.max()) + 1.0, 0.25)
    r = reflectance_sweep(stack, [wavelength_nm], grid).reflectance(stack.light.polarisation)[0, :, 0]
    signal = np.interp(truth, grid, r) / r.max() * peak
    return np.clip(signal + rng.normal(0, noise, truth.shape), 0, 1)


def main():
    out = HERE / "fringes"
    out.mkdir(exist_ok=True)
    rng = np.random.default_rng(7)
    soap = load_stack(HERE / "soap-film-loop.toml")
    truth = draining_soap_film(SHAPE, black_nm=25, bottom_nm=1100, seed=4)
    grey = intensity(soap, truth, 589.3, 0.85, rng)
    # Saved as a camera saves a photo: sRGB-encoded, 8 bit.
    Image.fromarray(np.rint(srgb_encode(grey) * 255).astype(np.uint8), mode="L").save(out / "soap-sodium.png",
                                                                                       optimize=True)
    np.savez_compressed(out / "soap-sodium-truth.npz", thickness_nm=truth.astype(np.float32))
    (out / "soap-sodium.json").write_text(json.dumps({
        "photo": "soap-sodium.png", "stack": "soap-film-loop.toml", "wavelengths_nm": [589.3],
        "note": "sodium lamp; black film (about 25 nm) at the top, thicker towards the bottom",
        "anchor": [150, 3, 25.0], "trend": "down", "range": [0, 1500], "line": [150, 3, 150, 196]},
        indent=1) + "\n", encoding="utf-8")

    oil = load_stack(HERE / "oil-on-water.toml")
    truth = oil_lens(SHAPE, rim_nm=60.0, centre_nm=650.0)
    rgb = np.zeros(SHAPE + (3,))
    rgb[..., 0] = intensity(oil, truth, 632.8, 0.9, rng)
    rgb[..., 2] = intensity(oil, truth, 488.0, 0.8, rng)
    Image.fromarray(np.rint(srgb_encode(rgb) * 255).astype(np.uint8)).save(out / "oil-two-lines.png", optimize=True)
    np.savez_compressed(out / "oil-two-lines-truth.npz", thickness_nm=truth.astype(np.float32))
    (out / "oil-two-lines.json").write_text(json.dumps({
        "photo": "oil-two-lines.png", "stack": "oil-on-water.toml", "wavelengths_nm": [632.8, 488.0],
        "channels": ["red", "blue"], "note": "red 632.8 nm and blue 488.0 nm lines; nothing else known",
        "range": [0, 1500], "line": [0, 100, 299, 100]}, indent=1) + "\n", encoding="utf-8")
    print(f"wrote {out}: soap-sodium.png, oil-two-lines.png")


if __name__ == "__main__":
    main()
