"""Annotations checked against the slide's bounds, and manifest reasons that name the filter."""

from __future__ import annotations

import json

import pandas as pd
import pytest

from helpers import write_slide
from tilewright.cli.tile_out import main as tile_out
from tilewright.errors import RegionError
from tilewright.regions.regionmap import RegionMap

MPP0 = 0.2428  # an odd 40x level-0 µm/px (common practice)


def _collection(*rings, cls="Tumor"):
    return {"type": "FeatureCollection", "features": [
        {"type": "Feature", "properties": {"classification": cls},
         "geometry": {"type": "Polygon", "coordinates": [ring]}} for ring in rings]}


def test_file_in_y_x_order_is_refused_with_a_swap_hint(tmp_path):
    # a slide 1200 px high and 3000 wide; the polygon lies at x 2000..2600, y 100..500 ([x, y])
    true_xy = [[2000, 100], [2600, 100], [2600, 500], [2000, 500], [2000, 100]]
    path = tmp_path / "s.geojson"
    path.write_text(json.dumps(_collection([[y, x] for x, y in true_xy])))
    with pytest.raises(RegionError, match=r"read as \[y, x\], 100% of it would lie inside") as info:
        RegionMap.from_geojson(path, mpp=MPP0, slide_shape=(1200, 3000))
    assert str(path) in str(info.value) and "export positions as [x, y]" in str(info.value)
    # the same file in [x, y] order fits (ground truth constructed above: 600 x 400 px)
    path.write_text(json.dumps(_collection(true_xy)))
    regions = RegionMap.from_geojson(path, mpp=MPP0, slide_shape=(1200, 3000))
    assert regions.fraction("Tumor", 0, 0, 1200, 3000, MPP0) * 1200 * 3000 == pytest.approx(600 * 400, rel=1e-6)


def test_annotations_mostly_outside_without_a_swap_that_fits(tmp_path):
    far = [[5000, 5000], [5600, 5000], [5600, 5400], [5000, 5400], [5000, 5000]]
    near = [[0, 0], [100, 0], [100, 100], [0, 100], [0, 0]]
    path = tmp_path / "other-slide.geojson"
    path.write_text(json.dumps(_collection(far, near)))
    with pytest.raises(RegionError, match="only 4% of the annotated area lies inside the slide") as info:
        RegionMap.from_geojson(path, mpp=MPP0, slide_shape=(1200, 3000))
    assert "belongs to this slide" in str(info.value) and "[y, x]" not in str(info.value)


@pytest.fixture(scope="module")
def one_slide(tmp_path_factory):
    d = tmp_path_factory.mktemp("skips")
    path, _ = write_slide(d / "slides" / "k7.tif", mpp=MPP0, size_um=(500.0, 560.0), seed=13, n_islands=1)
    blank, _ = write_slide(d / "blank" / "k8.tif", mpp=MPP0, size_um=(300.0, 300.0), seed=2, n_islands=0)
    return d, path, blank


def _manifest(out):
    return pd.read_csv(out / "manifest.csv", keep_default_na=False).iloc[0]


def test_skip_reason_names_the_region_filter(one_slide, tmp_path):
    d, path, _ = one_slide
    regions = tmp_path / "regions"
    regions.mkdir()
    tiny = [[100, 100], [150, 100], [150, 150], [100, 150], [100, 100]]  # far smaller than any 32-px tile
    (regions / "k7.geojson").write_text(json.dumps(_collection(tiny)))
    out = tmp_path / "out"
    assert tile_out([str(path), str(out), "--mpp", "1.0", "--tile", "32", "--min-tissue", "0", "--regions",
                     str(regions), "--keep", "Tumor", "--quiet"]) == 0
    row = _manifest(out)
    assert row.status == "skipped"
    assert "region filter removed all" in row.error and "k7.geojson" in row.error and "Tumor" in row.error
    assert "tissue criteria" not in row.error


def test_skip_reason_names_the_sharpness_filter_and_the_tissue_filter(one_slide, tmp_path):
    d, path, blank = one_slide
    out = tmp_path / "sharp"
    assert tile_out([str(path), str(out), "--mpp", "1.0", "--tile", "32", "--min-sharpness", "1e12",
                     "--quiet"]) == 0
    row = _manifest(out)
    assert row.status == "skipped" and "sharpness filter removed all" in row.error
    out = tmp_path / "blank"
    assert tile_out([str(blank), str(out), "--mpp", "1.0", "--tile", "32", "--quiet"]) == 0
    row = _manifest(out)
    assert row.status == "skipped" and "no tile met the tissue criteria" in row.error


def test_slide_whose_file_has_no_kept_class_fails_naming_the_file(one_slide, tmp_path):
    d, path, _ = one_slide
    regions = tmp_path / "regions"
    regions.mkdir()
    (regions / "k7.geojson").write_text(json.dumps(_collection(
        [[0, 0], [900, 0], [900, 900], [0, 900], [0, 0]], cls="Stroma")))
    out = tmp_path / "out"
    assert tile_out([str(path), str(out), "--mpp", "1.0", "--tile", "32", "--regions", str(regions),
                     "--keep", "Tumor,Necrosis", "--quiet"]) == 3
    row = _manifest(out)
    assert row.status == "failed"
    assert str(regions / "k7.geojson") in row.error and "none of the kept classes ('Tumor', 'Necrosis')" in row.error
    assert "'Stroma'" in row.error and "--keep" in row.error
