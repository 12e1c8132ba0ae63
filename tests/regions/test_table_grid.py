"""First-pass tile tables off the slide origin's grid, soft tables, and ids read as text."""

from __future__ import annotations

import tracemalloc

import numpy as np
import pandas as pd
import pytest
import shapely

from tilewright.errors import RegionError
from tilewright.regions.load import load_regions
from tilewright.regions.regionmap import RegionMap
from tilewright.run.sources import read_mpp_table


def _offset_grid(side_px, tile, offset, rng):
    ys, xs = np.meshgrid(np.arange(offset, side_px - tile + 1, tile), np.arange(offset, side_px - tile + 1, tile),
                         indexing="ij")
    cls = rng.choice(["tumour", "stroma", "fat"], ys.shape)
    return pd.DataFrame({"y": ys.ravel(), "x": xs.ravel(), "class": cls.ravel()})


def test_grid_offset_by_37_px_is_exact_and_small():
    rng = np.random.default_rng(11)
    table = _offset_grid(6000, 128, 37, rng)  # 3 x 3 mm at 0.5 µm/px, grid offset by 37 px
    tracemalloc.start()
    try:
        regions = RegionMap.from_tiles(table, tile=128, mpp=0.5)
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    # a raster at the 128-px pitch: ~46 x 46 cells; 1-px cells would need ~100 MB a class
    assert peak < 8e6, f"peak {peak / 1e6:.1f} MB"
    # reference: shapely areas of the tumour tiles' union, for boxes at another µm/px (0.2527)
    tumour = table[table["class"] == "tumour"]
    geom = shapely.union_all(shapely.box(tumour.x, tumour.y, tumour.x + 128, tumour.y + 128))
    yx = np.c_[rng.integers(0, 11000, 300), rng.integers(0, 11000, 300)]
    size, f = 300, 0.2527 / 0.5  # box side at 0.2527 µm/px; table px per box px
    boxes = shapely.box(yx[:, 1] * f, yx[:, 0] * f, (yx[:, 1] + size) * f, (yx[:, 0] + size) * f)
    expected = shapely.area(shapely.intersection(boxes, geom)) / shapely.area(boxes)
    np.testing.assert_allclose(regions.fractions("tumour", yx, size, size, 0.2527), expected, atol=1e-5)


def test_table_of_a_large_slide_is_not_refused():
    rng = np.random.default_rng(3)
    table = _offset_grid(80_000, 256, 37, rng)  # an 80k x 80k px slide's first pass, offset by 37 px
    regions = RegionMap.from_tiles(table, tile=256, mpp=0.5)
    pick = rng.integers(0, len(table), 200)
    got = regions.fractions("stroma", table[["y", "x"]].to_numpy()[pick], 256, 256, 0.5)
    # ground truth constructed above: a box on one tile has that tile's class
    np.testing.assert_array_equal(got, (table["class"].to_numpy()[pick] == "stroma").astype(np.float32))


def test_irregular_corners_keep_exact_footprint_weights():
    # tiles of 100 px placed at irregular, non-overlapping places (no common grid finer than 1 px)
    rng = np.random.default_rng(5)
    rows = []
    for r in range(12):
        x = int(rng.integers(0, 40))
        while x < 2400:
            rows.append((r * 113 + int(rng.integers(0, 9)), x, rng.choice(["a", "b"])))
            x += 100 + int(rng.integers(1, 60))
    table = pd.DataFrame(rows, columns=["y", "x", "class"])
    regions = RegionMap.from_tiles(table, tile=100, mpp=1.0)
    a = table[table["class"] == "a"]
    geom = shapely.union_all(shapely.box(a.x, a.y, a.x + 100, a.y + 100))
    # reference: shapely area of the class's tiles; a box holding whole raster cells measures it exactly
    whole = regions.fraction("a", -500, -500, 4000, 4000, 1.0) * 4000 * 4000
    assert whole == pytest.approx(geom.area, rel=1e-6)  # float32 fractions
    # the raster's cells are 100 px from the smallest corner; boxes made of whole cells are exact
    # (each tile adds the exact share of each cell it covers), whatever the tiles' offsets
    oy, ox = int(table.y.min()), int(table.x.min())
    cy, cx, n = rng.integers(0, 14, 200), rng.integers(0, 24, 200), rng.integers(1, 4, 200)
    y0, x0, side = oy + 100 * cy, ox + 100 * cx, 100 * n
    boxes = shapely.box(x0, y0, x0 + side, y0 + side)
    expected = shapely.area(shapely.intersection(boxes, geom)) / shapely.area(boxes)
    got = np.array([regions.fraction("a", y, x, s, s, 1.0) for y, x, s in zip(y0, x0, side)])
    np.testing.assert_allclose(got, expected, atol=1e-5)
    assert 0.1 < expected.mean() < 0.9  # not a vacuous check


def test_all_zero_probability_rows_are_no_class():
    table = pd.DataFrame({"y": [0, 0, 64], "x": [0, 64, 0], "tumour": [0.0, 0.9, 0.0], "stroma": [0.0, 0.1, 1.0]})
    regions = RegionMap.from_tiles(table, 64, 0.5)
    # ground truth constructed above: tile (0, 0) has no class, (0, 64) is tumour, (64, 0) stroma
    assert regions.fraction("tumour", 0, 0, 64, 64, 0.5) == 0.0
    assert regions.fraction("tumour", 0, 64, 64, 64, 0.5) == 1.0
    assert regions.fraction("tumour,stroma", 0, 0, 128, 128, 0.5) == pytest.approx(0.5)
    assert pd.isna(regions.table["class"].iloc[0])


def test_soft_table_saved_with_its_index_reads_back(tmp_path):
    rng = np.random.default_rng(8)
    p = rng.dirichlet([1, 1, 1], 40)
    frame = pd.DataFrame({"y": np.repeat(np.arange(5) * 96, 8) + 37, "x": np.tile(np.arange(8) * 96, 5) + 37,
                          "tumour": p[:, 0], "stroma": p[:, 1], "fat": p[:, 2]})
    regions = RegionMap.from_tiles(frame, 96, 0.4991, soft=True)
    path = tmp_path / "soft.csv"
    regions.table.to_csv(path)  # pandas writes its index as a first, unnamed column by default
    again = RegionMap.from_tiles(path, soft=True)
    assert again.classes == ("tumour", "stroma", "fat")
    yx = np.c_[rng.integers(0, 500, 60), rng.integers(0, 800, 60)]
    # reference: the table's own map before saving
    np.testing.assert_allclose(again.fractions("stroma", yx, 50, 50, 0.4991),
                               regions.fractions("stroma", yx, 50, 50, 0.4991), atol=1e-6)
    regions.table.reset_index().to_parquet(tmp_path / "soft.parquet")  # an "index" column
    assert RegionMap.from_tiles(tmp_path / "soft.parquet", soft=True).classes == ("tumour", "stroma", "fat")


def test_zero_padded_ids_and_class_names_stay_text(tmp_path):
    path = tmp_path / "first-pass.csv"
    pd.DataFrame({"slide_id": ["00123", "00123", "123"], "y": [0, 0, 0], "x": [0, 128, 0], "tile": 128,
                  "mpp": 0.5, "class": ["007", "010", "007"]}).to_csv(path, index=False)
    regions = load_regions(path, "00123", 0.2527)
    assert regions is not None and regions.classes == ("007", "010")
    # ground truth constructed above: slide 00123 has two tiles side by side, 007 on the left
    assert regions.fraction("007", 0, 0, 128, 256, 0.5) == pytest.approx(0.5)
    assert load_regions(path, "123", 0.2527).classes == ("007",)
    mpp = tmp_path / "mpp.csv"
    mpp.write_text("slide_id,mpp\n00123,0.2527\n0456,0.4991\n")
    assert read_mpp_table(mpp) == {"00123": 0.2527, "0456": 0.4991}


def test_table_without_tile_column_tells_a_file_user_what_to_add(tmp_path):
    path = tmp_path / "s1.csv"
    pd.DataFrame({"y": [0], "x": [0], "mpp": 0.5, "class": ["a"]}).to_csv(path, index=False)
    with pytest.raises(RegionError, match="add a 'tile' column") as info:
        load_regions(tmp_path, "s1", 0.25)
    assert "pass tile=" not in str(info.value) and str(path) in str(info.value)


def test_table_tiles_outside_the_slide_are_refused_with_a_swap_hint(tmp_path):
    path = tmp_path / "s2.csv"
    # a slide of 2000 x 6000 level-0 px at 0.25 µm/px = 1000 x 3000 px at the table's 0.5 µm/px;
    # tiles written with y and x exchanged start below the slide
    ys, xs = np.meshgrid(np.arange(0, 1000, 128), np.arange(1024, 3000, 128), indexing="ij")
    pd.DataFrame({"y": xs.ravel(), "x": ys.ravel(), "tile": 128, "mpp": 0.5, "class": "a"}).to_csv(path, index=False)
    with pytest.raises(RegionError, match="y and x columns look exchanged") as info:
        load_regions(path, "s2", 0.25, slide_shape=(2000, 6000))
    assert str(path) in str(info.value)


def test_region_digest_follows_only_the_slides_own_rows(tmp_path):
    from tilewright.regions.load import region_change

    path = tmp_path / "all.csv"
    frame = pd.DataFrame({"slide_id": ["a", "a", "b"], "y": [0, 0, 0], "x": [0, 128, 0], "tile": 128, "mpp": 0.5,
                          "class": ["tumour", "stroma", "tumour"]})
    frame.to_csv(path, index=False)
    stored = load_regions(path, "a", 0.2527).to_dict()  # what a store of slide "a" records
    assert region_change(stored, path, "a") is None
    frame.loc[2, "class"] = "stroma"  # another slide's row: slide "a" is unaffected
    frame.to_csv(path, index=False)
    assert region_change(stored, path, "a") is None
    frame.loc[0, "class"] = "stroma"  # slide "a"'s own row
    frame.to_csv(path, index=False)
    assert "all.csv changed since the store was made" in region_change(stored, path, "a")
    assert "no digest" in region_change({"kind": "tiles"}, path, "a")  # stores from before digests
