"""Speed of the thickness sweep against two reference implementations, in one run.

Grid: 81 wavelengths (380–780 nm) × 61 angles (0–60°) × 2001 film thicknesses
(0–2000 nm) × 2 polarisations, for
  * a three-medium stack: air / SiO₂ film / Si, and
  * a five-layer stack with the film in the middle:
    air / MgF₂ 90 nm / TiO₂ 60 nm / SiO₂ film / Si₃N₄ 80 nm / Al₂O₃ 50 nm / Si.

Baselines, timed in the same process on a subsample and scaled to the grid:
  * colour-science ``colour.phenomena.multilayer_tmm`` (vectorised over
    wavelength and angle, one call per thickness);
  * Byrnes' ``tmm.coh_tmm`` (one call per wavelength, angle, thickness, polarisation).

Prints evaluations per second (one evaluation = one R at one λ, θ, d and
polarisation), the speed-up ratios, and peak memory of the filmcalc sweep.

Run: ``make bench`` or ``python benchmarks/bench_sweep.py [--quick]``.
"""

from __future__ import annotations

import argparse
import resource
import time
import tracemalloc
import warnings

import numpy as np
import tmm

from filmcalc.materials import built_in_material
from filmcalc.optics import thickness_sweep

with warnings.catch_warnings():
    warnings.simplefilter("ignore")
    import colour

WL = np.linspace(380.0, 780.0, 81)
ANGLES = np.linspace(0.0, 60.0, 61)
THICK = np.linspace(0.0, 2000.0, 2001)

STACKS = {
    "3 media (air/SiO2/Si)": (["air", "fused-silica", "silicon"], [0.0], 0),
    "5 layers, film in the middle": (
        ["air", "magnesium-fluoride", "titanium-dioxide", "fused-silica", "silicon-nitride", "alumina",
         "silicon"], [90.0, 60.0, 0.0, 80.0, 50.0], 2),
}


def indices(names, wl):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return [built_in_material(name).index(wl) for name in names]


def best_of(fn, repeats):
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return min(times)


def run_filmcalc(n, d, film):
    for pol in "sp":
        thickness_sweep(n, d, [True] * len(d), film, THICK, WL, ANGLES, pol, transmittance=False)


def run_colour(n, d, film, thicknesses):
    stack_n = np.array(n)  # (media, wavelengths)
    for t in thicknesses:
        dd = list(d)
        dd[film] = t
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            colour.phenomena.multilayer_tmm(stack_n, dd, WL, ANGLES)


def run_tmm(n, d, film, samples):
    for iw, ia, it in samples:
        dd = [np.inf] + list(d) + [np.inf]
        dd[film + 1] = THICK[it]
        for pol in "sp":
            tmm.coh_tmm(pol, [x[iw] for x in n], dd, np.deg2rad(ANGLES[ia]), WL[iw])


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="one repeat, smaller baseline subsamples")
    args = parser.parse_args()
    repeats = 1 if args.quick else 3
    total = WL.size * ANGLES.size * THICK.size * 2
    rng = np.random.default_rng(0)
    print(f"grid: {WL.size} wavelengths x {ANGLES.size} angles x {THICK.size} thicknesses x 2 polarisations"
          f" = {total:,} evaluations")
    for label, (names, d, film) in STACKS.items():
        n = indices(names, WL)
        run_filmcalc(n, d, film)  # warm-up
        t_fc = best_of(lambda: run_filmcalc(n, d, film), repeats)
        tracemalloc.start()
        run_filmcalc(n, d, film)
        peak = tracemalloc.get_traced_memory()[1]
        tracemalloc.stop()

        sub_t = THICK[:: (20 if args.quick else 10)]
        t_cs = best_of(lambda: run_colour(n, d, film, sub_t), 1)
        rate_cs = sub_t.size * WL.size * ANGLES.size * 2 / t_cs

        samples = [(rng.integers(WL.size), rng.integers(ANGLES.size), rng.integers(THICK.size))
                   for _ in range(150 if args.quick else 400)]
        t_tmm = best_of(lambda: run_tmm(n, d, film, samples), 1)
        rate_tmm = len(samples) * 2 / t_tmm

        rate_fc = total / t_fc
        print(f"\n{label}")
        print(f"  filmcalc thickness_sweep : {t_fc:8.3f} s for the full grid  {rate_fc:14,.0f} eval/s")
        print(f"  colour-science (scaled)  : {total / rate_cs:8.1f} s  ({sub_t.size} thicknesses timed)"
              f"  {rate_cs:14,.0f} eval/s")
        print(f"  tmm.coh_tmm (scaled)     : {total / rate_tmm:8.0f} s  ({len(samples)} points timed)"
              f"  {rate_tmm:14,.0f} eval/s")
        print(f"  speed-up vs colour-science: {rate_fc / rate_cs:7.1f}x   vs tmm: {rate_fc / rate_tmm:9.0f}x")
        print(f"  filmcalc peak traced memory (numpy arrays, output included): {peak / 2**20:7.1f} MiB")
    print(f"\nprocess peak resident memory: {resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024:.0f} MiB")


if __name__ == "__main__":
    main()
