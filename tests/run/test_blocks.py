"""Block reading: the tiles of a block equal single-tile reads, and only needed source tiles are decoded."""

import numpy as np
import pytest

import tilewright as tw
from tilewright.demo.pyramid import write_pyramid
from tilewright.demo.synth import random_layout
from tilewright.run.blocks import block_order, iter_tile_blocks


@pytest.fixture(scope="module")
def jpeg40(tmp_path_factory):
    # levels at downsample 1, 4, 16: a 0.5 µm/px view is computed from level 0 (scale 2), and a
    # 64 px view tile stands exactly on one stored 128 px tile
    lay = random_layout(1200.0, 1600.0, seed=4, n_islands=2)
    path = tmp_path_factory.mktemp("b") / "j40.tif"
    write_pyramid(path, lay.renderer(0.25), shape=lay.shape_at(0.25), mpp=0.25, tile=128, factor=4,
                  compression="jpeg")
    return path


def _count_decodes(slide, monkeypatch):
    """Count the stored tiles the reader decodes (its checked decode: JPEG tiles are verified)."""
    reader = slide._reader
    assert reader.verify_jpeg
    calls = {"n": 0}
    real = reader._decode_verified

    def counting(lv, data, index):
        calls["n"] += 1
        return real(lv, data, index)

    monkeypatch.setattr(reader, "_decode_verified", counting)
    return calls


@pytest.mark.parametrize("threads", [1, 2])
def test_sparse_blocks_decode_only_needed_tiles(jpeg40, monkeypatch, threads):
    with tw.open(jpeg40) as slide:
        view = slide.at_mpp(0.5)
        assert view.source_level == 0 and view.scale == 2.0
        # ground truth constructed here: a checkerboard-like sparse set of 64 px tiles at 0.5 µm/px,
        # i.e. 128 px at level 0, exactly one stored 128 px tile each
        yx = np.array([(y, x) for y in range(0, 1024, 64) for x in range(0, 1536, 64)
                       if (y // 64 + x // 64) % 3 == 0 and y + 64 <= view.shape[0] and x + 64 <= view.shape[1]])
        order, _ = block_order(yx, 64, 512)
        yx = yx[order]
        calls = _count_decodes(slide, monkeypatch)
        got = {}
        for pos, tiles in iter_tile_blocks(view, yx, 64, block=512, threads=threads):
            for p, t in zip(pos, tiles):
                got[int(p)] = t
        assert calls["n"] == len(yx)  # one stored tile decoded per planned tile, no glass between
        monkeypatch.undo()
        for i, (y, x) in enumerate(yx):
            # reference: the view's own single-tile read (seam-free resampling)
            np.testing.assert_array_equal(got[i], view.read(int(y), int(x), 64, 64))


def test_overlapping_tiles_read_once_per_box(jpeg40, monkeypatch):
    with tw.open(jpeg40) as slide:
        view = slide.at_mpp(0.5)
        yx = np.array([(y, x) for y in range(0, 256, 32) for x in range(0, 256, 32)])  # stride 32 < tile 64
        order, _ = block_order(yx, 64, 1024)
        yx = yx[order]
        calls = _count_decodes(slide, monkeypatch)
        (pos, tiles), = list(iter_tile_blocks(view, yx, 64, block=1024, threads=1))
        # ground truth: the block's box is 288 x 288 view px = 576 level-0 px = 5 x 5 stored tiles
        assert calls["n"] == 25
        monkeypatch.undo()
        for p, t in zip(pos, tiles):
            y, x = yx[p]
            np.testing.assert_array_equal(t, view.read(int(y), int(x), 64, 64))  # reference: view.read


def test_process_runs_in_the_reader(jpeg40):
    with tw.open(jpeg40) as slide:
        view = slide.at_mpp(0.5)
        yx = np.array([(0, 0), (0, 64), (64, 0)])
        out = list(iter_tile_blocks(view, yx, 64, block=512, threads=2, process=lambda t: (len(t), t.sum())))
        assert out[0][1][0] == 3  # ground truth: three tiles in the one block
        assert out[0][1][1] == sum(int(view.read(int(y), int(x), 64, 64).sum()) for y, x in yx)


def test_reused_buffers_give_the_same_tiles(jpeg40):
    # reference: the same blocks read into fresh arrays; reuse needs a consuming process
    with tw.open(jpeg40) as slide:
        view = slide.at_mpp(0.5)
        yx = np.array([(y, x) for y in range(0, 512, 64) for x in range(0, 768, 64)])
        order, _ = block_order(yx, 64, 256)
        yx = yx[order]
        fresh = {int(p): t for pos, tiles in iter_tile_blocks(view, yx, 64, block=256, threads=2)
                 for p, t in zip(pos, tiles)}
        for threads in (1, 2):
            got = {}
            for pos, copies in iter_tile_blocks(view, yx, 64, block=256, threads=threads, reuse=True,
                                                process=lambda t: t.copy()):
                got.update({int(p): t for p, t in zip(pos, copies)})
            assert got.keys() == fresh.keys()
            for p in got:
                np.testing.assert_array_equal(got[p], fresh[p])
        with pytest.raises(ValueError, match="consumes"):
            next(iter_tile_blocks(view, yx, 64, block=256, reuse=True))
