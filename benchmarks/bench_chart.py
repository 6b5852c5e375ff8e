"""Time to build the default colour chart, cold and cached, against a colour-science path.

The chart: 2001 thicknesses (0–2000 nm) × 61 angles (0–60°), 81 wavelengths
(380–780 nm, 5 nm), unpolarised, D65, for the demo oxide-on-silicon stack,
with NA 0 and NA 0.3.

* colours: ``film_colours`` (optics + colorimetry), the part both paths share;
* cold chart: the colours plus the plotly figure and its JSON;
* cached redraw: the figure and JSON from colours already computed (what the
  dashboard does when only the view changes; the colours are cached by input);
* baseline, timed in the same run on every 50th thickness and scaled: colour-
  science's ``multilayer_tmm`` for the reflectance, one call per thickness over
  all wavelengths and angles (for NA 0.3 over the same cone quadrature nodes
  filmcalc uses), and ``colour.msds_to_XYZ`` (the array form of ``sd_to_XYZ``,
  ASTM E308 integration) for the colours.

Run: ``python benchmarks/bench_chart.py``.
"""

from __future__ import annotations

import time
import warnings
from pathlib import Path

import numpy as np

from filmcalc.appearance import film_colours
from filmcalc.charts import thickness_angle_figure
from filmcalc.optics import cone_angles, stack_indices
from filmcalc.stack import load_stack

with warnings.catch_warnings():
    warnings.simplefilter("ignore")
    import colour

STACK = load_stack(Path(__file__).resolve().parent.parent / "demo_data" / "oxide-coupon.toml").with_light(source="D65")
THICK = np.linspace(0.0, 2000.0, 2001)
ANGLES = np.linspace(0.0, 60.0, 61)
WL = np.arange(380.0, 781.0, 5.0)


def filmcalc_colours(na):
    return film_colours(STACK, THICK, ANGLES, numerical_aperture=na)


def filmcalc_redraw(c):
    thickness_angle_figure(c, STACK).to_json()


def colour_science(na, thicknesses):
    n, _ = stack_indices(STACK, WL)
    media = np.array(n)
    cmfs = colour.MSDS_CMFS["CIE 1931 2 Degree Standard Observer"]
    illuminant = colour.SDS_ILLUMINANTS["D65"]
    shape = colour.SpectralShape(380, 780, 5)
    nodes = [cone_angles(a, na, float(n[0].real.min())) for a in ANGLES]
    all_angles = np.concatenate([a for a, _ in nodes])
    for d in thicknesses:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            R, _ = colour.phenomena.multilayer_tmm(media, [d], WL, all_angles)  # (W, angles, 1, 2)
            R = R[:, :, 0, :].mean(axis=-1).T  # unpolarised, (angles, W)
            XYZ = colour.msds_to_XYZ(R, cmfs, illuminant, method="Integration", shape=shape)
        start = 0
        for a, w in nodes:  # cone average in XYZ (linear)
            _ = w @ XYZ[start:start + a.size]
            start += a.size


def best(fn, repeats=3):
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t0)
    return min(times), out


def main():
    print(f"chart: {THICK.size} thicknesses x {ANGLES.size} angles x {WL.size} wavelengths, unpolarised, D65")
    for na in (0.0, 0.3):
        film_colours(STACK, THICK[:11], ANGLES[:2], numerical_aperture=na)  # warm-up (imports, caches)
        t_colours, c = best(lambda: filmcalc_colours(na))
        t_redraw, _ = best(lambda: filmcalc_redraw(c))
        t_cold = t_colours + t_redraw
        sub = THICK[::50]
        t_sub, _ = best(lambda: colour_science(na, sub), 1)
        t_cs = t_sub * THICK.size / sub.size
        print(f"\nNA {na:g}")
        print(f"  filmcalc colours (optics + colorimetry): {t_colours:7.3f} s")
        print(f"  filmcalc figure and JSON = cached redraw: {t_redraw:7.3f} s")
        print(f"  filmcalc cold chart (both)              : {t_cold:7.3f} s")
        print(f"  colour-science colours (scaled from {sub.size} thicknesses): {t_cs:7.1f} s")
        print(f"  speed-up on the colours: {t_cs / t_colours:6.1f}x   (cold chart incl. figure: {t_cs / t_cold:.1f}x)")


if __name__ == "__main__":
    main()
