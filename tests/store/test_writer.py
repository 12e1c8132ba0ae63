"""Atomic store writing and reading, against ground truth arrays built here."""

import json

import numpy as np
import pytest
import zarr

from tilewright.errors import IncompleteStoreError, StoreError
from tilewright.store.reader import is_complete, open_store
from tilewright.store.writer import StoreWriter


def _tiles(n, t=32, seed=0):
    return np.random.default_rng(seed).integers(0, 256, (n, t, t, 3), dtype=np.uint8)


def _write(path, tiles, shard=4, **attrs):
    n, t = len(tiles), tiles.shape[1]
    yx = np.stack([np.arange(n) * t, np.arange(n) * 2 * t], axis=1)
    with StoreWriter(path, n + 3, t, shard_tiles=shard) as w:
        for i in range(0, n, shard):
            w.append(tiles[i:i + shard], yx[i:i + shard], yx[i:i + shard] * 2,
                     np.full(len(tiles[i:i + shard]), 0.75), np.arange(i, min(i + shard, n)))
        w.commit({"slide_id": "s", **attrs}, np.zeros((5, 6, 3), np.uint8), np.ones((5, 6), bool))
    return yx


def test_round_trip_and_plain_zarr(tmp_path):
    tiles = _tiles(10)
    yx = _write(tmp_path / "s.zarr", tiles)
    store = open_store(tmp_path / "s.zarr")
    assert len(store) == 10  # ground truth: 10 tiles appended; capacity 13 trimmed
    np.testing.assert_array_equal(store[3], tiles[3])
    np.testing.assert_array_equal(store[-1], tiles[-1])
    np.testing.assert_array_equal(store.yx, yx)
    np.testing.assert_array_equal(store.yx_level0, yx * 2)
    np.testing.assert_array_equal(store.to_dask().compute(), tiles)
    # plain zarr, without tilewright (reference: zarr-python)
    g = zarr.open_group(str(tmp_path / "s.zarr"), mode="r")
    np.testing.assert_array_equal(g["tiles"][2:5], tiles[2:5])
    assert g.attrs["complete"] is True
    json.dumps(dict(g.attrs))  # provenance is JSON-safe
    # one tile a chunk, several tiles a shard: few files for many tiles
    assert g["tiles"].chunks == (1, 32, 32, 3) and g["tiles"].shards == (4, 32, 32, 3)
    files = list((tmp_path / "s.zarr" / "tiles").rglob("*"))
    assert sum(f.is_file() for f in files) <= 1 + 3  # zarr.json + ceil(10 / 4) shard files


def test_exception_mid_write_leaves_nothing(tmp_path):
    tiles = _tiles(8)
    with pytest.raises(RuntimeError):
        with StoreWriter(tmp_path / "s.zarr", 8, 32, shard_tiles=4) as w:
            w.append(tiles[:4], np.zeros((4, 2)), np.zeros((4, 2)), np.zeros(4), np.zeros(4))
            raise RuntimeError("injected")
    assert not (tmp_path / "s.zarr").exists()
    assert list(tmp_path.iterdir()) == []  # the temporary folder is gone too


def test_incomplete_store_is_refused(tmp_path):
    g = zarr.open_group(str(tmp_path / "s.zarr"), mode="w")
    g.attrs.update({"format": "tilewright.tiles", "complete": False})
    assert not is_complete(tmp_path / "s.zarr")
    with pytest.raises(IncompleteStoreError):
        open_store(tmp_path / "s.zarr")
    with pytest.raises(StoreError):
        open_store(tmp_path / "missing.zarr")


def test_overwrite_replaces_atomically(tmp_path):
    _write(tmp_path / "s.zarr", _tiles(5, seed=1))
    tiles = _tiles(7, seed=2)
    _write(tmp_path / "s.zarr", tiles)
    store = open_store(tmp_path / "s.zarr")
    assert len(store) == 7
    np.testing.assert_array_equal(store[6], tiles[6])
    assert [p.name for p in tmp_path.iterdir()] == ["s.zarr"]


def test_store_pickles_for_workers(tmp_path):
    import pickle

    tiles = _tiles(4)
    _write(tmp_path / "s.zarr", tiles)
    s2 = pickle.loads(pickle.dumps(open_store(tmp_path / "s.zarr")))
    np.testing.assert_array_equal(s2[1], tiles[1])


def test_maps_written_early_in_bands_and_encoded_appends(tmp_path):
    # ground truth: a thumbnail and masks whose sides are not multiples of the 512 px band
    rng = np.random.default_rng(3)
    thumb = rng.integers(0, 256, (700, 1100, 3), dtype=np.uint8)
    mask = rng.random((700, 1100)) > 0.5
    ink = rng.random((700, 1100)) > 0.9
    tiles = _tiles(6)
    with StoreWriter(tmp_path / "m.zarr", 6, 32, shard_tiles=4) as w:
        w.write_maps(thumb, mask, {"ink": ink})  # before any tile, as tile_slide does
        w.append(None, np.zeros((6, 2)), np.zeros((6, 2)), np.ones(6), np.ones(6), encoded=w.encode(tiles))
        with pytest.raises(ValueError, match="tiles or their encoded"):
            w.append(None, np.zeros((1, 2)), np.zeros((1, 2)), [1.0], [1.0])
        w.commit({"slide_id": "m"})
    store = open_store(tmp_path / "m.zarr")
    np.testing.assert_array_equal(store.thumbnail, thumb)
    np.testing.assert_array_equal(store.mask, mask)
    np.testing.assert_array_equal(store[...], tiles)
    g = zarr.open_group(str(tmp_path / "m.zarr"), mode="r")
    np.testing.assert_array_equal(g["ink"][...], ink)
    assert g["thumbnail"].chunks == (512, 512, 3)  # banded: zarr never holds the whole picture at once
