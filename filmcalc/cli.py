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

Errors a user can cause print one line to stderr and exit with status 2;
material warnings go to stderr and do not change the output.
"""

from __future__ import annotations

import argparse
import csv
import json
import os
import sys

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
    return values


def wavelength_grid(text):
    """'380:780:5' → array of wavelengths, nm (both ends included)."""
    lo, hi, step = parse_range(text, "--wavelengths")
    if not (0 < lo < hi and step > 0):
        raise FilmcalcError(f"--wavelengths needs 0 < A < B and STEP > 0 (got {text!r}).")
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
    if args.json:
        json.dump({
            "stack": stack.name, "film_thickness_nm": args.thickness,
            "angle_deg": stack.light.angle_deg if args.angle is None else args.angle,
            "numerical_aperture": stack.light.numerical_aperture, "polarisation": pol,
            "wavelength_nm": wl.tolist(), "R_s": result.R_s.tolist(), "R_p": result.R_p.tolist(),
            "R": result.reflectance(pol).tolist(), "T": result.T.tolist(),
            "warnings": result.warnings, "filmcalc_version": __version__,
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
    if args.json:
        print(json.dumps(result, indent=1))
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
    if args.csv:
        rows = colour_table(c)
        with open(args.csv, "w", newline="", encoding="utf-8") as fh:
            writer = csv.DictWriter(fh, fieldnames=list(rows[0]))
            writer.writeheader()
            writer.writerows(rows)
    print(f"wrote {args.out}" + (f" and {args.csv}" if args.csv else ""), file=sys.stderr)


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
    if args.json:
        print(json.dumps({"colour": args.colour, "CIELAB": [round(float(v), 3) for v in target],
                          "tolerance": args.tolerance, "range_nm": [lo, hi], "angle_deg": float(c.angle_deg[0]),
                          "candidates": found}, indent=1))
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
    if args.json:
        print(json.dumps(record, indent=1, default=fio._jsonable))
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
    if args.json:
        print(json.dumps(summary, indent=1))
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
    if args.json:
        print(json.dumps(summary, indent=1))
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
        if args.json:
            print(json.dumps({k: v for k, v in record.items() if k != "profile"}, indent=1))
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
    if args.json:
        print(json.dumps(record, indent=1, default=fio._jsonable))
    else:
        st = result.statistics
        print(f"wrote {out} and {out.with_suffix('.json')}")
        if "mean_nm" in st:
            print(f"thickness {st['mean_nm']:.1f} ± {st['std_nm']:.1f} nm (mean ± σ over good pixels), "
                  f"{st['min_nm']:.1f}–{st['max_nm']:.1f} nm; {record['seconds']:.1f} s")


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
    sp.set_defaults(run=_spectrum)

    cp = sub.add_parser("colour", help="the film's colour at one thickness")
    cp.add_argument("stack", help="stack file (TOML)")
    cp.add_argument("--thickness", type=float, required=True, help="film thickness, nm")
    cp.add_argument("--angle", type=float, help="angle of incidence, degrees (default: the file's)")
    _add_colour_options(cp)
    cp.add_argument("--json", action="store_true", help="print JSON")
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
    sq.set_defaults(run=_sequence)
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
    if args.json:
        json.dump(summary, sys.stdout, indent=1)
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
    args = build_parser().parse_args(argv)
    try:
        args.run(args)
    except FilmcalcError as exc:
        print(f"filmcalc: error: {exc}", file=sys.stderr)
        return 2
    except BrokenPipeError:  # output piped into `head` and the like
        sys.stderr.close()
        return 0
    return 0
