"""Label rasters and first-pass tile tables: box fractions against brute-force pixel counts."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from tilewright.errors import RegionError
from tilewright.regions.regionmap import RegionMap


def _brute(canvas, yx, size):
    """Mean of ``canvas`` over each size x size box (zero past the canvas) — direct summation."""
    out = []
    for y, x in yx:
        window = np.zeros((size, size), dtype=np.float64)
        part = canvas[y:y + size, x:x + size]
        window[: part.shape[0], : part.shape[1]] = part
        out.append(window.mean())
    return np.asarray(out)


@pytest.mark.parametrize("box_mpp,box", [(0.5, 96), (1.5, 40), (4.0, 3)])
def test_raster_fractions_equal_pixel_counts(box_mpp, box):
    rng = np.random.default_rng(0)
    labels = rng.integers(0, 4, size=(37, 53))  # at 4 µm/px
    regions = RegionMap.from_raster(labels, 4.0, {1: "tumour", 2: "stroma", 3: "tumour"})
    assert regions.classes == ("tumour", "stroma")
    # brute force on a common 0.5 µm/px grid: raster pixels are 8 fine pixels, boxes box_mpp/0.5
    fine = np.repeat(np.repeat(np.isin(labels, [1, 3]), 8, axis=0), 8, axis=1).astype(float)
    k = int(round(box_mpp / 0.5))
    limit = (np.array(labels.shape) * 4.0 / box_mpp).astype(int)
    yx = np.c_[rng.integers(0, limit[0], 300), rng.integers(0, limit[1], 300)]
    got = regions.fractions("tumour", yx, box, box, box_mpp)
    expected = _brute(fine, yx * k, box * k)  # reference: direct pixel count
    np.testing.assert_allclose(got, expected, atol=1e-5)
    both = regions.fractions(["tumour", "stroma"], yx, box, box, box_mpp)
    fine_both = np.repeat(np.repeat(labels > 0, 8, axis=0), 8, axis=1).astype(float)
    np.testing.assert_allclose(both, _brute(fine_both, yx * k, box * k), atol=1e-5)


def test_raster_list_classes_and_errors():
    labels = np.array([[0, 1], [1, 1]])
    regions = RegionMap.from_raster(labels, 2.0, ["background", "tumour"])
    # ground truth constructed above: 3 of 4 pixels are tumour
    assert regions.fraction("tumour", 0, 0, 4, 4, 1.0) == pytest.approx(0.75)
    with pytest.raises(RegionError, match="'necrosis'"):
        regions.fraction("necrosis", 0, 0, 4, 4, 1.0)
    with pytest.raises(RegionError, match="2-D"):
        RegionMap.from_raster(np.zeros((2, 2, 3), int), 2.0, ["a"])
    with pytest.raises(RegionError, match="integers"):
        RegionMap.from_raster(np.zeros((2, 2)), 2.0, ["a"])
    with pytest.raises(RegionError, match="mpp"):
        RegionMap.from_raster(labels, -1, ["a"])


def _grid_table(rng, tile=128, offset=64, n=(9, 11), classes=("tumour", "stroma", "fat")):
    ys, xs = np.meshgrid(offset + tile * np.arange(n[0]), offset + tile * np.arange(n[1]), indexing="ij")
    keep = rng.random(ys.shape) < 0.8  # some tiles missing (background)
    cls = rng.choice(classes, ys.shape)
    return pd.DataFrame({"y": ys[keep], "x": xs[keep], "class": cls[keep]})


@pytest.mark.parametrize("box_mpp,box", [(0.5, 200), (2.0, 64), (0.25, 300)])
def test_tile_table_fractions_equal_pixel_counts(box_mpp, box):
    rng = np.random.default_rng(1)
    table = _grid_table(rng)
    regions = RegionMap.from_tiles(table, tile=128, mpp=0.5)
    # brute force: paint each tile's class on a 0.25 µm/px canvas (tile = 256 canvas px)
    canvas = np.zeros((64 * 2 + 9 * 256 + 512, 64 * 2 + 11 * 256 + 512), dtype=float)
    for y, x, c in table.itertuples(index=False):
        if c in ("tumour", "fat"):
            canvas[2 * y:2 * y + 256, 2 * x:2 * x + 256] = 1.0
    k = box_mpp / 0.25
    yx = np.c_[rng.integers(0, 1300 / box_mpp, 200), rng.integers(0, 1500 / box_mpp, 200)]
    got = regions.fractions(["tumour", "fat"], yx, box, box, box_mpp)
    expected = _brute(canvas, (yx * k).astype(int), int(box * k))  # reference: direct pixel count
    np.testing.assert_allclose(got, expected, atol=1e-5)


def test_overlapping_soft_tiles_average_probabilities():
    rng = np.random.default_rng(2)
    ys, xs = np.meshgrid(np.arange(0, 640, 64), np.arange(0, 640, 64), indexing="ij")  # stride 64, tile 128
    p = rng.dirichlet([1, 1], ys.size)
    table = pd.DataFrame({"y": ys.ravel(), "x": xs.ravel(), "tumour": p[:, 0], "other": p[:, 1], "tissue": 1.0})
    soft = RegionMap.from_tiles(table, 128, 0.5, soft=True)
    hard = RegionMap.from_tiles(table, 128, 0.5)
    assert soft.classes == ("tumour", "other")  # "tissue" is a reserved column, not a class
    sums = np.zeros((768, 768))
    votes = np.zeros((768, 768))
    counts = np.zeros((768, 768))
    for (y, x), pt in zip(np.c_[ys.ravel(), xs.ravel()], p[:, 0]):
        sums[y:y + 128, x:x + 128] += pt
        votes[y:y + 128, x:x + 128] += pt > 0.5
        counts[y:y + 128, x:x + 128] += 1
    soft_canvas = np.divide(sums, counts, out=np.zeros_like(sums), where=counts > 0)
    hard_canvas = np.divide(votes, counts, out=np.zeros_like(sums), where=counts > 0)
    yx = np.c_[rng.integers(0, 700, 100), rng.integers(0, 700, 100)]
    # reference: per-pixel mean over the covering tiles, counted directly (documented overlap rule)
    np.testing.assert_allclose(soft.fractions("tumour", yx, 100, 100, 0.5), _brute(soft_canvas, yx, 100), atol=1e-5)
    np.testing.assert_allclose(hard.fractions("tumour", yx, 100, 100, 0.5), _brute(hard_canvas, yx, 100), atol=1e-5)


@pytest.mark.parametrize("ext", ["csv", "parquet"])
def test_table_round_trip_through_files(tmp_path, ext):
    rng = np.random.default_rng(3)
    regions = RegionMap.from_tiles(_grid_table(rng), tile=128, mpp=0.5)
    path = tmp_path / f"first-pass.{ext}"
    getattr(regions.table, f"to_{ext}")(path, index=False)
    again = RegionMap.from_tiles(path)  # tile and mpp come from the saved table's columns
    yx = np.c_[rng.integers(0, 1200, 50), rng.integers(0, 1400, 50)]
    np.testing.assert_array_equal(again.fractions("stroma", yx, 256, 256, 0.5),
                                  regions.fractions("stroma", yx, 256, 256, 0.5))
    assert again.to_dict()["path"] == str(path) and again.to_dict()["kind"] == "tiles"


@pytest.mark.parametrize("frame,kw,match", [
    (pd.DataFrame({"y": [0], "class": ["a"]}), {}, "lacks column"),
    (pd.DataFrame({"y": [0], "x": [0], "class": ["a"]}), {"mpp": 0.5}, "tile="),
    (pd.DataFrame({"y": [-128], "x": [0], "class": ["a"]}), {"tile": 128, "mpp": 0.5}, "non-negative"),
    (pd.DataFrame({"y": [0], "x": [0], "a": [1.7]}), {"tile": 128, "mpp": 0.5}, r"\[0, 1\]"),
    (pd.DataFrame({"y": [0], "x": [0], "note": ["z"]}), {"tile": 128, "mpp": 0.5}, "neither"),
    (pd.DataFrame({"y": [0], "x": [0], "class": ["b"]}), {"tile": 128, "mpp": 0.5, "classes": ["a"]}, "'b'"),
    (pd.DataFrame({"y": [0], "x": [0], "class": [3]}), {"tile": 128, "mpp": 0.5, "classes": ["a"]}, "outside"),
    (pd.DataFrame({"y": [0], "x": [0], "class": ["a"]}), {"tile": 0, "mpp": 0.5}, "positive"),
])
def test_bad_tables_are_clear_errors(frame, kw, match):
    with pytest.raises(RegionError, match=match):
        RegionMap.from_tiles(frame, **kw)


def test_bad_table_files(tmp_path):
    bad = tmp_path / "t.csv"
    bad.write_bytes(b"\x00\x01garbage")
    with pytest.raises(RegionError) as info:
        RegionMap.from_tiles(bad, 128, 0.5)
    assert str(bad) in str(info.value)
    sheet = tmp_path / "t.xlsx"
    sheet.write_bytes(b"PK")
    with pytest.raises(RegionError, match="extension"):
        RegionMap.from_tiles(sheet, 128, 0.5)
    with pytest.raises(RegionError, match="not found"):
        RegionMap.from_tiles(tmp_path / "missing.csv", 128, 0.5)
