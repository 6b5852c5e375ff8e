"""Frame sequences read one frame at a time: a folder of images, a multi-page TIFF or a video.

Public names
------------
open_frames, FrameSource
    Open a sequence and select frames (``A:B:STEP``); frames are decoded only
    when asked for, so a long recording is never held in memory.
parse_frame_range
    ``"A:B:STEP"`` → (start, stop, step), as Python slices count (0-based,
    stop excluded).
natural_key
    Sort key that puts ``frame_2.png`` before ``frame_10.png``.

Videos (MP4, AVI, MOV, MKV) are decoded by the ffmpeg executable that the
``imageio-ffmpeg`` package ships. Seeking to a frame asks ffmpeg for the first
frame at or after half a frame before its time stamp, which is exact for
the constant-frame-rate files that cameras write (variable frame rates are not
supported). Compressed video stores colour at reduced resolution and adds
compression artefacts: for measurement, record uncompressed or lossless
frames where the camera allows.
"""

from __future__ import annotations

import dataclasses
import hashlib
import re
from pathlib import Path

import numpy as np

from .errors import FilmcalcError
from .io import MAX_PIXELS, load_photo, rgb_of_samples, tiff_page_samples

__all__ = ["FrameSource", "open_frames", "parse_frame_range", "natural_key", "IMAGE_SUFFIXES", "VIDEO_SUFFIXES"]

IMAGE_SUFFIXES = (".png", ".tif", ".tiff", ".jpg", ".jpeg")
VIDEO_SUFFIXES = (".mp4", ".avi", ".mov", ".mkv", ".m4v")


class FrameError(FilmcalcError):
    """One frame cannot be read (the sequence can go on without it)."""


def natural_key(name):
    """Sort key: digit runs compare as numbers (``f2`` < ``f10``), case ignored."""
    return [int(part) if part.isdigit() else part.lower() for part in re.split(r"(\d+)", str(name))]


def parse_frame_range(text):
    """``"A:B:STEP"`` (any part may be empty) → (start, stop, step), 0-based, stop excluded.

    >>> parse_frame_range("10:100:2")
    (10, 100, 2)
    >>> parse_frame_range("::5")
    (0, None, 5)
    """
    if text is None or str(text).strip() == "":
        return 0, None, 1
    parts = str(text).strip().split(":")
    if len(parts) > 3:
        raise FilmcalcError(f"Frame range {text!r}: write START:STOP:STEP (for example 0:500:2).")
    try:
        values = [int(p) if p.strip() else None for p in parts] + [None] * (3 - len(parts))
    except ValueError:
        raise FilmcalcError(f"Frame range {text!r}: START, STOP and STEP must be whole numbers.") from None
    start, stop, step = values
    if len(parts) == 1:  # a single number: that frame only
        stop = start + 1
    start = 0 if start is None else start
    step = 1 if step is None else step
    if start < 0 or (stop is not None and stop < 0) or step < 1:
        raise FilmcalcError(f"Frame range {text!r}: frames count from 0 and STEP must be at least 1.")
    if stop is not None and stop <= start:
        raise FilmcalcError(f"Frame range {text!r} selects no frame (STOP must exceed START).")
    return start, stop, step


@dataclasses.dataclass
class FrameSource:
    """A selection of frames from one recording, read on demand.

    Attributes
    ----------
    path : str
        The folder, TIFF or video.
    kind : {"folder", "tiff", "video"}
    raw_indices : list of int
        The recording's frame numbers (0-based) that were selected.
    names : list of str
        A label per selected frame: its file name, or ``page N`` / ``frame N``.
    fps : float or None
        Frames per second of the recording (from the file, or given).
    shape : (int, int)
        Height and width of the frames, in pixels.
    files : list of str
        The folder's image files (folder only).
    file_fps : float or None
        The video's own frame rate (for seeking; video only).
    """

    path: str
    kind: str
    raw_indices: list
    names: list
    fps: float | None
    shape: tuple
    files: list = dataclasses.field(default_factory=list)
    file_fps: float | None = None

    def __len__(self):
        return len(self.raw_indices)

    def times_s(self):
        """Time of each selected frame from the start of the recording, s (frame numbers when fps is unknown)."""
        scale = 1.0 / self.fps if self.fps else 1.0
        return np.asarray(self.raw_indices, dtype=float) * scale

    def read(self, k):
        """The k-th selected frame as encoded RGB float32 (H, W, 3) in 0–1; raises FrameError if unreadable."""
        for _, frame in self.iterate(k, k + 1):
            if isinstance(frame, Exception):
                raise frame
            return frame
        raise FrameError(f"{self.names[k]}: no frame could be decoded.")

    def iterate(self, start=0, stop=None):
        """Yield (k, frame) for selected frames k in [start, stop); ``frame`` is the array, or a
        :class:`FrameError` saying why that frame could not be read (the caller decides)."""
        stop = len(self) if stop is None else min(stop, len(self))
        if start >= stop:
            return
        if self.kind == "video":
            yield from self._iterate_video(start, stop)
            return
        if self.kind == "tiff":
            import tifffile

            try:
                tif = tifffile.TiffFile(self.path)
            except Exception as exc:  # tifffile raises many types for damaged files
                raise FilmcalcError(f"{Path(self.path).name!r} is not a readable TIFF ({exc}).") from None
            with tif:
                for k in range(start, stop):
                    try:
                        samples = tiff_page_samples(tif.pages[self.raw_indices[k]], self.names[k])
                        frame = self._checked(rgb_of_samples(samples, self.names[k])[0], k)
                    except FilmcalcError as exc:
                        frame = FrameError(str(exc))
                    except Exception as exc:  # a damaged page
                        frame = FrameError(f"{self.names[k]}: unreadable page ({exc}).")
                    yield k, frame
            return
        for k in range(start, stop):
            try:
                frame = self._checked(load_photo(self.files[self.raw_indices[k]]).rgb, k)
            except FilmcalcError as exc:
                frame = FrameError(str(exc))
            yield k, frame

    def _checked(self, rgb, k):
        if rgb.shape[:2] != tuple(self.shape):
            raise FrameError(f"{self.names[k]}: {rgb.shape[1]} × {rgb.shape[0]} pixels, unlike the first frame's "
                             f"{self.shape[1]} × {self.shape[0]}.")
        return rgb

    def _iterate_video(self, start, stop):
        import imageio_ffmpeg

        first = self.raw_indices[start]
        input_params = ["-ss", f"{(first - 0.5) / self.file_fps:.6f}"] if first > 0 else []
        h, w = self.shape
        reader = imageio_ffmpeg.read_frames(self.path, input_params=input_params)
        try:
            next(reader)  # metadata
            k, raw = start, first
            for data in reader:
                if raw == self.raw_indices[k]:
                    if len(data) != h * w * 3:
                        yield k, FrameError(f"{self.names[k]}: decoded {len(data)} bytes, expected {h * w * 3}.")
                    else:
                        yield k, np.frombuffer(data, np.uint8).reshape(h, w, 3).astype(np.float32) / 255.0
                    k += 1
                    if k >= stop:
                        break
                raw += 1
            for missing in range(k, stop):
                yield missing, FrameError(f"{self.names[missing]}: the video ended before this frame.")
        except (RuntimeError, OSError, StopIteration) as exc:
            raise FilmcalcError(f"{Path(self.path).name!r} could not be decoded as video ({exc}).") from None
        finally:
            reader.close()

    def fingerprint(self):
        """SHA-256 of the recording's bytes (of each selected file's digest, for a folder)."""
        if self.kind != "folder":
            return _file_digest(self.path)
        digest = hashlib.sha256()
        for i in self.raw_indices:
            digest.update(_file_digest(self.files[i]).encode())
        return digest.hexdigest()


def _file_digest(path):
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        for block in iter(lambda: handle.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def _select(count, frames):
    start, stop, step = parse_frame_range(frames) if isinstance(frames, (str, type(None))) else frames
    stop = count if stop is None else min(stop, count)
    indices = list(range(start, stop, step))
    if not indices:
        raise FilmcalcError(f"The frame range selects no frame: the recording has {count} frames (0–{count - 1}).")
    return indices


def open_frames(path, frames=None, fps=None):
    """Open a folder of images, a multi-page TIFF or a video as a :class:`FrameSource`.

    Parameters
    ----------
    path : str or path-like
    frames : str or (start, stop, step), optional
        Which frames: ``"A:B:STEP"`` (see :func:`parse_frame_range`). All by default.
    fps : float, optional
        Frames per second; overrides the file's own value (folders and TIFFs rarely carry one).

    Raises
    ------
    FilmcalcError
        Missing path, a folder with no images, an unreadable first frame, a video that cannot be decoded.
    """
    path = Path(path)
    if fps is not None and not (np.isfinite(fps) and fps > 0):
        raise FilmcalcError(f"Frames per second must be a positive number, not {fps!r}.")
    try:
        exists = path.exists()
    except (OSError, ValueError):  # a name the system cannot look up (too long, a NUL character)
        exists = False
    if not exists:
        shown = str(path) if len(str(path)) <= 80 else str(path)[:79] + "…"
        raise FilmcalcError(f"{shown!r} does not exist.")
    if path.is_dir():
        files = sorted((p for p in path.iterdir() if p.is_file() and p.suffix.lower() in IMAGE_SUFFIXES),
                       key=lambda p: natural_key(p.name))
        if not files:
            raise FilmcalcError(f"The folder {path.name!r} holds no PNG, TIFF or JPEG frames.")
        indices = _select(len(files), frames)
        first = load_photo(files[indices[0]])
        source = FrameSource(str(path), "folder", indices, [files[i].name for i in indices], fps, first.shape,
                             [str(f) for f in files])
    elif path.suffix.lower() in (".tif", ".tiff"):
        source = _open_tiff(path, frames, fps)
    elif path.suffix.lower() in VIDEO_SUFFIXES:
        source = _open_video(path, frames, fps)
    else:
        raise FilmcalcError(f"{path.name!r}: give a folder of frames, a multi-page TIFF or a video "
                            f"({', '.join(VIDEO_SUFFIXES)}).")
    if source.kind != "folder":
        source.read(0)  # a first frame that cannot be read stops the run here, with the reason
    return source


def _open_tiff(path, frames, fps):
    import tifffile

    try:
        with tifffile.TiffFile(path) as tif:
            count = len(tif.pages)
            if count:
                shape = (int(tif.pages[0].imagelength), int(tif.pages[0].imagewidth))
    except Exception as exc:  # tifffile raises many types for damaged files
        message = (str(exc).strip().splitlines() or [type(exc).__name__])[0][:120]
        raise FilmcalcError(f"{path.name!r} is not a readable TIFF ({message}).") from None
    if not count:
        raise FilmcalcError(f"{path.name!r} is a TIFF file with no readable page (or a damaged directory); "
                            "export it again.")
    if shape[0] * shape[1] > MAX_PIXELS:
        raise FilmcalcError(f"{path.name!r}: frames of {shape[1]} × {shape[0]} pixels are over the limit.")
    indices = _select(count, frames)
    return FrameSource(str(path), "tiff", indices, [f"page {i}" for i in indices], fps, shape)


def _open_video(path, frames, fps):
    import imageio_ffmpeg

    try:
        reader = imageio_ffmpeg.read_frames(str(path))
        meta = next(reader)
        reader.close()
        count, _ = imageio_ffmpeg.count_frames_and_secs(str(path))
    except (RuntimeError, OSError, StopIteration) as exc:
        message = str(exc).strip().splitlines()[-1] if str(exc).strip() else type(exc).__name__
        raise FilmcalcError(f"{path.name!r} could not be decoded as video ({message}). Check that the file is "
                            "complete, or export the frames as PNG or TIFF.") from None
    w, h = meta["size"]
    if w * h > MAX_PIXELS:
        raise FilmcalcError(f"{path.name!r}: frames of {w} × {h} pixels are over the limit.")
    if count < 1:
        raise FilmcalcError(f"{path.name!r} holds no video frames.")
    file_fps = float(meta["fps"]) if meta.get("fps") else None
    if not file_fps:
        raise FilmcalcError(f"{path.name!r} does not state its frame rate, so its frames cannot be found by time; "
                            "export the frames as PNG or TIFF.")
    indices = _select(count, frames)
    return FrameSource(str(path), "video", indices, [f"frame {i}" for i in indices], fps or file_fps, (h, w),
                       file_fps=file_fps)
