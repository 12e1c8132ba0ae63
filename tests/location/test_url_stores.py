"""Stores written into a bucket of a real S3-protocol server (SeaweedFS): the same store as on disk,
made complete only by its marker, written last, after every shard and the check."""

from __future__ import annotations

import numpy as np
import pytest

import tilewright as tw
from tilewright.errors import ObjectStoreError, StoreError
from tilewright.run.config import TilingConfig
from tilewright.store.reader import is_complete

from helpers import write_slide
from object_store_files import listing, upload

CFG = TilingConfig(mpp=0.4991, tile=64, min_tissue=0.3, shard_tiles=16, max_tiles=90, compression="zstd")


@pytest.fixture(scope="module")
def slide(tmp_path_factory):
    path, _ = write_slide(tmp_path_factory.mktemp("slides") / "s-01.tif", mpp=0.2428, size_um=(700.0, 900.0),
                          seed=7)
    return path


def _same_store(a, b):
    assert len(a) == len(b) > 0
    np.testing.assert_array_equal(a[:], b[:])  # tile for tile
    for part in ("yx", "yx_level0", "tissue", "sharpness", "thumbnail", "mask"):
        np.testing.assert_array_equal(getattr(a, part), getattr(b, part))
    def settled(attrs):  # what differs by where the slide was read from and when
        out = {k: v for k, v in attrs.items() if k not in ("created", "source")}
        out["tissue_mask"] = {k: v for k, v in out["tissue_mask"].items() if k != "source"}
        return out

    assert settled(a.attrs) == settled(b.attrs)


def test_tile_slide_into_a_bucket_writes_the_local_store(tmp_path, bucket, slide):
    local = tw.tile_slide(slide, tmp_path / "out", CFG)
    remote = tw.tile_slide(slide, f"{bucket}/out", CFG)
    assert remote.store == f"{bucket}/out/s-01.zarr" and is_complete(remote.store)
    _same_store(tw.open_store(local.store), tw.open_store(remote.store))
    objects = listing(f"{bucket}/out")
    assert "qc/s-01.png" in objects and objects["qc/s-01.png"] == (tmp_path / "out" / "qc" / "s-01.png").read_bytes()
    # the objects are the local store's files, byte for byte except the group's attributes (creation time)
    files = {p.relative_to(tmp_path / "out").as_posix(): p.read_bytes()
             for p in (tmp_path / "out" / "s-01.zarr").rglob("*") if p.is_file()}
    shards = {k for k in files if "/tiles/c/" in k}
    assert shards and all(objects[k] == files[k] for k in shards)
    assert set(objects) - {"qc/s-01.png"} == set(files)  # nothing more: no temporary objects left


def test_a_slide_in_a_bucket_tiles_as_the_local_file(tmp_path, bucket, slide):
    upload(slide, f"{bucket}/slides/s-01.tif")
    local = tw.tile_slide(slide, tmp_path / "out", CFG)
    remote = tw.tile_slide(f"{bucket}/slides/s-01.tif", f"{bucket}/out", CFG)
    _same_store(tw.open_store(local.store), tw.open_store(remote.store))
    a = tw.open_store(remote.store).attrs["source"]
    assert a["path"] == f"{bucket}/slides/s-01.tif" and a["size"] == slide.stat().st_size
    assert a["digest"] == tw.open_store(local.store).attrs["source"]["digest"]  # the same bytes, read by range


def test_the_marker_is_written_last_and_a_failed_write_leaves_no_complete_store(tmp_path, bucket, slide,
                                                                             monkeypatch):
    from tilewright.location import objects
    from tilewright.store import backing

    writes = []
    real_put = objects.put
    monkeypatch.setattr(objects, "put", lambda url, data: writes.append(url) or real_put(url, data))
    real_set = backing.UrlObjectStore.set

    async def spy(self, key, value):
        writes.append(f"{self.url}/{key}" + (" complete" if key == "zarr.json" and b'"complete": true' in
                                              value.to_bytes() else ""))
        return await real_set(self, key, value)

    monkeypatch.setattr(backing.UrlObjectStore, "set", spy)
    tw.tile_slide(slide, f"{bucket}/out", CFG)
    store = f"{bucket}/out/s-01.zarr"
    assert writes[-2] == f"{store}/zarr.json complete"  # the marker: the store's last write (then the QC picture)
    assert sum(w.endswith("complete") for w in writes) == 1
    assert writes[-1].endswith("qc/s-01.png")
    assert any("/tiles/c/" in w for w in writes[:-2])

    calls = {"n": 0}

    def flaky(url, data):
        calls["n"] += 1
        if "/tiles/c/" in url and calls["n"] > 2:
            raise ObjectStoreError("the connection dropped while writing (after 6 retries); run again", url,
                                   cause="connection")
        return real_put(url, data)

    monkeypatch.setattr(objects, "put", flaky)
    with pytest.raises(ObjectStoreError, match="connection dropped"):
        tw.tile_slide(slide, f"{bucket}/out", CFG)  # the old store is replaced: it goes first
    assert not is_complete(store)
    assert not [k for k in listing(f"{bucket}/out") if k.startswith("s-01.zarr/")]  # removed on failure


def test_overwrite_refusal_keeps_the_store_and_a_leftover_is_swept(tmp_path, bucket, slide):
    from tilewright.store.writer import remove_partials

    first = tw.tile_slide(slide, f"{bucket}/out", CFG)
    before = listing(f"{bucket}/out")
    with pytest.raises(StoreError, match="already exists"):
        tw.tile_slide(slide, f"{bucket}/out", CFG, overwrite=False)
    assert listing(f"{bucket}/out") == before and is_complete(first.store)
    # what a killed writer leaves: objects under the prefix, no marker
    upload(tmp_path / "x", f"{bucket}/out/s-02.zarr") if (tmp_path / "x").exists() else None
    (tmp_path / "left").mkdir()
    (tmp_path / "left" / "zarr.json").write_text('{"zarr_format": 3, "node_type": "group", "attributes": {}}')
    (tmp_path / "left" / "tiles").mkdir()
    (tmp_path / "left" / "tiles" / "c").write_bytes(b"partial shard")
    upload(tmp_path / "left", f"{bucket}/out/s-02.zarr")
    remove_partials(f"{bucket}/out/s-01.zarr", f"{bucket}/out/s-02.zarr")
    after = listing(f"{bucket}/out")
    assert not [k for k in after if k.startswith("s-02.zarr/")]  # the unfinished store is gone
    assert {k: v for k, v in after.items() if k.startswith("s-01.zarr/")} == \
        {k: v for k, v in before.items() if k.startswith("s-01.zarr/")}  # the complete one is kept
