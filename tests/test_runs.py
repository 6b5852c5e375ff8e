"""The run store (filmcalc/runs.py): round trips, concurrency, crash safety, migration, export/import, history.

Sample names, tags and people here are invented.
"""

import io
import json
import multiprocessing
import os
import shutil
import socket
import subprocess
import tempfile
import time
import zipfile
from pathlib import Path

import numpy as np
import pytest
import sqlalchemy as sa

from filmcalc import runs
from filmcalc.errors import FilmcalcError
from filmcalc.runs import KINDS, RunStore, compare_maps, history_table, numeric_summary_keys, validate_name

DEMO = Path(__file__).resolve().parent.parent / "demo_data"
STACK = DEMO / "oxide-coupon.toml"
PHOTO = DEMO / "photos" / "oxide-coupon-steps.png"


@pytest.fixture
def store(tmp_path):
    with RunStore(tmp_path / "data") as s:
        yield s


def _blobs(data_dir):
    files = Path(data_dir) / "files"
    return sorted(p for p in files.glob("??/*") if p.is_file()) if files.exists() else []


def _cube_folder(root):
    """A small Zarr v3 group like the sequence runner writes."""
    import zarr

    folder = Path(root) / "cube.zarr"
    group = zarr.open_group(str(folder), mode="w")
    data = np.arange(3 * 4 * 5, dtype=np.float32).reshape(3, 4, 5)
    group.create_array("thickness_nm", data=data, chunks=(2, 4, 5))
    group.attrs.update({"frames": ["a", "b", "c"], "time_s": [0.0, 0.1, 0.2]})
    return folder, data


# ------------------------------------------------------------------------------------------- round trips

@pytest.mark.parametrize("kind", list(KINDS))
def test_round_trip_of_every_kind(store, tmp_path, kind):
    rng = np.random.default_rng(7)
    thickness = rng.normal(250, 3, (6, 8)).astype(np.float32)
    thickness[0, 0] = np.nan
    outputs = {"thickness_nm.npy": thickness, "flags.npy": np.arange(48, dtype=np.uint8).reshape(6, 8),
               "table.csv": "x,y\n1,2\n", "raw.bin": b"\x00\x01\xff"}
    cube = None
    if kind == "sequence":
        folder, cube = _cube_folder(tmp_path)
        outputs["cube.zarr.zip"] = folder
    run = store.save(kind, inputs={"oxide-coupon.toml": STACK, "photo.png": PHOTO.read_bytes()}, outputs=outputs,
                     settings={"range": "0:1500", "anchor": [[10, 100, 0.0]], "pixel_size": np.float64(2.0)},
                     summary={"mean_nm": 250.5, "statistics": {"std_nm": np.float32(3.0), "min_nm": float("nan")}},
                     provenance={"photo": {"file": "photo.png"}}, sample="Coupon K-3", tags=["etch B", "etch B", "q1"],
                     note="after anneal\nsecond line", saved_by="R. Ilves")
    again = store.get(run.id)
    assert again == run
    assert again.kind == kind and again.sample == "Coupon K-3" and again.tags == ["etch B", "q1"]
    assert again.note == "after anneal\nsecond line" and again.saved_by == "R. Ilves"
    assert again.settings["pixel_size"] == 2.0 and again.summary["statistics"] == {"std_nm": 3.0, "min_nm": None}
    assert again.provenance["photo"] == {"file": "photo.png"}
    assert again.provenance["input_sha256"]["photo.png"] == again.inputs["photo.png"].sha256
    np.testing.assert_array_equal(store.load_array(run.id, "thickness_nm.npy"), thickness)
    np.testing.assert_array_equal(store.load_array(run, "flags.npy", mmap=True), outputs["flags.npy"])
    assert store.read_bytes(run.id, "table.csv") == b"x,y\n1,2\n"
    assert store.read_bytes(run.id, "raw.bin") == b"\x00\x01\xff"
    assert store.read_bytes(run.id, "oxide-coupon.toml", role="input") == STACK.read_bytes()
    assert again.inputs["photo.png"].media_type == "image/png"
    if cube is not None:
        arrays, attrs = store.open_cube(run.id)
        np.testing.assert_array_equal(arrays["thickness_nm"].compute(), cube)
        assert attrs["frames"] == ["a", "b", "c"]
    assert [r.id for r in store.list_runs(kind=kind)] == [run.id]
    assert run.bytes_stored == sum(f.size for f in run.files)


def test_same_content_is_stored_once(store):
    photo = PHOTO.read_bytes()
    first = store.save("map", inputs={"a.png": photo}, outputs={"t.npy": np.zeros(3, np.float32)})
    second = store.save("map", inputs={"renamed.png": photo}, outputs={"t.npy": np.zeros(3, np.float32)})
    assert first.inputs["a.png"].sha256 == second.inputs["renamed.png"].sha256
    assert len(_blobs(store.data_dir)) == 2
    store.delete(first.id)  # the files are still used by the second run
    assert len(_blobs(store.data_dir)) == 2 and store.read_bytes(second.id, "renamed.png", "input") == photo
    store.delete(second.id)
    assert _blobs(store.data_dir) == [] and store.check().ok


def test_a_store_is_created_by_the_first_save_only(tmp_path):
    where = tmp_path / "not-yet"
    s = RunStore(where)
    assert s.list_runs() == [] and s.count_runs() == 0 and s.schema_version() is None and s.check().ok
    assert s.facets() == {"samples": [], "tags": [], "kinds": [], "saved_by": []}
    assert not where.exists()
    with pytest.raises(FilmcalcError, match="No run"):
        s.get("abcdef123456")
    s.save("colour", summary={"hex": "#aabbcc"})
    assert (where / "runs.sqlite").exists() and s.schema_version() == runs.SCHEMA_VERSION


def test_data_dir_comes_from_the_argument_then_the_environment(tmp_path, monkeypatch):
    monkeypatch.setenv("FILMCALC_DATA", str(tmp_path / "env"))
    assert runs.resolve_data_dir() == tmp_path / "env"
    assert runs.resolve_data_dir(tmp_path / "arg") == tmp_path / "arg"
    monkeypatch.delenv("FILMCALC_DATA")
    monkeypatch.setenv("XDG_DATA_HOME", str(tmp_path / "xdg"))
    if os.name == "posix" and os.uname().sysname == "Linux":
        assert runs.resolve_data_dir() == tmp_path / "xdg" / "filmcalc"


# ------------------------------------------------------------------------------------------- names and labels

@pytest.mark.parametrize("bad", ["", "../evil", "a/../b", "/etc/passwd", "a\\b", "C:evil", "c:/x", ".hidden",
                                 "a//b", "a/", "-dash", "sp ace", "x" * 101, "a/b/c/d/e", "ü.png", "a\x00b"])
def test_names_that_could_become_paths_are_refused(store, bad):
    with pytest.raises(FilmcalcError):
        validate_name(bad)
    with pytest.raises(FilmcalcError):
        store.save("map", outputs={bad: b"x"})
    assert store.list_runs() == [] and not list((store.data_dir / "files").glob("??/*"))


def test_safe_name_and_labels():
    assert runs.safe_name("../../etc/passwd") == "passwd"
    assert runs.safe_name("..") == "file" and runs.safe_name("", "stack.toml") == "stack.toml"
    assert validate_name(runs.safe_name("x" * 300 + ".png")).endswith(".png")
    assert runs.validate_labels(" Wafer 9 ", ["a", " a ", "b  c"]) == {"sample": "Wafer 9", "tags": ["a", "b c"],
                                                                     "note": "", "saved_by": ""}
    for bad in ({"sample": "two\nlines"}, {"tags": ["a,b"]}, {"note": "bell\x07"}, {"saved_by": "x" * 101}):
        with pytest.raises(FilmcalcError):
            runs.validate_labels(**bad)


def test_bad_kinds_ids_and_oversized_summaries(store):
    with pytest.raises(FilmcalcError, match="Unknown kind"):
        store.save("photo-of-cat")
    with pytest.raises(FilmcalcError, match="not a run id"):
        store.get("../../x")
    with pytest.raises(FilmcalcError, match="KiB"):
        store.save("fit", summary={"points": list(range(20000))})
    with pytest.raises(FilmcalcError, match=".npy"):
        store.save("fit", outputs={"a.bin": np.zeros(2)})
    with pytest.raises(FilmcalcError, match="objects"):
        store.save("fit", outputs={"a.npy": np.array([{}], dtype=object)})
    with pytest.raises(FilmcalcError, match="Cannot read"):
        store.save("fit", inputs={"gone.csv": store.data_dir / "gone.csv"})
    assert store.list_runs() == []
    assert not list(store.files_dir.glob("tmp/*"))  # nothing left behind by the failed saves


# ------------------------------------------------------------------------------------------- listing

def test_list_filter_count_and_facets(store):
    made = []
    for i in range(12):
        made.append(store.save(["map", "fit", "fringes"][i % 3], summary={"mean_nm": 100 + i},
                               sample=["Wafer 7", "Wafer 8"][i % 2], tags=["line A"] + (["weekly"] if i % 4 == 0 else []),
                               saved_by=["M. Okafor", "J. Lind"][i % 2], note=f"batch {i}"))
        time.sleep(0.002)
    assert [r.id for r in store.list_runs()] == [r.id for r in reversed(made)]
    assert [r.id for r in store.list_runs(newest_first=False, limit=3)] == [r.id for r in made[:3]]
    assert [r.id for r in store.list_runs(limit=2, offset=1)] == [made[10].id, made[9].id]
    assert {r.id for r in store.list_runs(sample="Wafer 7")} == {r.id for r in made[::2]}
    assert {r.id for r in store.list_runs(tags="weekly")} == {made[0].id, made[4].id, made[8].id}
    assert {r.id for r in store.list_runs(tags=["weekly", "line A"], kind="map")} == {made[0].id}
    assert {r.id for r in store.list_runs(kind=["fit", "fringes"], saved_by="J. Lind")} == {
        r.id for r in made if r.kind in ("fit", "fringes") and r.saved_by == "J. Lind"}
    assert [r.id for r in store.list_runs(text="BATCH 11")] == [made[11].id]
    assert store.list_runs(text="100%") == []  # LIKE wildcards are literal
    assert store.count_runs(sample="Wafer 8") == 6 and store.count_runs(tags=["nothing"]) == 0
    middle = made[5].created_utc
    assert {r.id for r in store.list_runs(since=middle)} == {r.id for r in made[5:]}
    assert {r.id for r in store.list_runs(until=middle)} == {r.id for r in made[:5]}
    assert store.list_runs(since="2999-01-01") == [] and len(store.list_runs(until="2999-01-01")) == 12
    with pytest.raises(FilmcalcError, match="date"):
        store.list_runs(since="last tuesday")
    with pytest.raises(FilmcalcError, match="Unknown kind"):
        store.list_runs(kind="nonsense")
    listed = store.list_runs(sample="Wafer 8", limit=1)[0]
    assert listed.summary == {"mean_nm": 111} and listed.tags == ["line A"] and listed.note == "batch 11"
    assert store.facets() == {"samples": ["Wafer 7", "Wafer 8"], "tags": ["line A", "weekly"],
                              "kinds": ["fit", "fringes", "map"], "saved_by": ["J. Lind", "M. Okafor"]}


def test_update_changes_labels_only(store):
    run = store.save("fit", summary={"thickness_nm": 742.0}, sample="old", tags=["x"], note="n")
    changed = store.update(run.id, sample="Wafer 12", tags=["re-measured", "q3"])
    assert (changed.sample, changed.tags, changed.note) == ("Wafer 12", ["q3", "re-measured"], "n")
    assert changed.summary == run.summary and changed.created_utc == run.created_utc
    assert store.update(run.id, note="").note == ""
    assert store.list_runs(tags="x") == [] and len(store.list_runs(tags="q3")) == 1


# ------------------------------------------------------------------------------------------- concurrency

def _concurrent_worker(data_dir, worker, saves, barrier):
    """Runs in a spawned process: wait for the others, then save ``saves`` runs into a store none of them made."""
    barrier.wait(timeout=60)
    shared = b"the same photo for everyone" * 1000
    with RunStore(data_dir) as s:
        for k in range(saves):
            values = np.full((64, 64), worker * 100 + k, np.float32)
            s.save("map", inputs={"photo.png": shared}, outputs={"thickness_nm.npy": values},
                   summary={"worker": worker, "k": k}, sample=f"sample {worker}", tags=["concurrent"])


def test_eight_processes_save_at_once(tmp_path):
    data_dir, writers, saves = tmp_path / "data", 8, 4
    ctx = multiprocessing.get_context("spawn")
    barrier = ctx.Barrier(writers)
    processes = [ctx.Process(target=_concurrent_worker, args=(data_dir, w, saves, barrier)) for w in range(writers)]
    for p in processes:
        p.start()
    for p in processes:
        p.join(120)
    assert [p.exitcode for p in processes] == [0] * writers
    with RunStore(data_dir) as s:
        listed = s.list_runs(tags="concurrent")
        assert len(listed) == writers * saves and len({r.id for r in listed}) == writers * saves
        seen = set()
        for r in listed:
            worker, k = r.summary["worker"], r.summary["k"]
            seen.add((worker, k))
            assert r.sample == f"sample {worker}"
            values = s.load_array(r.id, "thickness_nm.npy")
            assert values.shape == (64, 64) and np.all(values == worker * 100 + k)
        assert seen == {(w, k) for w in range(writers) for k in range(saves)}
        report = s.check()
        assert report.ok and report.runs == writers * saves
        assert report.files == writers * saves + 1  # the shared photo once, one map per run
        assert s.schema_version() == runs.SCHEMA_VERSION


# ------------------------------------------------------------------------------------------- crash safety

def _killed_save(data_dir, where):
    """Runs in a spawned process: save a run and die (os._exit) at ``where``, before the commit."""
    original = runs.RunStore._insert_rows

    def insert_then_die(self, conn, record, tags, files):
        original(self, conn, record, tags, files)  # rows inserted, transaction not committed
        os._exit(17)

    def die_before_placing(self, record, tags, staged, new_id):
        os._exit(17)  # the files are still in files/tmp

    if where == "after the rows":
        runs.RunStore._insert_rows = insert_then_die
    else:
        runs.RunStore._commit = die_before_placing
    with RunStore(data_dir) as s:
        s.save("map", inputs={"photo.png": PHOTO}, outputs={"thickness_nm.npy": np.ones((50, 50), np.float32)},
               sample="never seen")


@pytest.mark.parametrize("where", ["after the rows", "before placing"])
def test_a_killed_save_leaves_no_visible_run(tmp_path, monkeypatch, where):
    data_dir = tmp_path / "data"
    with RunStore(data_dir) as s:
        earlier = s.save("map", inputs={"photo.png": PHOTO}, sample="kept")  # shares the photo with the killed save
    child = multiprocessing.get_context("spawn").Process(target=_killed_save, args=(data_dir, where))
    child.start()
    child.join(60)
    assert child.exitcode == 17
    with RunStore(data_dir) as s:
        assert [r.id for r in s.list_runs()] == [earlier.id] and s.list_runs(sample="never seen") == []
        report = s.check()
        assert not report.missing and not report.corrupt
        if where == "after the rows":
            # the map's file was moved into place; the photo is used by the earlier run, so not an orphan
            assert not report.ok and len(report.orphans) == 1 and report.temporary == []
            report = s.check(delete_orphans=True)
            assert len(report.deleted) == 1 and report.ok
        else:
            # the files never left files/tmp: reported, but young ones could be a save in progress
            assert report.orphans == [] and len(report.temporary) == 2
            assert not any(t["stale"] for t in report.temporary) and report.ok
            assert s.check(delete_orphans=True).deleted == []
            monkeypatch.setattr(runs, "TEMP_GRACE_S", 0.0)  # as if an hour had passed
            report = s.check()
            assert not report.ok and all(t["stale"] for t in report.temporary)
            report = s.check(delete_orphans=True)
            assert len(report.deleted) == 2 and report.ok
        assert s.check().ok and s.read_bytes(earlier.id, "photo.png", "input") == PHOTO.read_bytes()


def _save_forever(data_dir):
    """Runs in a spawned process: save runs with 4 MB maps until killed."""
    with RunStore(data_dir) as s:
        for k in range(10_000):
            s.save("map", outputs={"thickness_nm.npy": np.full((1000, 1000), k, np.float32)}, summary={"k": k})


def test_a_save_killed_at_a_random_moment_leaves_a_sound_store(tmp_path):
    data_dir = tmp_path / "data"
    child = multiprocessing.get_context("spawn").Process(target=_save_forever, args=(data_dir,))
    child.start()
    with RunStore(data_dir) as s:
        deadline = time.monotonic() + 60
        while s.count_runs() < 3 and time.monotonic() < deadline:
            time.sleep(0.05)
        time.sleep(0.013)  # somewhere inside a save
        child.kill()  # SIGKILL: no clean-up of any kind
        child.join(30)
        listed = s.list_runs()
        assert len(listed) >= 3
        for run in listed:  # every visible run is complete
            assert s.load_array(run.id, "thickness_nm.npy")[0, 0] == run.summary["k"]
        report = s.check()
        assert not report.missing and not report.corrupt and len(report.orphans) <= 1
        s.check(delete_orphans=True)
        s.save("map", summary={"k": -1})  # the store takes new saves


def test_check_reports_missing_and_damaged_files(store):
    run = store.save("fit", inputs={"spot.csv": "wavelength_nm,R\n500,0.3\n"},
                     outputs={"model.npy": np.linspace(0, 1, 100)})
    damaged = store.blob_path(run.outputs["model.npy"].sha256)
    os.chmod(damaged, 0o644)
    data = bytearray(damaged.read_bytes())
    data[-1] ^= 0xFF  # same size, different content
    damaged.write_bytes(bytes(data))
    with pytest.raises(FilmcalcError, match="SHA-256"):
        store.export_zip(run.id, store.data_dir / "x.zip")
    assert not (store.data_dir / "x.zip").exists() and not list(store.data_dir.glob("*.part"))
    store.blob_path(run.inputs["spot.csv"].sha256).unlink()
    (store.files_dir / "stray.txt").write_text("hello")
    report = store.check()
    assert [m["name"] for m in report.missing] == ["spot.csv"] and report.missing[0]["run_id"] == run.id
    assert report.corrupt == [{"sha256": run.outputs["model.npy"].sha256, "problem": "content does not match its "
                               "SHA-256", "run_ids": [run.id]}]
    assert report.unexpected == ["files/stray.txt"] and not report.ok
    assert store.check(verify_hashes=False).corrupt == []  # --quick compares sizes only
    with pytest.raises(FilmcalcError, match="runs check"):
        store.read_bytes(run.id, "spot.csv", "input")


def test_nothing_stored_is_unpickled(store):
    pickled = io.BytesIO()
    np.save(pickled, np.array([{"a": 1}], dtype=object), allow_pickle=True)
    truncated = io.BytesIO()
    np.save(truncated, np.zeros(1000))
    run = store.save("map", outputs={"evil.npy": pickled.getvalue(), "short.npy": truncated.getvalue()[:-8]})
    with pytest.raises(FilmcalcError, match="Python objects"):
        store.load_array(run.id, "evil.npy")
    with pytest.raises(FilmcalcError, match="truncated"):
        store.load_array(run.id, "short.npy")


def test_a_cube_with_a_codec_filmcalc_does_not_write_is_refused(store, tmp_path):
    folder, _ = _cube_folder(tmp_path)
    meta_path = folder / "thickness_nm" / "zarr.json"
    meta = json.loads(meta_path.read_text())
    meta["codecs"].append({"name": "numcodecs.pickle"})
    meta_path.write_text(json.dumps(meta))
    run = store.save("sequence", outputs={"cube.zarr.zip": folder})
    with pytest.raises(FilmcalcError, match="codec"):
        store.open_cube(run.id)


# ------------------------------------------------------------------------------------------- migrations

def test_a_version_1_store_opens_upgraded_with_its_runs(tmp_path):
    data_dir = tmp_path / "old"
    (data_dir / "files").mkdir(parents=True)
    photo = PHOTO.read_bytes()
    sha = runs.hashlib.sha256(photo).hexdigest()
    (data_dir / "files" / sha[:2]).mkdir()
    (data_dir / "files" / sha[:2] / sha).write_bytes(photo)
    engine = sa.create_engine(f"sqlite:///{data_dir / 'runs.sqlite'}")
    v1 = runs._schema(1).tables
    assert "bytes_stored" not in v1["runs"].c
    with engine.begin() as conn:  # exactly what filmcalc with schema 1 wrote
        runs._create_v1(conn)
        conn.execute(v1["runs"].insert().values(
            id="0a1b2c3d4e5f", kind="map", sample="Wafer 3", saved_by="K. Sato", note="", created_utc=
            "2026-03-01T09:00:00.000000Z", filmcalc_version="0.1.0", settings="{}", summary='{"mean_nm": 98.5}',
            provenance="{}"))
        conn.execute(v1["run_tags"].insert().values(run_id="0a1b2c3d4e5f", tag="baseline"))
        conn.execute(v1["run_files"].insert().values(run_id="0a1b2c3d4e5f", role="input", name="photo.png",
                                                     sha256=sha, size=len(photo), media_type="image/png"))
    engine.dispose()
    with RunStore(data_dir) as s:
        assert s.schema_version() == 1  # reading the version does not upgrade
        listed = s.list_runs(sample="Wafer 3")
        assert s.schema_version() == 2
        assert [(r.id, r.tags, r.summary, r.bytes_stored) for r in listed] == [
            ("0a1b2c3d4e5f", ["baseline"], {"mean_nm": 98.5}, len(photo))]
        assert s.read_bytes("0a1b2c3d4e5f", "photo.png", "input") == photo
        s.save("map", summary={"mean_nm": 99.0}, sample="Wafer 3")
        assert s.count_runs(sample="Wafer 3") == 2 and s.check().ok
        with s._engine.connect() as conn:
            indexes = {i["name"] for i in sa.inspect(conn).get_indexes("runs")}
            versions = [row.version for row in conn.execute(sa.select(runs.VERSIONS))]
        assert {"ix_runs_sample_created", "ix_runs_created"} <= indexes and versions == [1, 2]


def test_a_store_from_a_newer_filmcalc_is_refused(store):
    store.save("colour", summary={"hex": "#000000"})
    with store._engine.begin() as conn:
        conn.execute(runs.VERSIONS.insert().values(version=99, applied_utc=runs._now_utc(), description="future"))
    with RunStore(store.data_dir) as newer, pytest.raises(FilmcalcError, match="schema version 99, newer than"):
        newer.list_runs()


# ------------------------------------------------------------------------------------------- export and import

def test_export_import_round_trip_is_byte_identical(tmp_path):
    spectrum = (DEMO / "spectra" / "oxide-spot.csv").read_bytes()
    with RunStore(tmp_path / "a") as a:
        run = a.save("fit", inputs={"oxide-spot.csv": spectrum, "oxide-coupon.toml": STACK, "frames/f1.png": PHOTO},
                     outputs={"model.npy": np.linspace(0, 0.4, 401)}, settings={"range": "0:3000"},
                     summary={"thickness_nm": 742.0}, sample="Spot 4", tags=["daily"], note="exported",
                     saved_by="T. Mensah")
        exported = a.export_zip(run.id, tmp_path / "run.zip")
        with zipfile.ZipFile(exported) as zf:
            assert sorted(zf.namelist()) == ["inputs/frames/f1.png", "inputs/oxide-coupon.toml",
                                             "inputs/oxide-spot.csv", "manifest.json", "outputs/model.npy"]
            assert zf.read("inputs/oxide-spot.csv") == spectrum
            manifest = json.loads(zf.read("manifest.json"))
        assert manifest["run"]["id"] == run.id and manifest["run"]["provenance"] == run.provenance
        with pytest.raises(FilmcalcError, match="already holds a run"):
            a.import_zip(exported)
        copy = a.import_zip(exported, new_id=True)
        assert copy.id != run.id and len(_blobs(a.data_dir)) == 4  # nothing stored twice
    with RunStore(tmp_path / "b") as b:
        imported = b.import_zip(exported)
        assert imported.id == run.id and imported.record() == run.record() and imported.files == run.files
        for f in run.inputs.values():
            assert b.read_bytes(run.id, f.name, "input") == (tmp_path / "a" / "files" / f.sha256[:2] /
                                                             f.sha256).read_bytes()
        assert b.read_bytes(run.id, "oxide-spot.csv", "input") == spectrum
        np.testing.assert_array_equal(b.load_array(run.id, "model.npy"), np.linspace(0, 0.4, 401))
        again = b.export_zip(run.id, tmp_path / "again.zip")
        with zipfile.ZipFile(again) as zf:
            assert json.loads(zf.read("manifest.json"))["run"] == manifest["run"]
        assert b.check().ok


def _export_with(tmp_path, members, manifest_files=None, tweak=None):
    """A zip shaped like an export, with the given members (name → bytes)."""
    files = manifest_files
    if files is None:
        files = [{"role": name.split("/")[0][:-1], "name": name.split("/", 1)[1],
                  "sha256": runs.hashlib.sha256(data).hexdigest(), "size": len(data), "media_type": "x"}
                 for name, data in members.items()]
    manifest = {"format": "filmcalc run", "format_version": 1,
                "run": {"id": "feedc0ffee01", "kind": "map", "sample": "", "tags": [], "note": "", "saved_by": "",
                        "created_utc": "2026-05-05T10:00:00.000000Z", "filmcalc_version": "0.1.0", "settings": {},
                        "summary": {}, "provenance": {}}, "files": files}
    path = tmp_path / f"crafted-{len(list(tmp_path.glob('crafted-*')))}.zip"
    with zipfile.ZipFile(path, "w", zipfile.ZIP_DEFLATED) as zf:
        zf.writestr("manifest.json", json.dumps(manifest))
        for name, data in members.items():
            zf.writestr(name, data)
        if tweak:
            tweak(zf)
    return path


def _declare_size(size):
    def tweak(zf):
        zf.filelist[-1].file_size = size  # the central directory will claim this many bytes
    return tweak


@pytest.mark.parametrize("case, message", [
    ("dotdot", "climbs out"), ("dotdot-inside", "climbs out"), ("absolute", "absolute"), ("drive", "absolute"),
    ("backslash", "backslash"), ("not-listed", "do not match the manifest"), ("outside-folders", "unexpected member"),
    ("huge", "over the limit"), ("bomb", "compression ratio"), ("tampered", "SHA-256"), ("no-manifest", "manifest"),
    ("bad-name-in-manifest", "bad file name"), ("not-a-zip", "not a readable zip")])
def test_crafted_exports_are_refused(tmp_path, case, message):
    good = b"thickness"
    if case == "dotdot":
        path = _export_with(tmp_path, {"../evil.txt": good}, manifest_files=[])
    elif case == "dotdot-inside":
        path = _export_with(tmp_path, {"inputs/../../evil.txt": good}, manifest_files=[])
    elif case == "absolute":
        path = _export_with(tmp_path, {"/tmp/evil.txt": good}, manifest_files=[])
    elif case == "drive":
        path = _export_with(tmp_path, {"C:/evil.txt": good}, manifest_files=[])
    elif case == "backslash":
        path = _export_with(tmp_path, {"inputs\\..\\evil.txt": good}, manifest_files=[])
    elif case == "not-listed":
        path = _export_with(tmp_path, {"outputs/extra.npy": good}, manifest_files=[])
    elif case == "outside-folders":
        path = _export_with(tmp_path, {"scripts/run.py": good}, manifest_files=[])
    elif case == "huge":
        path = _export_with(tmp_path, {"outputs/big.npy": good}, tweak=_declare_size(10 ** 12))
    elif case == "bomb":
        path = _export_with(tmp_path, {"outputs/big.npy": b"\0" * 4096}, tweak=_declare_size(5 * 10 ** 9))
    elif case == "tampered":
        path = _export_with(tmp_path, {"inputs/photo.png": good}, manifest_files=[
            {"role": "input", "name": "photo.png", "sha256": "0" * 64, "size": len(good)}])
    elif case == "no-manifest":
        path = tmp_path / "plain.zip"
        with zipfile.ZipFile(path, "w") as zf:
            zf.writestr("inputs/photo.png", good)
    elif case == "bad-name-in-manifest":
        path = _export_with(tmp_path, {}, manifest_files=[
            {"role": "input", "name": "sub/../../x", "sha256": "0" * 64, "size": 1}])
    else:
        path = tmp_path / "text.zip"
        path.write_text("not a zip")
    with RunStore(tmp_path / "data") as s:
        with pytest.raises(FilmcalcError, match=message):
            s.import_zip(path)
        assert s.list_runs() == [] and _blobs(s.data_dir) == []
        assert not list(s.files_dir.glob("tmp/*")) and not (tmp_path / "evil.txt").exists()


def test_import_limits_are_adjustable(tmp_path):
    data = np.random.default_rng(1).bytes(200_000)
    path = _export_with(tmp_path, {"outputs/noise.bin": data})
    with RunStore(tmp_path / "data") as s:
        with pytest.raises(FilmcalcError, match="over the limit"):
            s.import_zip(path, max_member_bytes=100_000)
        with pytest.raises(FilmcalcError, match="unpacks to"):
            s.import_zip(path, max_total_bytes=150_000)
        assert s.import_zip(path).id == "feedc0ffee01"


# ------------------------------------------------------------------------------------------- history

def _history_runs(values, start_day=1):
    return [{"id": f"run{i:02d}", "created_utc": f"2026-02-{start_day + i:02d}T08:00:00.000000Z",
             "summary": {"statistics": {"mean_nm": v}}, "sample": "Wafer 1"} for i, v in enumerate(values)]


def test_history_control_limits_by_hand():
    # Individuals chart (NIST/SEMATECH e-Handbook §6.3; Montgomery): centre = mean, σ = MR̄ / d2, d2 = 1.128.
    values = [100.0, 102.0, 101.0, 103.0, 99.0, 101.0, 118.0, 100.0]
    # By hand: mean = 824 / 8 = 103.0; moving ranges 2, 1, 2, 4, 2, 17, 18 → MR̄ = 46 / 7 = 6.5714;
    # σ = 6.5714 / 1.128 = 5.8257; limits 103 ± 17.477 = 85.523 … 120.477: nothing outside.
    table = history_table(list(reversed(_history_runs(values))), "statistics.mean_nm")
    assert [r["run_id"] for r in table.rows] == [f"run{i:02d}" for i in range(8)]  # sorted by time
    assert table.mean == pytest.approx(103.0) and table.sigma == pytest.approx(46 / 7 / 1.128)
    assert table.upper == pytest.approx(103.0 + 3 * 46 / 7 / 1.128) and table.lower == pytest.approx(85.523, abs=1e-3)
    assert table.outside == [] and table.baseline == 8
    # The first six runs as the reference period: mean 101.0; MR 2, 1, 2, 4, 2 → MR̄ = 2.2, σ = 1.9504;
    # limits 95.149 … 106.851: run 6 (118) is above.
    table = history_table(_history_runs(values), "statistics.mean_nm", baseline=6)
    assert table.mean == pytest.approx(101.0) and table.sigma == pytest.approx(2.2 / 1.128)
    assert table.upper == pytest.approx(106.851, abs=1e-3)
    assert [(r["run_id"], r["side"]) for r in table.outside] == [("run06", "above")]
    # Sample standard deviation instead: s of the eight values = 6.1875 (by hand: Σ(x − 103)² = 268, / 7, √).
    table = history_table(_history_runs(values), "statistics.mean_nm", sigma_method="sample")
    assert table.sigma == pytest.approx((268 / 7) ** 0.5)


def test_history_skips_runs_without_the_number():
    history = _history_runs([5.0, 7.0])
    history.append({"id": "text", "created_utc": "2026-02-20T00:00:00.000000Z", "summary": {"statistics": {"mean_nm": "n/a"}}})
    history.append({"id": "none", "created_utc": "2026-02-21T00:00:00.000000Z", "summary": {}})
    history.append({"id": "flag", "created_utc": "2026-02-22T00:00:00.000000Z",
                    "summary": {"statistics": {"mean_nm": True}}})
    table = history_table(history, "statistics.mean_nm")
    assert [r["value"] for r in table.rows] == [5.0, 7.0] and table.skipped == ["text", "none", "flag"]
    single = history_table(history[:1], "statistics.mean_nm")
    assert single.mean is None and single.upper is None and single.outside == []
    with pytest.raises(FilmcalcError):
        history_table(history, "statistics.mean_nm", baseline=1)
    with pytest.raises(FilmcalcError):
        history_table(history, "statistics.mean_nm", sigma_method="range")
    assert numeric_summary_keys(history) == ["statistics.mean_nm"]


def test_history_from_the_store_and_its_figure(store):
    from filmcalc.charts import history_figure

    for v in [10.0, 12.0, 11.0, 13.0, 30.0]:
        store.save("fit", summary={"thickness_nm": v}, sample="Lot 5")
    store.save("fit", summary={"thickness_nm": 999.0}, sample="another lot")
    table = history_table(store.list_runs(sample="Lot 5"), "thickness_nm")
    assert [r["value"] for r in table.rows] == [10.0, 12.0, 11.0, 13.0, 30.0]
    assert [r["value"] for r in table.outside] == [30.0]
    fig = history_figure(table, title="Lot 5", label="thickness (nm)")
    names = [t.name for t in fig.data]
    assert "outside the limits" in names and list(fig.data[names.index("outside the limits")].y) == [30.0]
    assert len(fig.layout.shapes) == 3  # mean and the two limits


def test_compare_maps():
    a = np.array([[1.0, 2.0], [np.nan, 4.0]])
    b = np.array([[2.0, 2.0], [3.0, np.nan]])
    out = compare_maps(a, b)
    assert (out["zmin"], out["zmax"], out["pixels"]) == (1.0, 4.0, 2)
    np.testing.assert_array_equal(out["difference"], np.array([[1.0, 0.0], [np.nan, np.nan]], np.float32))
    assert out["mean_nm"] == 0.5 and out["rms_nm"] == pytest.approx(0.5 ** 0.5) and out["difference_limit"] == 1.0
    with pytest.raises(FilmcalcError, match="same size"):
        compare_maps(a, np.zeros((3, 2)))


# ------------------------------------------------------------------------------------------- PostgreSQL

def _free_port():
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@pytest.fixture(scope="module")
def postgres_url():
    """A throwaway PostgreSQL server on loopback, or a skip that says why none could be started."""
    try:
        import psycopg  # noqa: F401
    except ImportError:
        pytest.skip("psycopg is not installed (pip install 'psycopg[binary]'), so PostgreSQL cannot be tested")
    initdb, pg_ctl = shutil.which("initdb"), shutil.which("pg_ctl")
    if not (initdb and pg_ctl):
        pytest.skip("initdb and pg_ctl (PostgreSQL server programs) are not on PATH")
    prefix = []
    if os.geteuid() == 0:  # PostgreSQL refuses to run as root: run it as an unprivileged user
        runuser = shutil.which("runuser")
        if not runuser:
            pytest.skip("running as root without runuser, and PostgreSQL refuses to run as root")
        prefix = [runuser, "-u", "nobody", "--"]
    root = Path(tempfile.mkdtemp(prefix="filmcalc-pg-"))
    data, port = root / "db", _free_port()
    if prefix:
        os.chmod(root, 0o777)
    try:
        made = subprocess.run(prefix + [initdb, "-D", str(data), "-U", "filmcalc", "--auth=trust", "-E", "UTF8"],
                              check=False, capture_output=True, text=True, timeout=120)
        if made.returncode:
            pytest.skip(f"initdb could not make a cluster: {made.stderr.strip()[-300:]}")
        started = subprocess.run(prefix + [pg_ctl, "-D", str(data), "-w", "-t", "60", "-l", str(root / "log"), "-o",
                                           f"-p {port} -k {root} -c listen_addresses=127.0.0.1 -c fsync=off",
                                           "start"], check=False, capture_output=True, text=True, timeout=120)
        if started.returncode:
            log = (root / "log").read_text(errors="replace")[-300:] if (root / "log").exists() else started.stderr
            pytest.skip(f"the PostgreSQL server did not start: {log.strip()}")
        yield f"postgresql+psycopg://filmcalc@127.0.0.1:{port}/postgres"
    finally:
        if (data / "postmaster.pid").exists():
            subprocess.run(prefix + [pg_ctl, "-D", str(data), "-m", "immediate", "stop"], check=False,
                           capture_output=True, timeout=60)
        shutil.rmtree(root, ignore_errors=True)


def test_the_same_code_on_postgresql(postgres_url, tmp_path):
    with RunStore(tmp_path / "data", database_url=postgres_url) as s:
        assert s.list_runs() == [] and "postgresql" in s.describe()
        run = s.save("map", inputs={"photo.png": PHOTO}, outputs={"thickness_nm.npy": np.eye(3, dtype=np.float32)},
                     summary={"mean_nm": 1.5}, sample="Wafer P", tags=["pg"])
        assert s.get(run.id) == run and [r.id for r in s.list_runs(tags="pg", sample="Wafer P")] == [run.id]
        np.testing.assert_array_equal(s.load_array(run.id, "thickness_nm.npy"), np.eye(3))
        exported = s.export_zip(run.id, tmp_path / "pg.zip")
        s.delete(run.id)
        assert s.import_zip(exported).id == run.id and s.check().ok and s.schema_version() == runs.SCHEMA_VERSION
        s.delete(run.id)
