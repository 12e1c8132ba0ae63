"""A cohort's tiles as one lazy dask array: one chunk a shard, each shard file read once by a map."""

import os
from collections import Counter

import numpy as np
import zarr

import tilewright as tw
from tilewright.store import shard_reader
from tilewright.store.cohort import write_manifest

from .fakes import smooth_tiles, write_store

SIZES = {"N01": 11, "N02": 8, "S01": 5}  # shards of 4: 3 + 2 + 2 shard files


def _cohort(d):
    rows = []
    for s, (sid, n) in enumerate(SIZES.items()):
        write_store(d / f"{sid}.zarr", smooth_tiles(n, t=24, seed=s), shard=4, compression="lz4", slide_id=sid)
        rows.append({"slide_id": sid, "source": f"{sid}.tif", "status": "ok", "n_tiles": n})
    write_manifest(d, rows)
    return tw.open_cohort(d)


def test_cohort_tiles_are_lazy_one_chunk_a_shard(tmp_path, monkeypatch):
    cohort = _cohort(tmp_path)
    opened = Counter()
    reads = Counter()
    real_open, real_pread = os.open, os.pread
    fds = {}

    def counting_open(path, *a):
        fd = real_open(path, *a)
        opened[str(path)] += 1
        fds[fd] = str(path)
        return fd

    def counting_pread(fd, n, off):
        reads[fds[fd]] += 1
        return real_pread(fd, n, off)

    monkeypatch.setattr(shard_reader.os, "open", counting_open)
    monkeypatch.setattr(shard_reader.os, "pread", counting_pread)
    tiles = cohort.tiles
    assert not opened  # building the array read no tile
    assert tiles.shape == (24, 24, 24, 3)
    assert tiles.chunks[0] == (4, 4, 3, 4, 4, 4, 1)  # ground truth: shards of 4 per store, in manifest order
    means = tiles.map_blocks(lambda b: b.mean(axis=(1, 2, 3)), drop_axis=[1, 2, 3], dtype=float)
    got = means.compute(scheduler="threads")
    shard_files = [str(p) for sid in SIZES for p in (tmp_path / f"{sid}.zarr" / "tiles" / "c").rglob("*") if p.is_file()]
    assert len(shard_files) == 7
    assert opened == Counter({f: 1 for f in shard_files})  # each shard file opened once...
    assert reads == Counter({f: 1 for f in shard_files})  # ...and read in one read
    ref = np.concatenate([zarr.open_group(str(tmp_path / f"{sid}.zarr"), mode="r")["tiles"][...] for sid in SIZES])
    np.testing.assert_allclose(got, ref.mean(axis=(1, 2, 3)))  # reference: zarr-python's read


def test_store_to_dask_other_chunks_and_processes(tmp_path):
    cohort = _cohort(tmp_path)
    store = cohort.stores["N01"]
    ref = zarr.open_group(str(store.path), mode="r")["tiles"][...]  # reference: zarr-python
    arr = store.to_dask(chunk=3)
    assert arr.chunks[0] == (3, 3, 3, 2)
    np.testing.assert_array_equal(arr.compute(scheduler="processes", num_workers=2), ref)
    np.testing.assert_array_equal(store.to_dask()[[10, 2, 2]].compute(), ref[[10, 2, 2]])
