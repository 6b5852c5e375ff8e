"""Saved runs: save and reopen a 24-megapixel map, list and filter 10,000 runs, the history over 1,000 runs.

Every figure is timed in this process against a plain baseline on the same disk:

* saving a run holding a 6000 × 4000 float32 thickness map (96 MB) against ``np.save`` of the same array
  to a plain file, fsynced (the store also hashes it, moves it into place and commits the rows);
  reopening it (``RunStore.load_array``, header checked, no pickle) against ``np.load`` of that file;
* listing and filtering 10,000 runs (goal: under 0.2 s for the whole list) against a bare ``sqlite3``
  query of the same columns without building records or parsing JSON;
* the history table with control limits over 1,000 runs of one sample, and the plotly figure of it.

Run: ``python benchmarks/bench_runs.py`` (about a minute; the runs are saved one by one through the public
``RunStore.save``, each in its own transaction). ``--runs N`` changes the 10,000.
"""

from __future__ import annotations

import argparse
import os
import shutil
import sqlite3
import tempfile
import time
from pathlib import Path

import numpy as np

from filmcalc.charts import history_figure
from filmcalc.runs import RunStore, history_table

LIST_GOAL_S = 0.2


def best_of(function, repeat=3):
    """(best wall time in s, last result) over ``repeat`` calls."""
    best, result = float("inf"), None
    for _ in range(repeat):
        start = time.perf_counter()
        result = function()
        best = min(best, time.perf_counter() - start)
    return best, result


def folder_bytes(path):
    return sum(p.stat().st_size for p in Path(path).rglob("*") if p.is_file())


def bench_big_map(root):
    print("\n1. A run holding a 24-megapixel map (6000 × 4000 float32, 96 MB)")
    rng = np.random.default_rng(0)
    thickness = (250 + 40 * rng.standard_normal((4000, 6000))).astype(np.float32)
    thickness[rng.random((4000, 6000)) < 0.01] = np.nan
    plain = root / "plain.npy"

    def baseline_save():
        with open(plain, "wb") as handle:
            np.save(handle, thickness)
            handle.flush()
            os.fsync(handle.fileno())
        return plain

    t_plain, _ = best_of(baseline_save)
    saves = []

    def save():
        store_dir = root / f"big-{len(saves)}"
        with RunStore(store_dir) as store:
            run = store.save("map", outputs={"thickness_nm.npy": thickness}, summary={"mean_nm": 250.0},
                             sample="benchmark wafer")
        saves.append((store_dir, run.id))
        return store_dir

    t_save, store_dir = best_of(save)
    run_id = saves[-1][1]
    on_disk = folder_bytes(store_dir)
    t_plain_load, _ = best_of(lambda: np.load(plain))
    with RunStore(store_dir) as store:
        t_load, loaded = best_of(lambda: store.load_array(run_id, "thickness_nm.npy"))
        t_mmap, _ = best_of(lambda: float(store.load_array(run_id, "thickness_nm.npy", mmap=True)[2000, 3000]))
        t_get, _ = best_of(lambda: store.get(run_id))
        t_export, _ = best_of(lambda: store.export_zip(run_id, root / "big.zip"), repeat=1)
    assert np.array_equal(loaded, thickness, equal_nan=True)
    print(f"   save (hash, fsync, move, commit)     {t_save:7.3f} s   np.save + fsync of a plain file {t_plain:6.3f} s "
          f"(× {t_save / t_plain:.1f})")
    print(f"   on disk                              {on_disk / 1e6:7.1f} MB  (array {thickness.nbytes / 1e6:.1f} MB "
          "+ database)")
    print(f"   reopen: record                       {t_get * 1e3:7.1f} ms")
    print(f"   reopen: load the map                 {t_load:7.3f} s   np.load of the plain file {t_plain_load:6.3f} s "
          f"(× {t_load / t_plain_load:.2f})")
    print(f"   reopen: memory-map, read one pixel   {t_mmap * 1e3:7.1f} ms")
    print(f"   export to zip (deflate, hash check)  {t_export:7.2f} s   ({(root / 'big.zip').stat().st_size / 1e6:.1f} MB)")
    for folder, _ in saves:
        shutil.rmtree(folder)


def populate(store, count):
    samples = [f"Wafer {k:03d}" for k in range(100)]
    rng = np.random.default_rng(1)
    kinds = ["map", "fit", "fit-map", "fringes", "sequence", "chart"]
    start = time.perf_counter()
    for i in range(count):
        sample = "Line A monitor" if i % 10 == 0 else samples[i % 100]
        value = float(100 + rng.normal(0, 1.5))
        summary = {"stack": "thermal oxide coupon on silicon", "mean_nm": round(value, 3), "std_nm": 1.2,
                   "min_nm": value - 5, "max_nm": value + 5, "pixels": 60000, "good_pixels": 59554,
                   "flagged_fraction": 0.007, "seconds": 1.2,
                   "flags": {"ambiguous": 12, "saturated": 0, "dark": 3, "off_path": 40}}
        store.save(kinds[i % len(kinds)], summary=summary, settings={"range": "0:1500", "trend": "right"},
                   sample=sample, tags=["daily"] + (["weekly"] if i % 7 == 0 else []),
                   saved_by=["A. Diallo", "P. Novak", "S. Kim"][i % 3], note=f"batch {i}")
    return time.perf_counter() - start


def bench_listing(root, count):
    print(f"\n2. Listing and filtering {count:,} runs (goal: the whole list in under {LIST_GOAL_S} s)")
    store_dir = root / "many"
    with RunStore(store_dir) as store:
        seconds = populate(store, count)
        print(f"   saving {count:,} runs one by one         {seconds:7.1f} s   ({count / seconds:.0f} saves/s, "
              "each its own transaction)")
        db = sqlite3.connect(store_dir / "runs.sqlite")
        t_raw, raw = best_of(lambda: db.execute("SELECT id, kind, sample, note, saved_by, created_utc, "
                                                "filmcalc_version, summary, bytes_stored FROM runs "
                                                "ORDER BY created_utc DESC").fetchall())
        db.close()
        cases = [
            ("all runs, newest first", lambda: store.list_runs()),
            ("one sample (Wafer 042)", lambda: store.list_runs(sample="Wafer 042")),
            ("tag 'weekly'", lambda: store.list_runs(tags="weekly")),
            ("kind fit, saved by P. Novak", lambda: store.list_runs(kind="fit", saved_by="P. Novak")),
            ("text 'batch 99' in sample/note/id", lambda: store.list_runs(text="batch 99")),
            ("a page: 50 newest", lambda: store.list_runs(limit=50)),
            ("count, all", lambda: store.count_runs()),
            ("filter values (facets)", lambda: store.facets()),
        ]
        print(f"   bare sqlite3 query, all rows (floor)  {t_raw * 1e3:7.1f} ms   ({len(raw):,} rows)")
        for name, call in cases:
            t, result = best_of(call)
            size = result if isinstance(result, int) else len(result)
            flag = ""
            if name.startswith("all runs"):
                flag = f"   goal < {LIST_GOAL_S * 1e3:.0f} ms: {'met' if t < LIST_GOAL_S else 'NOT MET'}"
            print(f"   {name:<37} {t * 1e3:7.1f} ms   ({size:,}){flag}")
    return store_dir


def bench_history(store_dir):
    print("\n3. History of one sample over 1,000 runs (mean_nm, individuals chart, ±3σ)")
    with RunStore(store_dir) as store:
        t_query, history = best_of(lambda: store.list_runs(sample="Line A monitor", newest_first=False))
        t_table, table = best_of(lambda: history_table(history, "mean_nm"))
        t_figure, fig = best_of(lambda: history_figure(table, title="Line A monitor", label="mean thickness (nm)"))
        t_json, text = best_of(lambda: fig.to_json())
    print(f"   query the runs                       {t_query * 1e3:7.1f} ms   ({len(history):,} runs)")
    print(f"   history table and control limits     {t_table * 1e3:7.1f} ms   "
          f"({len(table.outside)} outside {table.lower:.2f}–{table.upper:.2f} nm)")
    print(f"   plotly figure                        {t_figure * 1e3:7.1f} ms")
    print(f"   figure to JSON (what a page sends)   {t_json * 1e3:7.1f} ms   ({len(text) / 1e3:.0f} kB)")
    print(f"   total                                {(t_query + t_table + t_figure + t_json) * 1e3:7.1f} ms")


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=10_000, help="runs to list and filter (default 10,000)")
    args = parser.parse_args()
    print(f"bench_runs: SQLite store in a temporary folder; {os.cpu_count()} cores; best of 3 unless said")
    with tempfile.TemporaryDirectory(prefix="filmcalc-bench-runs-") as tmp:
        root = Path(tmp)
        bench_big_map(root)
        store_dir = bench_listing(root, args.runs)
        bench_history(store_dir)


if __name__ == "__main__":
    main()
