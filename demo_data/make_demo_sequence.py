"""Write the demo frame sequence from invented ground truth (a fictional lab's recording).

* ``sequences/soap-loop-drainage.tif`` — the demo soap film in its wire loop
  (Hollow Bench fluid lab, loop 3), filmed at 40 frames per second for 1 s
  under the daylight lamp: the film thins as h = A·(t − t₀)^−α with the
  invented α = 0.5, t₀ = −0.6 s, A = 520 nm·s^0.5, and ruptures at 0.81 s (a
  hole opens over most of the loop; the frames after show the dark background).
  A multi-page TIFF (deflate-compressed, 8-bit RGB), one page per frame.

``soap-loop-drainage.json`` holds what the invented lab knows (frame rate,
pixel size, where to look) and, under ``truth``, the invented law and rupture
time (the thickness of every frame is :func:`filmcalc.synthetic.thinning_film`
of its time). Run: ``python demo_data/make_demo_sequence.py``
(deterministic).
"""

import json
from pathlib import Path

import numpy as np
import tifffile

from filmcalc.stack import load_stack
from filmcalc.synthetic import CameraSettings, render_sequence
from filmcalc.thickness import build_lookup

HERE = Path(__file__).resolve().parent
SHAPE = (150, 200)
FPS = 40.0
FRAMES = 40
LAW = dict(amplitude_nm=520.0, t0_s=-0.6, alpha=0.5)
RUPTURE_S = 0.81


def main():
    out = HERE / "sequences"
    out.mkdir(exist_ok=True)
    stack = load_stack(HERE / "soap-film-loop.toml")
    lookup = build_lookup(stack, (0.0, 1200.0), 0.25)
    times = np.arange(FRAMES) / FPS
    frames = [np.rint(frame * 255).astype(np.uint8) for _, frame, _ in
              render_sequence(stack, SHAPE, times, RUPTURE_S, CameraSettings(noise=0.003, seed=11), lookup=lookup,
                              **LAW)]
    tifffile.imwrite(out / "soap-loop-drainage.tif", np.stack(frames), photometric="rgb", compression="zlib")
    (out / "soap-loop-drainage.json").write_text(json.dumps({
        "recording": "soap-loop-drainage.tif", "stack": "soap-film-loop.toml", "fps": FPS, "pixel_size_um": 50.0,
        "range": [0, 1300], "point": [100, 75], "line": [100, 0, 100, 149],
        "note": "loop 3 filmed at 40 frames/s; the film broke within the second",
        "truth": {**LAW, "rupture_s": RUPTURE_S}}, indent=1) + "\n",
        encoding="utf-8")


if __name__ == "__main__":
    main()
