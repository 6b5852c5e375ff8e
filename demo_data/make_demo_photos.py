"""Make the demo photos from invented ground truth with filmcalc's forward model.

Run from the repository root: ``python demo_data/make_demo_photos.py``. It writes
``demo_data/photos/NAME.png|.jpg``, ``NAME-truth.npz`` (the invented thickness
field in nm, float32) and ``NAME.json`` (the stack, what the invented lab knows
about the sample — range, anchors, reference, trend — and the camera errors used). Every random
number is seeded, so the files are reproducible. The scenarios are invented
(a fictional lab, invented samples); they are not measurements.
"""

import json
from pathlib import Path

import numpy as np
from PIL import Image

from filmcalc.stack import load_stack
from filmcalc.synthetic import CameraSettings, draining_soap_film, edge_bead, oil_lens, render_photo, steps

HERE = Path(__file__).resolve().parent
SHAPE = (200, 300)

# name: (stack file, truth, camera, format, what the (invented) lab knows about the sample)
SCENARIOS = {
    "soap-film-draining": ("soap-film-loop.toml", draining_soap_film(SHAPE, black_nm=25, bottom_nm=1100, seed=4),
                           CameraSettings(exposure=10.0, gains=(1.04, 1.0, 0.95), noise=0.003, seed=1), "png",
                           {"note": "black film at the top", "range": [0, 1500], "anchors": [[150, 5, 25]]}),
    "oxide-coupon-steps": ("oxide-coupon.toml", steps(SHAPE, [0.0, 95.0, 210.0, 330.0, 470.0]),
                           CameraSettings(gains=(0.95, 1.0, 1.08), exposure=0.9, noise=0.002, seed=2), "png",
                           {"note": "bare silicon on the left, oxide thicker to the right", "range": [0, 1500],
                            "reference": [2, 2, 40, 197, 0], "anchors": [[10, 100, 0]], "trend": "right"}),
    "resist-edge-bead": ("resist-wafer.toml", edge_bead(SHAPE, flat_nm=620.0, bead_nm=900.0, width=0.1),
                         CameraSettings(noise=0.002, jpeg_quality=92, seed=3), "jpg",
                         {"note": "the spin recipe gives about 0.62 µm", "range": [400, 1200],
                          "anchors": [[20, 100, 620]]}),
    "oil-on-water": ("oil-on-water.toml", oil_lens(SHAPE, rim_nm=60.0, centre_nm=650.0),
                     CameraSettings(exposure=6.0, noise=0.002, seed=5), "png",
                     {"note": "thin rim in the corners", "range": [0, 1500], "anchors": [[2, 2, 60]]}),
}


def main():
    out = HERE / "photos"
    out.mkdir(exist_ok=True)
    for name, (stack_file, truth, camera, fmt, known) in SCENARIOS.items():
        stack = load_stack(HERE / stack_file)
        photo = render_photo(stack, truth, camera)
        image = Image.fromarray(np.rint(photo * 255).astype(np.uint8))
        if fmt == "jpg":
            image.save(out / f"{name}.jpg", quality=92)
        else:
            image.save(out / f"{name}.png", optimize=True)
        np.savez_compressed(out / f"{name}-truth.npz", thickness_nm=truth.astype(np.float32))
        settings = {"photo": f"{name}.{fmt}", "stack": stack_file, **known,
                    "camera": {"gains": list(camera.gains), "exposure": camera.exposure, "noise": camera.noise,
                               "jpeg_quality": camera.jpeg_quality}}
        (out / f"{name}.json").write_text(json.dumps(settings, indent=1) + "\n", encoding="utf-8")
        print(f"{name}: {fmt}, {truth.min():.0f}–{truth.max():.0f} nm ({known['note']})")


if __name__ == "__main__":
    main()
