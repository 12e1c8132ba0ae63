"""A run's own cost per slide stays flat: journal, bounded submission, resume in one read a store.

Issue 30: at 1,000 slides each finished slide re-opened every unrecorded store and rewrote the
whole manifest (O(N²)); every submitted slide was listed as in flight; a re-run cost a task a
slide. The ground truths here are counted by the tests themselves (rows written, stores read,
tasks pulled from the argument stream, events sent).
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

import tilewright as tw
from tilewright.run.ledger import INTERRUPTED, Ledger
from tilewright.run.slide import SlideResult
from tilewright.store.cohort import read_manifest
from tilewright.store.journal import JOURNAL_NAME, append_lines, read_rows

pytestmark = pytest.mark.timeout(300)


@pytest.fixture
def slide(tmp_path):
    """A small JPEG-tiled pyramid at an odd 40x µm/px (0.2428), ~0.5 x 0.6 mm."""
    from helpers import write_slide

    def make(name, *, seed):
        return write_slide(tmp_path / "slides" / name, mpp=0.2428, size_um=(512.0, 640.0), seed=seed)[0]

    return make


@pytest.fixture
def fast_config():
    return tw.TilingConfig(mpp=1.0, tile=128, min_tissue=0.3, qc_overlay=False)


def _row(i, status="ok"):
    return SlideResult(f"s{i:05d}", f"/slides/s{i:05d}.svs", status, "" if status == "ok" else "bad file",
                       n_tiles=5 if status == "ok" else 0, seconds=0.07).to_row()


class _Clock:
    def __init__(self):
        self.now = 1000.0

    def __call__(self):
        return self.now


def test_recording_appends_and_folds_every_few_seconds_without_reading_stores(tmp_path, monkeypatch):
    import tilewright.run.ledger as ledger_mod
    import tilewright.store.cohort as cohort_mod
    import tilewright.store.metadata as metadata

    n = 3000
    ids = [f"s{i:05d}" for i in range(n)]
    ledger = Ledger(tmp_path, [f"/slides/{s}.svs" for s in ids], ids, "mpp = 0.5\n")
    ledger.started = True
    clock = _Clock()
    monkeypatch.setattr(ledger_mod.time, "monotonic", clock)
    folds = []
    real_write = cohort_mod.write_manifest
    monkeypatch.setattr(cohort_mod, "write_manifest", lambda out, rows: folds.append(len(rows)) or real_write(out, rows))

    def no_store_reads(*a, **k):
        raise AssertionError("recording a slide read a store")

    monkeypatch.setattr(metadata, "read_json", no_store_reads)
    for i in range(n):  # 20 slides a second for 150 s of the clock
        ledger.record(_row(i, "failed" if i % 97 == 0 else "ok"))
        clock.now += 0.05
    # folded at most once every FOLD_EVERY seconds: ground truth from the clock the test drives
    assert 1 <= len(folds) <= 150 / ledger_mod.FOLD_EVERY + 1
    assert all(k == n for k in folds)  # each folding writes every slide of the run (unreached: interrupted)
    monkeypatch.undo()
    # between foldings the rows are in the journal; readers see manifest and journal together
    m = read_manifest(tmp_path)
    assert len(m) == n and (m.status == "failed").sum() == len(range(0, n, 97))
    assert len(read_rows(tmp_path)) < n  # the journal holds only rows since the last folding
    ledger.write(last=True)
    assert not (tmp_path / JOURNAL_NAME).exists()
    on_disk = pd.read_csv(tmp_path / "manifest.csv", keep_default_na=False)
    assert list(on_disk.slide_id) == ids and (on_disk.status == "ok").sum() == n - len(range(0, n, 97))


def test_a_killed_run_loses_no_row_and_a_cut_line_is_skipped(tmp_path):
    ids = ["a", "b", "c"]
    paths = [f"/slides/{s}.tif" for s in ids]
    first = Ledger(tmp_path, paths, ids, "")
    first.started = True
    first.write()  # the manifest as a run leaves it at its first folding: every slide interrupted
    first.record(SlideResult("a", paths[0], "ok", n_tiles=3).to_row())
    first.record(SlideResult("b", paths[1], "failed", "bad header").to_row())
    # SIGKILL now: no folding; a third row was being appended when the process died
    with open(tmp_path / JOURNAL_NAME, "a", encoding="utf-8") as fh:
        fh.write('{"slide_id": "c", "status": "o')
    on_disk = pd.read_csv(tmp_path / "manifest.csv", keep_default_na=False).set_index("slide_id")
    assert on_disk.loc["a", "error"] == INTERRUPTED  # the manifest alone is behind ...
    m = read_manifest(tmp_path).set_index("slide_id")  # ... manifest + journal are not
    assert m.loc["a", "status"] == "ok" and m.loc["a", "n_tiles"] == 3
    assert m.loc["b", "error"] == "bad header" and m.loc["c", "error"] == INTERRUPTED
    # the next run starts from those rows (its previous rows), and folds them into the manifest
    again = Ledger(tmp_path, paths, ids, "")
    assert again.previous["a"]["status"] == "ok" and again.previous["b"]["status"] == "failed"
    again.started = True
    again.write(last=True)
    assert not (tmp_path / JOURNAL_NAME).exists()
    assert dict(pd.read_csv(tmp_path / "manifest.csv").set_index("slide_id").status) == \
        {"a": "ok", "b": "failed", "c": "failed"}


def test_journal_lines_are_whole_rows(tmp_path):
    append_lines(tmp_path / JOURNAL_NAME, [json.dumps({"slide_id": "x", "seconds": 1.5}), "not json",
                                           json.dumps([1, 2]), json.dumps({"no_id": 1})])
    assert read_rows(tmp_path) == [{"slide_id": "x", "seconds": 1.5}]


def test_tasks_are_submitted_a_few_per_worker_thread():
    """execute pulls arguments lazily: at every result, at most per_thread x threads are out."""
    from distributed import Client, LocalCluster

    from tilewright.run.execute import execute

    pulled = [0]

    def args():
        for i in range(120):
            pulled[0] += 1
            yield (i,)

    with LocalCluster(n_workers=2, threads_per_worker=1, processes=False, dashboard_address=":0") as cluster, \
            Client(cluster) as client:
        seen, outstanding = [], []
        for k, value in execute(_square, args(), client=client, per_thread=3):
            seen.append((k, value))
            outstanding.append(pulled[0] - len(seen))
    assert sorted(seen) == [(i, i * i) for i in range(120)]
    assert max(outstanding) <= 3 * 2  # ground truth: 2 worker threads x 3


def _square(i):
    return i * i


def test_progress_counts_in_flight_only_slides_being_tiled():
    """Kept slides are never in flight and do not lower the planned mean; a late "tiles" message
    of a finished slide does not bring it back; the end is never "now" while slides remain."""
    from tilewright.run.events import ProgressEvent, ProgressTracker

    t = ProgressTracker(None, 10)
    t(ProgressEvent("start", count=10))
    for i in range(4):  # four slides kept from an earlier run
        t(ProgressEvent("slide", f"k{i}", row={"status": "ok", "n_tiles": 7, "kept": True}))
    t(ProgressEvent("plan", "a", 100, time=t.started))
    t(ProgressEvent("tiles", "a", 100, 10.0))
    t(ProgressEvent("slide", "a", row={"status": "ok", "n_tiles": 100}))
    t(ProgressEvent("tiles", "a", 0, 0.0))  # a late flush
    t(ProgressEvent("slide", "b", 40, 4.0, row={"status": "ok", "n_tiles": 40}))  # too short for events
    t(ProgressEvent("plan", "c", 60))
    t(ProgressEvent("tiles", "c", 10, 1.0))
    snap = t.snapshot()
    assert snap["in_flight"] == ["c"]
    assert snap["tiles_read"] == 150 and snap["source_megapixels"] == pytest.approx(15.0)
    # planned: 100 + 40 + 60, plus the mean of those three for each of the 3 slides not yet seen
    assert snap["tiles_planned_estimate"] == 200 + 3 * 200 // 3
    assert snap["estimated_end"] is not None and snap["estimated_end"] > snap["updated"][:19]
    t(ProgressEvent("tiles", "c", 50, 5.0))  # every planned tile read, slide c not finished
    assert t.eta_seconds() > 0  # four slides still to finish: not "ends now"


def test_a_rerun_reads_each_store_once_and_sends_no_task(slide, tmp_path, fast_config, monkeypatch):
    import tilewright.run.identity as identity
    import tilewright.store.metadata as metadata

    srcs = [slide(f"r{i}.tif", seed=40 + i) for i in range(5)]
    out = tmp_path / "out"
    first = tw.tile_cohort(srcs, out, fast_config, progress=False)
    assert all(r.status == "ok" for r in first)
    reads, opened, digested = [], [], []
    real = metadata.read_json
    monkeypatch.setattr(metadata, "read_json", lambda p: reads.append(str(p)) or real(p))
    monkeypatch.setattr(identity, "_file_mpp", lambda *a: opened.append(a) or 0.2428)
    import tilewright.store.provenance as provenance

    real_digest = provenance.source_digest
    monkeypatch.setattr(provenance, "source_digest", lambda p: digested.append(p) or real_digest(p))

    def no_task(*a, **k):
        raise AssertionError("a kept slide became a task")

    import tilewright.run.batches as batches

    monkeypatch.setattr(batches, "run_batch", no_task)
    again = tw.tile_cohort(srcs, out, fast_config, progress=False)
    assert [r.status for r in again] == ["ok"] * 5 and all(r.kept for r in again)
    assert sorted(reads) == sorted(str(out / f"r{i}.zarr" / "zarr.json") for i in range(5))
    assert opened == []  # level-0 µm/px from the stores: same digest, read from the file
    assert digested == []  # unchanged size and modification time: the recorded digest stands
    # a changed source is noticed (its digest), and then the file is opened for its µm/px
    monkeypatch.setattr(batches, "run_batch", lambda *a, **k: [])
    with open(srcs[2], "ab") as fh:
        fh.write(b"\0" * 16)
    rows = {r.slide_id: r for r in tw.tile_cohort(srcs, out, fast_config, progress=False)}
    assert rows["r2"].status == "failed" and "source size" in rows["r2"].error and len(opened) == 1
    assert [str(p) for p in digested] == [str(srcs[2])]  # only the changed file is read
    assert all(rows[f"r{i}"].kept for i in (0, 1, 3, 4))


def test_batches_fit_a_second_of_work_and_leave_work_for_every_thread():
    from tilewright.run.batches import MAX_BATCH, BatchSizer

    sizer = BatchSizer(threads=2, task_seconds=1.0)
    assert sizer.size(1000) == 1  # nothing measured yet
    for _ in range(50):
        sizer.note({"seconds": 0.07})
    sizer.note({"seconds": 30.0, "kept": True})  # a kept slide took no time in this run
    assert sizer.size(1000) == int(1.0 / sizer.mean) == 14
    assert sizer.size(20) == 5  # 20 left on 2 threads: two tasks a thread
    sizer.note({"seconds": 600.0})
    assert sizer.size(1000) == 1  # long slides: one a task
    assert BatchSizer(threads=0).size(1000) == 1  # in this process: one at a time
    items = list(range(1000))
    fast = BatchSizer(threads=4, task_seconds=10.0)
    fast.mean = 0.01
    parts = list(fast.batches(items))
    assert sum(parts, []) == items and max(map(len, parts)) == MAX_BATCH


def test_a_dead_workers_batch_keeps_its_finished_stores(slide, tmp_path, fast_config):
    from tilewright.run.batches import lost_rows
    from tilewright.run.slide import tile_slide

    src = slide("d0.tif", seed=61)
    out = tmp_path / "out"
    tile_slide(src, out / "d0.zarr", fast_config, slide_id="d0")
    rows = lost_rows([(str(src), "d0", None), (str(src), "d1", None)], out, RuntimeError("boom"))
    assert rows[0]["status"] == "ok" and rows[0]["n_tiles"] == len(tw.open_store(out / "d0.zarr"))
    assert rows[1]["status"] == "failed" and "boom" in rows[1]["error"]
    assert lost_rows([(str(src), "d0", None)], out, RuntimeError("boom"), overwrite=True)[0]["status"] == "failed"


def test_store_metadata_without_zarr_matches_zarr(slide, tmp_path, fast_config):
    """One plain read of zarr.json gives what zarr's own open gives (zarr-python as reference),
    and the small arrays read from their chunk files equal zarr's reads."""
    import zarr

    from tilewright.store.metadata import read_small_array, store_attrs

    src = slide("m0.tif", seed=71)
    tw.tile_slide(src, tmp_path / "m0.zarr", fast_config)
    group = zarr.open_group(str(tmp_path / "m0.zarr"), mode="r")
    assert store_attrs(tmp_path / "m0.zarr") == dict(group.attrs)
    for name in ("yx", "yx_level0", "tissue", "sharpness", "thumbnail", "mask"):
        mine = read_small_array(tmp_path / "m0.zarr" / name)
        ref = group[name][...]
        assert mine.dtype == ref.dtype and np.array_equal(mine, ref), name
    assert store_attrs(tmp_path / "missing.zarr") is None


def test_a_worker_slide_sends_events_only_when_it_lasts(monkeypatch):
    """On a worker (a topic name as ``report``), a slide sends its plan and per-block counts once
    it has lasted SEND_EVERY seconds; a shorter one sends nothing and ``finish`` returns what it
    read, for its row. Ground truth: the counts the test feeds, and the clock it drives."""
    import distributed

    import tilewright.run.reporting as reporting

    sent = []

    class Worker:
        def log_event(self, topic, msg):
            sent.append((topic, msg["kind"], msg["slide_id"], msg["count"]))

    clock = _Clock()
    monkeypatch.setattr(distributed, "get_worker", lambda: Worker())
    monkeypatch.setattr(reporting.time, "monotonic", clock)
    on_plan, on_tiles, finish = reporting.slide_reporter("topic-x", "short")
    on_plan(5, 0.25)
    on_tiles(3)
    clock.now += reporting.SEND_EVERY / 2
    on_tiles(2)
    assert sent == [] and finish() == (5, 5 * 0.25)
    on_plan, on_tiles, finish = reporting.slide_reporter("topic-x", "long")
    on_plan(40, 0.25)
    on_tiles(10)
    clock.now += reporting.SEND_EVERY
    on_tiles(10)  # lasted SEND_EVERY: the plan, then the 20 tiles read so far
    clock.now += 0.1
    on_tiles(5)  # within SEND_EVERY of the last message: held
    assert sent == [("topic-x", "plan", "long", 40), ("topic-x", "tiles", "long", 20)]
    assert finish() == (0, 0.0) and sent[-1] == ("topic-x", "tiles", "long", 5)
