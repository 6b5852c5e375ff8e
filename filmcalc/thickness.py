"""Photo of interference colours → calibrated thickness map with uncertainty.

Public names
------------
ColourLookup, build_lookup
    The film's predicted colour every ≤ 0.5 nm over the user's range, as the
    camera records it (linear, then gains/matrix, clipped, encoded).
CameraModel
    The camera correction: a 3 × 3 matrix on linear RGB (its diagonal are the
    per-channel gains; exposure is their common scale).
thickness_map, ThicknessMap
    The whole inversion: calibration, candidates across fringe orders, order
    resolution, uncertainty, flags and statistics.
FLAGS, FLAG_MEANINGS
    Bit values of the per-pixel flags, and what each means.

Method
------
1. Every pixel's colour and every predicted colour are compared in CIELAB
   (D65 white; the prediction is corrected, clipped to the sRGB cube and
   encoded first, as a camera would). Candidates are the local minima of the
   colour distance along the thickness path below a tolerance, one per
   fringe order, found on a 2 nm lookup and refined on the 0.5 nm one. Each
   distinct 8-bit colour is searched once, and candidates are kept per
   colour, never per pixel (a 24-megapixel photo stays within memory).
2. Orders are resolved coarse to fine, as in quality-guided phase
   unwrapping: on a downsampled grid (≤ 96 cells a side) assignment grows
   from the user's anchors or, without them, from the least ambiguous
   colours, each step taking the candidate nearest the thickness predicted
   by continuing the local slope (over up to three cells behind). Where no
   candidate continues the film (none within a third of a period), the
   pixel is left to another path or starts a region of its own. Across an edge (a jump in colour well above
   the photo's usual neighbour-to-neighbour change) the colour decides
   instead, and an optional trend (where the film gets thicker) penalises
   thinning against it. The result, upsampled, is the reference each
   full-resolution pixel picks its nearest candidate against; a second pass
   against a locally smoothed reference (σ = 3 px) cleans up. Values are
   never smoothed, so steps stay sharp.
3. Calibration: a reference region of known thickness (e.g. bare substrate at
   0 nm) gives the per-channel gains; so do the pixels around anchors, as a
   start. Without a reference region, the camera correction is
   fitted jointly with the map on a subsample (up to three alternating passes):
   a 3 × 3 matrix, ridge-regularised towards the gains, when the photo's
   colours span enough of colour space; gains otherwise; exposure only when
   the photo shows few colours. Each thickness counts once in the fit.
4. Uncertainty (1σ): colour noise (robust spread of the residuals) divided
   by the local slope of the colour path, |dLab/dd|, and at least the
   spread (width/√12) of the stretch of path that stays as close to the
   pixel's colour (within the noise, at least 1 ΔE76). On such stretches
   wider than an eighth of a period (a flat colour path: near 0 nm, at
   turning points, towards the wash-out), away from colour edges, the
   thickness nearest the local reference within the stretch is taken:
   colour cannot choose there, the neighbours can.
5. Flags instead of guesses: saturated, dark, no match, ambiguous (another
   order fits about as well, or clearly better), a region no anchor ties to
   (without anchors: every region but the largest), inconsistent with
   neighbours, past the thickness where colours wash out for this photo
   (the colour path's excursion below 5 ΔE or below 5 × the model's misfit
   there; reported), and a poor colour fit.

References
----------
Ghiglia, D. C. & Pritt, M. D. (1998). Two-Dimensional Phase Unwrapping:
Theory, Algorithms, and Software, ch. 4 (quality-guided path following).
"""

from __future__ import annotations

import dataclasses
import functools
import heapq
import os
import threading
import time

import numpy as np

from .appearance import film_colours, fringe_order
from .colour import (_D65_XY, _XYZ_TO_SRGB, XYZ_to_Lab, _adaptation_matrix, _xy_to_XYZ, delta_E_2000, srgb_decode,
                     srgb_encode)
from .errors import FilmcalcError

__all__ = ["ColourLookup", "build_lookup", "CameraModel", "thickness_map", "ThicknessMap", "FLAGS", "FLAG_MEANINGS",
           "TRENDS", "lab_of_encoded", "line_profile"]

FLAGS = {"saturated": 1, "dark": 2, "no_match": 4, "ambiguous": 8, "unanchored": 16, "inconsistent": 32,
         "washed_out": 64, "poor_fit": 128}

FLAG_MEANINGS = {
    "saturated": "a channel at its maximum", "dark": "too little light",
    "no_match": "no film colour within the tolerance", "ambiguous": "another fringe order fits about as well",
    "unanchored": "a region no anchor ties to",
    "inconsistent": "disagrees with its neighbours by over a third of an order",
    "washed_out": "past the thickness where white-light colours wash out",
    "poor_fit": "its colour fits the model much worse than the rest of the photo",
}

# A pixel whose colour residual (ΔE00) exceeds this many times the map's median residual, and
# at least POOR_FIT_MIN_DE, fits the model badly: its thickness is flagged (our choice).
POOR_FIT_FACTOR, POOR_FIT_MIN_DE = 3.0, 3.0

# Colours "wash out" where, over one fringe period, the colour path stays within this distance
# (ΔE76) of its local mean: a few times the colour noise of a good 8-bit photo (our choice;
# common practice, no source).
WASHOUT_DE = 5.0
# ... and where it stays within this many times the photo's colour misfit at that thickness (our choice).
WASHOUT_MISFIT = 5.0

_D65_XYZ = _xy_to_XYZ(_D65_XY) * 100
_WORKERS = min(4, len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else (os.cpu_count() or 1))
_SRGB_TO_XYZ = np.linalg.inv(_XYZ_TO_SRGB)  # linear sRGB → XYZ (Y = 1), D65 white


def lab_of_linear(linear_rgb):
    """CIELAB (D65 white) of linear sRGB values (..., 3)."""
    return XYZ_to_Lab(100 * np.asarray(linear_rgb, dtype=float) @ _SRGB_TO_XYZ.T, _D65_XYZ)


def lab_of_encoded(encoded_rgb):
    """CIELAB (D65 white) of encoded sRGB values (..., 3) in 0–1."""
    return lab_of_linear(srgb_decode(encoded_rgb))


@dataclasses.dataclass
class CameraModel:
    """Linear camera correction: camera linear RGB = matrix @ predicted linear sRGB."""

    matrix: np.ndarray = dataclasses.field(default_factory=lambda: np.eye(3))

    @property
    def gains(self):
        """Per-channel gains (the matrix diagonal)."""
        return np.diag(self.matrix).copy()

    def apply(self, linear_rgb):
        return np.asarray(linear_rgb) @ self.matrix.T


@dataclasses.dataclass
class ColourLookup:
    """Predicted film colours along the thickness path.

    Attributes
    ----------
    thickness_nm : numpy.ndarray, shape (L,)
    linear_rgb : numpy.ndarray, shape (L, 3)
        Ideal linear sRGB (light's white → (1, 1, 1)), exposure 1, unclipped.
    order : numpy.ndarray, shape (L,)
        Fringe order at 550 nm of each thickness (1 = first).
    period_nm : float
        Thickness of one fringe order at 550 nm.
    """

    thickness_nm: np.ndarray
    linear_rgb: np.ndarray
    order: np.ndarray
    period_nm: float
    # Results computed from this path, kept for the next call (the frames of a sequence share one
    # lookup and one camera): never part of equality or the repr.
    _memo: dict = dataclasses.field(default_factory=dict, repr=False, compare=False)

    def encoded(self, camera):
        """What the camera records: corrected, clipped to 0–1 and encoded."""
        return srgb_encode(np.clip(camera.apply(self.linear_rgb), 0.0, 1.0))

    def lab(self, camera):
        """CIELAB of what the camera records along the path (L, 3); read-only, kept per camera."""
        return self.memo(("lab", camera.matrix.tobytes()), lambda: lab_of_encoded(self.encoded(camera)))

    def memo(self, key, compute):
        """``compute()``, kept under ``key`` (a handful of entries at most)."""
        if key not in self._memo:
            if len(self._memo) >= 8:
                self._memo.clear()
            value = compute()
            if isinstance(value, np.ndarray):
                value.setflags(write=False)
            self._memo[key] = value
        return self._memo[key]

    def within(self, lo, hi):
        """The part of the path from ``lo`` to ``hi`` nm."""
        keep = (self.thickness_nm >= lo - 1e-9) & (self.thickness_nm <= hi + 1e-9)
        return ColourLookup(self.thickness_nm[keep], self.linear_rgb[keep], self.order[keep], self.period_nm)


def build_lookup(stack, range_nm=(0.0, 1500.0), step_nm=0.5, angle_deg=None, observer="2"):
    """The colour path of the stack's film, every ``step_nm`` over ``range_nm``."""
    lo, hi = float(range_nm[0]), float(range_nm[1])
    if not (0 <= lo < hi < 1e6) or not (0 < step_nm <= 0.5):
        raise FilmcalcError("The thickness range needs 0 ≤ min < max < 1 mm, and the lookup step must be ≤ 0.5 nm.")
    thickness = np.arange(lo, hi + step_nm / 2, step_nm)
    colours = film_colours(stack, thickness, None if angle_deg is None else [angle_deg], observer=observer)
    linear = (colours.XYZ[0] / 100.0) @ _adaptation_matrix(colours.white_XYZ).T
    orders = fringe_order(stack, np.append(thickness, 1.0), colours.angle_deg[0])
    return ColourLookup(thickness, linear, np.floor(orders[:-1]).astype(int) + 1, float(1.0 / orders[-1]))


@dataclasses.dataclass
class ThicknessMap:
    """Result of :func:`thickness_map` (arrays have the photo's shape)."""

    thickness_nm: np.ndarray
    sigma_nm: np.ndarray
    residual_dE: np.ndarray
    order: np.ndarray
    flags: np.ndarray
    camera: CameraModel
    calibration: dict
    statistics: dict
    warnings: list
    seconds: float

    def flag_mask(self, name):
        return (self.flags & FLAGS[name]) != 0


def _candidates(lab_obs, lab_lut, tolerance, max_candidates):
    """Local minima of the ΔE76 distance along the path, best first: indices (U, C) and distances."""
    U, L = lab_obs.shape[0], lab_lut.shape[0]
    idx = np.full((U, max_candidates), -1, dtype=np.int64)
    dist = np.full((U, max_candidates), np.inf)
    lut = lab_lut.astype(np.float32)
    lut2 = np.sum(lut**2, axis=1)
    chunk = max(1, (1 << 16) // L)
    for a in range(0, U, chunk):
        obs = lab_obs[a:a + chunk].astype(np.float32)
        d2 = np.sum(obs**2, axis=1)[:, None] + lut2[None, :] - 2 * obs @ lut.T
        d = np.sqrt(np.maximum(d2, 0))
        interior = np.ones_like(d, dtype=bool)
        interior[:, 1:] &= d[:, 1:] <= d[:, :-1]
        interior[:, :-1] &= d[:, :-1] < d[:, 1:]
        score = np.where(interior & (d <= tolerance), d, np.inf)
        k = min(max_candidates, L)
        part = np.argpartition(score, k - 1, axis=1)[:, :k]
        pd = np.take_along_axis(score, part, axis=1)
        order = np.argsort(pd, axis=1)
        part, pd = np.take_along_axis(part, order, axis=1), np.take_along_axis(pd, order, axis=1)
        idx[a:a + chunk, :k] = np.where(np.isfinite(pd), part, -1)
        dist[a:a + chunk, :k] = pd
    return idx, dist


_TABLES = threading.local()
# Up to this many pixels, sorting finds the distinct colours faster than scanning the 2²⁴ table.
SMALL_IMAGE = 1 << 17


def _colour_tables():
    """This thread's all-False presence table and index table over the 2²⁴ 8-bit colours."""
    if not hasattr(_TABLES, "present"):
        _TABLES.present = np.zeros(1 << 24, dtype=bool)
        _TABLES.index = np.zeros(1 << 24, dtype=np.int32)
    return _TABLES.present, _TABLES.index


@dataclasses.dataclass
class _Colours:
    """A photo reduced to its unique 8-bit colours."""

    shape: tuple
    inverse: np.ndarray     # (H·W,) index of each pixel's colour in ``rgb``
    rgb: np.ndarray         # (U, 3) encoded 0–1
    lab: np.ndarray         # (U, 3)

    @classmethod
    def of(cls, encoded):
        H, W, _ = encoded.shape
        q = np.clip(np.rint(encoded.reshape(-1, 3) * np.float32(255)), 0, 255).astype(np.int32)
        codes = (q[:, 0] << 16) | (q[:, 1] << 8) | q[:, 2]
        del q
        if codes.size <= SMALL_IMAGE:
            uniq, inverse = np.unique(codes, return_inverse=True)
            inverse = inverse.astype(np.int32).reshape(H, W)
        else:
            # A table over all 2²⁴ 8-bit colours: linear time, where sorting the pixels is not. The
            # tables are kept between calls (one per thread) and cleared where used: allocating and
            # zeroing 80 MB for every frame of a sequence costs more than the lookups.
            present, table = _colour_tables()
            present[codes] = True
            uniq = np.flatnonzero(present).astype(np.int32)
            present[uniq] = False
            table[uniq] = np.arange(uniq.size, dtype=np.int32)
            inverse = table[codes].reshape(H, W)
        rgb = np.stack([(uniq >> 16) & 255, (uniq >> 8) & 255, uniq & 255], axis=1) / 255.0
        return cls((H, W), inverse, rgb, lab_of_encoded(rgb))

    def per_pixel(self, values):
        """Spread per-colour values (U, ...) to the image (H, W, ...)."""
        return np.asarray(values)[self.inverse]

    def block_mean_lab(self, step, shape):
        """CIELAB averaged over step × step blocks (up to 5 × 5 pixels spread over each), on a grid of
        the given (coarse) shape."""
        hb, wb = shape
        acc = np.zeros((hb, wb, 3))
        count = np.zeros((hb, wb, 1))
        offsets = np.unique(np.linspace(0, step - 1, min(step, 5)).astype(int))
        for dy in offsets:
            for dx in offsets:
                part = self.inverse[dy::step, dx::step][:hb, :wb]
                acc[:part.shape[0], :part.shape[1]] += self.lab[part]
                count[:part.shape[0], :part.shape[1]] += 1
        return acc / np.maximum(count, 1)


def _refined_candidates(lab_obs, lab_lut, tolerance, max_candidates, coarse=4):
    """Candidates found on every ``coarse``-th lookup entry, then refined on the full lookup nearby."""
    L = lab_lut.shape[0]
    idx, dist = _candidates(lab_obs, lab_lut[::coarse], tolerance + 2.0, max_candidates)
    offsets = np.arange(-coarse, coarse + 1)
    # Only the (colour, candidate) pairs found are refined, in single precision.
    found = np.flatnonzero(idx.ravel() >= 0)
    row = found // idx.shape[1]
    fine = np.clip(idx.ravel()[found, None] * coarse + offsets, 0, L - 1)  # (P, 2·coarse+1)
    diff = lab_lut.astype(np.float32)[fine]
    diff -= lab_obs.astype(np.float32)[row, None, :]
    d2 = np.einsum("pkc,pkc->pk", diff, diff)
    del diff
    best = np.argmin(d2, axis=-1)[:, None]
    idx_f = np.full(idx.size, -1, dtype=np.int64)
    dist_f = np.full(idx.size, np.inf)
    idx_f[found] = np.take_along_axis(fine, best, axis=-1)[:, 0]
    dist_f[found] = np.sqrt(np.take_along_axis(d2, best, axis=-1)[:, 0])
    idx_f, dist_f = idx_f.reshape(idx.shape), dist_f.reshape(idx.shape)
    keep = (idx >= 0) & (dist_f <= tolerance)
    idx_f, dist_f = np.where(keep, idx_f, -1), np.where(keep, dist_f, np.inf)
    order = np.argsort(dist_f, axis=1)
    return np.take_along_axis(idx_f, order, axis=1), np.take_along_axis(dist_f, order, axis=1)


@dataclasses.dataclass
class _Candidates:
    """Candidate thicknesses per distinct colour, and which row each pixel uses.

    ``t`` and ``d`` have one row per colour plus a last row of +inf for
    pixels that are not used (saturated, dark); nothing per pixel × candidate
    is ever stored, which keeps a 24-megapixel photo within memory.
    """

    t: np.ndarray    # (U + 1, C) float32, thickness nm, +inf where none
    d: np.ndarray    # (U + 1, C) float32, ΔE76, +inf where none
    i: np.ndarray    # (U + 1, C) int32, index into the lookup, 0 where none
    key: np.ndarray  # (H, W) int32

    @functools.cached_property
    def gap(self):
        """(U + 1, C) thickness distance from each candidate to the nearest other one of its colour."""
        with np.errstate(invalid="ignore"):
            apart = np.abs(self.t[:, :, None] - self.t[:, None, :])
        C = self.t.shape[1]
        apart[:, np.arange(C), np.arange(C)] = np.inf
        return np.nan_to_num(np.min(apart, axis=2), nan=np.inf)

    def at(self, rows, cols):
        """(h, w, C) arrays for a sub-grid."""
        k = self.key[rows, cols]
        return self.t[k], self.d[k]

    def has(self):
        return np.isfinite(self.t[:, 0])[self.key]

    def take(self, pick, which="t"):
        """The picked candidate's thickness (or distance) per pixel."""
        table = self.t if which == "t" else self.d
        return table.ravel()[self.key * np.int32(table.shape[1]) + pick]


def _pixel_candidates(colours, usable, lookup, camera, tolerance, max_candidates):
    """Candidates for every distinct colour of the photo (see :class:`_Candidates`)."""
    idx, dist = _refined_candidates(colours.lab, lookup.lab(camera), tolerance, max_candidates)
    # Columns no colour uses are dropped (candidates are sorted best first): smaller tables, fewer cache misses.
    used = max(2, int(np.max(np.sum(idx >= 0, axis=1), initial=0)))
    idx, dist = idx[:, :used], dist[:, :used]
    # Missing candidates are +inf in both arrays, so no NaN needs handling downstream.
    t = np.where(idx >= 0, lookup.thickness_nm[np.maximum(idx, 0)], np.inf).astype(np.float32)
    C = t.shape[1]
    t = np.vstack([t, np.full((1, C), np.inf, np.float32)])
    d = np.vstack([dist.astype(np.float32), np.full((1, C), np.inf, np.float32)])
    i = np.vstack([np.maximum(idx, 0), np.zeros((1, C), np.int64)]).astype(np.int32)
    key = np.where(usable, colours.inverse, t.shape[0] - 1).astype(np.int32)
    return _Candidates(t, d, i, key)


def _nearest_candidate(cands, reference, colour_weight, key=None):
    """Index of the candidate nearest a reference thickness (colour distance as a tie-break).

    Missing candidates carry an infinite colour distance, so they never win.
    ``key`` (the colour rows) defaults to every pixel's; the result has the reference's shape.
    """
    shape = np.shape(reference)
    key = cands.key.ravel() if key is None else key
    ref = np.reshape(reference, (-1, 1)).astype(np.float32)
    pick = np.empty(key.size, dtype=np.int8)
    weight = np.float32(colour_weight)

    def block(a):  # cache-sized blocks, shared out over the cores (numpy releases the GIL)
        k = key[a:a + 65536]
        cost = np.abs(cands.t[k] - ref[a:a + 65536])
        cost += weight * cands.d[k]
        pick[a:a + 65536] = np.argmin(cost, axis=-1)

    _in_parallel(block, range(0, key.size, 65536))
    return pick.reshape(shape)


def _repick(cands, reference, pick):
    """:func:`_nearest_candidate` (colour weight 1), starting from a current pick.

    Only pixels where another candidate could be nearer are looked at again: a
    candidate c beats the current pick p only if |t_c − t_p| < 2·|t_p − ref| + d_p
    (as d_c ≥ 0), so where no other candidate is that close the pick stands.
    """
    flat = (cands.key * np.int32(cands.t.shape[1]) + pick).ravel()
    ref = np.ravel(reference)
    bound = 2 * np.abs(cands.t.ravel()[flat] - ref) + cands.d.ravel()[flat]
    again = np.flatnonzero(~(cands.gap.ravel()[flat] >= bound))
    del flat, bound
    pick = pick.ravel().copy()
    pick[again] = _nearest_candidate(cands, ref[again], 1.0, cands.key.ravel()[again])
    return pick.reshape(cands.key.shape)


def _stretch(lab_obs, index, distance, lab_lut, lookup, margin):
    """The stretch of thickness around lookup entries ``index`` where the colour path stays within
    ``distance + margin`` (ΔE76) of the colours ``lab_obs`` (..., 3), up to a quarter period each way,
    found to 2 nm. Returns its ends (low, high) in nm, shaped like ``index``."""
    shape = np.shape(index)
    index, distance = np.ravel(index), np.ravel(distance)
    lab_obs = np.reshape(lab_obs, (-1, 3)).astype(np.float32)
    lab_lut = lab_lut.astype(np.float32)
    step = float(lookup.thickness_nm[1] - lookup.thickness_nm[0])
    stride = max(1, int(round(2.0 / step)))
    reach = max(1, int(lookup.period_nm / 4 / step / stride))
    offsets = np.arange(-reach, reach + 1) * stride
    L = lab_lut.shape[0]
    low = np.empty(index.size, dtype=np.float32)
    high = np.empty(index.size, dtype=np.float32)
    for a in range(0, index.size, 4096):
        i = index[a:a + 4096]
        j = i[:, None] + offsets
        diff = lab_lut[np.clip(j, 0, L - 1)] - lab_obs[a:a + 4096, None, :]
        inside = np.einsum("ukc,ukc->uk", diff, diff) <= ((distance[a:a + 4096] + margin) ** 2)[:, None]
        inside &= (j >= 0) & (j < L)
        # Contiguous from the entry outwards on each side.
        right = np.maximum(np.cumprod(inside[:, reach:], axis=1).sum(axis=1) - 1, 0)
        left = np.maximum(np.cumprod(inside[:, reach::-1], axis=1).sum(axis=1) - 1, 0)
        low[a:a + 4096] = lookup.thickness_nm[np.maximum(i - stride * left, 0)]
        high[a:a + 4096] = lookup.thickness_nm[np.minimum(i + stride * right, L - 1)]
    return low.reshape(shape), high.reshape(shape)


def _colour_stretch(cands, used, lab_obs, lab_lut, lookup, margin):
    """:func:`_stretch` for every (colour, candidate) pair some pixel uses (flat indices ``used``).

    Returns two flat tables, (U + 1) · C long, of the stretch's ends in nm (the candidate's own
    thickness, or NaN where it is missing, for the pairs not computed).
    """
    low = np.where(np.isfinite(cands.t), cands.t, np.nan).astype(np.float32).ravel()
    high = low.copy()
    C = cands.t.shape[1]
    low[used], high[used] = _stretch(lab_obs[used // C], cands.i.ravel()[used], cands.d.ravel()[used], lab_lut,
                                     lookup, margin)
    return low, high


def _near_colour_edge(colours, pixels, distances):
    """Whether each of the (flat-indexed) pixels has a colour edge (over ``EDGE_DE``) within the
    given distances along the rows or columns."""
    H, W = colours.shape
    y, x = np.divmod(pixels, W)
    here = colours.lab[colours.inverse.ravel()[pixels]]
    near = np.zeros(pixels.size, dtype=bool)
    for r in distances:
        for yy, xx in ((y + r, x), (y - r, x), (y, x + r), (y, x - r)):
            there = colours.inverse[np.clip(yy, 0, H - 1), np.clip(xx, 0, W - 1)]
            near |= np.linalg.norm(colours.lab[there] - here, axis=-1) > EDGE_DE
    return near


def _upsample(coarse, step, shape, offset=(0, 0)):
    """Bilinear interpolation to ``shape`` of a grid whose node (i, j) is pixel (offset[0] + i·step,
    offset[1] + j·step); constant beyond the outer nodes."""
    H, W = shape
    h, w = coarse.shape
    xs = (np.arange(W, dtype=np.float32) - offset[1]) / step
    rows = np.stack([np.interp(xs, np.arange(w), coarse[r]) for r in range(h)]).astype(np.float32)
    ys = np.clip((np.arange(H, dtype=np.float32) - offset[0]) / step, 0, h - 1)
    y0 = np.floor(ys).astype(np.int64)
    y1 = np.minimum(y0 + 1, h - 1)
    fy = (ys - y0)[:, None].astype(np.float32)
    out = rows[y0]
    out *= 1 - fy
    out += fy * rows[y1]
    return out


def _in_parallel(function, items):
    """Call ``function`` on every item, on as many threads as there are cores."""
    items = list(items)
    if len(items) < 2 or _WORKERS < 2:
        for item in items:
            function(item)
        return
    from concurrent.futures import ThreadPoolExecutor

    with ThreadPoolExecutor(_WORKERS) as pool:
        list(pool.map(function, items))


EDGE_DE = 12.0  # colour change between neighbours (ΔE76) taken as an edge of the film (a step)
# On a smooth film, no candidate within this fraction of a fringe period of the thickness continued
# from a neighbour means the colours do not continue the film there (our choice).
BREAK_FRACTION = 1 / 3
SLOPE_CELLS = 3  # cells behind a pixel over which the local slope is taken (our choice)


TRENDS = {"right": (0, 1), "left": (0, -1), "down": (1, 0), "up": (-1, 0)}


def _grow(cand_t, cand_d, seeds, period_nm, valid, lab, trend=None, cand_lo=None, cand_hi=None):
    """Quality-guided growth over a small grid; returns chosen thickness (NaN unreached) and region ids.

    Across a smooth film the next pixel takes the candidate nearest the
    thickness predicted from its neighbour (continuing the local slope).
    Across an edge (a colour change above ``EDGE_DE``, e.g. an etched step)
    continuity says little, so the colour decides: the best-matching
    candidates (within the photo's colour noise of the best, at least 2 ΔE)
    compete on continuity only.
    A trend (the direction in which the film gets thicker) penalises
    candidates that would make the film thinner in that direction.
    """
    ty, tx = TRENDS[trend] if trend else (0, 0)
    break_nm = BREAK_FRACTION * period_nm
    # At an edge, candidates within the photo's colour noise of the best one stay in the running.
    best_match = cand_d[..., 0][valid & np.isfinite(cand_d[..., 0])]
    noise_margin = max(2.0, 3.0 * float(np.median(best_match))) if best_match.size else 2.0
    H, W, C = cand_t.shape
    edge = np.zeros((H, W, 4), dtype=bool)
    dy = np.linalg.norm(np.diff(lab, axis=0), axis=-1)
    dx = np.linalg.norm(np.diff(lab, axis=1), axis=-1)
    # An edge stands out from the photo's usual neighbour-to-neighbour change (noise, smooth slopes).
    typical = np.median(np.concatenate([dy.ravel(), dx.ravel()])) if dy.size + dx.size else 0.0
    threshold = max(EDGE_DE, 4 * typical)
    edge[:-1, :, 0] = edge[1:, :, 1] = dy > threshold      # (y+1, x) and (y-1, x)
    edge[:, :-1, 2] = edge[:, 1:, 3] = dx > threshold      # (y, x+1) and (y, x-1)
    edge = edge.tolist()
    # Candidates far worse in colour than a cell's best never win; leaving them out keeps the loop short.
    keep = np.isfinite(cand_t) & (cand_d <= cand_d[..., :1] + max(8.0, 3 * noise_margin))
    # Per cell, the kept candidates as (thickness, ΔE, low, high), best colour first: each stands
    # for the stretch of thickness whose colour fits as well (a point where the colour path is
    # steep, a range where it is flat), and continuity picks within it.
    lo_all = cand_t if cand_lo is None else cand_lo
    hi_all = cand_t if cand_hi is None else cand_hi
    cells = [[[] for _ in range(W)] for _ in range(H)]
    ys, xs, _ = np.nonzero(keep)
    values = np.stack([cand_t[keep], cand_d[keep], lo_all[keep], hi_all[keep]], axis=1).tolist()
    for y, x, v in zip(ys.tolist(), xs.tolist(), values):
        cells[y][x].append(v)
    first_t = np.where(keep[..., 0], cand_t[..., 0], np.nan).tolist()
    first_d = np.where(keep[..., 0], cand_d[..., 0], 1e9).tolist()
    ok = (valid & np.isfinite(cand_t[..., 0])).tolist()
    chosen = [[None] * W for _ in range(H)]
    region = np.full((H, W), -1, dtype=np.int64)
    heap = []
    for rid, (y, x, t) in enumerate(seeds):
        if ok[y][x] and chosen[y][x] is None:
            chosen[y][x] = t
            region[y, x] = rid
            heap.append((0.0, y, x))
    heapq.heapify(heap)
    next_region = len(seeds)
    # New regions start where the colour is least ambiguous: the largest gap
    # between the best and the second-best candidate (a unique match first).
    with np.errstate(invalid="ignore"):
        margin = np.where(np.isfinite(cand_d[..., 1]), cand_d[..., 1] - cand_d[..., 0], 1e6) - 1e-3 * cand_d[..., 0]
    order = np.argsort(np.where(valid & np.isfinite(cand_d[..., 0]), -margin, np.inf), axis=None).tolist()
    pos = 0
    while True:
        while heap:
            _, y, x = heapq.heappop(heap)
            t0 = chosen[y][x]
            rid = region[y, x]
            for k, (yy, xx) in enumerate(((y + 1, x), (y - 1, x), (y, x + 1), (y, x - 1))):
                if 0 <= yy < H and 0 <= xx < W and ok[yy][xx] and chosen[yy][xx] is None:
                    across_edge = edge[y][x][k]
                    floor = first_d[yy][xx] + noise_margin if across_edge else 1e18
                    # Predict by continuing the local slope along the line behind this pixel (up to
                    # SLOPE_CELLS cells, none across an edge), which keeps steep but smooth films on the
                    # right branch of the colour path; the longer baseline averages out colour noise.
                    sy, sx = y - yy, x - xx
                    backward = k ^ 1  # the direction index opposite to k
                    predicted, back = t0, 0
                    for j in range(1, SLOPE_CELLS + 1):
                        by, bx = y + j * sy, x + j * sx
                        if not (0 <= by < H and 0 <= bx < W) or chosen[by][bx] is None or \
                                region[by, bx] != rid or edge[by - sy][bx - sx][backward]:
                            break
                        back = j
                    if back:
                        predicted = t0 + (t0 - chosen[y + back * sy][x + back * sx]) / back
                    best, best_cost, best_jump, best_d = None, 1e18, 0.0, 0.0
                    for t, d, lo, hi in cells[yy][xx]:
                        if d <= floor:  # a good enough match at an edge
                            if not across_edge:
                                t = lo if predicted < lo else hi if predicted > hi else predicted
                            jump = abs(t - predicted)
                            cost = jump + 0.5 * d
                            along = (yy - y) * ty + (xx - x) * tx
                            if along and (t - t0) * along < -0.05 * period_nm:
                                cost += period_nm  # against the trend
                            if cost < best_cost:
                                best, best_cost, best_jump, best_d = t, cost, jump, d
                    if best is None or (not across_edge and best_jump > break_nm):
                        continue  # no candidate continues the film here: left for another path or region
                    chosen[yy][xx] = best
                    region[yy, xx] = rid
                    quality = 0.05 * best_d + (0.5 if across_edge else best_jump / period_nm)
                    heapq.heappush(heap, (quality, yy, xx))
        # Start a new region from the most confident unreached pixel.
        while pos < len(order):
            y, x = divmod(order[pos], W)
            pos += 1
            if ok[y][x] and chosen[y][x] is None:
                chosen[y][x] = first_t[y][x]
                region[y, x] = next_region
                next_region += 1
                heap.append((0.0, y, x))
                break
        else:
            break
    out = np.array([[np.nan if v is None else v for v in row] for row in chosen], dtype=float)
    return out, region


def _blur_normalised(values, weights, sigma):
    """Gaussian-weighted local mean of ``values`` where ``weights`` > 0 (normalised convolution)."""
    from scipy.ndimage import gaussian_filter

    dtype = np.result_type(values, np.float32)
    w = np.where(np.isfinite(values), weights, 0).astype(dtype)
    num, den = np.where(w > 0, values, 0) * w, w

    def blur(array):  # in place; the two run on separate cores
        gaussian_filter(array, sigma, output=array, mode="nearest", truncate=3.0)

    _in_parallel(blur, [num, den])
    return np.divide(num, den, out=np.full(values.shape, np.nan, dtype), where=den > 1e-6)


def _resolve(cands, valid, anchors, period_nm, colours, trend=None, coarse_max=96, lab_lut=None, lookup=None,
             prior=None):
    """Order resolution, coarse to fine (see the module docstring).

    With ``lab_lut`` (the predicted colours) and ``lookup``, candidates on the coarse grid stand
    for the stretches of thickness whose colour fits as well (see :func:`_stretch`). With a
    ``prior`` (a thickness map of the same film moments earlier, NaN where unknown), every coarse
    cell whose prior is continued by a candidate (within a third of a period) seeds the growth,
    and the prior itself is the full-resolution reference wherever it is known.
    """
    H, W = cands.key.shape
    step = max(1, int(np.ceil(max(H, W) / coarse_max)))
    ct, cd = cands.at(slice(None, None, step), slice(None, None, step))
    cv = valid[::step, ::step]
    seeds = []
    for x, y, t in anchors:
        yy, xx = min(y // step, ct.shape[0] - 1), min(x // step, ct.shape[1] - 1)
        if np.any(np.isfinite(ct[yy, xx])):
            j = int(np.argmin(np.abs(ct[yy, xx] - t)))
            seeds.append((yy, xx, float(ct[yy, xx, j])))
    if prior is not None:
        with np.errstate(invalid="ignore"):
            gap = np.abs(ct - prior[::step, ::step, None])
            nearest = np.argmin(np.where(np.isfinite(gap), gap, np.inf), axis=-1)
            near_t = np.take_along_axis(ct, nearest[..., None], -1)[..., 0]
            continued = cv & (np.take_along_axis(gap, nearest[..., None], -1)[..., 0] < BREAK_FRACTION * period_nm)
        ys, xs = np.nonzero(continued)
        seeds += list(zip(ys.tolist(), xs.tolist(), near_t[ys, xs].tolist()))
    if prior is not None and seeds and len(seeds) >= 0.5 * np.count_nonzero(cv & np.isfinite(ct[..., 0])):
        # The prior continues over most of the film: its seeds are the coarse map (no growth needed),
        # one region tied to the prior; cells it does not reach get their reference from around them.
        coarse = np.full(ct.shape[:2], np.nan)
        region = np.full(ct.shape[:2], -1, dtype=np.int64)
        ys, xs, ts = (np.array(v) for v in zip(*seeds))
        coarse[ys, xs], region[ys, xs] = ts, 0
        seeds = seeds[:1]
    else:
        # Edges are judged on block means (noise averages out), candidates on the sampled pixels.
        lab_blocks = colours.block_mean_lab(step, ct.shape[:2])
        lo = hi = None
        if lab_lut is not None:
            # Stretches for each distinct colour on the grid, for the candidates that fit about as
            # well as its best (the others seldom win and stay points).
            rows, inverse = np.unique(cands.key[::step, ::step], return_inverse=True)
            rows = rows[rows < colours.lab.shape[0]]  # not the row of unusable pixels
            d = cands.d[rows]
            best = d[:, 0][np.isfinite(d[:, 0])]
            margin = max(1.0, 1.4826 * float(np.median(best))) if best.size else 1.0
            fits = np.isfinite(d) & (d <= d[:, :1] + 4 * margin)
            lo_rows, hi_rows = cands.t[rows].copy(), cands.t[rows].copy()
            r, c = np.nonzero(fits)
            lo_rows[r, c], hi_rows[r, c] = _stretch(colours.lab[rows[r]], cands.i[rows[r], c], d[r, c], lab_lut, lookup,
                                                    margin)
            pad = np.full((1, lo_rows.shape[1]), np.inf, np.float32)  # for the unusable row, if present
            inverse = inverse.reshape(ct.shape[:2])
            lo, hi = np.vstack([lo_rows, pad])[inverse], np.vstack([hi_rows, pad])[inverse]
        coarse, region = _grow(ct, cd, seeds, period_nm, cv, lab_blocks, trend, lo, hi)
    # Fill unreached coarse cells so the upsampled reference is defined everywhere.
    filled = np.where(np.isnan(coarse), _blur_normalised(coarse, np.ones_like(coarse), 2.0), coarse)
    filled = np.where(np.isnan(filled), np.nanmean(coarse) if np.any(np.isfinite(coarse)) else 0.0, filled)
    reference = _upsample(filled.astype(np.float32), step, (H, W))
    if prior is not None:
        reference = np.where(np.isfinite(prior), prior, reference).astype(np.float32)
    pick = _repick(cands, reference, np.zeros((H, W), dtype=np.int8))
    chosen = cands.take(pick)
    # Second pass against a locally smoothed reference (weights favour good colour matches).
    local = _blur_normalised(chosen, (1.0 / (1.0 + cands.take(pick, "d"))).astype(np.float32), 3.0)
    local = np.where(np.isfinite(local), local, reference).astype(np.float32)
    del reference
    pick = _repick(cands, local, pick)
    region_full = np.repeat(np.repeat(region.astype(np.int32), step, axis=0), step, axis=1)[:H, :W]
    return cands.take(pick), pick, local, region_full, len(seeds)


def _fit_gains(pred_linear, obs_linear):
    """Least-squares per-channel gains: obs ≈ diag(g) @ pred."""
    g = np.sum(pred_linear * obs_linear, axis=0) / np.maximum(np.sum(pred_linear**2, axis=0), 1e-12)
    return np.diag(g)


def thickness_map(encoded_rgb, stack, range_nm=(0.0, 1500.0), *, anchors=(), reference=None, trend=None,
                  self_calibrate=True, full_matrix=None, tolerance=12.0, max_candidates=12, step_nm=0.5,
                  pixel_size_um=None, angle_deg=None, progress=None, lookup=None, camera=None, prior=None):
    """Turn a photo of interference colours into a thickness map.

    Parameters
    ----------
    encoded_rgb : numpy.ndarray, shape (H, W, 3)
        The photo as encoded sRGB in 0–1 (see :func:`filmcalc.io.load_photo`).
    stack : filmcalc.stack.Stack
    range_nm : (float, float)
        Thicknesses to consider, nm.
    anchors : sequence of (x, y, thickness_nm)
        Pixels of known thickness (x = column, y = row from the top-left).
    reference : (x0, y0, x1, y1, thickness_nm), optional
        A rectangle (inclusive corners) of known thickness for the camera gains.
    trend : {"right", "left", "down", "up"}, optional
        The direction in which the film gets thicker, where the user knows it.
    self_calibrate : bool
        Without a reference, fit the camera correction jointly with the map.
    full_matrix : bool, optional
        Fit a full 3 × 3 correction (default: when the photo's colours allow).
    tolerance : float
        Largest colour distance (ΔE76) for a candidate.
    pixel_size_um : float, optional
        For areas in the statistics.
    progress : callable(fraction, message), optional
    lookup : ColourLookup, optional
        The film's predicted colours over ``range_nm`` (built when not given).
    camera : CameraModel, optional
        A camera correction fitted before (e.g. on the first frame of a sequence): used as it
        is, with no calibration.
    prior : numpy.ndarray, shape (H, W), optional
        The film's thickness (nm) moments earlier, NaN where unknown: the order resolution
        continues it (see :func:`_resolve`), and the regions it reaches count as anchored.

    Returns
    -------
    ThicknessMap
    """
    t_start = time.perf_counter()
    report = progress or (lambda fraction, message: None)
    rgb = np.asarray(encoded_rgb, dtype=np.float32)
    if rgb.ndim != 3 or rgb.shape[2] != 3:
        raise FilmcalcError("The photo must be an RGB image.")
    H, W, _ = rgb.shape
    colours = _Colours.of(rgb)
    if np.ptp(colours.rgb, axis=-1).max() <= 2 / 255:
        raise FilmcalcError("This photo is greyscale: colour cannot tell thickness here. Use the monochromatic "
                            "fringe analysis for photos taken under line light or through a band-pass filter.")
    anchors = [(int(x), int(y), float(t)) for x, y, t in anchors]
    if trend is not None and trend not in TRENDS:
        raise FilmcalcError(f"The trend must be one of {', '.join(TRENDS)} (the direction of thicker film).")
    for x, y, t in anchors:
        if not (0 <= x < W and 0 <= y < H):
            raise FilmcalcError(f"Anchor ({x}, {y}) lies outside the {W} × {H} photo.")
        if not range_nm[0] <= t <= range_nm[1]:
            raise FilmcalcError(f"Anchor thickness {t} nm lies outside the range {range_nm[0]}–{range_nm[1]} nm.")
    report(0.05, "predicting the film's colours")
    wide = None
    if lookup is None:
        lo, hi = float(range_nm[0]), float(range_nm[1])
        if 0 <= lo < hi and abs(lo / step_nm - round(lo / step_nm)) < 1e-9:
            # One path from 0 nm to a period past the range serves both the search (sliced to the
            # range) and the wash-out limit.
            angle = stack.light.angle_deg if angle_deg is None else angle_deg
            period_nm = 1.0 / float(fringe_order(stack, np.array([1.0]), angle)[0])
            wide = build_lookup(stack, (0.0, hi + period_nm), step_nm, angle_deg)
            lookup = wide.within(lo, hi)
        else:
            lookup = build_lookup(stack, range_nm, step_nm, angle_deg)
    period = lookup.period_nm
    saturated = colours.per_pixel(np.any(colours.rgb >= 0.995, axis=-1))
    dark = colours.per_pixel(colours.lab[:, 0] < 3.0)
    valid = ~(saturated | dark)
    if not valid.any():
        raise FilmcalcError("Every pixel is saturated or nearly black: check the exposure of the photo.")
    if prior is not None and np.shape(prior) != (H, W):
        raise FilmcalcError(f"The prior thickness map is {np.shape(prior)}, the photo {H} × {W}: they must match.")
    if camera is None:
        camera, calibration = _initial_camera(rgb, valid, lookup, reference, self_calibrate, anchors)
    else:
        calibration = {"method": "given"}
    shift_dE = 0.0
    if self_calibrate and reference is None and calibration["method"] != "given":
        # Fit the camera on a subsample (≤ 60 000 pixels), alternating with the map.
        stride = max(1, int(np.ceil(np.sqrt(H * W / 60_000))))
        small = np.ascontiguousarray(rgb[::stride, ::stride])
        # Calibration works on colours rounded to 6 bits a channel: far fewer to search, and a
        # camera fit over thousands of pixels does not need the last bits.
        small_colours = _Colours.of(np.rint(small * 63) / 63)
        small_valid = valid[::stride, ::stride]
        small_anchors = [(x // stride, y // stride, t) for x, y, t in anchors]
        for k in range(3):
            report(0.1 + 0.2 * k, f"calibrating the camera (pass {k + 1} of 3)")
            small_cands = _pixel_candidates(small_colours, small_valid, lookup, camera, tolerance, max_candidates)
            has = small_cands.has()
            if not has.any():
                break
            chosen = _resolve(small_cands, has, small_anchors, period, small_colours, trend, coarse_max=48,
                              lab_lut=lookup.lab(camera), lookup=lookup)[0]
            camera, shift, fitted = _refit_camera(camera, chosen, has, srgb_decode(small), lookup, full_matrix,
                                                  anchored="anchor gains" in calibration)
            shift_dE += shift
            calibration.update(fitted)
            if k and shift < 0.1:
                break  # converged: the last pass moved the colours by under 0.1 ΔE00
    report(0.7, "matching colours")
    cands = _pixel_candidates(colours, valid, lookup, camera, tolerance, max_candidates)
    has = cands.has()
    if not has.any():
        raise FilmcalcError(f"No pixel matches any colour of this stack between {range_nm[0]:g} and "
                            f"{range_nm[1]:g} nm: check the stack, the light, the exposure and the range.")
    report(0.8, "resolving fringe orders")
    chosen, pick, local, region, n_seeds = _resolve(cands, has, anchors, period, colours, trend,
                                                    lab_lut=lookup.lab(camera), lookup=lookup,
                                                    prior=None if prior is None else np.asarray(prior, np.float32))
    report(0.9, "uncertainty and flags")
    # Everything but the agreement with the neighbours depends on the pixel's colour and picked
    # candidate only: computed once per (colour, candidate) in tables, then looked up per pixel.
    C = cands.t.shape[1]
    flat = cands.key * np.int32(C) + pick
    t_table = np.where(np.isfinite(cands.t), cands.t, np.nan).astype(np.float32)
    d_table = cands.d
    thickness = t_table.ravel()[flat]
    ok = np.isfinite(thickness)
    # Robust statistics over the photo are taken on a subsample of ≤ ~100 000 pixels.
    every = max(1, H * W // 100_000)
    sample = flat.ravel()[::every][ok.ravel()[::every]]
    t_s, d_s = t_table.ravel()[sample], d_table.ravel()[sample]
    noise = float(1.4826 * np.median(d_s)) if sample.size else 0.0
    washout_nm = _washout_thickness(stack, lookup, camera, angle_deg, (t_s, d_s), noise, wide)
    # Uncertainty: colour noise over the local slope of the colour path.
    lab_lut = lookup.lab(camera)
    slope = np.linalg.norm(np.gradient(lab_lut, lookup.thickness_nm, axis=0), axis=1)  # ΔE per nm
    sigma_table = np.minimum(np.maximum(noise, d_table) / np.maximum(slope[cands.i], 1e-3), period / 2)
    # Colour residual ΔE00, for the (colour, candidate) pairs some pixel uses (NaN for the others).
    used = np.flatnonzero(np.bincount(flat[ok], minlength=cands.t.size))
    residual_table = np.full(cands.t.shape, np.nan, np.float32)
    residual_table.ravel()[used] = delta_E_2000(colours.lab[used // C], lab_lut[cands.i.ravel()[used]])
    typical_residual = float(np.median(residual_table.ravel()[sample])) if sample.size else 0.0
    colour_flags = np.zeros(cands.t.shape, dtype=np.uint8)
    # Continuity chose a candidate that another fringe order clearly out-fits: the colours there
    # cannot tell the orders apart reliably (e.g. a camera the model does not describe well).
    colour_flags[d_table[:, :1] < d_table - max(2.0, 2.0 * noise)] |= FLAGS["ambiguous"]
    if washout_nm is not None:
        # Past the limit, or within a period of it with a colour that fits a washed-out thickness
        # about as well as the chosen one (within the colour noise, at least 1 ΔE).
        past = np.min(np.where(cands.t >= washout_nm, d_table, np.inf), axis=1, keepdims=True)
        near = (cands.t >= washout_nm - period) & (past <= d_table + max(1.0, noise))
        colour_flags[(cands.t >= washout_nm) | near] |= FLAGS["washed_out"]
    colour_flags[residual_table > max(POOR_FIT_MIN_DE, POOR_FIT_FACTOR * typical_residual)] |= FLAGS["poor_fit"]
    # Another order fits about as well: ambiguous where the neighbours do not settle it either.
    other = np.where(np.arange(C) == 0, 1, 0)
    with np.errstate(invalid="ignore"):  # inf − inf where a colour has no second candidate
        contested = (d_table[:, other] < d_table + 1.0) & (np.abs(cands.t[:, other] - cands.t) > period / 3)
    flags = colour_flags.ravel()[flat]
    off = np.abs(thickness - local)
    # (Flags are combined arithmetically: far quicker than boolean indexing on large photos.)
    flags |= (contested.ravel()[flat] & (off > period / 4)).view(np.uint8) * np.uint8(FLAGS["ambiguous"])
    flags |= (off > period / 3).view(np.uint8) * np.uint8(FLAGS["inconsistent"])
    del off
    flags *= ok.view(np.uint8)
    flags |= saturated.view(np.uint8) * np.uint8(FLAGS["saturated"])
    flags |= dark.view(np.uint8) * np.uint8(FLAGS["dark"])
    flags |= (valid & ~has).view(np.uint8) * np.uint8(FLAGS["no_match"])
    # Regions the growth could not join (separate patches of film, or colours that do not continue
    # the film) have fringe orders of their own: flagged unless an anchor ties them; without
    # anchors (or a prior) the largest region is the reference. Regions grown from a seed (an
    # anchor or a cell continuing the prior) are tied.
    counts = np.bincount(region[::4, ::4][ok[::4, ::4] & (region[::4, ::4] >= 0)].ravel())
    if counts.size:
        tied = np.zeros(max(counts.size, int(region.max()) + 1) + 1, dtype=bool)
        if n_seeds:
            tied[:n_seeds] = True
        else:
            tied[int(np.argmax(counts))] = True
        flags |= (ok & ~tied[region]).view(np.uint8) * np.uint8(FLAGS["unanchored"])
    # Where the colour path is nearly flat, colour alone cannot place the thickness within the
    # stretch where it stays as close to the pixel's colour: there the neighbours decide
    # (the thickness nearest the local reference within that stretch), and σ covers the stretch.
    # Only on flat stretches (over an eighth of a period) and away from colour edges, so steps
    # stay sharp.
    low, high = _colour_stretch(cands, used, colours.lab, lab_lut, lookup, max(1.0, noise))
    span = np.nan_to_num(high - low)
    sigma_table = np.maximum(sigma_table.astype(np.float32).ravel(), span / np.sqrt(12))
    sigma = np.where(ok, sigma_table[flat], np.nan)
    slide = np.flatnonzero((span > period / 8)[flat.ravel()])  # missing candidates have no span
    slide = slide[~_near_colour_edge(colours, slide, (3, 6, 9))]
    thickness = thickness.ravel()
    thickness[slide] = np.clip(local.ravel()[slide], low[flat.ravel()[slide]], high[flat.ravel()[slide]])
    thickness = thickness.reshape(H, W)
    del low, high, span, slide
    if washout_nm is not None:
        flags |= (ok & (thickness >= washout_nm)).view(np.uint8) * np.uint8(FLAGS["washed_out"])
    residual = np.where(ok, residual_table.ravel()[flat], np.nan)
    step = float(lookup.thickness_nm[1] - lookup.thickness_nm[0])
    index = np.clip(np.rint((np.nan_to_num(thickness) - lookup.thickness_nm[0]) / step), 0,
                    lookup.order.size - 1).astype(np.int32)
    order = np.where(ok, lookup.order[index], 0).astype(np.int16)
    stats = _statistics(thickness, flags, pixel_size_um)
    calibration.update({"matrix": camera.matrix.round(5).tolist(), "gains": camera.gains.round(5).tolist(),
                        "colour_shift_dE00": round(shift_dE, 3), "colour_noise_dE76": round(noise, 3),
                        "washout_nm": washout_nm,
                        "unique_colours": int(colours.rgb.shape[0]), "seeds": n_seeds})
    warnings = []
    if stats["flagged_fraction"] > 0.2:
        warnings.append(f"{100 * stats['flagged_fraction']:.0f} % of pixels are flagged: check the stack, light, "
                        "range and exposure, or add an anchor.")
    report(1.0, "done")
    return ThicknessMap(thickness.astype(np.float32), sigma.astype(np.float32), residual.astype(np.float32),
                        order, flags, camera, calibration, stats, warnings, time.perf_counter() - t_start)


def _initial_camera(rgb, valid, lookup, reference, self_calibrate, anchors=()):
    """Gains from a reference region or the anchors, an exposure guess for self-calibration, or the identity."""
    H, W, _ = rgb.shape
    if reference is not None:
        x0, y0, x1, y1, t_ref = reference
        if not (0 <= x0 <= x1 < W and 0 <= y0 <= y1 < H):
            raise FilmcalcError(f"Reference rectangle ({x0},{y0})–({x1},{y1}) lies outside the {W} × {H} photo.")
        patch = srgb_decode(rgb[y0:y1 + 1, x0:x1 + 1]).reshape(-1, 3)
        expected = np.array([np.interp(t_ref, lookup.thickness_nm, lookup.linear_rgb[:, i]) for i in range(3)])
        if np.any(expected <= 1e-6):
            raise FilmcalcError("The reference thickness predicts a black channel; choose another reference.")
        if np.any(patch >= 0.995):
            raise FilmcalcError("The reference region is saturated; use a less exposed photo or another region.")
        gains = patch.mean(axis=0) / expected
        return CameraModel(np.diag(gains)), {"method": "reference region", "reference": list(reference)}
    if not self_calibrate:
        return CameraModel(), {"method": "none (camera taken as ideal)"}
    if anchors:
        # Anchors are small references: the pixels around each give the per-channel gains.
        ratios = []
        for x, y, t in anchors:
            patch = rgb[max(0, y - 2):y + 3, max(0, x - 2):x + 3][valid[max(0, y - 2):y + 3, max(0, x - 2):x + 3]]
            expected = np.array([np.interp(t, lookup.thickness_nm, lookup.linear_rgb[:, i]) for i in range(3)])
            if patch.size and np.all(expected > 0.02):
                ratios.append(srgb_decode(patch).mean(axis=0) / expected)
        if ratios:
            gains = np.median(ratios, axis=0)
            return CameraModel(np.diag(gains)), {"method": "self-calibration", "anchor gains": gains.round(4).tolist()}
    # Exposure guess: match the bright end of the photo to the bright end of the colour path.
    every = max(1, int(np.sqrt(rgb.shape[0] * rgb.shape[1] / 50_000)))  # a subsample is plenty
    lin = srgb_decode(rgb[::every, ::every][valid[::every, ::every]])
    observed = np.percentile(lin.mean(axis=1), 95)
    predicted = np.percentile(lookup.linear_rgb.mean(axis=1), 95)
    k = float(observed / predicted) if predicted > 0 else 1.0
    return CameraModel(np.eye(3) * k), {"method": "self-calibration", "initial_exposure": round(k, 4)}


def _refit_camera(camera, chosen, has, linear, lookup, full_matrix, anchored=False):
    """One calibration step: fit the camera to the current assignment, keep it if it explains the photo better."""
    good = has & np.isfinite(chosen)
    sel = np.flatnonzero(good.ravel())
    if sel.size < 50:
        return camera, 0.0, {}
    if sel.size > 10000:
        sel = np.random.default_rng(0).choice(sel, 10000, replace=False)
    t = chosen.ravel()[sel]
    bins, inverse, counts = np.unique(np.rint(t / 2), return_inverse=True, return_counts=True)  # 2 nm bins
    # Each thickness bin counts once, so a large uniform area does not dominate the fit.
    w = np.sqrt(1.0 / counts[inverse])[:, None]
    pred = np.stack([np.interp(t, lookup.thickness_nm, lookup.linear_rgb[:, i]) for i in range(3)], -1)
    obs = linear.reshape(-1, 3)[sel]
    few = bins.size < 25 or np.ptp(t) < lookup.period_nm / 2
    spread = np.linalg.svd(pred - pred.mean(0), compute_uv=False)
    rich = bins.size >= 100 and spread[-1] > 0.02 * spread[0]
    use_full = rich if full_matrix is None else (full_matrix and rich)
    gains = _fit_gains(w * pred, w * obs)
    note = {}
    if few and anchored:
        return camera, 0.0, {"note": "few distinct colours: gains from the anchors kept"}
    if few:
        # A nearly uniform film shows too few colours to tell a colour cast from a thickness
        # change: fit the exposure only (a reference region calibrates such photos fully).
        gains = np.eye(3) * np.sum(w * pred * w * obs) / max(np.sum((w * pred) ** 2), 1e-12)
        use_full = False
        note = {"note": "few distinct colours: exposure fitted, no colour correction; give a reference region"}
    if use_full:
        # Ridge towards the gains: a full matrix only moves as far as the data demand.
        P, O = w * pred, w * obs
        lam = 0.01 * np.trace(P.T @ P) / 3
        new = np.linalg.solve(P.T @ P + lam * np.eye(3), P.T @ O + lam * gains.T).T
    else:
        new = gains
    before = np.median(np.linalg.norm(lab_of_linear(np.clip(camera.apply(pred), 0, 1)) - lab_of_linear(obs), axis=1))
    after = np.median(np.linalg.norm(lab_of_linear(np.clip(pred @ new.T, 0, 1)) - lab_of_linear(obs), axis=1))
    if not after < before:
        return camera, 0.0, {"full_matrix": False, **note}
    shift = float(np.median(delta_E_2000(lab_of_linear(np.clip(camera.apply(pred), 0, 1)),
                                         lab_of_linear(np.clip(pred @ new.T, 0, 1)))))
    return CameraModel(new), shift, {"full_matrix": bool(use_full), **note}


def _washout_thickness(stack, lookup, camera, angle_deg=None, fit=None, noise=0.0, wide=None):
    """Thickness from which colours no longer vary enough to read (None if beyond the range).

    The colour path, from 0 nm to one period past the user's range, is
    compared with its running mean over one fringe period. Past the
    thickness of its largest excursion (colours only fade from there), the
    limit is the first thickness where the excursion falls below
    ``WASHOUT_DE`` or below ``WASHOUT_MISFIT`` times how badly the model fits
    the photo there (the median colour distance of the pixels assigned
    nearby, ``fit`` = (thickness, ΔE76) per pixel; the photo's ``noise``
    where too few pixels say): neighbouring orders then look alike to this
    camera, and pixels past it are flagged instead of guessed. ``wide``: a
    lookup already covering that span, if there is one.
    """
    from scipy.ndimage import maximum_filter1d, uniform_filter1d

    top = float(lookup.thickness_nm[-1]) + lookup.period_nm
    if wide is None or wide.thickness_nm[0] != 0 or wide.thickness_nm[-1] < top - 1.0:
        # Kept with the lookup (which belongs to this stack): every frame of a sequence needs it.
        wide = lookup.memo(("wide", top, angle_deg), lambda: build_lookup(stack, (0.0, top), 0.5, angle_deg))
    lab = wide.lab(camera)
    t = wide.thickness_nm
    n = max(3, int(round(wide.period_nm / (t[1] - t[0]))))
    amplitude = maximum_filter1d(np.linalg.norm(lab - uniform_filter1d(lab, n, axis=0, mode="nearest"), axis=1),
                                 n, mode="nearest")
    misfit = np.full(t.shape, noise)
    if fit is not None and fit[0].size:
        # Median misfit of the pixels within half a period, on a grid of eighth periods.
        order = np.argsort(fit[0])
        ft, fd = fit[0][order], fit[1][order]
        half = wide.period_nm / 2
        for c in np.arange(0.0, t[-1] + half / 4, half / 4):
            a, b = np.searchsorted(ft, [c - half, c + half])
            if b - a >= 200:
                misfit[np.abs(t - c) <= half / 8] = np.median(fd[a:b])
    unreadable = amplitude < np.maximum(WASHOUT_DE, WASHOUT_MISFIT * misfit)
    unreadable[:int(np.argmax(amplitude))] = False
    if not unreadable.any():
        return None
    limit = float(t[np.argmax(unreadable)])
    return None if limit > lookup.thickness_nm[-1] else limit


def line_profile(values, x0, y0, x1, y1):
    """Values along the straight line from pixel (x0, y0) to (x1, y1), one sample per pixel of length.

    Each sample takes its nearest pixel (no interpolation, so steps stay steps).

    Returns
    -------
    distance_px, samples : numpy.ndarray
        Distance from (x0, y0) in pixels, and the values there.
    """
    values = np.asarray(values)
    H, W = values.shape[:2]
    for x, y in ((x0, y0), (x1, y1)):
        if not (0 <= x < W and 0 <= y < H):
            raise FilmcalcError(f"The line's end ({x}, {y}) lies outside the {W} × {H} map.")
    length = float(np.hypot(x1 - x0, y1 - y0))
    n = max(2, int(np.ceil(length)) + 1)
    f = np.linspace(0.0, 1.0, n)
    xs = np.rint(x0 + f * (x1 - x0)).astype(int)
    ys = np.rint(y0 + f * (y1 - y0)).astype(int)
    return f * length, values[ys, xs]


def _statistics(thickness, flags, pixel_size_um):
    good = np.isfinite(thickness) & (flags == 0)
    t = thickness[good]
    stats = {"pixels": int(thickness.size), "good_pixels": int(good.sum()),
             "flagged_fraction": float(1 - good.mean()) if thickness.size else 1.0}
    if t.size:
        p = np.percentile(t, [5, 25, 50, 75, 95])
        stats.update({"mean_nm": float(t.mean()), "std_nm": float(t.std()), "min_nm": float(t.min()),
                      "max_nm": float(t.max()), "p5_nm": p[0], "p25_nm": p[1], "median_nm": p[2], "p75_nm": p[3],
                      "p95_nm": p[4]})
    if pixel_size_um:
        stats["good_area_um2"] = float(good.sum() * pixel_size_um**2)
    return {k: (round(v, 3) if isinstance(v, float) else v) for k, v in stats.items()}
