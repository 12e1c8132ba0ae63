"""Regions through the real pipeline: tile-out --regions/--keep, and classify_regions on a real file."""

import json

import numpy as np
import pandas as pd
import pytest
import shapely.geometry as sg

import tilewright as tw
from helpers import write_slide
from tilewright.cli.tile_out import main as tile_out


@pytest.fixture(scope="module")
def slide_and_geojson(tmp_path_factory):
    d = tmp_path_factory.mktemp("reg")
    path, lay = write_slide(d / "slides" / "r1.tif", mpp=0.5, size_um=(1000.0, 1200.0), seed=21, n_islands=2)
    # a "tumour" square with a square hole, in level-0 px (x, y), at 0.5 µm/px
    outer = [[300, 300], [1500, 300], [1500, 1500], [300, 1500], [300, 300]]
    hole = [[700, 700], [1100, 700], [1100, 1100], [700, 1100], [700, 700]]
    gj = {"type": "FeatureCollection", "features": [
        {"type": "Feature", "properties": {"classification": "tumour"},
         "geometry": {"type": "Polygon", "coordinates": [outer, hole]}},
        {"type": "Feature", "properties": {"classification": "stroma"},
         "geometry": {"type": "Polygon", "coordinates": [[[1600, 0], [2400, 0], [2400, 2000], [1600, 2000],
                                                           [1600, 0]]]}}]}
    regions = d / "regions"
    regions.mkdir()
    (regions / "r1.geojson").write_text(json.dumps(gj))
    return path, regions, sg.Polygon(outer, [hole])


def test_tile_out_keeps_only_chosen_class(slide_and_geojson, tmp_path):
    path, regions, tumour = slide_and_geojson
    out = tmp_path / "out"
    code = tile_out([str(path.parent), str(out), "--tile", "128", "--min-tissue", "0", "--regions", str(regions),
                     "--keep", "tumour", "--min-region", "0.5", "--quiet"])
    assert code == 0
    store = tw.open_store(out / "r1.zarr")
    assert store.attrs["regions"]["keep"] == ["tumour"]
    assert len(store) > 10
    # each kept tile: its recorded class fraction equals the shapely area (reference: shapely), >= 0.5
    for (y, x), frac in zip(store.yx_level0, store.region):
        box = sg.box(x, y, x + 128, y + 128)  # 0.5 µm/px source = target: level-0 px = target px
        assert frac == pytest.approx(box.intersection(tumour).area / box.area, abs=0.01)
        assert frac >= 0.5
    # and no tile of the hole or the stroma side got in: count against the analytic grid
    grid = [(y, x) for y in range(0, 2000 - 127, 128) for x in range(0, 2400 - 127, 128)]
    expected = sum(sg.box(x, y, x + 128, y + 128).intersection(tumour).area / 128 ** 2 >= 0.5 for y, x in grid)
    assert len(store) == expected


def test_keep_without_region_file_for_slide_fails_that_slide(slide_and_geojson, tmp_path):
    path, regions, _ = slide_and_geojson
    empty = tmp_path / "noregions"
    empty.mkdir()
    out = tmp_path / "out"
    assert tile_out([str(path), str(out), "--regions", str(empty), "--keep", "tumour", "--quiet"]) == 3
    m = pd.read_csv(out / "manifest.csv", keep_default_na=False)
    assert "no region file" in m.error[0]


def test_classify_regions_on_a_real_file_with_the_real_mask(tmp_path):
    path, lay = write_slide(tmp_path / "t.tif", mpp=0.5, size_um=(1200.0, 1400.0), seed=5, n_islands=1,
                            tumour=True)
    with tw.open(path) as slide:
        # first pass: a callable that labels tiles by their mean hematoxylin darkness (red channel)
        rmap = tw.classify_regions(slide, lambda t: (t[..., 0].mean(axis=(1, 2)) < 120).astype(int),
                                   mpp=0.5, tile=64, classes=["normal", "dense"])
        view = slide.at_mpp(1.0)
        mask = tw.tissue_mask(slide)
        plan = tw.plan_tiles(view, mask, tile=64, min_tissue=0.0, regions=rmap, keep="dense", min_region=0.5)
    truth = lay.tumour_truth(1.0)  # ground truth: the layout's dense region at 1 µm/px
    inside = np.array([truth[y:y + 64, x:x + 64].mean() for y, x in plan.yx])
    assert len(plan) > 3 and (inside >= 0.3).mean() >= 0.9
