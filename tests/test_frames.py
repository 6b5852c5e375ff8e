"""Reading frame sequences: folders, multi-page TIFFs, videos; frame selection."""

import numpy as np
import pytest
import tifffile
from PIL import Image

from filmcalc.errors import FilmcalcError
from filmcalc.frames import FrameError, natural_key, open_frames, parse_frame_range


def numbered(k, shape=(32, 80)):
    """A frame showing its number k in binary: 8 vertical stripes, black or white (robust to compression)."""
    frame = np.zeros(shape + (3,), np.uint8)
    for bit in range(8):
        frame[:, bit * 10:(bit + 1) * 10] = 255 if (k >> bit) & 1 else 0
    return frame


def number_of(frame):
    return sum(1 << bit for bit in range(8) if frame[:, bit * 10 + 5].mean() > 0.5)


def test_frame_ranges():
    assert parse_frame_range("10:100:2") == (10, 100, 2)
    assert parse_frame_range("::5") == (0, None, 5)
    assert parse_frame_range("7") == (7, 8, 1)
    assert parse_frame_range(None) == (0, None, 1)
    for bad in ("a:b", "5:2", "0:10:0", "-1:5", "1:2:3:4"):
        with pytest.raises(FilmcalcError):
            parse_frame_range(bad)


def test_natural_order():
    names = ["f10.png", "f2.png", "F1.png", "f100.png"]
    assert sorted(names, key=natural_key) == ["F1.png", "f2.png", "f10.png", "f100.png"]


def test_folder_in_natural_order_with_selection_and_a_bad_frame(tmp_path):
    for k in (0, 1, 2, 5, 10, 11):
        Image.fromarray(numbered(k)).save(tmp_path / f"shot_{k}.png")
    Image.fromarray(numbered(3, (16, 80))).save(tmp_path / "shot_3.png")  # the wrong size
    (tmp_path / "notes.txt").write_text("not a frame")
    source = open_frames(tmp_path, "1::1", fps=50)
    assert source.names == ["shot_1.png", "shot_2.png", "shot_3.png", "shot_5.png", "shot_10.png", "shot_11.png"]
    np.testing.assert_allclose(source.times_s(), np.array([1, 2, 3, 4, 5, 6]) / 50)
    got = list(source.iterate())
    assert isinstance(got[2][1], FrameError) and "unlike the first frame" in str(got[2][1])
    assert [number_of(f) for k, f in got if k != 2] == [1, 2, 5, 10, 11]


def test_multipage_tiff_pages_and_stride(tmp_path):
    path = tmp_path / "stack.tif"
    tifffile.imwrite(path, np.stack([numbered(k) for k in range(12)]), photometric="rgb")
    source = open_frames(path, "2:11:3")
    assert source.kind == "tiff" and source.raw_indices == [2, 5, 8] and source.shape == (32, 80)
    assert [number_of(f) for _, f in source.iterate()] == [2, 5, 8]
    assert number_of(source.read(1)) == 5


def test_video_frames_are_exact_after_seeking(tmp_path):
    import imageio_ffmpeg

    path = tmp_path / "clip.mp4"
    writer = imageio_ffmpeg.write_frames(str(path), (80, 32), fps=25, macro_block_size=1, quality=None,
                                         pix_fmt_out="yuv444p", output_params=["-crf", "0"])
    writer.send(None)
    for k in range(60):
        writer.send(numbered(k).tobytes())
    writer.close()
    source = open_frames(path)
    assert len(source) == 60 and source.fps == 25.0 and source.shape == (32, 80)
    for start in (0, 1, 17, 33, 58):
        assert [number_of(f) for _, f in source.iterate(start, start + 3)] == list(range(start, min(start + 3, 60)))
    strided = open_frames(path, "10:50:7", fps=100.0)  # a given frame rate sets the times, not the seeking
    assert [number_of(f) for _, f in strided.iterate(2, 5)] == [24, 31, 38]
    np.testing.assert_allclose(strided.times_s()[:2], [0.10, 0.17])


def test_undecodable_video_and_missing_input(tmp_path):
    bad = tmp_path / "broken.mp4"
    bad.write_bytes(b"\x00\x00\x00\x18ftypmp42" + bytes(range(256)) * 20)
    with pytest.raises(FilmcalcError, match="could not be decoded as video"):
        open_frames(bad)
    with pytest.raises(FilmcalcError, match="does not exist"):
        open_frames(tmp_path / "nothing-here")
    (tmp_path / "empty").mkdir()
    with pytest.raises(FilmcalcError, match="holds no PNG, TIFF or JPEG"):
        open_frames(tmp_path / "empty")
    with pytest.raises(FilmcalcError, match="selects no frame"):
        Image.fromarray(numbered(0)).save(tmp_path / "empty" / "a.png")
        open_frames(tmp_path / "empty", "5:9")
