"""Spectrum fitting speed: filmcalc against a plain multi-start least-squares fit, same run.

* One spectrum (401 wavelengths, 400–800 nm), one layer (SiO₂ on Si), thickness
  searched over 0–3000 nm: time per fit (goal: under 50 ms).
* A map of 10,000 such spectra: spectra per second (goal: at least 500).
* Baseline: ``scipy.optimize.least_squares`` started from every 100 nm over
  0–3000 nm (31 starts, enough to land in the right fringe order), each
  residual evaluated by filmcalc's general transfer-matrix path
  (``stack_reflectance``); timed on a subsample and scaled to the map.

Both fits are checked against the invented truth. Run:
``python benchmarks/bench_spectra.py [--spectra N]``.
"""

from __future__ import annotations

import argparse
import resource
import time

import numpy as np
from scipy.optimize import least_squares

from filmcalc.optics import reflectance_sweep, stack_reflectance
from filmcalc.spectra import Spectrum, SpectrumMap, fit_map, fit_spectrum
from filmcalc.stack import loads_stack

OXIDE = loads_stack('[ambient]\nmaterial = "air"\n[[layers]]\nmaterial = "fused-silica"\nthickness_nm = 100\n'
                    'unknown = true\n[substrate]\nmaterial = "silicon"\n')
WL = np.linspace(400.0, 800.0, 401)


def multistart(y):
    best = None
    for start in np.arange(0.0, 3001.0, 100.0):
        r = least_squares(lambda p: stack_reflectance(OXIDE, WL, p[0]).R - y, [start], bounds=([0.0], [3000.0]))
        if best is None or r.cost < best.cost:
            best = r
    return float(best.x[0])


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--spectra", type=int, default=10000, help="spectra in the map (default 10000)")
    args = parser.parse_args()
    rng = np.random.default_rng(0)
    truth = rng.uniform(20, 2980, args.spectra)
    # The map's spectra: from the fast sweep on a 0.01 nm grid, interpolated (far finer than any fit error).
    grid = np.arange(0.0, 3000.01, 0.01)
    t0 = time.perf_counter()
    idx = np.rint(truth / 0.01).astype(int)
    table = reflectance_sweep(OXIDE, WL, grid[np.unique(idx)]).R[0]
    lookup = {i: k for k, i in enumerate(np.unique(idx))}
    spectra = table[[lookup[i] for i in idx]] + rng.normal(0, 0.002, (args.spectra, WL.size))
    print(f"made {args.spectra} synthetic spectra in {time.perf_counter() - t0:.1f} s")

    runs = []
    for k in range(20):
        t0 = time.perf_counter()
        fit = fit_spectrum(Spectrum(WL, spectra[k]), OXIDE, (0, 3000))
        runs.append(time.perf_counter() - t0)
        assert abs(fit.thickness_nm - truth[k]) < 2, (fit.thickness_nm, truth[k])
    print(f"single spectrum, 0–3000 nm: median {1000 * np.median(runs):.1f} ms per fit (goal < 50 ms)")

    t0 = time.perf_counter()
    result = fit_map(SpectrumMap(WL, spectra, np.arange(args.spectra), np.zeros(args.spectra)), OXIDE, (0, 3000))
    seconds = time.perf_counter() - t0
    err = result.thickness_nm - truth
    print(f"map of {args.spectra} spectra: {seconds:.2f} s = {args.spectra / seconds:.0f} spectra/s (goal ≥ 500); "
          f"errors: median {np.median(np.abs(err)):.3f} nm, worst {np.max(np.abs(err)):.2f} nm, "
          f"{int(np.sum(np.abs(err) > 5))} off by more than 5 nm")

    sub = 5
    t0 = time.perf_counter()
    base = [multistart(spectra[k]) for k in range(sub)]
    per = (time.perf_counter() - t0) / sub
    print(f"baseline (least_squares, 31 starts, general transfer-matrix path): {per:.2f} s per spectrum = "
          f"{1 / per:.2f} spectra/s, errors {np.round(np.array(base) - truth[:sub], 3).tolist()} nm")
    print(f"speed-up: single fit {per / np.median(runs):.0f}×, map {per * args.spectra / seconds:.0f}×")
    print(f"peak resident memory {resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024:.0f} MiB")


if __name__ == "__main__":
    main()
