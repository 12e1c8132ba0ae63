"""A store carries its final name only when it is whole (issue 16, defect 1).

Cases: another slide's cleanup whose name reads as a glob pattern (``a[1]`` matches ``a1``), a
temporary folder removed while it is written, a writer given fewer tiles than planned, a shard
file lost before the rename.
"""

from __future__ import annotations

import shutil

import numpy as np
import pytest

import tilewright as tw
from tilewright.errors import StoreError
from tilewright.store.reader import is_complete
from tilewright.store.writer import StoreWriter, remove_partials

pytestmark = pytest.mark.timeout(120)


def _append(w, n, value=7, tile=16):
    w.append(np.full((n, tile, tile, 3), value, np.uint8), np.arange(2 * n).reshape(n, 2),
             np.arange(2 * n).reshape(n, 2), np.ones(n), np.ones(n))


def _partials(folder):
    return sorted(p.name for p in folder.iterdir() if ".partial-" in p.name)


def test_cleanup_of_a_bracket_name_spares_the_other_slides_store(slide, tmp_path, fast_config):
    """``a[1]`` as a glob pattern matches ``a1``: the cleanup of one slide removed the other's
    temporary store while it was being written. Deterministic: ``a1``'s writer is held open while
    ``a[1]`` is tiled into the same folder."""
    out = tmp_path / "out"
    w = StoreWriter(out / "a1.zarr", 6, 16, shard_tiles=2)  # a1 in the middle of its write
    _append(w, 4)
    remove_partials(out / "a[1].zarr")  # the cleanup a[1]'s own run starts with
    res = tw.tile_slide(slide("a[1].tif"), out, fast_config)  # and the whole run of it
    _append(w, 2)
    w.commit({"slide_id": "a1"})
    store = tw.open_store(out / "a1.zarr")  # raised KeyError on the torn store before the fix
    assert len(store) == 6 and int(store.tiles[5, 0, 0, 0]) == 7  # ground truth: the tiles appended
    assert res.slide_id == "a_1_"  # brackets are no longer kept in ids
    assert is_complete(out / "a_1_.zarr") and _partials(out) == []


def test_writer_fails_when_its_temporary_folder_vanished(tmp_path):
    final = tmp_path / "s.zarr"
    w = StoreWriter(final, 8, 16, shard_tiles=2)
    _append(w, 4)
    shutil.rmtree(w.tmp)  # removed by someone else mid-write
    with pytest.raises(StoreError, match="vanished"), w:
        _append(w, 4)
        w.commit({"slide_id": "s"})
    assert not final.exists() and _partials(tmp_path) == []  # nothing re-created, nothing committed


def test_folder_emptied_just_before_commit_is_refused(tmp_path):
    """The last shard is written at commit; a folder emptied before that is caught by the
    structural check (every array's metadata and every shard present) instead of committed."""
    final = tmp_path / "s.zarr"
    with pytest.raises(StoreError), StoreWriter(final, 7, 16, shard_tiles=2) as w:
        _append(w, 7)
        shutil.rmtree(w.tmp / "tiles")  # metadata and the written shards gone, folder still there
        w.commit({"slide_id": "s"})
    assert not final.exists() and _partials(tmp_path) == []


def test_a_lost_shard_file_is_refused(tmp_path, monkeypatch):
    from tilewright.store.shards import ShardEncoder

    real = ShardEncoder.write_chunks

    def lossy(self, shard_index, chunks):
        if shard_index != 1:  # ground truth: shard 1 (tiles 2-3) never reaches the disk
            real(self, shard_index, chunks)

    monkeypatch.setattr(ShardEncoder, "write_chunks", lossy)
    final = tmp_path / "s.zarr"
    with pytest.raises(StoreError, match="tiles 2-3"), StoreWriter(final, 6, 16, shard_tiles=2) as w:
        _append(w, 6)
        w.commit({"slide_id": "s"})
    assert not final.exists()


def test_fewer_tiles_than_planned_are_never_committed(slide, tmp_path, fast_config, monkeypatch):
    """A block lost on the way (here: the reader yields all blocks but the last) must not give a
    complete store whose missing tiles are white."""
    import tilewright.run.blocks as blocks

    real = blocks.iter_tile_blocks

    def short(*args, **kwargs):
        items = list(real(*args, **kwargs))
        return iter(items[:-1])

    src = slide("a.tif")
    ref = tw.tile_slide(src, tmp_path / "ref", fast_config.replace(block=256))
    assert ref.n_tiles > 2
    monkeypatch.setattr(blocks, "iter_tile_blocks", short)
    with pytest.raises(StoreError, match="planned tiles were read"):
        tw.tile_slide(src, tmp_path / "out", fast_config.replace(block=256))
    assert not (tmp_path / "out" / "a.zarr").exists()
    # the writer itself refuses a count other than the one intended
    with pytest.raises(StoreError, match="3 tiles were written where 5"), \
            StoreWriter(tmp_path / "w.zarr", 5, 16) as w:
        _append(w, 3)
        w.commit({"slide_id": "w"}, expected=5)
    assert not (tmp_path / "w.zarr").exists()
    # capacity trimming stays legitimate: fewer tiles than capacity, as intended
    with StoreWriter(tmp_path / "t.zarr", 5, 16) as w:
        _append(w, 3)
        w.commit({"slide_id": "t"}, expected=3)
    assert len(tw.open_store(tmp_path / "t.zarr")) == 3
