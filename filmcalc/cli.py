"""The ``filmcalc`` command line.

Sub-commands
------------
spectrum STACK.toml --thickness NM [--angle DEG] [--polarisation s|p|unpolarised]
         [--wavelengths A:B:STEP] [--json]
    Reflectance spectrum of the stack: CSV ``wavelength_nm,R_s,R_p,R``
    (fractions 0–1), or JSON.

colour STACK.toml --thickness NM [--angle DEG] [--exposure X] [--observer 2|10] [--json]
    The film's colour: hex, sRGB, CIELAB and XYZ (Y = 100 for a perfect white).

chart STACK.toml --from NM --to NM --step NM [--angles A:B:STEP] --out FILE.png|.pdf [--csv FILE]
      [--unit nm|um|A] [--paper A4|Letter] [--exposure X] [--observer 2|10]
    A printable bench chart of swatches (one angle), or with --angles a
    thickness × angle colour chart; --csv writes one row per thickness and angle.

match STACK.toml --colour "#RRGGBB" [--range MIN:MAX] [--tolerance DE] [--angle DEG] [--json]
    Every thickness in the range whose colour is within the ΔE₀₀ tolerance.

map PHOTO STACK.toml --out FILE(.npy|.tiff|.csv|.png) [--range MIN:MAX] [--anchor X,Y,NM]...
    [--reference X0,Y0,X1,Y1,NM] [--trend right|left|down|up] [--pixel-size UM] [--json]
    Photo of interference colours → thickness map (X = column, Y = row from the
    top-left, in pixels; the reference rectangle's corners are inclusive). A
    provenance record FILE.json is written beside the map.

fit SPECTRUM.csv STACK.toml [--range MIN:MAX] [--fit thickness|thickness,cauchy|thickness,layer:K]
    [--window A:B] [--baseline none|offset|scale+offset] [--scale auto|percent|fraction]
    [--reference MATERIAL] [--json]
    Thickness of the unknown film from a reflectance spectrum (CSV/TSV of
    wavelength and reflectance, or sample/reference/dark counts).

fit-map INPUT STACK.toml --out FILE.csv|.png [--positions CSV] [--range MIN:MAX] [--window A:B]
        [--baseline ...] [--json]
    Every spectrum of a mapping run (a long CSV x, y, wavelength, reflectance, or
    a folder of spectra with positions.csv: file, x, y) → thickness per point and
    the uniformity figures.

fringes PHOTO STACK.toml --wavelength NM [--wavelength NM] [--channel red|green|blue|grey]...
        [--anchor X,Y,NM] [--trend right|left|down|up] [--line X0,Y0,X1,Y1 [--direction thicker|thinner]]
        [--range MIN:MAX] --out FILE [--json]
    Monochromatic (or two-wavelength) fringes → thickness. With --line, the
    thickness along the line by fringe counting from the anchor's thickness at
    the line's start (--out .csv or .json); otherwise a map (--out .npy, .tiff,
    .csv or .png, with a .json record beside it).

sequence INPUT STACK.toml --out FOLDER [--frames A:B:STEP] [--fps N] [--anchor X,Y,NM]...
         [--range MIN:MAX] [--point X,Y]... [--region X0,Y0,X1,Y1]... [--line X0,Y0,X1,Y1]
         [--pixel-size UM] [--chunk K] [--scheduler serial|local|tcp://HOST:PORT] [--workers N]
         [--export tiff|mp4|gif]... [--json]
    A recording (folder of frames, multi-page TIFF or video) → a thickness cube
    (FOLDER/cube.zarr), the series over time (FOLDER/series.csv), the thinning
    law and the rupture; --json prints the summary, with the frames skipped and
    why. Anchors are pixels of the first frame mapped. The default scheduler is
    a Dask cluster of local worker processes; tcp://HOST:PORT uses a running one.

Saving runs
-----------
Every analysis command above takes ``--save [--sample NAME] [--tag TAG]...
[--note TEXT] [--saved-by NAME] [--data-dir PATH] [--database-url URL]``:
the run (inputs, settings, outputs, summary numbers, provenance) goes into
the run store (:mod:`filmcalc.runs`) and its id is printed to stderr (and
added to --json output as ``saved_run``).

runs list [--sample NAME] [--tag TAG]... [--kind KIND] [--saved-by NAME] [--since DATE] [--until DATE]
          [--search TEXT] [--limit N (default 100, 0: all)] [--json]
runs show ID [--json]
runs export ID --out FILE.zip
runs import FILE.zip [--new-id] [--json]
runs delete ID
runs check [--delete-orphans] [--quick] [--json]
    Exit status 0 when the store is sound, 1 when problems were found.
runs history (--sample NAME | --tag TAG)... [--kind KIND] [--key KEY] [--baseline N]
             [--sigma moving-range|sample] [--json]
    A summary number per run over time with mean ± 3σ control limits;
    without --key, the numbers available.

All ``runs`` commands take --data-dir and --database-url (defaults: the
FILMCALC_DATA and FILMCALC_DATABASE_URL environment variables, else a
per-user folder, see :func:`filmcalc.runs.default_data_dir`).

Errors a user can cause print one line to stderr and exit with status 2;
material warnings go to stderr and do not change the output.
"""

from __future__ import annotations

import argparse
import csv
import io
import json
import os
import sys
from pathlib import Path

import numpy as np

from . import __version__
from .errors import FilmcalcError
from .optics import stack_reflectance
from .stack import POLARISATIONS, load_stack

# The colour commands import colour-science (slow to load), so they import lazily.


def parse_range(text, what, count=3):
    """'A:B' or 'A:B:STEP' → floats, with a clear error."""
    parts = text.split(":")
    try:
        values = [float(p) for p in parts]
    except ValueError:
        values = []
    if len(values) != count:
        form = "A:B:STEP" if count == 3 else "A:B"
        raise FilmcalcError(f"{what} must be written {form} (got {text!r}).")
    if not all(np.isfinite(values)):
        raise FilmcalcError(f"{what}: every number must be finite (got {text!r}).")
    return values


def wavelength_grid(text):
    """'380:780:5' → array of wavelengths, nm (both ends included)."""
    lo, hi, step = parse_range(text, "--wavelengths")
    if not (0 < lo < hi and step > 0):
        raise FilmcalcError(f"--wavelengths needs 0 < A < B and STEP > 0 (got {text!r}).")
    if (hi - lo) / step > 100_000:
        raise FilmcalcError(f"--wavelengths {text!r} gives over 100 000 wavelengths; use a larger STEP.")
    return np.arange(lo, hi + step / 2, step)


def _spectrum(args):
    stack = load_stack(args.stack)
    if stack.film_index is None and args.thickness is not None:
        raise FilmcalcError(f"{args.stack}: no layer has unknown = true, so --thickness has nothing to set.")
    wl = wavelength_grid(args.wavelengths)
    result = stack_reflectance(stack, wl, args.thickness, args.angle)
    for w in result.warnings:
        print(f"warning: {w}", file=sys.stderr)
    pol = args.polarisation
    angle = stack.light.angle_deg if args.angle is None else args.angle
    reflectance = np.asarray(result.reflectance(pol), float)
    saved = _save_run(args, "spectrum", inputs={"stack": args.stack}, outputs={
        "wavelength_nm.npy": wl, "R_s.npy": np.asarray(result.R_s), "R_p.npy": np.asarray(result.R_p),
        "R.npy": reflectance, "T.npy": np.asarray(result.T)}, summary={
        "stack": stack.name, "film_thickness_nm": args.thickness, "angle_deg": angle, "polarisation": pol,
        "R_mean": float(reflectance.mean()), "R_min": float(reflectance.min()), "R_max": float(reflectance.max()),
        "wavelength_of_min_R_nm": float(wl[int(np.argmin(reflectance))])})
    if args.json:
        json.dump({
            "stack": stack.name, "film_thickness_nm": args.thickness,
            "angle_deg": angle,
            "numerical_aperture": stack.light.numerical_aperture, "polarisation": pol,
            "wavelength_nm": wl.tolist(), "R_s": result.R_s.tolist(), "R_p": result.R_p.tolist(),
            "R": result.reflectance(pol).tolist(), "T": result.T.tolist(),
            "warnings": result.warnings, "filmcalc_version": __version__, **_saved_key(saved),
        }, sys.stdout, indent=1)
        print()
        return
    print("wavelength_nm,R_s,R_p,R")
    for row in zip(wl, result.R_s, result.R_p, result.reflectance(pol)):
        print(f"{row[0]:g},{row[1]:.8f},{row[2]:.8f},{row[3]:.8f}")


def _warn(warnings):
    for w in warnings:
        print(f"warning: {w}", file=sys.stderr)


def _film_stack(path):
    stack = load_stack(path)
    if stack.film_index is None:
        raise FilmcalcError(f"{path}: no layer has unknown = true; mark the film to vary.")
    return stack


def _colour(args):
    from .appearance import film_colours

    stack = _film_stack(args.stack)
    if args.thickness < 0:
        raise FilmcalcError("--thickness must be ≥ 0 nm.")
    c = film_colours(stack, [args.thickness], None if args.angle is None else [args.angle],
                     observer=args.observer, exposure=args.exposure)
    _warn(c.warnings)
    result = {"thickness_nm": args.thickness, "angle_deg": float(c.angle_deg[0]), "hex": str(c.hex()[0, 0]),
              "sRGB": [round(float(v), 6) for v in c.srgb[0, 0]],
              "CIELAB": [round(float(v), 4) for v in c.Lab[0, 0]],
              "XYZ": [round(float(v), 5) for v in c.XYZ[0, 0]],
              "out_of_gamut": bool(c.out_of_gamut[0, 0]), "light": c.source, "observer": c.observer,
              "exposure": c.exposure, "polarisation": c.polarisation}
    L, a, b = result["CIELAB"]
    saved = _save_run(args, "colour", inputs={"stack": args.stack},
                      summary={"stack": stack.name, **result, "L_star": L, "a_star": a, "b_star": b})
    if args.json:
        print(json.dumps({**result, **_saved_key(saved)}, indent=1))
        return
    L, a, b = result["CIELAB"]
    X, Y, Z = result["XYZ"]
    print(f"{result['hex']}  sRGB {', '.join(f'{v:.4f}' for v in result['sRGB'])}"
          f"{'  (out of gamut, clipped)' if result['out_of_gamut'] else ''}")
    print(f"CIELAB L* {L:.2f}  a* {a:.2f}  b* {b:.2f}   XYZ {X:.3f} {Y:.3f} {Z:.3f}")
    print(f"({stack.name}; {args.thickness:g} nm at {result['angle_deg']:g}°; light {c.source}, "
          f"{c.observer}° observer, exposure {c.exposure:g}×)")


def _thickness_grid(start, stop, step):
    if not (0 <= start < stop and step > 0):
        raise FilmcalcError("Thickness range needs 0 ≤ --from < --to and --step > 0.")
    count = int(np.floor((stop - start) / step + 1e-9)) + 1
    if count > 200001:
        raise FilmcalcError("That range and step give over 200 000 thicknesses; use a larger --step.")
    return start + step * np.arange(count)


def _chart(args):
    from .appearance import film_colours
    from .charts import bench_chart, colour_table, save_bench_chart, thickness_angle_chart_image

    stack = _film_stack(args.stack)
    dz = _thickness_grid(args.from_nm, args.to_nm, args.step)
    if args.angles:
        lo, hi, step = parse_range(args.angles, "--angles")
        if not (0 <= lo <= hi < 90 and step > 0):
            raise FilmcalcError("--angles needs 0 ≤ A ≤ B < 90 and STEP > 0.")
        angles = np.arange(lo, hi + step / 2, step)
    else:
        angles = None
    c = film_colours(stack, dz, angles, observer=args.observer, exposure=args.exposure)
    _warn(c.warnings)
    if args.angles:
        fig = thickness_angle_chart_image(c, stack, args.unit, args.paper)
    else:
        fig = bench_chart(c, stack, args.unit, args.paper)
    save_bench_chart(fig, args.out)
    rows = colour_table(c)
    if args.csv:
        with open(args.csv, "w", newline="", encoding="utf-8") as fh:
            writer = csv.DictWriter(fh, fieldnames=list(rows[0]))
            writer.writeheader()
            writer.writerows(rows)
    print(f"wrote {args.out}" + (f" and {args.csv}" if args.csv else ""), file=sys.stderr)
    if args.save:
        table = io.StringIO(newline="")
        writer = csv.DictWriter(table, fieldnames=list(rows[0]))
        writer.writeheader()
        writer.writerows(rows)
        _save_run(args, "chart", inputs={"stack": args.stack}, outputs={
            f"chart{Path(args.out).suffix.lower()}": Path(args.out), "colours.csv": table.getvalue(),
            "thickness_nm.npy": c.thickness_nm, "angle_deg.npy": c.angle_deg, "srgb.npy": c.srgb,
            "Lab.npy": c.Lab, "XYZ.npy": c.XYZ}, summary={
            "stack": stack.name, "from_nm": float(dz[0]), "to_nm": float(dz[-1]), "step_nm": args.step,
            "thicknesses": int(dz.size), "angles": int(np.size(c.angle_deg)), "light": c.source,
            "observer": c.observer, "exposure": c.exposure,
            "out_of_gamut_fraction": float(np.mean(c.out_of_gamut))})


def _match(args):
    from .appearance import film_colours, match_colour
    from .colour import parse_colour

    stack = _film_stack(args.stack)
    lo, hi = parse_range(args.range, "--range", 2)
    dz = _thickness_grid(lo, hi, args.resolution)
    c = film_colours(stack, dz, None if args.angle is None else [args.angle], observer=args.observer,
                     exposure=args.exposure)
    _warn(c.warnings)
    target = parse_colour(args.colour, c.white_XYZ)
    found = match_colour(target, c, args.tolerance, stack)
    lab = [round(float(v), 3) for v in target]
    saved = _save_run(args, "match", inputs={"stack": args.stack},
                      outputs={"candidates.json": json.dumps(found, indent=1, default=_json_default)},
                      summary={"stack": stack.name, "colour": args.colour, "CIELAB": lab, "tolerance": args.tolerance,
                               "range_nm": [lo, hi], "angle_deg": float(c.angle_deg[0]), "candidates": len(found),
                               "best_thickness_nm": found[0]["thickness_nm"] if found else None,
                               "best_delta_E": found[0]["delta_E"] if found else None})
    if args.json:
        print(json.dumps({"colour": args.colour, "CIELAB": lab,
                          "tolerance": args.tolerance, "range_nm": [lo, hi], "angle_deg": float(c.angle_deg[0]),
                          "candidates": found, **_saved_key(saved)}, indent=1))
        return
    if not found:
        print(f"No thickness in {lo:g}–{hi:g} nm comes within ΔE00 {args.tolerance:g} of {args.colour}; "
              "widen --range or --tolerance, or check the light and exposure.")
        return
    print("thickness_nm,delta_E00,order,from_nm,to_nm,hex")
    for cand in found:
        print(f"{cand['thickness_nm']:g},{cand['delta_E']:.2f},{cand['order']},{cand['from_nm']:g},"
              f"{cand['to_nm']:g},{cand['hex']}")


def _numbers(text, count, what):
    try:
        values = [float(v) for v in text.split(",")]
    except ValueError:
        values = []
    if len(values) != count:
        raise FilmcalcError(f"{what} needs {count} comma-separated numbers (got {text!r}).")
    if not all(np.isfinite(values)) or max(abs(v) for v in values) > 1e9:
        raise FilmcalcError(f"{what}: every number must be finite and below 10⁹ (got {text!r}).")
    return values


def _map(args):
    import hashlib
    import time
    from pathlib import Path

    from . import io as fio
    from .thickness import FLAGS, thickness_map

    started = time.perf_counter()
    stack = _film_stack(args.stack)
    photo = fio.load_photo(args.photo)
    if photo.greyscale:
        raise FilmcalcError(f"{photo.name} is a greyscale image: colour cannot tell thickness. Use the "
                            "monochromatic fringe analysis for photos under line light.")
    lo, hi = parse_range(args.range, "--range", 2)
    anchors = []
    for text in args.anchor or []:
        x, y, t = _numbers(text, 3, "--anchor X,Y,NM")
        anchors.append((int(x), int(y), t))
    reference = None
    if args.reference:
        x0, y0, x1, y1, t = _numbers(args.reference, 5, "--reference X0,Y0,X1,Y1,NM")
        reference = (int(x0), int(y0), int(x1), int(y1), t)
    if args.pixel_size is not None and args.pixel_size <= 0:
        raise FilmcalcError("--pixel-size must be > 0 µm.")
    out = Path(args.out)
    suffix = out.suffix.lower()
    if suffix not in (".npy", ".tif", ".tiff", ".csv", ".png"):
        raise FilmcalcError("--out must end in .npy, .tif, .tiff, .csv or .png.")

    def progress(fraction, message):
        if not args.json:
            print(f"\r[{'#' * int(20 * fraction):<20}] {message:<40}", end="", file=sys.stderr, flush=True)

    result = thickness_map(photo.rgb, stack, (lo, hi), anchors=anchors, reference=reference, trend=args.trend,
                           pixel_size_um=args.pixel_size, progress=progress)
    if not args.json:
        print(file=sys.stderr)
    _warn(result.warnings)
    if suffix == ".npy":
        fio.save_map_npy(out, result.thickness_nm)
    elif suffix in (".tif", ".tiff"):
        fio.save_map_tiff(out, result.thickness_nm, args.pixel_size)
    elif suffix == ".csv":
        fio.save_map_csv(out, result.thickness_nm, result.sigma_nm, result.flags, result.residual_dE)
    else:
        fio.save_map_png(out, result.thickness_nm, f"{stack.name}: {photo.name}", pixel_size_um=args.pixel_size)
    stack_text = Path(args.stack).read_bytes()
    record = {
        "filmcalc_version": __version__, "created": time.strftime("%Y-%m-%dT%H:%M:%S%z"),
        "photo": {"file": photo.name, "sha256": photo.sha256, "width": photo.shape[1], "height": photo.shape[0],
                  "bit_depth": photo.bit_depth},
        "stack": {"file": str(args.stack), "sha256": hashlib.sha256(stack_text).hexdigest(), "name": stack.name,
                  "light": stack.light.source, "angle_deg": stack.light.angle_deg},
        "settings": {"range_nm": [lo, hi], "anchors": anchors, "reference": reference, "trend": args.trend,
                     "pixel_size_um": args.pixel_size},
        "calibration": result.calibration, "statistics": result.statistics,
        "flags": {name: int(np.count_nonzero(result.flags & bit)) for name, bit in FLAGS.items()},
        "warnings": result.warnings, "seconds": round(time.perf_counter() - started, 3), "output": str(out),
    }
    fio.save_provenance(out.with_suffix(".json") if suffix != ".json" else out, record)
    saved = _save_run(args, "map", inputs={"photo": args.photo, "stack": args.stack}, outputs={
        "thickness_nm.npy": result.thickness_nm, "sigma_nm.npy": result.sigma_nm, "flags.npy": result.flags,
        "residual_dE.npy": result.residual_dE}, summary={
        "stack": stack.name, "photo": photo.name, **result.statistics, "flags": record["flags"],
        "calibration_method": result.calibration.get("method"), "seconds": record["seconds"]},
        provenance=record)
    if args.json:
        print(json.dumps({**record, **_saved_key(saved)}, indent=1, default=fio._jsonable))
    else:
        st = result.statistics
        print(f"wrote {out} and {out.with_suffix('.json')}")
        if "mean_nm" in st:
            print(f"thickness {st['mean_nm']:.1f} ± {st['std_nm']:.1f} nm (mean ± σ over good pixels), "
                  f"{st['min_nm']:.1f}–{st['max_nm']:.1f} nm; {100 * st['flagged_fraction']:.1f} % flagged; "
                  f"{record['seconds']:.1f} s")


def _fit(args):
    from .spectra import fit_spectrum, read_spectrum

    stack = _film_stack(args.stack)
    spectrum = read_spectrum(args.spectrum, scale=args.scale, reference_material=args.reference)
    window = parse_range(args.window, "--window", 2) if args.window else None
    result = fit_spectrum(spectrum, stack, parse_range(args.range, "--range", 2), fit=args.fit, window_nm=window,
                          baseline=args.baseline)
    summary = {"spectrum": spectrum.name, "stack": stack.name, "notes": spectrum.notes, **result.summary()}
    saved = _save_run(args, "fit", inputs={"spectrum": args.spectrum, "stack": args.stack}, outputs={
        "wavelength_nm.npy": result.wavelength_nm, "data.npy": result.data, "model.npy": result.model,
        "landscape_nm.npy": result.landscape_nm, "landscape_chi2.npy": result.landscape_chi2}, summary=summary)
    if args.json:
        print(json.dumps({**summary, **_saved_key(saved)}, indent=1))
        return
    for note in spectrum.notes:
        print(f"note: {note}", file=sys.stderr)
    _warn(result.warnings)
    print(f"thickness {result.thickness_nm:.2f} ± {result.sigma_nm:.2f} nm (1σ); reduced χ² {result.reduced_chi2:.2f}; "
          f"{result.wavelength_nm.size} points, {result.wavelength_nm[0]:g}–{result.wavelength_nm[-1]:g} nm")
    for name, (value, sigma) in result.parameters.items():
        if name != "thickness_nm":
            print(f"  {name} = {value:.6g} ± {sigma:.2g}")
    for alt in result.alternatives[:3]:
        print(f"  another minimum: {alt['thickness_nm']:.1f} nm (reduced χ² {alt['reduced_chi2']:.1f})")
    if result.fft_thickness_nm is not None:
        print(f"  fringe-frequency estimate: {result.fft_thickness_nm:.0f} nm (FFT resolution "
              f"{result.fft_resolution_nm:.0f} nm)")


def _fit_map(args):
    from pathlib import Path

    from .charts import spectrum_map_figure_image
    from .spectra import fit_map, read_spectrum_map

    stack = _film_stack(args.stack)
    out = Path(args.out)
    if out.suffix.lower() not in (".csv", ".png"):
        raise FilmcalcError("--out must end in .csv (one row per point) or .png (the map).")
    smap = read_spectrum_map(args.input, positions=args.positions, scale=args.scale)
    window = parse_range(args.window, "--window", 2) if args.window else None

    def progress(fraction, message):
        if not args.json:
            print(f"\r[{'#' * int(20 * fraction):<20}] {message:<40}", end="", file=sys.stderr, flush=True)

    result = fit_map(smap, stack, parse_range(args.range, "--range", 2), window_nm=window, baseline=args.baseline,
                     progress=progress)
    if not args.json:
        print(file=sys.stderr)
    if out.suffix.lower() == ".csv":
        with open(out, "w", newline="", encoding="utf-8") as f:
            w = csv.writer(f)
            w.writerow(["x", "y", "thickness_nm", "sigma_nm", "reduced_chi2", "ambiguous"])
            for row in zip(result.x, result.y, result.thickness_nm, result.sigma_nm, result.reduced_chi2,
                           result.ambiguous):
                w.writerow([f"{row[0]:g}", f"{row[1]:g}", f"{row[2]:.3f}", f"{row[3]:.4f}", f"{row[4]:.3f}",
                            int(row[5])])
    else:
        spectrum_map_figure_image(result, f"{stack.name}: {smap.name}", out)
    summary = {"input": smap.name, "stack": stack.name, "points": int(result.x.size), "statistics": result.statistics,
               "ambiguous_points": int(result.ambiguous.sum()), "notes": smap.notes, "warnings": result.warnings,
               "seconds": round(result.seconds, 3), "output": str(out)}
    saved = _save_run(args, "fit-map", inputs={"input": args.input, "positions": args.positions, "stack": args.stack},
                      outputs={"x.npy": result.x, "y.npy": result.y, "thickness_nm.npy": result.thickness_nm,
                               "sigma_nm.npy": result.sigma_nm, "reduced_chi2.npy": result.reduced_chi2,
                               "ambiguous.npy": np.asarray(result.ambiguous, bool)},
                      summary={k: v for k, v in summary.items() if k != "output"})
    if args.json:
        print(json.dumps({**summary, **_saved_key(saved)}, indent=1))
        return
    for note in smap.notes:
        print(f"note: {note}", file=sys.stderr)
    _warn(result.warnings)
    st = result.statistics
    print(f"wrote {out}: {st['points']} points, mean {st['mean_nm']:.2f} nm, σ {st['std_nm']:.2f} nm, "
          f"{st['min_nm']:.2f}–{st['max_nm']:.2f} nm, non-uniformity {st['nonuniformity_pct']:.2f} % "
          f"((max − min) / 2·mean); {result.seconds:.2f} s")


def _fringes(args):
    import hashlib
    import time
    from pathlib import Path

    from . import io as fio
    from .fringes import FLAGS, fringe_images, fringe_map, line_profile_thickness

    started = time.perf_counter()
    stack = _film_stack(args.stack)
    photo = fio.load_photo(args.photo)
    wavelengths = args.wavelength
    if not 1 <= len(wavelengths) <= 2:
        raise FilmcalcError("Give one or two --wavelength values (nm).")
    images = fringe_images(photo, wavelengths, args.channel)
    anchor = None
    if args.anchor:
        x, y, t = _numbers(args.anchor, 3, "--anchor X,Y,NM")
        anchor = (int(x), int(y), t)
    out = Path(args.out)
    suffix = out.suffix.lower()
    record = {"filmcalc_version": __version__, "created": time.strftime("%Y-%m-%dT%H:%M:%S%z"),
              "photo": {"file": photo.name, "sha256": photo.sha256, "width": photo.shape[1],
                        "height": photo.shape[0]},
              "stack": {"file": str(args.stack), "name": stack.name,
                        "sha256": hashlib.sha256(Path(args.stack).read_bytes()).hexdigest()},
              "settings": {"wavelengths_nm": wavelengths, "channels": args.channel, "anchor": anchor,
                           "trend": args.trend, "range_nm": list(parse_range(args.range, "--range", 2))}}
    if args.line:
        if suffix not in (".csv", ".json"):
            raise FilmcalcError("With --line, --out must end in .csv or .json.")
        if anchor is None:
            raise FilmcalcError("--line needs --anchor X,Y,NM: the thickness at the line's start.")
        line = tuple(int(v) for v in _numbers(args.line, 4, "--line X0,Y0,X1,Y1"))
        profile = line_profile_thickness(images[0], line, wavelengths[0], stack, anchor[2], args.direction,
                                         encoded=not photo.linear)
        _warn(profile.warnings)
        record["settings"].update({"line": list(line), "direction": args.direction})
        record.update({"period_nm": profile.period_nm, "extrema": len(profile.extrema_px),
                       "thickness_end_nm": float(profile.thickness_nm[-1]), "warnings": profile.warnings})
        if suffix == ".csv":
            with open(out, "w", newline="", encoding="utf-8") as f:
                w = csv.writer(f)
                w.writerow(["distance_px", "thickness_nm", "sigma_nm", "intensity"])
                for row in zip(profile.distance_px, profile.thickness_nm, profile.sigma_nm, profile.intensity):
                    w.writerow([f"{row[0]:.2f}", f"{row[1]:.2f}", f"{row[2]:.2f}", f"{row[3]:.4f}"])
        else:
            record["profile"] = {"distance_px": profile.distance_px.round(2).tolist(),
                                 "thickness_nm": profile.thickness_nm.round(2).tolist(),
                                 "sigma_nm": profile.sigma_nm.round(2).tolist()}
            out.write_text(json.dumps(record, indent=1), encoding="utf-8")
        record["seconds"] = round(time.perf_counter() - started, 3)
        saved = _save_run(args, "fringes", inputs={"photo": args.photo, "stack": args.stack}, outputs={
            "distance_px.npy": profile.distance_px, "thickness_nm.npy": profile.thickness_nm,
            "sigma_nm.npy": profile.sigma_nm, "intensity.npy": profile.intensity,
            "extrema_px.npy": np.asarray(profile.extrema_px, float),
            "extrema_nm.npy": np.asarray(profile.extrema_nm, float)}, summary={
            "stack": stack.name, "photo": photo.name, "mode": "line", "period_nm": profile.period_nm,
            "extrema": len(profile.extrema_px), "thickness_start_nm": float(profile.thickness_nm[0]),
            "thickness_end_nm": float(profile.thickness_nm[-1]), "seconds": record["seconds"]},
            provenance={k: v for k, v in record.items() if k != "profile"})
        if args.json:
            print(json.dumps({**{k: v for k, v in record.items() if k != "profile"}, **_saved_key(saved)}, indent=1))
        else:
            print(f"wrote {out}: {len(profile.extrema_px)} fringe extrema along the line, "
                  f"{profile.thickness_nm[0]:.0f} → {profile.thickness_nm[-1]:.0f} nm "
                  f"(one fringe = {profile.period_nm:.1f} nm)")
        return
    if suffix not in (".npy", ".tif", ".tiff", ".csv", ".png"):
        raise FilmcalcError("--out must end in .npy, .tif, .tiff, .csv or .png.")
    result = fringe_map(images, stack, wavelengths, anchor=anchor, trend=args.trend,
                        range_nm=parse_range(args.range, "--range", 2), encoded=not photo.linear)
    _warn(result.warnings)
    if suffix == ".npy":
        fio.save_map_npy(out, result.thickness_nm)
    elif suffix in (".tif", ".tiff"):
        fio.save_map_tiff(out, result.thickness_nm, None)
    elif suffix == ".csv":
        fio.save_map_csv(out, result.thickness_nm, result.sigma_nm, result.flags)
    else:
        fio.save_map_png(out, result.thickness_nm, f"{stack.name}: {photo.name}")
    record.update({"period_nm": list(result.period_nm), "statistics": result.statistics,
                   "flags": {name: int(np.count_nonzero(result.flags & bit)) for name, bit in FLAGS.items()},
                   "warnings": result.warnings, "seconds": round(time.perf_counter() - started, 3),
                   "output": str(out)})
    fio.save_provenance(out.with_suffix(".json"), record)
    saved = _save_run(args, "fringes", inputs={"photo": args.photo, "stack": args.stack}, outputs={
        "thickness_nm.npy": result.thickness_nm, "sigma_nm.npy": result.sigma_nm, "flags.npy": result.flags},
        summary={"stack": stack.name, "photo": photo.name, "mode": "map", **result.statistics,
                 "period_nm": list(result.period_nm), "flags": record["flags"], "seconds": record["seconds"]},
        provenance=record)
    if args.json:
        print(json.dumps({**record, **_saved_key(saved)}, indent=1, default=fio._jsonable))
    else:
        st = result.statistics
        print(f"wrote {out} and {out.with_suffix('.json')}")
        if "mean_nm" in st:
            print(f"thickness {st['mean_nm']:.1f} ± {st['std_nm']:.1f} nm (mean ± σ over good pixels), "
                  f"{st['min_nm']:.1f}–{st['max_nm']:.1f} nm; {record['seconds']:.1f} s")


# ----------------------------------------------------------------------------- saving runs

# Arguments that are not settings of the result: output switches, where files are, how to save.
_NOT_SETTINGS = {"run", "json", "save", "sample", "tag", "note", "saved_by", "data_dir", "database_url", "argv",
                 "stack", "photo", "spectrum", "input", "positions", "out", "csv"}


def _saved_key(run_id):
    return {} if run_id is None else {"saved_run": run_id}


def _json_default(value):
    if isinstance(value, np.ndarray):
        return value.tolist()
    if isinstance(value, (np.floating, np.integer, np.bool_)):
        return value.item()
    raise TypeError(f"not JSON serialisable: {type(value).__name__}")


def _first_finite(values):
    if values is None:
        return None
    values = np.asarray(values, float)
    finite = values[np.isfinite(values)]
    return float(finite[0]) if finite.size else None


def _folder_files(folder, limit_depth=3):
    """Regular, non-hidden files under a folder (at most ``limit_depth`` levels), sorted."""
    folder = Path(folder)
    found = []
    for path in sorted(folder.rglob("*")):
        relative = path.relative_to(folder)
        if path.is_file() and len(relative.parts) <= limit_depth and not any(p.startswith(".") for p in relative.parts):
            found.append(path)
    return found


def _gather_inputs(roles):
    """{role: path, list of paths, or None} → ({stored name: Path}, {role: stored name or folder name}).

    A file keeps its own (cleaned) name; the files of a folder, or a list of frame files, are stored as
    ``FOLDER/NAME``.
    """
    from .runs import safe_name, unique_name

    files, names = {}, {}
    for role, value in roles.items():
        if value is None:
            continue
        if isinstance(value, (list, tuple)) or Path(value).is_dir():
            if isinstance(value, (list, tuple)):
                members = [Path(v) for v in value]
                folder = members[0].parent if members else Path(role)
                relative = [Path(m.name) for m in members]
            else:
                folder = Path(value)
                members = _folder_files(folder)
                relative = [m.relative_to(folder) for m in members]
            prefix = unique_name(safe_name(folder.resolve().name, role), {n.split("/")[0] for n in files})
            for member, rel in zip(members, relative):
                name = "/".join([prefix] + [safe_name(part) for part in rel.parts])
                files[unique_name(name, files)] = member
            names[role] = prefix
        else:
            name = unique_name(safe_name(value, role), files)
            files[name] = Path(value)
            names[role] = name
    return files, names


def _store(args):
    from .runs import RunStore

    return RunStore(getattr(args, "data_dir", None), getattr(args, "database_url", None))


def _check_save_options(args):
    """Before any work: --sample, --tag, --note, --saved-by only with --save, and valid."""
    if not hasattr(args, "save"):
        return
    labels = [args.sample, args.tag, args.note, args.saved_by]
    if not args.save:
        if any(v is not None for v in labels):
            raise FilmcalcError("--sample, --tag, --note and --saved-by describe a saved run: add --save.")
        return
    from .runs import validate_labels

    validate_labels(args.sample, args.tag, args.note, args.saved_by)


def _default_saved_by():
    import getpass

    try:
        return getpass.getuser()
    except (KeyError, OSError):  # no login name (some containers)
        return ""


def _save_run(args, kind, *, inputs, outputs=None, summary=None, provenance=None):
    """Save the run when --save was given: the input files, the settings (the parsed arguments),
    the outputs, the summary and the provenance. Returns the run id, or None."""
    if not getattr(args, "save", False):
        return None
    files, names = _gather_inputs(inputs)
    settings = {k: v for k, v in vars(args).items() if k not in _NOT_SETTINGS}
    settings["inputs"] = names
    provenance = {"command_line": list(getattr(args, "argv", []) or []), **(provenance or {})}
    with _store(args) as store:
        run = store.save(kind, inputs=files, outputs=outputs, settings=settings, summary=summary,
                         provenance=provenance, sample=args.sample or "", tags=args.tag or [], note=args.note or "",
                         saved_by=_default_saved_by() if args.saved_by is None else args.saved_by)
        print(f"saved run {run.id} ({kind}) in {store.describe()}", file=sys.stderr)
    return run.id


# ----------------------------------------------------------------------------- filmcalc runs ...

def _count(n, word):
    """'1 run', '2 runs'."""
    return f"{n} {word}" + ("" if n == 1 else "s")


def _size_text(size):
    for unit, factor in (("GB", 1e9), ("MB", 1e6), ("kB", 1e3)):
        if size >= factor:
            return f"{size / factor:.1f} {unit}"
    return f"{size} B"


def _when(created_utc):
    return created_utc[:16].replace("T", " ")


def _run_filters(args):
    return {"sample": args.sample, "tags": args.tag, "kind": args.kind, "saved_by": args.saved_by,
            "since": args.since, "until": args.until, "text": getattr(args, "search", None)}


def _runs_list(args):
    if args.limit < 0:
        raise FilmcalcError("--limit must be 0 (all runs) or more.")
    with _store(args) as store:
        runs = store.list_runs(**_run_filters(args), limit=args.limit or None)
        if args.limit and len(runs) == args.limit:
            total = store.count_runs(**_run_filters(args))
            if total > len(runs):
                print(f"showing the {len(runs)} newest of {total:,} runs; --limit 0 shows all", file=sys.stderr)
    if args.json:
        print(json.dumps([r.to_dict() for r in runs], indent=1, ensure_ascii=False))
        return
    if not runs:
        print(f"No saved runs match in {store.describe()}.", file=sys.stderr)
        return
    header = ("id", "saved (UTC)", "kind", "sample", "tags", "saved by", "note")
    rows = [(r.id, _when(r.created_utc), r.kind, r.sample, ", ".join(r.tags), r.saved_by,
             (r.note.splitlines() or [""])[0][:40]) for r in runs]
    widths = [min(30, max(len(str(row[i])) for row in rows + [header])) for i in range(len(header) - 1)]
    for row in [header] + rows:
        print("  ".join(str(v)[:w].ljust(w) for v, w in zip(row[:-1], widths)) + "  " + row[-1])


def _runs_show(args):
    with _store(args) as store:
        run = store.get(args.id)
    if args.json:
        print(json.dumps(run.to_dict(), indent=1, ensure_ascii=False))
        return
    print(f"run {run.id}: {run.kind} ({_kind_text(run.kind)}), saved {_when(run.created_utc)} UTC"
          + (f" by {run.saved_by}" if run.saved_by else "") + f" with filmcalc {run.filmcalc_version}")
    print(f"sample: {run.sample or '-'}   tags: {', '.join(run.tags) or '-'}")
    if run.note:
        print("note: " + run.note.replace("\n", "\n      "))
    for role in ("input", "output"):
        listed = [f for f in run.files if f.role == role]
        print(f"{role}s:" + ("" if listed else " none"))
        for f in listed:
            print(f"  {f.name:<36} {_size_text(f.size):>9}  {f.media_type:<24} sha256 {f.sha256[:16]}…")
    print("summary:")
    for key, value in run.summary.items():
        print(f"  {key}: {json.dumps(value, ensure_ascii=False)[:100]}")
    print("settings:")
    for key, value in run.settings.items():
        print(f"  {key}: {json.dumps(value, ensure_ascii=False)[:100]}")


def _kind_text(kind):
    from .runs import KINDS

    return KINDS.get(kind, kind)


def _runs_export(args):
    with _store(args) as store:
        path = store.export_zip(args.id, args.out)
    print(f"wrote {path}", file=sys.stderr)


def _runs_import(args):
    with _store(args) as store:
        run = store.import_zip(args.file, new_id=args.new_id)
        where = store.describe()
    if args.json:
        print(json.dumps(run.to_dict(), indent=1, ensure_ascii=False))
    else:
        print(f"imported run {run.id} ({run.kind}, {len(run.files)} files) into {where}")


def _runs_delete(args):
    with _store(args) as store:
        run = store.delete(args.id)
    print(f"deleted run {run.id} ({run.kind}, sample {run.sample or '-'}, saved {_when(run.created_utc)} UTC)")


def _runs_check(args):
    with _store(args) as store:
        report = store.check(delete_orphans=args.delete_orphans, verify_hashes=not args.quick)
        where = store.describe()
    if args.json:
        print(json.dumps(report.to_dict(), indent=1))
        return 0 if report.ok else 1
    print(f"{where}: {_count(report.runs, 'run')}, {_count(report.files, 'stored file')} ({_size_text(report.bytes)}), "
          + ("SHA-256 of every file verified" if report.hashes_verified else "sizes checked (--quick)"))
    for o in report.orphans:
        print(f"orphan: files/{o['sha256'][:2]}/{o['sha256']} ({_size_text(o['size'])}) belongs to no run")
    for m in report.missing:
        print(f"missing: {m['role']} {m['name']} of run {m['run_id']} (files/{m['sha256'][:2]}/{m['sha256']})")
    for c in report.corrupt:
        print(f"corrupt: files/{c['sha256'][:2]}/{c['sha256']}: {c['problem']} (runs {', '.join(c['run_ids'])})")
    for t in report.temporary:
        state = "left by an interrupted save" if t["stale"] else "maybe a save in progress"
        print(f"temporary: files/tmp/{t['name']} ({t['age_s']:.0f} s old, {state})")
    for u in report.unexpected:
        print(f"unexpected file (left alone): {u}")
    for d in report.deleted:
        print(f"deleted {d}")
    if report.ok:
        print("store is sound")
        return 0
    if report.orphans and not args.delete_orphans:
        print("orphans are harmless; `filmcalc runs check --delete-orphans` removes them")
    return 1


def _runs_history(args):
    from .runs import history_table, numeric_summary_keys

    if not (args.sample or args.tag):
        raise FilmcalcError("runs history needs --sample NAME or --tag TAG: whose history?")
    with _store(args) as store:
        runs = store.list_runs(sample=args.sample, tags=args.tag, kind=args.kind, newest_first=False)
    if not runs:
        raise FilmcalcError("No saved runs match; `filmcalc runs list` shows what is saved.")
    keys = numeric_summary_keys(runs)
    if not args.key:
        if args.json:
            print(json.dumps(keys))
        else:
            print("summary numbers to choose with --key: " + ", ".join(keys))
        return
    if args.key not in keys:
        raise FilmcalcError(f"No run here has a summary number {args.key!r}; choose one of: {', '.join(keys)}.")
    table = history_table(runs, args.key, sigma_method=args.sigma, baseline=args.baseline)
    if args.json:
        print(json.dumps(table.to_dict(), indent=1, ensure_ascii=False))
        return
    print("id            saved (UTC)       sample          value")
    for row in table.rows:
        mark = {"above": "  ▲ above the upper limit", "below": "  ▼ below the lower limit"}.get(row["side"], "")
        print(f"{row['run_id']:<13} {_when(row['created_utc'])}  {row['sample'][:15]:<15} {row['value']:.6g}{mark}")
    if table.mean is None:
        print("fewer than two values: no control limits")
    else:
        print(f"mean {table.mean:.6g}; σ {table.sigma:.4g} ({table.sigma_method}, from {table.baseline} runs); "
              f"limits {table.lower:.6g} – {table.upper:.6g} (mean ± {table.k:g}σ); "
              f"{len(table.outside)} of {len(table.rows)} outside")
    if table.skipped:
        print(f"{len(table.skipped)} runs have no {args.key!r}")


def _add_store_options(p):
    p.add_argument("--data-dir", help="run store folder (default: $FILMCALC_DATA, else a per-user folder such as "
                                      "~/.local/share/filmcalc)")
    p.add_argument("--database-url", help="database URL, e.g. postgresql+psycopg://user@host/filmcalc (default: "
                                          "$FILMCALC_DATABASE_URL, else SQLite in the data folder)")


def _add_save_options(p):
    g = p.add_argument_group("saving the run")
    g.add_argument("--save", action="store_true", help="save the run (inputs, settings, outputs, summary) in the "
                                                       "run store")
    g.add_argument("--sample", help="sample name for the saved run")
    g.add_argument("--tag", action="append", help="tag for the saved run (repeatable)")
    g.add_argument("--note", help="free-text note for the saved run")
    g.add_argument("--saved-by", help="your name, stored with the run (default: your login name)")
    _add_store_options(g)


def _add_filter_options(p):
    p.add_argument("--sample", help="only this sample (exact name)")
    p.add_argument("--tag", action="append", help="only runs with this tag (repeatable: all of them)")
    p.add_argument("--kind", help="only this kind: spectrum, colour, chart, match, map, fit, fit-map, fringes, "
                                  "sequence")
    p.add_argument("--saved-by", help="only runs saved by this name")
    p.add_argument("--since", help="saved on or after this date/time (UTC), e.g. 2026-12-01")
    p.add_argument("--until", help="saved before this date/time (UTC)")


def _add_runs_parser(sub):
    rp = sub.add_parser("runs", help="saved runs: list, show, export, import, delete, check, history")
    rs = rp.add_subparsers(dest="runs_command", required=True)
    lp = rs.add_parser("list", help="saved runs, newest first")
    _add_filter_options(lp)
    lp.add_argument("--search", help="text in the sample, note or id")
    lp.add_argument("--limit", type=int, default=100, help="at most N runs, newest first (default 100; 0: all)")
    lp.add_argument("--json", action="store_true", help="print JSON")
    lp.set_defaults(run=_runs_list)
    sp = rs.add_parser("show", help="one run: files, summary, settings")
    sp.add_argument("id", help="run id")
    sp.add_argument("--json", action="store_true", help="print JSON")
    sp.set_defaults(run=_runs_show)
    ep = rs.add_parser("export", help="one run as a zip (inputs, outputs, manifest with provenance)")
    ep.add_argument("id", help="run id")
    ep.add_argument("--out", required=True, help="FILE.zip")
    ep.set_defaults(run=_runs_export)
    ip = rs.add_parser("import", help="a run exported by `filmcalc runs export`")
    ip.add_argument("file", help="FILE.zip")
    ip.add_argument("--new-id", action="store_true", help="give the run a new id if its id is taken here")
    ip.add_argument("--json", action="store_true", help="print the imported run as JSON")
    ip.set_defaults(run=_runs_import)
    dp = rs.add_parser("delete", help="delete a run (files no other run uses go too)")
    dp.add_argument("id", help="run id")
    dp.set_defaults(run=_runs_delete)
    cp = rs.add_parser("check", help="integrity: orphaned, missing and damaged files (exit 1 if any)")
    cp.add_argument("--delete-orphans", action="store_true",
                    help="remove files no run uses and temporary files over an hour old")
    cp.add_argument("--quick", action="store_true", help="compare sizes only, do not re-hash every file")
    cp.add_argument("--json", action="store_true", help="print JSON")
    cp.set_defaults(run=_runs_check)
    hp = rs.add_parser("history", help="a summary number over time, with mean ± 3σ control limits")
    _add_filter_options(hp)
    hp.add_argument("--key", help="summary number (dotted for nested ones, e.g. statistics.mean_nm); without it, "
                                  "the list of numbers")
    hp.add_argument("--baseline", type=int, help="only the first N runs set the limits (default: all)")
    hp.add_argument("--sigma", choices=("moving-range", "sample"), default="moving-range",
                    help="σ from the mean moving range / 1.128 (default) or the sample standard deviation")
    hp.add_argument("--json", action="store_true", help="print JSON")
    hp.set_defaults(run=_runs_history)
    for p in (lp, sp, ep, ip, dp, cp, hp):
        _add_store_options(p)


def _add_colour_options(p):
    p.add_argument("--exposure", type=float, default=1.0, help="exposure factor (default 1)")
    p.add_argument("--observer", choices=("2", "10"), default="2", help="CIE 1931 2° or 1964 10° observer")


def build_parser():
    parser = argparse.ArgumentParser(prog="filmcalc", description="Thin-film thickness from interference colour.")
    parser.add_argument("--version", action="version", version=f"filmcalc {__version__}")
    sub = parser.add_subparsers(dest="command", required=True)
    sp = sub.add_parser("spectrum", help="reflectance spectrum of a stack file (CSV or JSON)")
    sp.add_argument("stack", help="stack file (TOML)")
    sp.add_argument("--thickness", type=float, help="thickness of the unknown film, nm (default: the file's)")
    sp.add_argument("--angle", type=float, help="angle of incidence, degrees (default: the file's)")
    sp.add_argument("--polarisation", choices=POLARISATIONS, default="unpolarised",
                    help="which reflectance fills the R column (default unpolarised)")
    sp.add_argument("--wavelengths", default="380:780:5", help="A:B:STEP in nm (default 380:780:5)")
    sp.add_argument("--json", action="store_true", help="print JSON instead of CSV")
    _add_save_options(sp)
    sp.set_defaults(run=_spectrum)

    cp = sub.add_parser("colour", help="the film's colour at one thickness")
    cp.add_argument("stack", help="stack file (TOML)")
    cp.add_argument("--thickness", type=float, required=True, help="film thickness, nm")
    cp.add_argument("--angle", type=float, help="angle of incidence, degrees (default: the file's)")
    _add_colour_options(cp)
    cp.add_argument("--json", action="store_true", help="print JSON")
    _add_save_options(cp)
    cp.set_defaults(run=_colour)

    ch = sub.add_parser("chart", help="printable colour chart (PNG or PDF) and CSV table")
    ch.add_argument("stack", help="stack file (TOML)")
    ch.add_argument("--from", dest="from_nm", type=float, default=0.0, help="first thickness, nm (default 0)")
    ch.add_argument("--to", dest="to_nm", type=float, required=True, help="last thickness, nm")
    ch.add_argument("--step", type=float, required=True, help="thickness step, nm")
    ch.add_argument("--angles", help="A:B:STEP degrees for a thickness × angle chart")
    ch.add_argument("--out", required=True, help="FILE.png or FILE.pdf")
    ch.add_argument("--csv", help="also write the colour table as CSV")
    ch.add_argument("--unit", default="nm", help="thickness unit on the chart: nm, um or A")
    ch.add_argument("--paper", choices=("A4", "Letter"), default="A4")
    _add_colour_options(ch)
    _add_save_options(ch)
    ch.set_defaults(run=_chart)

    mp = sub.add_parser("match", help="thicknesses that show a given colour")
    mp.add_argument("stack", help="stack file (TOML)")
    mp.add_argument("--colour", required=True, help='"#RRGGBB", srgb:R,G,B (0-1) or lab:L,a,b')
    mp.add_argument("--range", default="0:1500", help="MIN:MAX thickness, nm (default 0:1500)")
    mp.add_argument("--tolerance", type=float, default=5.0, help="largest ΔE00 (default 5)")
    mp.add_argument("--resolution", type=float, default=1.0, help="thickness step searched, nm (default 1)")
    mp.add_argument("--angle", type=float, help="angle of incidence, degrees (default: the file's)")
    _add_colour_options(mp)
    mp.add_argument("--json", action="store_true", help="print JSON")
    _add_save_options(mp)
    mp.set_defaults(run=_match)

    tp = sub.add_parser("map", help="photo of interference colours → thickness map")
    tp.add_argument("photo", help="PNG, JPEG or TIFF photo")
    tp.add_argument("stack", help="stack file (TOML)")
    tp.add_argument("--out", required=True, help="FILE.npy, .tiff, .csv or .png (a FILE.json record is added)")
    tp.add_argument("--range", default="0:1500", help="MIN:MAX thickness, nm (default 0:1500)")
    tp.add_argument("--anchor", action="append", help="X,Y,NM: a pixel of known thickness (repeatable)")
    tp.add_argument("--reference", help="X0,Y0,X1,Y1,NM: a rectangle of known thickness (camera gains)")
    tp.add_argument("--trend", choices=("right", "left", "down", "up"), help="where the film gets thicker")
    tp.add_argument("--pixel-size", type=float, help="µm per pixel")
    tp.add_argument("--json", action="store_true", help="print the summary record as JSON")
    _add_save_options(tp)
    tp.set_defaults(run=_map)

    fp = sub.add_parser("fit", help="reflectance spectrum → film thickness")
    fp.add_argument("spectrum", help="CSV/TSV: wavelength_nm, reflectance (or sample, reference[, dark] counts)")
    fp.add_argument("stack", help="stack file (TOML)")
    fp.add_argument("--range", default="0:3000", help="MIN:MAX thickness searched, nm (default 0:3000)")
    fp.add_argument("--fit", default="thickness", help="thickness, thickness,cauchy or thickness,layer:K")
    fp.add_argument("--window", help="A:B wavelengths used, nm (default: all)")
    fp.add_argument("--reference", default="silicon",
                    help="built-in material the raw counts' reference is made of (default silicon)")
    _add_spectrum_options(fp)
    fp.add_argument("--json", action="store_true", help="print JSON")
    _add_save_options(fp)
    fp.set_defaults(run=_fit)

    fm = sub.add_parser("fit-map", help="a mapping run of spectra → thickness per point and uniformity")
    fm.add_argument("input", help="long CSV (x, y, wavelength, reflectance) or a folder of spectra")
    fm.add_argument("stack", help="stack file (TOML)")
    fm.add_argument("--out", required=True, help="FILE.csv (per point) or FILE.png (map)")
    fm.add_argument("--positions", help="CSV file, x, y for a folder of spectra (default FOLDER/positions.csv)")
    fm.add_argument("--range", default="0:3000", help="MIN:MAX thickness searched, nm (default 0:3000)")
    fm.add_argument("--window", help="A:B wavelengths used, nm (default: all)")
    _add_spectrum_options(fm)
    fm.add_argument("--json", action="store_true", help="print JSON")
    _add_save_options(fm)
    fm.set_defaults(run=_fit_map)

    fr = sub.add_parser("fringes", help="monochromatic or two-wavelength fringes → thickness")
    fr.add_argument("photo", help="PNG, JPEG or TIFF photo (greyscale, or colour channels under line light)")
    fr.add_argument("stack", help="stack file (TOML)")
    fr.add_argument("--wavelength", type=float, action="append", required=True,
                    help="vacuum wavelength of the light, nm (give two for two-wavelength fringes)")
    fr.add_argument("--channel", action="append", choices=("red", "green", "blue", "grey"),
                    help="which channel shows each wavelength (default: grey for a greyscale photo, else red "
                         "≥ 580 nm, green ≥ 500 nm, blue below)")
    fr.add_argument("--anchor", help="X,Y,NM: a pixel of known thickness (for --line: the line's start)")
    fr.add_argument("--trend", choices=("right", "left", "down", "up"), help="where the film gets thicker")
    fr.add_argument("--line", help="X0,Y0,X1,Y1: thickness along this line by counting fringes")
    fr.add_argument("--direction", choices=("thicker", "thinner"), default="thicker",
                    help="how the film changes along --line (default thicker)")
    fr.add_argument("--range", default="0:2000", help="MIN:MAX thickness, nm (default 0:2000)")
    fr.add_argument("--out", required=True, help="map: .npy/.tiff/.csv/.png; line: .csv or .json")
    fr.add_argument("--json", action="store_true", help="print the summary record as JSON")
    _add_save_options(fr)
    fr.set_defaults(run=_fringes)

    sq = sub.add_parser("sequence", help="a recording over time → thickness cube, series, thinning law, rupture")
    sq.add_argument("input", help="folder of PNG/TIFF/JPEG frames, multi-page TIFF, or video (MP4, AVI, MOV, MKV)")
    sq.add_argument("stack", help="stack file (TOML)")
    sq.add_argument("--out", required=True, help="output folder (cube.zarr, series.csv, summary.json, ...)")
    sq.add_argument("--frames", help="START:STOP:STEP frames to use, 0-based, STOP excluded (default all)")
    sq.add_argument("--fps", type=float, help="frames per second (default: the video's own; else times are frame "
                                              "numbers)")
    sq.add_argument("--anchor", action="append", help="X,Y,NM: a pixel of known thickness in the first frame")
    sq.add_argument("--range", default="0:1500", help="MIN:MAX thickness, nm (default 0:1500)")
    sq.add_argument("--point", action="append", help="X,Y: follow the thickness at this pixel (repeatable)")
    sq.add_argument("--region", action="append", help="X0,Y0,X1,Y1: follow the mean in this rectangle")
    sq.add_argument("--line", help="X0,Y0,X1,Y1: record the thickness along this line (kymograph)")
    sq.add_argument("--pixel-size", type=float, help="µm per pixel on the film (gives volumes)")
    sq.add_argument("--chunk", type=int, help="frames per task (default: up to 16, so each worker gets several)")
    sq.add_argument("--scheduler", default="local",
                    help="serial (this process), local (Dask workers on this machine, the default) or the "
                         "address of a running Dask scheduler, tcp://HOST:PORT")
    sq.add_argument("--workers", type=int, default=max(1, min(8, os.cpu_count() or 1)),
                    help="worker processes for --scheduler local (default: one per core, up to 8)")
    sq.add_argument("--export", action="append", choices=("tiff", "mp4", "gif"),
                    help="also write thickness.tif (float32 stack) or a movie with a colour bar (repeatable)")
    sq.add_argument("--json", action="store_true", help="print the summary as JSON")
    _add_save_options(sq)
    sq.set_defaults(run=_sequence)
    _add_runs_parser(sub)
    return parser


def _sequence(args):
    from pathlib import Path

    from .frames import open_frames
    from .sequence import export_movie, export_tiff_stack, run_sequence

    stack = _film_stack(args.stack)
    lo, hi = parse_range(args.range, "--range", 2)
    anchors = [(int(x), int(y), t) for x, y, t in (_numbers(a, 3, "--anchor X,Y,NM") for a in args.anchor or [])]
    points = [tuple(int(v) for v in _numbers(p, 2, "--point X,Y")) for p in args.point or []]
    regions = [tuple(int(v) for v in _numbers(r, 4, "--region X0,Y0,X1,Y1")) for r in args.region or []]
    line = None if not args.line else tuple(int(v) for v in _numbers(args.line, 4, "--line X0,Y0,X1,Y1"))
    if args.pixel_size is not None and args.pixel_size <= 0:
        raise FilmcalcError("--pixel-size must be > 0 µm.")
    source = open_frames(args.input, args.frames, args.fps)
    state = {"shown": -1.0}

    def progress(done, total, message):
        fraction = done / max(total, 1)
        if not args.json and (fraction - state["shown"] >= 0.01 or done == total):
            state["shown"] = fraction
            print(f"\r[{'#' * int(30 * fraction):<30}] {done}/{total} frames  {message:<45}", end="",
                  file=sys.stderr, flush=True)

    result = run_sequence(source, stack, args.out, range_nm=(lo, hi), anchors=anchors,
                          pixel_size_um=args.pixel_size, points=points, regions=regions, line=line,
                          chunk=args.chunk, scheduler=args.scheduler, workers=args.workers, progress=progress)
    if not args.json:
        print(file=sys.stderr)
    _warn(result.warnings)
    out = Path(args.out)
    exports = []
    for kind in args.export or []:
        if kind == "tiff":
            exports.append(str(export_tiff_stack(out, out / "thickness.tif")))
        else:
            exports.append(str(export_movie(out, out / f"thickness.{kind}", fps=min(source.fps or 10.0, 25.0))))
    summary = result.summary()
    summary["exports"] = exports
    (out / "summary.json").write_text(json.dumps(summary, indent=1), encoding="utf-8")
    saved = None
    if args.save:
        inputs = {"input": args.input, "stack": args.stack}
        if source.kind == "folder":  # every frame file of the folder (what --frames counts in)
            inputs["input"] = [Path(f) for f in source.files]
        fit = summary["thinning_law"] or {}
        rupture = summary["rupture"] or {}
        provenance = json.loads((out / "provenance.json").read_text(encoding="utf-8"))
        saved = _save_run(args, "sequence", inputs=inputs, outputs={
            "cube.zarr.zip": out / "cube.zarr", "series.csv": out / "series.csv",
            "summary.json": out / "summary.json"}, summary={
            "stack": stack.name, "frames_selected": summary["frames_selected"],
            "frames_mapped": summary["frames_mapped"], "frames_skipped": len(summary["frames_skipped"]),
            "rupture_frame": rupture.get("index"), "rupture_time_s": rupture.get("time_s"),
            "alpha": fit.get("alpha"), "alpha_sigma": fit.get("alpha_sigma"), "t0_s": fit.get("t0_s"),
            "amplitude_nm": fit.get("amplitude_nm"),
            "mean_nm_first_frame": _first_finite(result.series.get("mean_nm")),
            "seconds": summary["seconds"], "warnings": summary["warnings"]}, provenance=provenance)
    if args.json:
        json.dump({**summary, **_saved_key(saved)}, sys.stdout, indent=1)
        print()
        return
    print(f"{summary['frames_mapped']} of {summary['frames_selected']} frames mapped in {summary['seconds']} s "
          f"on {result.scheduler}; cube and series in {out}")
    for skipped in summary["frames_skipped"]:
        if skipped["status"] != "ruptured":
            print(f"  skipped {skipped['frame']} ({skipped['status']}): {skipped['reason']}")
    if result.rupture_index is not None:
        print(f"rupture at {result.names[result.rupture_index]}, t = {result.rupture_time_s:.4f} s")
    if result.fit is not None:
        print(f"thinning law h = A·(t − t0)^−α: α = {result.fit.alpha:.4f} ± {result.fit.alpha_sigma:.4f}, "
              f"t0 = {result.fit.t0_s:.4f} s, A = {result.fit.amplitude_nm:.1f} nm")
    else:
        print(result.fit_note)


def _add_spectrum_options(p):
    p.add_argument("--baseline", choices=("none", "offset", "scale+offset"), default="none",
                   help="free baseline terms between model and data (default none)")
    p.add_argument("--scale", choices=("auto", "percent", "fraction"), default="auto",
                   help="reflectance given in percent or as a fraction (default: detected)")


def main(argv=None):
    argv = list(sys.argv[1:] if argv is None else argv)
    args = build_parser().parse_args(argv)
    args.argv = argv
    try:
        _check_save_options(args)
        status = args.run(args)
    except FilmcalcError as exc:
        print(f"filmcalc: error: {exc}", file=sys.stderr)
        return 2
    except BrokenPipeError:  # output piped into `head` and the like
        sys.stderr.close()
        return 0
    return status or 0
