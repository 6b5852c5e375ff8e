"""The ``filmcalc`` command line.

Sub-commands
------------
spectrum STACK.toml --thickness NM [--angle DEG] [--polarisation s|p|unpolarised]
         [--wavelengths A:B:STEP] [--json]
    Reflectance spectrum of the stack: CSV ``wavelength_nm,R_s,R_p,R``
    (fractions 0–1), or JSON.

Errors a user can cause print one line to stderr and exit with status 2;
material warnings go to stderr and do not change the output.
"""

from __future__ import annotations

import argparse
import json
import sys

import numpy as np

from . import __version__
from .errors import FilmcalcError
from .optics import stack_reflectance
from .stack import POLARISATIONS, load_stack


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
    return parser


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
