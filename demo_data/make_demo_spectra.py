"""Write the demo reflectance spectra from invented ground truth (a fictional lab's samples).

* ``oxide-spot.csv`` — one spot on the demo oxide coupon (invented truth 742.0 nm),
  reflectance in percent, 0.3 % noise, as a small spectrometer writes it.
* ``resist-counts.csv`` — a thick resist (invented truth 2430 nm) measured as raw counts:
  sample, reference (bare silicon) and dark.
* ``wafer-map.csv`` — a 49-point map of a 150 mm oxidised wafer (invented truth: a
  100 nm oxide, thicker towards the edge and tilted), long format x_mm, y_mm,
  wavelength_nm, reflectance.

Run: ``python demo_data/make_demo_spectra.py`` (deterministic).
"""

from pathlib import Path

import numpy as np

from filmcalc.optics import stack_reflectance
from filmcalc.spectra import bare_reflectance
from filmcalc.stack import load_stack

HERE = Path(__file__).resolve().parent
WL = np.arange(400.0, 800.5, 1.0)


def wafer_points():
    """49 points: the centre, then rings of 8, 16 and 24 at 22, 44 and 66 mm (a common pattern, no source)."""
    pts = [(0.0, 0.0)]
    for radius, count in ((22.0, 8), (44.0, 16), (66.0, 24)):
        for k in range(count):
            a = 2 * np.pi * k / count
            pts.append((round(radius * np.cos(a), 2), round(radius * np.sin(a), 2)))
    return np.array(pts)


def main():
    out = HERE / "spectra"
    out.mkdir(exist_ok=True)
    rng = np.random.default_rng(2026)
    oxide = load_stack(HERE / "oxide-coupon.toml")
    r = stack_reflectance(oxide, WL, 742.0).R + rng.normal(0, 0.003, WL.size)
    lines = ["# demo: oxide coupon spot, invented truth 742.0 nm", "wavelength_nm,reflectance_pct"]
    lines += [f"{w:.1f},{100 * v:.3f}" for w, v in zip(WL, r)]
    (out / "oxide-spot.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")

    resist = load_stack(HERE / "resist-wafer.toml")
    r = stack_reflectance(resist, WL, 2430.0).R
    dark = 180.0 + rng.normal(0, 3, WL.size)
    lamp = 30000.0 * np.exp(-((WL - 600.0) / 260.0) ** 2)  # an invented lamp × detector response
    reference = dark + lamp * bare_reflectance("silicon", WL) + rng.normal(0, 20, WL.size)
    sample = dark + lamp * r + rng.normal(0, 20, WL.size)
    lines = ["# demo: thick resist on silicon, invented truth 2430 nm; reference = bare silicon",
             "wavelength_nm,sample,reference,dark"]
    lines += [f"{w:.1f},{s:.1f},{f:.1f},{d:.1f}" for w, s, f, d in zip(WL, sample, reference, dark)]
    (out / "resist-counts.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")

    pts = wafer_points()
    x, y = pts[:, 0], pts[:, 1]
    truth = 100.0 + 0.0009 * (x**2 + y**2) + 0.02 * x - 0.01 * y
    lines = ["# demo: 150 mm wafer, invented truth 100 nm oxide thicker at the edge", "x_mm,y_mm,wavelength_nm,reflectance"]
    for xi, yi, t in zip(x, y, truth):
        r = stack_reflectance(oxide, WL[::2], t).R + rng.normal(0, 0.002, WL[::2].size)
        lines += [f"{xi:g},{yi:g},{w:.1f},{v:.5f}" for w, v in zip(WL[::2], r)]
    (out / "wafer-map.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    np.savez_compressed(out / "wafer-map-truth.npz", x_mm=x, y_mm=y, thickness_nm=truth)
    print(f"wrote {out}: oxide-spot.csv, resist-counts.csv, wafer-map.csv ({len(pts)} points)")


if __name__ == "__main__":
    main()
