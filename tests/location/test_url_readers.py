"""Tile stores and cohort folders read from a bucket of a real S3-protocol server (SeaweedFS).

Stores are written locally, uploaded object for object, and read both ways: every reader
(``open_store``, ``store[i]`` straight from the shard objects, ``to_dask``, ``open_cohort``,
``TileStoreDataset``, and plain zarr-python in a process without tilewright) must give what the
local folder gives.
"""

from __future__ import annotations

import json
import subprocess
import sys

import numpy as np
import pytest

import tilewright as tw
from tilewright.errors import IncompleteStoreError, StoreError
from tilewright.store.cohort import write_manifest

from object_store_files import upload
from store.fakes import smooth_tiles, write_store

SIZES = {"N01": 11, "S-02 (b)": 6}  # an id with a space and brackets; shards of 4


@pytest.fixture
def cohort(tmp_path, bucket):
    local = tmp_path / "out"
    rows = []
    for s, (sid, n) in enumerate(SIZES.items()):
        yx = np.stack([np.arange(n) * 40, np.arange(n) * 7 + 3], 1)
        write_store(local / f"{sid}.zarr", smooth_tiles(n, t=24, seed=s), shard=4, compression="zstd",
                    slide_id=sid, yx=yx)
        rows.append({"slide_id": sid, "source": f"{sid}.tif", "status": "ok", "n_tiles": n})
    write_manifest(local, rows)
    url = f"{bucket}/cohorts/run 1"
    upload(local, url)
    return local, url


def _count_requests(monkeypatch):
    from tilewright.location import objects

    calls = []
    for name in ("get_range", "get_tail", "get_bytes", "head"):
        real = getattr(objects, name)
        monkeypatch.setattr(objects, name, lambda *a, _real=real, _name=name: calls.append(_name) or _real(*a))
    return calls


def test_store_in_a_bucket_reads_as_the_local_store(cohort, monkeypatch):
    local, url = cohort
    a, b = tw.open_store(local / "N01.zarr"), tw.open_store(f"{url}/N01.zarr")
    assert len(b) == len(a) == 11 and b.attrs == a.attrs and b.slide_id == "N01"
    for part in ("yx", "yx_level0", "tissue", "sharpness", "thumbnail", "mask"):
        np.testing.assert_array_equal(getattr(b, part), getattr(a, part))
    ref = a.tiles[...]  # zarr-python's own read of the local store
    calls = _count_requests(monkeypatch)
    np.testing.assert_array_equal(b[9], ref[9])
    assert calls == ["get_tail", "get_range"]  # the shard's index (kept), then the tile's bytes
    calls.clear()
    np.testing.assert_array_equal(b[10], ref[10])
    assert calls == ["get_range"]  # ground truth: one range request a tile once the index is known
    idx = np.array([3, 0, 10, 3, -1])
    np.testing.assert_array_equal(b[idx], ref[idx])
    np.testing.assert_array_equal(b[2:9], ref[2:9])
    np.testing.assert_array_equal(b.to_dask().compute(scheduler="threads"), ref)


def test_cohort_and_dataset_from_a_bucket(cohort):
    local, url = cohort
    a, b = tw.open_cohort(local), tw.open_cohort(url)
    assert list(b.stores) == list(a.stores) == list(SIZES)
    assert b.manifest.equals(a.manifest)
    assert b.index.equals(a.index)
    np.testing.assert_array_equal(b.tiles.compute(scheduler="threads"), a.tiles.compute(scheduler="threads"))
    from tilewright.torch.dataset import TileStoreDataset

    pytest.importorskip("torch")
    ds_b, ds_a = TileStoreDataset(url, transform=lambda t: t), TileStoreDataset(local, transform=lambda t: t)
    assert len(ds_b) == len(ds_a) == sum(SIZES.values())
    for i in (0, 5, 16):
        np.testing.assert_array_equal(ds_b[i][0], ds_a[i][0])
    import torch

    # DataLoader worker processes open the stores again: spawned ones read them...
    batches = list(torch.utils.data.DataLoader(TileStoreDataset(url), batch_size=4, num_workers=2,
                                               multiprocessing_context="spawn"))
    got = torch.cat([b[0] for b in batches]).numpy()
    np.testing.assert_array_equal(got, np.moveaxis(a.tiles.compute(scheduler="threads"), -1, 1))
    # ...forked ones (the client's threads do not survive a fork) refuse with the fix, never hang
    with pytest.raises(Exception, match="multiprocessing_context='spawn'"):
        list(torch.utils.data.DataLoader(TileStoreDataset(url), batch_size=4, num_workers=1,
                                         multiprocessing_context="fork"))


def test_plain_zarr_reads_a_store_in_a_bucket(cohort):
    local, url = cohort
    code = """
import json, os, sys
import numpy as np, zarr
from obstore.store import S3Store
from zarr.storage import ObjectStore
url = sys.argv[1]
bucket, _, key = url.split("://", 1)[1].partition("/")
store = S3Store(bucket, prefix=key, endpoint=os.environ["AWS_ENDPOINT_URL"], region="us-east-1",
                client_options={"allow_http": True})
g = zarr.open_group(ObjectStore(store, read_only=True), mode="r")
print(json.dumps({"complete": g.attrs["complete"], "sum": int(g["tiles"][...].astype(np.int64).sum()),
                  "shape": list(g["tiles"].shape), "tilewright": "tilewright" in sys.modules}))
"""
    out = subprocess.run([sys.executable, "-c", code, f"{url}/N01.zarr"], capture_output=True, text=True, timeout=120)
    assert out.returncode == 0, out.stderr[-2000:]
    got = json.loads(out.stdout)
    ref = tw.open_store(local / "N01.zarr").tiles[...]  # zarr-python's read of the local folder
    assert got == {"complete": True, "sum": int(ref.astype(np.int64).sum()), "shape": list(ref.shape),
                   "tilewright": False}


def test_missing_and_incomplete_stores_in_a_bucket(cohort, object_server):
    from object_store_files import _store
    import obstore

    local, url = cohort
    with pytest.raises(StoreError) as e:
        tw.open_store(f"{url}/nowhere.zarr")
    assert "no such tile store" in str(e.value) and f"{url}/nowhere.zarr" in str(e.value)
    meta = json.loads((local / "N01.zarr" / "zarr.json").read_text())
    meta["attributes"]["complete"] = False  # what a reader sees of a store whose marker is not written yet
    store, key = _store(f"{url}/N01.zarr/zarr.json")
    obstore.put(store, key, json.dumps(meta).encode())
    assert not tw.store.reader.is_complete(f"{url}/N01.zarr")
    with pytest.raises(IncompleteStoreError):
        tw.open_store(f"{url}/N01.zarr")
