"""A recording of a film over time → a thickness cube, on this machine or a Dask cluster.

Public names
------------
run_sequence, SequenceResult
    Map every selected frame to thickness, with the previous frame as prior;
    write the cube, the time series and the records; fit the thinning law and
    find the rupture.
SequenceSetup
    What every frame shares: stack, range, camera, colour lookup, measures.
open_cube, load_series
    Read a finished run back: the cube as Dask arrays, the series as a dict of arrays.
export_tiff_stack, export_movie
    A float32 TIFF stack of the thickness maps; an MP4 or animated GIF of them with a colour bar.

Method
------
The first readable frame is mapped like a photo (anchors, self-calibrated
camera); its camera correction and colour lookup then serve every frame (one
camera, one light). Every later frame is mapped with a prior: the thickness map
of a frame before it (:func:`filmcalc.thickness.thickness_map`, ``prior``),
which keeps the fringe order from frame to frame as long as the film changes by
less than about a third of a fringe period between them.

Temporal continuity is carried by a coarse chain: every frame, decimated to at
most 64 pixels a side, is mapped with the previous frame's coarse map as its
prior, frame after frame through the recording. The full-resolution map of a
frame then takes its own frame's coarse map (upsampled) as prior. The chain is
light (a 250th of the pixels of a megapixel frame; a tenth of its time); the full-resolution maps
are independent of one another given the chain, so they run in parallel. The
frames are cut into chunks of K (by default 16 frames in a serial run, 4 on
Dask, so that workers start soon after the chain). The calling process reads
each frame once, in order, runs the chain, and sends each chunk's frames to the
workers for their full-resolution maps as soon as the chain has passed them, so
the chain and the maps overlap and workers never need the recording itself. The serial
runner calls the same functions on the same inputs, so both write the same
cube, bit for bit; the chunking changes how the work is shared out, never the
result.

A frame that cannot be read is skipped and recorded; a blank frame (uniform,
all dark or saturated, or with no film colour) is recorded as such; and once
the covered area falls below half its starting value for good
(:func:`filmcalc.series.rupture_frame`), that frame is the rupture and every
later frame is reported as ruptured, its thickness NaN.

Output folder
-------------
``cube.zarr``
    Zarr v3 group: ``thickness_nm`` and ``sigma_nm`` (frames × height × width,
    float32, NaN where none), ``flags`` (uint8, bits as in
    :data:`filmcalc.thickness.FLAGS`) and, with a line, ``kymograph_nm``
    (frames × samples); attributes: frame names, times, status, units.
``series.csv``
    One row per selected frame: time, status, mean and median thickness,
    coverage, volume, thinning rate, and the chosen points and regions.
``summary.json``, ``provenance.json``
"""

from __future__ import annotations

import csv
import dataclasses
import datetime
import itertools
import json
import logging
import math
import time
from pathlib import Path

import numpy as np

from . import __version__
from .errors import FilmcalcError
from .frames import FrameSource, open_frames
from .io import save_provenance
from .series import check_geometry, fit_power_law, frame_measures, rupture_frame, thinning_rate
from .stack import stack_to_dict
from .thickness import CameraModel, build_lookup, thickness_map

__all__ = ["SequenceSetup", "SequenceResult", "run_sequence", "start_local_cluster", "open_cube", "load_series", "export_tiff_stack",
           "export_movie", "STATUS", "DEFAULT_CHUNK"]

DEFAULT_CHUNK = 16  # frames per chunk, serial runs (fewer, larger zarr chunks)
DASK_CHUNK = 4  # frames per task on Dask: small, so workers start soon after the chain (our choice)
STATUS = ("ok", "unreadable", "blank", "ruptured")
_CUBE = "cube.zarr"
_CHUNK_BYTES = 64 << 20  # largest zarr chunk of thickness (one array), bytes (our choice)
# Memory settings for local Dask workers (see _Dask); for workers started by hand, set the same
# environment variables (the README shows how).
WORKER_MALLOC = {"distributed.nanny.pre-spawn-environ.MALLOC_TRIM_THRESHOLD_": str(128 << 20),
                 "distributed.nanny.pre-spawn-environ.MALLOC_MMAP_THRESHOLD_": str(32 << 20)}


@dataclasses.dataclass
class SequenceSetup:
    """What every frame of a run shares (sent once to each Dask worker)."""

    stack: object
    range_nm: tuple
    lookup: object
    camera: CameraModel
    pixel_size_um: float | None
    points: tuple
    regions: tuple
    line: tuple | None
    tolerance: float
    out_dir: str
    time_chunk: int
    threads: int | None = None


@dataclasses.dataclass
class _Frame:
    """One mapped (or skipped) frame as tasks hand it on."""

    k: int
    status: str
    reason: str
    thickness: np.ndarray | None
    sigma: np.ndarray | None
    flags: np.ndarray | None
    measures: dict
    seconds: float


@dataclasses.dataclass
class SequenceResult:
    """A finished run (see :func:`run_sequence`). Per-frame lists follow the selected frames."""

    out_dir: Path
    names: list
    raw_indices: list
    time_s: np.ndarray
    status: list
    reason: list
    series: dict
    rupture_index: int | None
    fit: object | None
    fit_note: str
    calibration: dict
    scheduler: str
    workers: int
    chunk: int
    seconds: float
    warnings: list

    @property
    def skipped(self):
        """Frames not mapped: [{index, frame, status, reason}]."""
        return [{"index": k, "frame": self.names[k], "status": s, "reason": r}
                for k, (s, r) in enumerate(zip(self.status, self.reason)) if s != "ok"]

    @property
    def rupture_time_s(self):
        return None if self.rupture_index is None else float(self.time_s[self.rupture_index])

    def summary(self):
        """A JSON-ready summary of the run."""
        fit = None
        if self.fit is not None:
            fit = {"alpha": round(self.fit.alpha, 5), "alpha_sigma": round(self.fit.alpha_sigma, 5),
                   "t0_s": round(self.fit.t0_s, 6), "t0_sigma_s": round(self.fit.t0_sigma_s, 6),
                   "amplitude_nm": round(self.fit.amplitude_nm, 3),
                   "rms_log_residual": round(self.fit.rms_log_residual, 5), "points": self.fit.points,
                   "t0_at_bound": self.fit.t0_at_bound}
        mapped = [k for k, s in enumerate(self.status) if s == "ok"]
        return {"out": str(self.out_dir), "frames_selected": len(self.status), "frames_mapped": len(mapped),
                "frames_skipped": self.skipped,
                "rupture": None if self.rupture_index is None else
                {"index": self.rupture_index, "frame": self.names[self.rupture_index],
                 "time_s": self.rupture_time_s},
                "thinning_law": fit, "thinning_law_note": self.fit_note,
                "units": {"time": "s", "thickness": "nm", "volume": "nL", "rate": "nm/s"},
                "scheduler": self.scheduler, "workers": self.workers, "chunk_frames": self.chunk,
                "seconds": round(self.seconds, 2),
                "frames_per_second_processed": round(len(self.status) / self.seconds, 3) if self.seconds else None,
                "warnings": self.warnings}


# ----------------------------------------------------------------------------- frame tasks

def _map_one(setup, k, frame, prior, measure=True):
    """Map frame k (an array, or the FrameError met reading it) with a prior; never raises for a bad frame."""
    t_start = time.perf_counter()
    if isinstance(frame, Exception):
        return _Frame(k, "unreadable", str(frame), None, None, None, {}, 0.0)
    if np.ptp(frame) < 4 / 255:
        return _Frame(k, "blank", "a uniform frame (no image)", None, None, None, {}, 0.0)
    try:
        tmap = thickness_map(frame, setup.stack, setup.range_nm, lookup=setup.lookup, camera=setup.camera,
                             prior=prior, tolerance=setup.tolerance, pixel_size_um=setup.pixel_size_um)
    except FilmcalcError as exc:
        return _Frame(k, "blank", str(exc), None, None, None, {}, time.perf_counter() - t_start)
    if not measure:
        return _Frame(k, "ok", "", tmap.thickness_nm, None, None, {}, time.perf_counter() - t_start)
    measures = frame_measures(tmap.thickness_nm, setup.pixel_size_um, setup.points, setup.regions, setup.line)
    measures["flagged_fraction"] = float(np.mean(tmap.flags != 0))
    return _Frame(k, "ok", "", tmap.thickness_nm, tmap.sigma_nm, tmap.flags, measures, time.perf_counter() - t_start)


def _use_threads(setup):
    if setup.threads:
        from . import thickness

        thickness._WORKERS = setup.threads


COARSE_SIDE = 64  # the coarse chain takes every 2nd pixel or more, at most this many a side (our choice)


def _coarse_step(shape):
    return max(2, math.ceil(max(shape) / COARSE_SIDE))


def _coarse_chain(setup, frames, prior, step):
    """The coarse maps of ``frames`` [(k, frame or FrameError)], each with the previous coarse map
    as prior, starting from ``prior``. Returns ({k: coarse thickness map or None}, the last coarse map)."""
    maps = {}
    for k, frame in frames:
        # Colours rounded to 6 bits a channel, as the camera calibration does: a third of the time,
        # and the coarse map only has to tell fringe orders apart (a period is ~200 nm; rounding
        # moves it by ~1 nm, median over the demo frames).
        small = frame if isinstance(frame, Exception) else (np.rint(frame[::step, ::step] * 63) / 63).astype(np.float32)
        result = _map_one(setup, k, small, prior, measure=False)
        maps[k] = result.thickness
        if result.status == "ok":
            prior = result.thickness
    return maps, prior


def _pack(frame):
    """A frame as 16-bit integers for sending to a worker (exact for 8- and 16-bit images: the
    worker's k/65535 rounds to the same float32 as the reader's k/255 or k/65535)."""
    if isinstance(frame, Exception):
        return frame
    return np.rint(np.clip(frame, 0.0, 1.0) * 65535.0).astype(np.uint16)


def _run_chunk(setup, frames, coarse, step, first=None):
    """Map ``frames`` [(k, frame packed by :func:`_pack`, or FrameError)] at full resolution, each with
    its own coarse map (``coarse[k]``, upsampled) as prior; ``first``, when given, is the frame before
    them, mapped already. Writes the chunk's slabs of the cube; returns the frames' records without
    their arrays."""
    _use_threads(setup)
    import zarr

    from .thickness import _upsample

    cube = zarr.open_group(str(Path(setup.out_dir) / _CUBE), mode="r+")
    done, slab = [], []

    def flush():
        if not slab:
            return
        a, b = slab[0].k, slab[-1].k + 1
        H, W = cube["thickness_nm"].shape[1:]
        thick = np.full((b - a, H, W), np.nan, np.float32)
        sigma = np.full((b - a, H, W), np.nan, np.float32)
        flags = np.zeros((b - a, H, W), np.uint8)
        for f in slab:
            if f.status == "ok":
                thick[f.k - a], sigma[f.k - a], flags[f.k - a] = f.thickness, f.sigma, f.flags
        cube["thickness_nm"][a:b] = thick
        cube["sigma_nm"][a:b] = sigma
        cube["flags"][a:b] = flags
        if "kymograph_nm" in cube:
            rows = np.full((b - a, cube["kymograph_nm"].shape[1]), np.nan, np.float32)
            for f in slab:
                if f.status == "ok":
                    rows[f.k - a] = f.measures["line_nm"]
            cube["kymograph_nm"][a:b] = rows
        for f in slab:
            f.measures.pop("line_nm", None)
            done.append(dataclasses.replace(f, thickness=None, sigma=None, flags=None))
        slab.clear()

    shape = cube["thickness_nm"].shape[1:]
    if first is not None:
        slab.append(first)
    for k, packed in frames:
        frame = packed if isinstance(packed, Exception) else packed.astype(np.float32) / np.float32(65535.0)
        prior = None if coarse.get(k) is None else _upsample(coarse[k], step, shape)
        slab.append(_map_one(setup, k, frame, prior))
        if (k + 1) % setup.time_chunk == 0:
            flush()
    flush()
    return done


# ----------------------------------------------------------------------------- the run

def _chunks(n, chunk):
    return [(a, min(a + chunk, n)) for a in range(0, n, chunk)]


def _time_chunk(shape, chunk):
    """Frames per zarr chunk: a power of two dividing ``chunk``, ≤ _CHUNK_BYTES per array."""
    per_frame = 4 * shape[0] * shape[1]
    tc = 1
    while tc * 2 <= chunk and chunk % (tc * 2) == 0 and tc * 2 * per_frame <= _CHUNK_BYTES:
        tc *= 2
    return tc


def _create_cube(out_dir, source, time_chunk, line_samples):
    import zarr

    H, W = source.shape
    group = zarr.open_group(str(out_dir / _CUBE), mode="w")
    chunks = (time_chunk, min(H, 512), min(W, 512))
    n = len(source)
    group.create_array("thickness_nm", shape=(n, H, W), chunks=chunks, dtype="float32", fill_value=np.nan)
    group.create_array("sigma_nm", shape=(n, H, W), chunks=chunks, dtype="float32", fill_value=np.nan)
    group.create_array("flags", shape=(n, H, W), chunks=chunks, dtype="uint8", fill_value=0)
    if line_samples:
        group.create_array("kymograph_nm", shape=(n, line_samples), chunks=(time_chunk, line_samples),
                           dtype="float32", fill_value=np.nan)
    return group


class _Serial:
    """Runs tasks in this process, in submission order (the reference for Dask runs)."""

    name = "serial"
    workers = 1

    def prepare(self, setup):
        return setup

    def send(self, frames):
        return frames

    def submit(self, function, *args):
        return function(*args)

    def gather(self, value):
        return value

    def close(self):
        pass


def start_local_cluster(workers=2):
    """A Dask LocalCluster on loopback: ``workers`` single-threaded worker processes (its status page on a
    free loopback port).

    Two adjustments make it fit for this work:

    * Dask's default MALLOC_TRIM_THRESHOLD_ for workers makes glibc map and unmap every large
      array afresh (page faults each time): thickness maps then run about 1.5× slower. The
      workers keep arrays up to 32 MB on the heap instead, as a plain Python process does.
    * Worker processes are spawned, and a spawned process runs the parent's ``__main__`` file
      again. Under Streamlit (and in test runners) that file is a page script, which must not
      run in a worker, so the workers start with an empty ``__main__``; tasks only use filmcalc.
    """
    import sys
    import types

    import dask
    import distributed

    main = sys.modules.get("__main__")
    sys.modules["__main__"] = types.ModuleType("__main__")
    try:
        with dask.config.set(WORKER_MALLOC):
            return distributed.LocalCluster(n_workers=int(workers), threads_per_worker=1, processes=True,
                                            host="127.0.0.1", dashboard_address="127.0.0.1:0",
                                            silence_logs=logging.ERROR)
    finally:
        sys.modules["__main__"] = main


def _warm_up():
    """Import the modules a chunk needs and allocate this worker's colour tables (run on each worker)."""
    import zarr  # noqa: F401

    from . import series, thickness  # noqa: F401

    thickness._colour_tables()


class _Dask:
    """Runs tasks on a Dask distributed cluster: a LocalCluster by default, or one at an address."""

    def __init__(self, scheduler, workers):
        import distributed

        self.cluster = None
        if scheduler in (None, "local"):
            self.cluster = start_local_cluster(workers)
            self.client = distributed.Client(self.cluster)
            self.name = f"local Dask cluster ({workers} workers)"
        else:
            try:
                self.client = distributed.Client(scheduler, timeout="15s")
            except (OSError, TimeoutError) as exc:
                raise FilmcalcError(f"No Dask scheduler answers at {scheduler!r} ({exc}). Start one with "
                                    "`dask scheduler` and workers with `dask worker ADDRESS` (see the README).") from None
            self.name = f"Dask cluster at {scheduler}"
        self.workers = max(1, len(self.client.scheduler_info()["workers"]))
        # Still during the first frame's calibration: each worker imports what the tasks use and
        # takes its colour tables, instead of doing so in its first chunk.
        self.client.run(_warm_up)

    def prepare(self, setup):
        """Send what every task shares to every worker once (single-threaded numpy in each)."""
        return self.client.scatter(dataclasses.replace(setup, threads=1), broadcast=True)

    def send(self, frames):
        return frames  # inside the task: measured faster than scattering them first (1.38× against 1.17×)

    def submit(self, function, *args):
        import warnings

        with warnings.catch_warnings():  # a chunk's frames make a "large graph" by design
            warnings.filterwarnings("ignore", message="Sending large graph")
            return self.client.submit(function, *args, pure=False)

    def gather(self, future):
        return future.result()

    def close(self):
        self.client.close()
        if self.cluster is not None:
            self.cluster.close()


def run_sequence(source, stack, out_dir, *, range_nm=(0.0, 1500.0), anchors=(), reference=None,
                 pixel_size_um=None, points=(), regions=(), line=None, chunk=None, scheduler="serial",
                 workers=2, tolerance=12.0, progress=None):
    """Map a recording frame by frame into a thickness cube, with time series, thinning law and rupture.

    Parameters
    ----------
    source : FrameSource or path
        See :func:`filmcalc.frames.open_frames` (a path is opened with all frames).
    stack : filmcalc.stack.Stack
    out_dir : path
        Output folder (created; an earlier run there is replaced).
    range_nm : (float, float)
        Thicknesses to consider, nm.
    anchors : sequence of (x, y, thickness_nm)
        Pixels of known thickness in the first selected frame.
    reference : (x0, y0, x1, y1, thickness_nm), optional
        A rectangle of known thickness in the first selected frame, for the camera gains.
    pixel_size_um : float, optional
        Pixel side on the film, µm: gives volumes.
    points, regions, line
        Where to follow the thickness (see :func:`filmcalc.series.frame_measures`).
    chunk : int, optional
        Frames per chunk (K in the module docstring); by default ``DEFAULT_CHUNK`` when serial,
        ``DASK_CHUNK`` on Dask.
    scheduler : {"serial", "local"} or str
        ``"serial"`` runs in this process; ``"local"`` starts a Dask LocalCluster with ``workers``
        single-threaded worker processes on this machine; ``"tcp://HOST:PORT"`` uses an existing
        Dask cluster, whose workers must see the output folder at the same path (they receive the
        frames from this process).
    workers : int
        Worker processes for ``"local"``.
    progress : callable(done_frames, total_frames, message), optional

    Returns
    -------
    SequenceResult
    """
    t_start = time.perf_counter()
    report = progress or (lambda done, total, message: None)
    if not isinstance(source, FrameSource):
        source = open_frames(source)
    if chunk is not None and int(chunk) < 2:
        raise FilmcalcError("Chunks must hold at least 2 frames.")
    if scheduler not in ("serial", "local") and not str(scheduler).startswith(("tcp://", "tls://", "inproc://")):
        raise FilmcalcError(f"Scheduler {scheduler!r}: use serial, local, or a Dask address such as "
                            "tcp://10.0.0.5:8786.")
    if int(workers) < 1:
        raise FilmcalcError("At least one worker is needed.")
    points = tuple((int(x), int(y)) for x, y in points)
    regions = tuple(tuple(int(v) for v in r) for r in regions)
    line = None if line is None else tuple(int(v) for v in line)
    check_geometry(source.shape, points, regions, line)
    n = len(source)
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    if chunk is None:
        chunk = DEFAULT_CHUNK if scheduler == "serial" else DASK_CHUNK
    chunk = int(chunk)
    time_chunk = _time_chunk(source.shape, chunk)
    warnings = []

    # The first readable frame gives the calibration; a Dask cluster starts (or is reached) while the first frame is calibrated.
    starting = None
    if scheduler != "serial":
        from concurrent.futures import ThreadPoolExecutor

        pool = ThreadPoolExecutor(1)
        starting = pool.submit(_Dask, scheduler, int(workers))
        pool.shutdown(wait=False)
    try:
        report(0, n, "calibrating on the first frame")
        lookup = build_lookup(stack, range_nm)
        first_k, first_map, early = _first_frame(source, stack, range_nm, anchors, reference, tolerance,
                                                 pixel_size_um, lookup)
        runner = _Serial() if starting is None else starting.result()
    except BaseException:
        if starting is not None:
            try:
                starting.result().close()
            except Exception:  # the cluster failed to start: the first error is the one to report
                pass
        raise
    if first_k and (anchors or reference is not None):
        warnings.append(f"The anchors were placed on {source.names[first_k]}, the first frame that could be read.")
    setup = SequenceSetup(stack, tuple(range_nm), lookup, first_map.camera, pixel_size_um, points, regions, line,
                          tolerance, str(out_dir), time_chunk)
    line_samples = None if line is None else frame_measures(first_map.thickness_nm, line=line)["line_nm"].size
    _create_cube(out_dir, source, time_chunk, line_samples)
    measures = frame_measures(first_map.thickness_nm, pixel_size_um, points, regions, line)
    measures["flagged_fraction"] = float(np.mean(first_map.flags != 0))
    first = _Frame(first_k, "ok", "", first_map.thickness_nm, first_map.sigma_nm, first_map.flags, measures,
                   first_map.seconds)

    # Chunks from the first mapped frame on (frames before it were skipped).
    plan = [(a + first_k, b + first_k) for a, b in _chunks(n - first_k, chunk)]
    records = list(early)
    try:
        report(len(records) + 1, n, f"mapping frames on {runner.name}")
        records += _run_plan(runner, source, setup, plan, first, n, len(records) + 1, report)
    finally:
        runner.close()
    records.sort(key=lambda f: f.k)
    report(n, n, "time series, thinning law and rupture")
    return _finish(source, stack, out_dir, records, first_map, setup, runner, chunk, anchors, reference, warnings,
                   time.perf_counter() - t_start)


def _first_frame(source, stack, range_nm, anchors, reference, tolerance, pixel_size_um, lookup):
    """Map the first frame that can be mapped (with the anchors, calibrating the camera).

    Returns its index, its ThicknessMap and the records of the frames skipped before it."""
    early = []
    for k, frame in source.iterate(0, len(source)):
        if isinstance(frame, Exception) or np.ptp(frame) < 4 / 255:
            early.append(_map_one(None, k, frame, None))
            continue
        try:
            tmap = thickness_map(frame, stack, range_nm, anchors=anchors, reference=reference, lookup=lookup,
                                 tolerance=tolerance, pixel_size_um=pixel_size_um)
        except FilmcalcError as exc:
            if anchors or reference is not None:
                raise FilmcalcError(f"{source.names[k]} (the first frame to map): {exc}") from None
            early.append(_Frame(k, "blank", str(exc), None, None, None, {}, 0.0))
            continue
        return k, tmap, early
    raise FilmcalcError("No frame of the selection could be mapped: "
                        + "; ".join(f"{source.names[f.k]}: {f.reason}" for f in early[:3]))


def _run_plan(runner, source, setup, plan, first, total, done, report):
    """Read the frames once, in order; run the coarse chain here, chunk by chunk, and hand each
    chunk's frames to the runner for their full-resolution maps as soon as the chain has passed
    them (at most a bounded window of chunks in flight)."""
    window = 2 * runner.workers + 1
    pending, records = [], []
    step = _coarse_step(source.shape)
    prior = np.ascontiguousarray(first.thickness[::step, ::step])
    remote = runner.prepare(setup)
    reading = source.iterate(first.k + 1, total)
    for j, (a, b) in enumerate(plan):
        # Chunk 0 starts with the calibration frame, mapped already (and counted).
        frames = list(itertools.islice(reading, b - a - (j == 0)))
        coarse, prior = _coarse_chain(setup, frames, prior, step)
        task = runner.submit(_run_chunk, remote, runner.send([(k, _pack(f)) for k, f in frames]), coarse, step,
                             first if j == 0 else None)
        del frames
        pending.append((task, b - a - (j == 0)))
        while len(pending) >= window or (j == len(plan) - 1 and pending):
            future, size = pending.pop(0)
            records += runner.gather(future)
            done += size
            report(min(done, total), total, f"mapping frames on {runner.name}")
    return records


def _finish(source, stack, out_dir, records, first_map, setup, runner, chunk, anchors, reference, warnings,
            seconds):
    import zarr

    n = len(source)
    times = source.times_s()
    status = ["ok"] * n
    reason = [""] * n
    columns = {name: np.full(n, np.nan) for name in ("mean_nm", "median_nm", "coverage", "flagged_fraction",
                                                      "volume_nL")}
    point_cols = [np.full(n, np.nan) for _ in setup.points]
    region_cols = [np.full(n, np.nan) for _ in setup.regions]
    for f in records:
        status[f.k], reason[f.k] = f.status, f.reason
        if f.status == "ok":
            for name in columns:
                columns[name][f.k] = f.measures[name]
            for i, v in enumerate(f.measures["points_nm"]):
                point_cols[i][f.k] = v
            for i, v in enumerate(f.measures["regions_nm"]):
                region_cols[i][f.k] = v
        else:
            columns["coverage"][f.k] = 0.0
    readable = np.array([s != "unreadable" for s in status])
    rupture = rupture_frame(columns["coverage"], readable)
    cube = zarr.open_group(str(out_dir / _CUBE), mode="r+")
    if rupture is not None:
        for k in range(rupture + 1, n):
            if status[k] != "unreadable":
                status[k], reason[k] = "ruptured", f"after the rupture at {source.names[rupture]}"
        # Thickness after the rupture is not film: NaN in the cube and the series.
        a = rupture + 1
        if a < n:
            for name in ("thickness_nm", "sigma_nm"):
                for s in range(a, n, setup.time_chunk * 8):
                    e = min(n, s + setup.time_chunk * 8)
                    cube[name][s:e] = np.float32(np.nan)
            if "kymograph_nm" in cube:
                cube["kymograph_nm"][a:] = np.float32(np.nan)
            for col in list(columns.values()) + point_cols + region_cols:
                col[a:] = np.nan
    ok = np.array([s == "ok" for s in status])
    rate = np.full(n, np.nan)
    before = ok & np.isfinite(columns["mean_nm"]) & (np.arange(n) < (rupture if rupture is not None else n))
    if before.sum() >= 2:
        rate[before] = thinning_rate(times[before], columns["mean_nm"][before])
    fit, fit_note = None, ""
    try:
        fit = fit_power_law(times[before], columns["mean_nm"][before])
        fit_note = "h = A·(t − t0)^−α fitted to the mean thickness of the frames before the rupture."
        if fit.t0_at_bound:
            fit_note += " The time origin t0 is not pinned down by the data: α is poorly defined."
    except FilmcalcError as exc:
        fit_note = f"No thinning law: {exc}"
    series = {"time_s": times, **columns, "thinning_rate_nm_per_s": rate}
    for i, (x, y) in enumerate(setup.points):
        series[f"point_{i + 1}_x{x}_y{y}_nm"] = point_cols[i]
    for i, r in enumerate(setup.regions):
        series[f"region_{i + 1}_{r[0]}_{r[1]}_{r[2]}_{r[3]}_nm"] = region_cols[i]
    cube.attrs.update({"frames": source.names, "raw_indices": source.raw_indices, "time_s": times.tolist(),
                       "status": status, "units": {"thickness_nm": "nm", "sigma_nm": "nm", "time_s": "s"},
                       "line": list(setup.line) if setup.line else None, "fps": source.fps,
                       "filmcalc_version": __version__})
    skipped = [f for f in status if f in ("unreadable", "blank")]
    if len(skipped) > 0.2 * n:
        warnings.append(f"{len(skipped)} of {n} frames could not be mapped: check the recording, stack and range.")
    calibration = {k: v for k, v in first_map.calibration.items()}
    result = SequenceResult(out_dir, source.names, source.raw_indices, times, status, reason, series, rupture, fit,
                            fit_note, calibration, runner.name, runner.workers, chunk, seconds, warnings)
    _write_series(out_dir / "series.csv", result)
    (out_dir / "summary.json").write_text(json.dumps(result.summary(), indent=1), encoding="utf-8")
    save_provenance(out_dir / "provenance.json", {
        "filmcalc_version": __version__, "time": datetime.datetime.now(datetime.timezone.utc).isoformat(),
        "input": {"path": source.path, "kind": source.kind, "sha256": source.fingerprint(),
                  "frames_selected": len(source), "raw_indices": [source.raw_indices[0], source.raw_indices[-1]],
                  "fps": source.fps},
        "stack": stack_to_dict(stack), "range_nm": list(setup.range_nm), "anchors": [list(a) for a in anchors],
        "reference": None if reference is None else list(reference), "pixel_size_um": setup.pixel_size_um,
        "calibration": calibration, "chunk_frames": chunk, "scheduler": runner.name,
        "points": [list(p) for p in setup.points], "regions": [list(r) for r in setup.regions],
        "line": None if setup.line is None else list(setup.line)})
    return result


def _write_series(path, result):
    names = list(result.series)
    with open(path, "w", newline="", encoding="utf-8") as handle:
        writer = csv.writer(handle)
        writer.writerow(["index", "frame", "status", "reason"] + names)
        for k in range(len(result.status)):
            row = [k, result.names[k], result.status[k], result.reason[k]]
            row += ["" if not math.isfinite(result.series[c][k]) else f"{result.series[c][k]:.6g}" for c in names]
            writer.writerow(row)


# ----------------------------------------------------------------------------- reading back, exports

def open_cube(out_dir):
    """The run's arrays as Dask arrays (lazy): {name: dask.array.Array}, plus the zarr attributes."""
    import dask.array as da
    import zarr

    path = Path(out_dir) / _CUBE
    if not path.exists():
        raise FilmcalcError(f"{str(out_dir)!r} holds no thickness cube ({_CUBE}).")
    group = zarr.open_group(str(path), mode="r")
    arrays = {name: da.from_zarr(str(path), component=name) for name in group.array_keys()}
    return arrays, dict(group.attrs)


def load_series(out_dir):
    """The run's ``series.csv`` as {column: numpy array} (text columns as lists)."""
    path = Path(out_dir) / "series.csv"
    if not path.exists():
        raise FilmcalcError(f"{str(out_dir)!r} holds no series.csv.")
    with open(path, newline="", encoding="utf-8") as handle:
        rows = list(csv.reader(handle))
    header, rows = rows[0], rows[1:]
    out = {}
    for i, name in enumerate(header):
        values = [r[i] for r in rows]
        if name in ("frame", "status", "reason"):
            out[name] = values
        else:
            out[name] = np.array([float(v) if v != "" else np.nan for v in values])
    return out


def export_tiff_stack(out_dir, path):
    """Write the thickness maps as a float32 multi-page TIFF (nm; NaN where none), one frame at a time."""
    import tifffile

    arrays, _ = open_cube(out_dir)
    cube = arrays["thickness_nm"]
    path = Path(path)
    with tifffile.TiffWriter(path, bigtiff=cube.nbytes > 3.5e9) as tif:
        for k in range(cube.shape[0]):
            tif.write(np.asarray(cube[k]), contiguous=True, metadata=None)
    return path


def _colour_bar(height, lo, hi, cmap, label):
    """An RGB strip (height × ~110 px) with a labelled colour bar, rendered once with matplotlib."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    dpi = 100
    fig = plt.figure(figsize=(1.25, max(height, 120) / dpi), dpi=dpi)
    ax = fig.add_axes([0.12, 0.05, 0.22, 0.9])
    fig.colorbar(matplotlib.cm.ScalarMappable(matplotlib.colors.Normalize(lo, hi), cmap), cax=ax, label=label)
    fig.canvas.draw()
    strip = np.asarray(fig.canvas.buffer_rgba())[..., :3]
    plt.close(fig)
    if strip.shape[0] != height:
        from PIL import Image

        strip = np.asarray(Image.fromarray(strip).resize((strip.shape[1], height)))
    return strip


def export_movie(out_dir, path, fps=10.0, every=1, vmin=None, vmax=None, max_height=540, progress=None):
    """An MP4 (H.264) or animated GIF of the thickness maps over time, with a colour bar (cividis, nm).

    Parameters
    ----------
    fps : float
        Playback frames per second.
    every : int
        Use every n-th frame.
    vmin, vmax : float, optional
        Colour scale, nm (default: 1st and 99th percentiles over a sample of frames).
    max_height : int
        Frames are shrunk to at most this height, px (and frames under 300 px enlarged by a whole factor).
    """
    import matplotlib
    from PIL import Image

    path = Path(path)
    kind = path.suffix.lower()
    if kind not in (".mp4", ".gif"):
        raise FilmcalcError("The movie must be .mp4 or .gif.")
    arrays, attrs = open_cube(out_dir)
    cube = arrays["thickness_nm"]
    n, H, W = cube.shape
    frames = list(range(0, n, max(1, int(every))))
    if vmin is None or vmax is None:
        sample = np.concatenate([np.asarray(cube[k][::4, ::4]).ravel() for k in frames[::max(1, len(frames) // 20)]])
        sample = sample[np.isfinite(sample)]
        lo, hi = (np.percentile(sample, [1, 99]) if sample.size else (0.0, 1.0))
        vmin = lo if vmin is None else vmin
        vmax = hi if vmax is None else vmax
    vmax = max(vmax, vmin + 1e-6)
    scale = max_height / H if H > max_height else float(math.ceil(300 / H))  # small frames are enlarged
    h, w = max(2, int(H * scale) // 2 * 2), max(2, int(W * scale) // 2 * 2)
    lut = (matplotlib.colormaps["cividis"](np.linspace(0, 1, 256))[:, :3] * 255).astype(np.uint8)
    bar = _colour_bar(h, vmin, vmax, "cividis", "thickness (nm)")
    width = w + bar.shape[1] + (w + bar.shape[1]) % 2
    times = attrs.get("time_s", list(range(n)))

    def picture(k):
        t = np.asarray(cube[k])
        index = np.clip((t - vmin) / (vmax - vmin) * 255, 0, 255)
        rgb = lut[np.nan_to_num(index).astype(np.uint8)]
        rgb[~np.isfinite(t)] = 255  # no thickness: white
        rgb = np.asarray(Image.fromarray(rgb).resize((w, h), Image.Resampling.NEAREST if scale > 1 else
                                                     Image.Resampling.BILINEAR))
        canvas = np.full((h, width, 3), 255, np.uint8)
        canvas[:, :w], canvas[:, w:w + bar.shape[1]] = rgb, bar
        status = attrs.get("status", ["ok"] * n)[k]
        _stamp(canvas, f"t = {times[k]:.3f} s" + ("" if status == "ok" else f": {status}"))
        return canvas

    if kind == ".gif":
        images = []
        for i, k in enumerate(frames):
            images.append(Image.fromarray(picture(k)).convert("P", palette=Image.Palette.ADAPTIVE))
            if progress:
                progress(i + 1, len(frames), "rendering the movie")
        images[0].save(path, save_all=True, append_images=images[1:], duration=int(1000 / fps), loop=0)
        return path
    import imageio_ffmpeg

    writer = imageio_ffmpeg.write_frames(str(path), (width, h), fps=fps, quality=8, macro_block_size=2)
    writer.send(None)
    try:
        for i, k in enumerate(frames):
            writer.send(np.ascontiguousarray(picture(k)).tobytes())
            if progress:
                progress(i + 1, len(frames), "rendering the movie")
    finally:
        writer.close()
    return path


def _stamp(canvas, text):
    """Write a short label in the top-left corner (PIL's default font)."""
    from PIL import Image, ImageDraw

    image = Image.fromarray(canvas)
    draw = ImageDraw.Draw(image)
    draw.rectangle([2, 2, 8 + 7 * len(text), 16], fill=(255, 255, 255))
    draw.text((5, 3), text, fill=(0, 0, 0))
    canvas[...] = np.asarray(image)
