"""Frame sequences: serial against Dask with two local workers, same run; and memory on a long recording.

* Speed: N one-megapixel frames (1000 × 1000 px) of an invented
  thinning soap film, rendered by the forward model with camera noise and saved
  as PNG files (default 96). Frames per second, serial runner (one process, its usual
  threads) against ``--scheduler local`` with 2 single-threaded Dask worker
  processes (goal: at least 1.7× on 2 cores). The cluster's start-up is timed
  with the Dask run. Both cubes are compared: they must be identical.
* Memory (``--long``): a 2,000-frame one-megapixel recording as an MP4 video
  (lossless H.264, 4:4:4) run on the local Dask cluster; peak resident memory of
  the whole process tree (this process and its workers, sampled every 0.2 s)
  (goal: under 2 GB: frames stream, nothing holds the recording).

Every frame is checked against the invented truth (fraction more than 25 nm off).
Run: ``python benchmarks/bench_sequence.py [--frames N] [--long [--long-frames 2000] [--long-video FILE]]``
(``--frames 0`` skips the speed part).
"""

from __future__ import annotations

import argparse
import tempfile
import threading
import time
from pathlib import Path

import numpy as np
import psutil
from PIL import Image

from filmcalc import synthetic
from filmcalc.frames import open_frames
from filmcalc.sequence import open_cube, run_sequence
from filmcalc.stack import load_stack
from filmcalc.thickness import build_lookup

ROOT = Path(__file__).resolve().parent.parent
SHAPE = (1000, 1000)
FPS = 250.0


def law_kwargs(duration_s):
    # The mean thickness goes from 700 nm to 700/√2 ≈ 495 nm over the recording (invented law).
    return dict(amplitude_nm=700.0 * np.sqrt(duration_s), t0_s=-duration_s, alpha=0.5)


def frames_of(stack, n, seed=0):
    lookup = build_lookup(stack, (0.0, 1200.0), 0.25)
    times = np.arange(n) / FPS
    camera = synthetic.CameraSettings(noise=0.002, seed=seed)
    yield from synthetic.render_sequence(stack, SHAPE, times, camera=camera, lookup=lookup,
                                         **law_kwargs(n / FPS))


class PeakMemory:
    """Peak resident memory of this process and all its children, sampled in a thread."""

    def __init__(self):
        self.peak, self._stop = 0, threading.Event()
        self._thread = threading.Thread(target=self._run, daemon=True)

    def _run(self):
        me = psutil.Process()
        while not self._stop.is_set():
            total = 0
            for p in [me] + me.children(recursive=True):
                try:
                    total += p.memory_info().rss
                except psutil.Error:
                    pass
            self.peak = max(self.peak, total)
            time.sleep(0.2)

    def __enter__(self):
        self._thread.start()
        return self

    def __exit__(self, *exc):
        self._stop.set()
        self._thread.join()


def wrong_fraction(out, truth):
    cube = open_cube(out)[0]["thickness_nm"]
    wrong = [np.nanmean(np.abs(np.asarray(cube[k]) - t) > 25) for k, t in enumerate(truth)]
    return float(np.mean(wrong))


def speed(stack, n, folder):
    truth = []
    for i, (_, frame, field) in enumerate(frames_of(stack, n)):
        Image.fromarray(np.rint(frame * 255).astype(np.uint8)).save(folder / f"film_{i:04d}.png")
        truth.append(field)
    source = open_frames(folder, fps=FPS)
    times = {}
    for scheduler in ("serial", "local"):
        t0 = time.perf_counter()
        run_sequence(source, stack, folder / f"out-{scheduler}", range_nm=(0.0, 1200.0), scheduler=scheduler,
                     workers=2)
        times[scheduler] = time.perf_counter() - t0
        print(f"  {scheduler:6s}: {n / times[scheduler]:.3f} frames/s ({times[scheduler]:.1f} s), "
              f"wrong order {100 * wrong_fraction(folder / f'out-{scheduler}', truth):.3f} % of pixels")
    a = open_cube(folder / "out-serial")[0]["thickness_nm"].compute()
    b = open_cube(folder / "out-local")[0]["thickness_nm"].compute()
    print(f"  identical cubes: {np.array_equal(a, b, equal_nan=True)}")
    print(f"  Dask (2 local workers) / serial: {times['serial'] / times['local']:.2f}× (goal ≥ 1.7×)")


def long_run(stack, n, folder, video=None):
    import imageio_ffmpeg

    if video is not None:  # a recording rendered by an earlier run of this script
        return measure_long(stack, Path(video), folder)
    video = folder / "long.mp4"
    t0 = time.perf_counter()
    writer = imageio_ffmpeg.write_frames(str(video), SHAPE[::-1], fps=FPS, quality=None, macro_block_size=8,
                                         pix_fmt_out="yuv444p", output_params=["-crf", "0", "-preset", "ultrafast"])
    writer.send(None)
    for _, frame, _ in frames_of(stack, n, seed=1):
        writer.send(np.rint(frame * 255).astype(np.uint8).tobytes())
    writer.close()
    print(f"  {n} frames rendered into {video.stat().st_size / 1e9:.2f} GB of video in {time.perf_counter() - t0:.0f} s")
    measure_long(stack, video, folder)


def measure_long(stack, video, folder):
    source = open_frames(video)
    t0 = time.perf_counter()
    with PeakMemory() as memory:
        result = run_sequence(source, stack, folder / "out-long", range_nm=(0.0, 1200.0), scheduler="local",
                              workers=2)
    seconds = time.perf_counter() - t0
    cube_bytes = sum(p.stat().st_size for p in (folder / "out-long").rglob("*") if p.is_file())
    print(f"  {len(source)} frames in {seconds:.0f} s ({len(source) / seconds:.2f} frames/s); "
          f"{len(result.skipped)} skipped; cube on disk {cube_bytes / 1e9:.2f} GB")
    print(f"  peak resident memory, client + workers: {memory.peak / 2**30:.2f} GiB (goal < 2 GB)")
    if result.fit is not None:
        print(f"  thinning exponent α = {result.fit.alpha:.4f} ± {result.fit.alpha_sigma:.4f} (invented truth 0.5)")


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--frames", type=int, default=96)
    parser.add_argument("--long", action="store_true")
    parser.add_argument("--long-frames", type=int, default=2000)
    parser.add_argument("--long-video", help="use this recording (from an earlier --long run) instead of rendering")
    args = parser.parse_args()
    stack = load_stack(ROOT / "demo_data" / "soap-film-loop.toml")
    print(f"Frame sequences, {SHAPE[1]} × {SHAPE[0]} px frames, {psutil.cpu_count()} cores")
    if args.frames:
        with tempfile.TemporaryDirectory() as tmp:
            print(f"Speed, {args.frames} frames:")
            speed(stack, args.frames, Path(tmp))
    if args.long:
        with tempfile.TemporaryDirectory() as tmp:
            print(f"Memory, {args.long_frames} frames:")
            long_run(stack, args.long_frames, Path(tmp), args.long_video)


if __name__ == "__main__":
    main()
