"""Tiles read straight from shard files, checked against zarr-python's own read of the same store."""

import multiprocessing
import os
import pickle

import numpy as np
import pytest
import zarr

from tilewright.errors import StoreError
from tilewright.store import shard_reader
from tilewright.store.layout import FORMAT_NAME
from tilewright.store.reader import open_store

from .fakes import smooth_tiles as _tiles
from .fakes import write_store as _write

CODECS = ["lz4", "zstd", "zlib", "none", "webp", "jpeg"]


@pytest.fixture(scope="module", params=CODECS)
def written(request, tmp_path_factory):
    tiles = _tiles(23)  # 23 tiles in shards of 4: the last shard holds 3
    path = _write(tmp_path_factory.mktemp(request.param) / "s.zarr", tiles, compression=request.param)
    reference = zarr.open_group(str(path), mode="r")["tiles"][...]  # reference: zarr-python's read
    return request.param, path, tiles, reference


def test_every_selection_equals_zarrs_read(written):
    codec, path, tiles, ref = written
    store = open_store(path)
    assert store._reader is not None  # the direct path is the one under test
    if codec != "jpeg":  # lossless: also the tiles written (ground truth)
        np.testing.assert_array_equal(ref, tiles)
    for i in (0, 3, 4, 22, -1, -23):
        np.testing.assert_array_equal(store[i], ref[i])
    for sl in (slice(0, 23), slice(5, 9), slice(2, 21, 3), slice(None, None, -1), slice(20, 30), slice(7, 7)):
        np.testing.assert_array_equal(store[sl], ref[sl])
    rng = np.random.default_rng(1)
    idx = rng.integers(-23, 23, 64)  # any order, repeats, negative indices
    np.testing.assert_array_equal(store[idx], ref[idx])
    np.testing.assert_array_equal(store[[5, 5, 5, 0]], ref[[5, 5, 5, 0]])
    np.testing.assert_array_equal(store[idx.reshape(8, 8)], ref[idx.reshape(8, 8)])
    mask = rng.random(23) > 0.5
    np.testing.assert_array_equal(store[mask], ref[mask])
    assert store[[]].shape == (0, 40, 40, 3)
    np.testing.assert_array_equal(store[3, 5:9, :, 1], ref[3, 5:9, :, 1])
    np.testing.assert_array_equal(store[[1, 2], :4], ref[[1, 2], :4])
    np.testing.assert_array_equal(store[...], ref)
    with pytest.raises(IndexError):
        store[23]
    with pytest.raises(IndexError):
        store[[0, 24]]


_PREAD, _PREADV = os.pread, os.preadv


def _count_reads(monkeypatch):
    """Record (bytes, offset) of every positioned read the shard reader makes."""
    calls = []
    monkeypatch.setattr(shard_reader.os, "pread", lambda fd, n, off: calls.append((n, off)) or _PREAD(fd, n, off))
    monkeypatch.setattr(shard_reader.os, "preadv", lambda fd, bufs, off: calls.append(
        (sum(memoryview(b).nbytes for b in bufs), off)) or _PREADV(fd, bufs, off))
    return calls


def test_index_read_once_and_one_read_a_chunk(written, monkeypatch):
    _, path, _, ref = written
    store = open_store(path)
    calls = _count_reads(monkeypatch)
    np.testing.assert_array_equal(store[9], ref[9])
    assert len(calls) == 2  # ground truth: the shard's index, then the one chunk
    assert calls[0][0] == 16 * 4 + 4  # index of 4 chunks (offset, length as uint64) + its CRC-32C
    calls.clear()
    np.testing.assert_array_equal(store[[0, 5, 9]], ref[[0, 5, 9]])
    assert len(calls) == 5  # shards 0 and 1: index + chunk; shard 2: its cached index, the chunk
    calls.clear()
    np.testing.assert_array_equal(store[[10, 1, 6]], ref[[10, 1, 6]])
    assert len(calls) == 3  # every index cached: one read a chunk


def test_a_whole_shard_is_one_read(written, monkeypatch):
    _, path, _, ref = written
    store = open_store(path)
    opened, reads = [], []
    real_open, real_pread = os.open, os.pread
    monkeypatch.setattr(shard_reader.os, "open", lambda p, *a: opened.append(str(p)) or real_open(p, *a))
    monkeypatch.setattr(shard_reader.os, "pread", lambda fd, n, off: reads.append(off) or real_pread(fd, n, off))
    np.testing.assert_array_equal(store[4:8], ref[4:8])
    np.testing.assert_array_equal(store[20:23], ref[20:23])  # the last, partial shard
    assert len(opened) == 2 and reads == [0, 0]  # ground truth: two shard files, each read whole from 0


def test_unsharded_store_falls_back_to_zarr(tmp_path):
    tiles = _tiles(9, t=16)
    g = zarr.open_group(str(tmp_path / "plain.zarr"), mode="w", zarr_format=3)
    g.create_array("tiles", shape=tiles.shape, chunks=(2, 16, 16, 3), dtype="uint8")[...] = tiles
    g.attrs.update({"format": FORMAT_NAME, "complete": True, "slide_id": "plain"})
    store = open_store(tmp_path / "plain.zarr")
    assert store._reader is None  # two tiles a chunk, no shards: not the layout the reader knows
    idx = np.array([8, 0, 3, 3, -2])
    np.testing.assert_array_equal(store[idx], tiles[idx])  # ground truth: the array written
    np.testing.assert_array_equal(store[2:7:2], tiles[2:7:2])
    np.testing.assert_array_equal(store[::-1], tiles[::-1])
    np.testing.assert_array_equal(store[4], tiles[4])


def test_index_at_start_and_absent_chunks(tmp_path):
    from zarr.codecs import BloscCodec, BytesCodec, ShardingCodec

    tiles = _tiles(10, t=16)
    g = zarr.open_group(str(tmp_path / "odd.zarr"), mode="w", zarr_format=3)
    sharding = ShardingCodec(chunk_shape=(1, 16, 16, 3), codecs=[BytesCodec(), BloscCodec(cname="lz4")],
                             index_location="start")
    arr = g.create_array("tiles", shape=tiles.shape, chunks=(4, 16, 16, 3), dtype="uint8", fill_value=255,
                         serializer=sharding, compressors=None)
    arr[0:3] = tiles[0:3]  # shard 0 lacks chunk 3; shards 1 and 2 are never written (no files)
    arr[9] = tiles[9]
    g.attrs.update({"format": FORMAT_NAME, "complete": True, "slide_id": "odd"})
    store = open_store(tmp_path / "odd.zarr")
    assert store._reader is not None and store._reader.layout.index_at_start
    ref = zarr.open_array(str(tmp_path / "odd.zarr" / "tiles"), mode="r")[...]  # reference: zarr-python
    np.testing.assert_array_equal(store[:], ref)
    np.testing.assert_array_equal(store[[9, 3, 5, 0]], ref[[9, 3, 5, 0]])
    assert (store[5] == 255).all()  # ground truth: never written, the fill value


def test_damaged_shards_raise_store_errors(tmp_path):
    path = _write(tmp_path / "s.zarr", _tiles(8, t=16), compression="lz4")
    shard = path / "tiles" / "c" / "1" / "0" / "0" / "0"
    data = bytearray(shard.read_bytes())
    data[-10] ^= 0xFF  # a flipped bit in the index
    shard.write_bytes(bytes(data))
    with pytest.raises(StoreError, match="CRC-32C") as err:
        open_store(path)[5]
    assert str(shard) in str(err.value)
    first = path / "tiles" / "c" / "0" / "0" / "0" / "0"
    raw = first.read_bytes()
    index = raw[-(16 * 4 + 4):]
    first.write_bytes(raw[:100] + index)  # chunk bytes lost, index intact: chunks point past the data
    with pytest.raises(StoreError, match="damaged"):
        open_store(path)[1]


_SHARED = {}


def test_pickled_and_forked_readers_read_the_same(written):
    _, path, _, ref = written
    store = open_store(path)
    store[[0, 9, 17]]  # the parent's index cache is filled
    assert len(pickle.dumps(store)) < 1000  # only the path travels
    clone = pickle.loads(pickle.dumps(store))
    np.testing.assert_array_equal(clone[[17, 2]], ref[[17, 2]])
    _SHARED["store"] = store
    try:
        with multiprocessing.get_context("fork").Pool(2) as pool:  # children inherit reader and cache
            got = pool.map(_read_in_child, [0, 9, 22, 13])
    finally:
        _SHARED.clear()
    for i, tile in zip((0, 9, 22, 13), got):
        np.testing.assert_array_equal(tile, ref[i])


def _read_in_child(i):
    return _SHARED["store"][i]
