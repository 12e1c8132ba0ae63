"""Shards written by tilewright's own encoder, checked against zarr-python's sharding codec."""

from pathlib import Path

import numpy as np
import pytest
import zarr

from tilewright.store.shards import ShardEncoder
from tilewright.store.writer import StoreWriter, compressor


def _tiles(n, t=16, seed=0):
    rng = np.random.default_rng(seed)
    base = rng.integers(0, 256, (n, 1, 1, 3), dtype=np.uint8)  # compressible: flat colour + noise
    return np.clip(base + rng.integers(0, 8, (n, t, t, 3)), 0, 255).astype(np.uint8)


@pytest.mark.parametrize("compression", ["zstd", "lz4", "zlib", "none"])
def test_shard_files_equal_zarrs_own(tmp_path, compression):
    tiles = _tiles(10)
    # reference: zarr-python writes the same array through its sharding codec
    ref = zarr.create_array(str(tmp_path / "ref.zarr"), shape=tiles.shape, chunks=(1, 16, 16, 3),
                            shards=(4, 16, 16, 3), dtype="uint8", compressors=compressor(compression),
                            fill_value=255)
    ref[...] = tiles
    ours = zarr.create_array(str(tmp_path / "ours.zarr"), shape=tiles.shape, chunks=(1, 16, 16, 3),
                             shards=(4, 16, 16, 3), dtype="uint8", compressors=compressor(compression),
                             fill_value=255)
    enc = ShardEncoder.for_array(ours)
    assert enc is not None
    for s in range(3):
        enc.write(s, tiles[4 * s:4 * s + 4])
    np.testing.assert_array_equal(zarr.open_array(str(tmp_path / "ours.zarr"))[...], tiles)
    for s in range(3):
        a = (tmp_path / "ref.zarr" / "c" / str(s) / "0" / "0" / "0").read_bytes()
        b = (tmp_path / "ours.zarr" / "c" / str(s) / "0" / "0" / "0").read_bytes()
        if compression == "zlib":  # gzip members carry the clock time (RFC 1952 MTIME): not ours to match
            a, b = _no_gzip_mtime(a), _no_gzip_mtime(b)
        assert a == b  # byte for byte what zarr itself writes (chunks, index, CRC-32C)


def _no_gzip_mtime(data: bytes) -> bytes:
    """``data`` with the MTIME field of every gzip member header zeroed (RFC 1952, section 2.3)."""
    import re

    return re.sub(rb"\x1f\x8b\x08(.)....", lambda m: b"\x1f\x8b\x08" + m.group(1) + bytes(4), data, flags=re.S)


def test_uneven_appends_round_trip(tmp_path):
    tiles = _tiles(23, seed=1)
    with StoreWriter(tmp_path / "s.zarr", 30, 16, shard_tiles=4) as w:
        assert w._encoder is not None  # the direct shard path is the one under test
        start = 0
        for k in (3, 5, 1, 7, 2, 5):  # ground truth: 23 tiles in batches that straddle shards
            part = tiles[start:start + k]
            enc = w.encode(part) if k != 1 else None  # pre-encoded and plain appends mixed
            w.append(part, np.zeros((k, 2)), np.zeros((k, 2)), np.ones(k), np.zeros(k), encoded=enc)
            start += k
        w.commit({"slide_id": "s"}, np.zeros((2, 2, 3), np.uint8), np.ones((2, 2), bool))
    g = zarr.open_group(str(tmp_path / "s.zarr"), mode="r")  # reference: plain zarr-python
    np.testing.assert_array_equal(g["tiles"][...], tiles)
    shard_files = [f for f in Path(tmp_path / "s.zarr" / "tiles").rglob("*") if f.is_file() and f.name != "zarr.json"]
    assert len(shard_files) == 6  # ceil(23 / 4): every shard written once, none beyond the data


def test_unknown_layout_falls_back_to_zarr(tmp_path):
    arr = zarr.create_array(str(tmp_path / "plain.zarr"), shape=(4, 8, 8, 3), chunks=(1, 8, 8, 3),
                            dtype="uint8")  # no sharding
    assert ShardEncoder.for_array(arr) is None
