"""Frame sequences end to end: a synthetic draining film, corrupt frames, Dask equal to serial, exports.

The movie is rendered by the project's forward model from an invented thinning law
h = A·(t − t0)^−α (α = 0.5) that ruptures at an invented time; the tests check that the run
recovers the law and the rupture, not the optics (tested elsewhere against tmm and standards).
"""

import json

import numpy as np
import pytest
import tifffile
from PIL import Image

from filmcalc import cli, synthetic
from filmcalc.errors import FilmcalcError
from filmcalc.frames import open_frames
from filmcalc.sequence import (export_movie, export_tiff_stack, load_series, open_cube, run_sequence,
                               start_local_cluster)
from filmcalc.stack import load_stack

FPS = 20.0
FRAMES = 32
RUPTURE_S = 1.33  # invented; the first frame at or after it (t = 1.35 s, frame 27) shows the hole
LAW = dict(amplitude_nm=500.0, t0_s=-0.5, alpha=0.5)
SHAPE = (96, 128)
CORRUPT = 13


@pytest.fixture(scope="module")
def stack(demo_dir):
    return load_stack(demo_dir / "soap-film-loop.toml")


@pytest.fixture(scope="module")
def movie(tmp_path_factory, stack):
    folder = tmp_path_factory.mktemp("movie")
    truth = []
    times = np.arange(FRAMES) / FPS
    camera = synthetic.CameraSettings(noise=0.003)
    for k, (_, frame, field) in enumerate(synthetic.render_sequence(stack, SHAPE, times, RUPTURE_S, camera, **LAW)):
        Image.fromarray(np.rint(frame * 255).astype(np.uint8)).save(folder / f"drain_{k}.png")
        truth.append(field)
    (folder / f"drain_{CORRUPT}.png").write_bytes(b"\x89PNG\r\n\x1a\n" + b"cut short")
    return folder, np.array(truth)


@pytest.fixture(scope="module")
def serial_run(movie, stack, tmp_path_factory):
    folder, _ = movie
    out = tmp_path_factory.mktemp("serial")
    result = run_sequence(open_frames(folder, fps=FPS), stack, out, range_nm=(0, 1300), pixel_size_um=5.0,
                          points=[(64, 48)], regions=[(10, 10, 40, 30)], line=(64, 0, 64, 95), scheduler="serial")
    return out, result


def test_thinning_law_and_rupture_recovered(serial_run, movie):
    out, result = serial_run
    # The invented law: α = 0.5 must come back within 5 %, the rupture within one frame.
    assert result.fit is not None and abs(result.fit.alpha - LAW["alpha"]) < 0.05 * LAW["alpha"]
    assert abs(result.fit.alpha - LAW["alpha"]) < 5 * result.fit.alpha_sigma + 0.005
    first_hole = int(np.ceil(RUPTURE_S * FPS))
    assert abs(result.rupture_index - first_hole) <= 1
    assert abs(result.rupture_time_s - first_hole / FPS) <= 1 / FPS
    assert all(s == "ruptured" for s in result.status[result.rupture_index + 1:])
    # The thickness itself, frame by frame, before the rupture: no fringe order lost.
    cube = open_cube(out)[0]["thickness_nm"].compute()
    _, truth = movie
    for k in range(result.rupture_index):
        if k != CORRUPT:
            assert np.nanmean(np.abs(cube[k] - truth[k]) > 25) < 0.01, k
    assert np.all(np.isnan(cube[result.rupture_index + 1:]))


def test_corrupt_frame_is_skipped_and_recorded(serial_run):
    out, result = serial_run
    assert result.status[CORRUPT] == "unreadable" and "drain_13.png" in result.reason[CORRUPT]
    assert result.status[CORRUPT - 1] == result.status[CORRUPT + 1] == "ok"
    summary = json.loads((out / "summary.json").read_text())
    skipped = {f["frame"]: f["status"] for f in summary["frames_skipped"]}
    assert skipped["drain_13.png"] == "unreadable"
    assert summary["thinning_law"]["alpha"] == pytest.approx(result.fit.alpha, abs=1e-5)


def test_series_file_volume_and_kymograph(serial_run, movie):
    out, result = serial_run
    series = load_series(out)
    assert series["status"][CORRUPT] == "unreadable" and np.isnan(series["mean_nm"][CORRUPT])
    np.testing.assert_allclose(series["time_s"], np.arange(FRAMES) / FPS, atol=1e-9)
    _, truth = movie
    k = 5
    # Volume: Σ thickness × (5 µm)², in nL (1 nL = 1e6 µm³); the truth's own sum as reference.
    expected = np.nansum(truth[k]) * 1e-3 * 25.0 / 1e6
    assert series["volume_nL"][k] == pytest.approx(expected, rel=0.01)
    assert series["point_1_x64_y48_nm"][k] == pytest.approx(truth[k][48, 64], abs=10)
    assert series["region_1_10_10_40_30_nm"][k] == pytest.approx(truth[k][10:31, 10:41].mean(), abs=5)
    # Thinning rate: the law's derivative, α·A·(t − t0)^(−α−1).
    t = series["time_s"][k]
    expected_rate = LAW["alpha"] * LAW["amplitude_nm"] * (t - LAW["t0_s"]) ** (-LAW["alpha"] - 1)
    assert series["thinning_rate_nm_per_s"][k] == pytest.approx(expected_rate, rel=0.05)
    kymo = open_cube(out)[0]["kymograph_nm"].compute()
    assert kymo.shape == (FRAMES, 96)
    cube = open_cube(out)[0]["thickness_nm"].compute()
    np.testing.assert_array_equal(kymo[k], cube[k][:, 64])  # the line is the column x = 64
    assert np.median(np.abs(kymo[k] - truth[k][:, 64])) < 6


def test_local_cluster_equals_serial(serial_run, movie, stack, tmp_path):
    folder, _ = movie
    with start_local_cluster(2) as cluster:  # two worker processes on loopback, started by the test
        result = run_sequence(open_frames(folder, fps=FPS), stack, tmp_path, range_nm=(0, 1300),
                              pixel_size_um=5.0, points=[(64, 48)], regions=[(10, 10, 40, 30)],
                              line=(64, 0, 64, 95), scheduler=cluster.scheduler_address, chunk=4)
    out, reference = serial_run
    assert result.workers == 2 and "Dask cluster at tcp://127.0.0.1" in result.scheduler
    for name in ("thickness_nm", "sigma_nm", "flags", "kymograph_nm"):
        a = open_cube(out)[0][name].compute()
        b = open_cube(tmp_path)[0][name].compute()
        assert np.array_equal(a, b, equal_nan=True), name
    assert result.status == reference.status and result.rupture_index == reference.rupture_index
    assert result.fit.alpha == reference.fit.alpha


def test_exports(serial_run, tmp_path):
    out, result = serial_run
    tiff = export_tiff_stack(out, tmp_path / "maps.tif")
    stack_back = tifffile.imread(tiff)
    cube = open_cube(out)[0]["thickness_nm"].compute()
    assert stack_back.dtype == np.float32 and np.array_equal(stack_back, cube, equal_nan=True)
    gif = export_movie(out, tmp_path / "maps.gif", fps=10, every=2)
    with Image.open(gif) as im:
        assert im.n_frames == FRAMES // 2
    mp4 = export_movie(out, tmp_path / "maps.mp4", fps=10)
    assert len(open_frames(mp4)) == FRAMES


def test_bad_requests(movie, stack, tmp_path):
    folder, _ = movie
    source = open_frames(folder, fps=FPS)
    with pytest.raises(FilmcalcError, match="outside"):
        run_sequence(source, stack, tmp_path, points=[(500, 5)])
    with pytest.raises(FilmcalcError, match="Scheduler"):
        run_sequence(source, stack, tmp_path, scheduler="nonsense")
    with pytest.raises(FilmcalcError, match="No Dask scheduler answers"):
        run_sequence(source, stack, tmp_path, scheduler="tcp://127.0.0.1:9")


def test_cli_sequence_json(movie, demo_dir, tmp_path, capsys):
    folder, _ = movie
    code = cli.main(["sequence", str(folder), str(demo_dir / "soap-film-loop.toml"), "--out", str(tmp_path / "run"),
                     "--frames", "0:16", "--fps", "20", "--range", "0:1300", "--scheduler", "serial", "--json"])
    assert code == 0
    summary = json.loads(capsys.readouterr().out)
    assert summary["frames_selected"] == 16 and summary["frames_mapped"] == 15
    assert summary["frames_skipped"] == [{"index": 13, "frame": "drain_13.png", "status": "unreadable",
                                          "reason": summary["frames_skipped"][0]["reason"]}]
    assert abs(summary["thinning_law"]["alpha"] - 0.5) < 0.05 and summary["thinning_law"]["alpha_sigma"] > 0
    assert (tmp_path / "run" / "cube.zarr").is_dir() and (tmp_path / "run" / "provenance.json").exists()


def test_cli_sequence_undecodable_video(demo_dir, tmp_path, capsys):
    bad = tmp_path / "broken.avi"
    bad.write_bytes(b"RIFF" + bytes(1000))
    code = cli.main(["sequence", str(bad), str(demo_dir / "soap-film-loop.toml"), "--out", str(tmp_path / "o")])
    assert code == 2
    assert "could not be decoded as video" in capsys.readouterr().err


def test_frames_sent_to_workers_arrive_unchanged():
    # 8- and 16-bit samples as the readers scale them (k/255, k/65535 in float32) survive the 16-bit packing.
    from filmcalc.sequence import _pack

    for scale in (255, 65535):
        k = np.arange(scale + 1, dtype=np.float32)
        frame = (k / np.float32(scale)).reshape(1, -1, 1)
        packed = _pack(frame)
        assert packed.dtype == np.uint16
        assert np.array_equal(packed.astype(np.float32) / np.float32(65535.0), frame)
