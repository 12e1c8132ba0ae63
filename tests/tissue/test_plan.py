"""Tile planning: analytic counts, the edge rule, regions and reproducible spread sampling."""

import math

import numpy as np
import pytest

from tilewright.tissue.mask import TissueMask
from tilewright.tissue.plan import TilePlan, plan_tiles, spread_sample
from tissue_fakes import FakeRegions, FakeView

F = 16  # target px (0.5 µm/px) per mask px (8 µm/px)


def rect_mask(shape, r0, r1, c0, c1):
    a = np.zeros(shape, bool)
    a[r0:r1, c0:c1] = True
    return TissueMask(a, 8.0)


def axis_count(lo, hi, tile, stride):
    """Analytic number of grid tiles [k*stride, k*stride + tile) inside [lo, hi)."""
    return max(0, math.floor((hi - tile) / stride) - math.ceil(lo / stride) + 1)


@pytest.mark.parametrize("tile,stride", [(256, 256), (256, 128), (256, 96), (224, 300)])
def test_counts_match_analytic_count_for_rectangles(tile, stride):
    mask = rect_mask((100, 120), 13, 71, 20, 97)
    view = FakeView((100 * F, 120 * F), 0.5)
    plan = plan_tiles(view, mask, tile=tile, stride=stride, min_tissue=1.0)
    want = axis_count(13 * F, 71 * F, tile, stride) * axis_count(20 * F, 97 * F, tile, stride)
    assert len(plan) == want  # ground truth: analytic count above
    assert plan.stride == stride and plan.tile == tile
    np.testing.assert_array_equal(plan.tissue, 1.0)


def test_partial_tiles_follow_min_tissue_exactly():
    mask = rect_mask((60, 60), 7, 45, 11, 52)
    view = FakeView((60 * F, 60 * F), 0.5)
    for min_tissue in (0.25, 0.5, 0.9):
        plan = plan_tiles(view, mask, tile=256, stride=200, min_tissue=min_tissue)
        want = []
        for y in range(0, 60 * F - 256 + 1, 200):  # ground truth: interval overlaps by hand
            for x in range(0, 60 * F - 256 + 1, 200):
                oy = max(0, min(y + 256, 45 * F) - max(y, 7 * F))
                ox = max(0, min(x + 256, 52 * F) - max(x, 11 * F))
                if oy * ox / 256**2 >= min_tissue:
                    want.append((y, x, oy * ox / 256**2))
        assert [tuple(v) for v in plan.yx] == [w[:2] for w in want]
        np.testing.assert_allclose(plan.tissue, [w[2] for w in want], atol=1e-6)


def test_edge_rule_drops_tiles_past_the_edge():
    mask = TissueMask(np.ones((63, 82), bool), 8.0)  # full tissue, view not a multiple of the tile
    view = FakeView((1000, 1300), 0.5)
    plan = plan_tiles(view, mask, tile=256, min_tissue=0.0)
    assert len(plan) == ((1000 - 256) // 256 + 1) * ((1300 - 256) // 256 + 1) == 15  # ground truth
    assert (plan.yx[:, 0] + 256 <= 1000).all() and (plan.yx[:, 1] + 256 <= 1300).all()
    overlap = plan_tiles(view, mask, tile=256, stride=100, min_tissue=0.0)
    assert len(overlap) == 8 * 11  # (1000-256)//100+1, (1300-256)//100+1
    tiny = plan_tiles(FakeView((200, 5000), 0.5), mask, tile=256)
    assert len(tiny) == 0 and tiny.yx.shape == (0, 2) and tiny.tissue.shape == (0,)


def test_row_major_and_level0():
    mask = TissueMask(np.ones((64, 64), bool), 8.0)
    plan = plan_tiles(FakeView((1024, 1024), 0.5, scale=2.0), mask, tile=256, max_tiles=7, seed=3)
    order = np.lexsort((plan.yx[:, 1], plan.yx[:, 0]))
    np.testing.assert_array_equal(order, np.arange(len(plan)))  # sorted by y, then x
    np.testing.assert_array_equal(plan.yx_level0, plan.yx * 2)  # scale = level-0 px per target px
    assert plan.yx.dtype == np.int64 and plan.tissue.dtype == np.float32
    sub = plan.select(plan.yx[:, 0] == plan.yx[0, 0])
    assert len(sub) == (plan.yx[:, 0] == plan.yx[0, 0]).sum() and isinstance(sub, TilePlan)


def test_regions_keep_only_wanted_classes():
    mask = rect_mask((40, 40), 0, 40, 0, 40)
    labels = np.zeros((40, 40), np.uint8)
    labels[:, :18] = 1   # "tumour" left
    labels[:, 18:] = 2   # "stroma" right
    regions = FakeRegions(labels, 8.0, {"tumour": 1, "stroma": 2})
    view = FakeView((40 * F, 40 * F), 0.5)
    plan = plan_tiles(view, mask, tile=128, stride=128, regions=regions, keep="tumour", min_region=0.2)
    assert regions.calls[0][0] == ("tumour",) and regions.calls[0][2:] == (128, 128, 0.5)
    # ground truth: tumour is x < 18*16 = 288 target px; the tile at x=256 holds 32/128 of it
    assert set(plan.yx[:, 1].tolist()) == {0, 128, 256}
    np.testing.assert_allclose(plan.region, np.where(plan.yx[:, 1] == 256, 0.25, 1.0), atol=1e-6)
    assert plan.params["n_tissue"] == 25 and plan.params["n_region"] == len(plan) == 15
    strict = plan_tiles(view, mask, tile=128, regions=regions, keep="tumour", min_region=0.5)
    assert set(strict.yx[:, 1].tolist()) == {0, 128}
    both = plan_tiles(view, mask, tile=128, regions=regions, keep=["tumour", "stroma"])
    assert len(both) == 25 and np.allclose(both.region, 1.0)
    assert plan_tiles(view, mask, tile=128).region is None


def test_max_tiles_reproducible_and_spread():
    mask = TissueMask(np.ones((100, 100), bool), 8.0)
    view = FakeView((100 * 16, 100 * 16), 0.5)
    full = plan_tiles(view, mask, tile=16, min_tissue=1.0)
    assert len(full) == 100 * 100
    a = plan_tiles(view, mask, tile=16, max_tiles=100, seed=11)
    b = plan_tiles(view, mask, tile=16, max_tiles=100, seed=11)
    c = plan_tiles(view, mask, tile=16, max_tiles=100, seed=12)
    assert len(a) == 100
    np.testing.assert_array_equal(a.yx, b.yx)          # same seed, same tiles
    assert not np.array_equal(a.yx, c.yx)              # another seed, another choice
    full_set = {tuple(v) for v in full.yx}
    assert all(tuple(v) in full_set for v in a.yx)     # a subset of the eligible tiles
    # ground truth constructed: 100 tiles over a 100 x 100 grid -> one in every 10 x 10 block
    blocks = {(y // 160, x // 160) for y, x in a.yx}
    assert len(blocks) == 100


def test_spread_sample_covers_irregular_tissue():
    # an L-shaped tissue region of grid points (in tile units): five 20 x 20 blocks of 400 points
    g = np.array([(y, x) for y in range(60) for x in range(60) if y < 20 or x < 20])
    for seed in range(20):
        pick = spread_sample(g * 256, 50, 256, seed=seed)
        assert len(pick) == len(set(pick.tolist())) == 50
        chosen = g[pick]
        blocks = np.bincount((chosen[:, 0] // 20) * 3 + chosen[:, 1] // 20, minlength=9)[[0, 1, 2, 3, 6]]
        # ground truth: each block holds 1/5 of the tissue, so about 10 of the 50 tiles; taking
        # tiles from one corner (the first 50 in row-major order) would put all 50 in block 0
        assert blocks.min() >= 5 and blocks.max() <= 15, (seed, blocks)
    assert spread_sample(g, 10_000, 1).tolist() == list(range(len(g)))
    assert spread_sample(g, 0, 1).tolist() == []


def test_bad_arguments():
    mask = TissueMask(np.ones((8, 8), bool), 8.0)
    view = FakeView((512, 512), 0.5)
    for kw in ({"tile": 0}, {"stride": -1}, {"min_tissue": 1.5}, {"min_region": -0.1}, {"max_tiles": -1}):
        with pytest.raises(ValueError):
            plan_tiles(view, mask, **kw)
    with pytest.raises(ValueError):
        TilePlan(np.zeros((2, 2)), np.zeros(3), tile=1, stride=1, mpp=1.0)


def test_unbound_polygon_regions_take_the_slide_mpp_from_the_view(tmp_path):
    # a GeoJSON map read without mpp (polygons in level-0 px) used straight in plan_tiles
    import tilewright as tw
    from tilewright.demo.pyramid import write_pyramid
    from tilewright.regions.regionmap import RegionMap

    path = tmp_path / "s.tif"
    write_pyramid(path, np.full((1203, 1701, 3), 128, np.uint8), mpp=0.2428, tile=256,
                  compression="zlib", downsamples=(1, 4))
    # tumour: level-0 x in [300, 1300), y in [0, 1203): a vertical band
    square = {"type": "FeatureCollection", "features": [{
        "type": "Feature", "properties": {"classification": "tumour"},
        "geometry": {"type": "Polygon", "coordinates": [[[300, 0], [1300, 0], [1300, 1203],
                                                         [300, 1203], [300, 0]]]}}]}
    regions = RegionMap.from_geojson(square)
    assert regions.level0_mpp is None
    mask = TissueMask(np.ones((40, 60), bool), 8.0)
    with tw.open(path) as slide:
        view = slide.at_mpp(0.5)  # 0.4856-µm/px level 1 is 2.9 % off: resampled, scale 2.0593
        plan = plan_tiles(view, mask, tile=64, min_tissue=0.0, regions=regions, keep="tumour",
                          min_region=0.0)
        bound = plan_tiles(view, mask, tile=64, min_tissue=0.0,
                           regions=RegionMap.from_geojson(square, mpp=slide.mpp), keep="tumour",
                           min_region=0.0)
    np.testing.assert_array_equal(plan.region, bound.region)
    # ground truth: a tile covers level-0 x in [x*s, (x+64)*s) with s = 0.5 / 0.2428
    s = 0.5 / 0.2428
    x0 = plan.yx[:, 1] * s
    want = np.clip(np.minimum(x0 + 64 * s, 1300) - np.maximum(x0, 300), 0, None) / (64 * s)
    np.testing.assert_allclose(plan.region, want, atol=1e-4)
