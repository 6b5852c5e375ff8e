"""Make the demo photos from invented ground truth with filmcalc's forward model.

Run from the repository root: ``python demo_data/make_demo_photos.py``. It writes
``demo_data/photos/NAME.png|.jpg`` and ``NAME-truth.npz`` (the invented
thickness field in nm, float32, with the camera settings used). Every random
number is seeded, so the files are reproducible. The scenarios are invented
(a fictional lab, invented samples); they are not measurements.
"""

from pathlib import Path

import numpy as np
from PIL import Image

from filmcalc.stack import load_stack
from filmcalc.synthetic import CameraSettings, draining_soap_film, edge_bead, oil_lens, render_photo, steps

HERE = Path(__file__).resolve().parent
SHAPE = (200, 300)

SCENARIOS = {
    # name: (stack file, truth, camera, format, what a user knows)
    "soap-film-draining": ("soap-film-loop.toml", draining_soap_film(SHAPE, black_nm=25, bottom_nm=1100, seed=4),
                           CameraSettings(exposure=10.0, gains=(1.04, 1.0, 0.95), noise=0.003, seed=1), "png",
                           "black film at the top: --anchor 150,5,25"),
    "oxide-coupon-steps": ("oxide-coupon.toml", steps(SHAPE, [0.0, 95.0, 210.0, 330.0, 470.0]),
                           CameraSettings(gains=(0.95, 1.0, 1.08), exposure=0.9, noise=0.002, seed=2), "png",
                           "bare silicon on the left: --reference 2,2,40,197,0 --anchor 10,100,0 --trend right"),
    "resist-edge-bead": ("resist-wafer.toml", edge_bead(SHAPE, flat_nm=1050.0, bead_nm=1350.0, width=0.1),
                         CameraSettings(noise=0.002, jpeg_quality=92, seed=3), "jpg",
                         "spin recipe gives about 1.05 µm: --range 950:1450 --anchor 20,100,1050"),
    "oil-on-water": ("oil-on-water.toml", oil_lens(SHAPE, rim_nm=60.0, centre_nm=650.0),
                     CameraSettings(exposure=6.0, noise=0.002, seed=5), "png",
                     "thin rim: --anchor 2,2,60"),
}


def main():
    out = HERE / "photos"
    out.mkdir(exist_ok=True)
    for name, (stack_file, truth, camera, fmt, hint) in SCENARIOS.items():
        stack = load_stack(HERE / stack_file)
        photo = render_photo(stack, truth, camera)
        image = Image.fromarray(np.rint(photo * 255).astype(np.uint8))
        if fmt == "jpg":
            image.save(out / f"{name}.jpg", quality=92)
        else:
            image.save(out / f"{name}.png", optimize=True)
        np.savez_compressed(out / f"{name}-truth.npz", thickness_nm=truth.astype(np.float32),
                            stack=stack_file, gains=np.asarray(camera.gains), exposure=camera.exposure,
                            noise=camera.noise, hint=hint)
        print(f"{name}: {fmt}, {truth.min():.0f}–{truth.max():.0f} nm ({hint})")


if __name__ == "__main__":
    main()
