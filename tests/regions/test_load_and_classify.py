"""load_regions (file or folder per slide id) and classify_regions argument/output checks."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from tilewright.demo.synth import random_layout
from tilewright.errors import RegionError
from tilewright.regions.classify import classify_regions
from tilewright.regions.load import load_regions

SQUARE = {"type": "FeatureCollection", "features": [{"type": "Feature", "properties": {"classification": "tumour"},
          "geometry": {"type": "Polygon", "coordinates": [[[0, 0], [800, 0], [800, 800], [0, 800], [0, 0]]]}}]}


def test_folder_with_one_file_per_slide(tmp_path):
    (tmp_path / "slide-a.geojson").write_text(json.dumps(SQUARE))
    pd.DataFrame({"y": [0, 128], "x": [0, 0], "tile": 128, "mpp": 0.5, "class": ["stroma", "tumour"]}) \
        .to_csv(tmp_path / "slide-b.csv", index=False)
    a = load_regions(tmp_path, "slide-a", 0.25)
    # ground truth constructed above: the square spans 800 level-0 px = 400 px at 0.5 µm/px
    assert a.fraction("tumour", 200, 200, 400, 400, 0.5) == pytest.approx(0.25)
    assert a.to_dict()["path"].endswith("slide-a.geojson") and a.level0_mpp == 0.25
    b = load_regions(tmp_path, "slide-b", 0.25)
    assert b.fraction("tumour", 128, 0, 128, 128, 0.5) == pytest.approx(1.0)
    assert b.fraction("tumour", 0, 0, 256, 128, 0.5) == pytest.approx(0.5)
    assert load_regions(tmp_path, "slide-c", 0.25) is None
    (tmp_path / "slide-a.json").write_text(json.dumps(SQUARE))
    with pytest.raises(RegionError, match="several region files"):
        load_regions(tmp_path, "slide-a", 0.25)


def test_single_file_and_multi_slide_table(tmp_path):
    path = tmp_path / "all.parquet"
    pd.DataFrame({"slide_id": ["s1", "s1", "s2"], "y": [0, 0, 0], "x": [0, 128, 0], "tile": 128, "mpp": 0.5,
                  "class": ["tumour", "stroma", "stroma"]}).to_parquet(path, index=False)
    s1 = load_regions(path, "s1", 0.25)
    assert s1.fraction("tumour", 0, 0, 128, 256, 0.5) == pytest.approx(0.5)  # constructed: 1 of 2 tiles
    assert load_regions(path, "s2", 0.25).classes == ("stroma",)
    assert load_regions(path, "s3", 0.25) is None
    gj = tmp_path / "one.geojson"
    gj.write_text(json.dumps(SQUARE))
    assert load_regions(gj, "anything", 0.5).level0_mpp == 0.5
    with pytest.raises(RegionError, match="not found"):
        load_regions(tmp_path / "missing.geojson", "x", 0.25)
    (tmp_path / "notes.txt").write_text("x")
    with pytest.raises(RegionError, match="extension"):
        load_regions(tmp_path / "notes.txt", "x", 0.25)
    bad = tmp_path / "bad.csv"
    bad.write_text("y,x\n0,0\n")
    with pytest.raises(RegionError) as info:
        load_regions(bad, "x", 0.25)
    assert str(bad) in str(info.value)


@pytest.fixture(scope="module")
def small_slide(fake_slide_cls, truth_mask_cls):
    layout = random_layout(600, 600, seed=1, n_islands=1)
    return fake_slide_cls(layout), truth_mask_cls(layout)


@pytest.mark.parametrize("fn,match", [
    (lambda t: np.zeros(len(t) + 1, int), "shape"),
    (lambda t: np.full(len(t), 0.5), "integer class ids"),
    (lambda t: np.full((len(t), 2), 3.0), "softmax"),
    (lambda t: np.full(len(t), 7), "class id 7"),
    (lambda t: np.zeros((len(t), 2, 2)), "shape"),
])
def test_bad_callable_outputs(small_slide, fn, match):
    slide, mask = small_slide
    with pytest.raises(RegionError, match=match):
        classify_regions(slide, fn, mpp=2.0, tile=32, mask=mask, classes=["a", "b"])


def test_bad_arguments_and_no_tissue(small_slide):
    slide, mask = small_slide
    ok = lambda t: np.zeros(len(t), int)  # noqa: E731
    for kw, match in [({"tile": 0}, "tile"), ({"batch": 2.5}, "batch"), ({"min_tissue": 2}, "min_tissue")]:
        with pytest.raises(RegionError, match=match):
            classify_regions(slide, ok, mpp=2.0, mask=mask, **kw)
    with pytest.raises(RegionError, match="callable"):
        classify_regions(slide, "model.pt", mask=mask)

    class Blank:
        def fractions(self, yx, h, w, mpp):
            return np.zeros(len(yx))

    with pytest.raises(RegionError, match="no first-pass tile") as info:
        classify_regions(slide, ok, mpp=2.0, tile=32, mask=Blank())
    assert slide.path in str(info.value)


def test_mask_with_only_single_box_fraction(small_slide):
    slide, mask = small_slide

    class OneAtATime:  # the documented fallback: .fraction(y, x, h, w, mpp)
        def fraction(self, y, x, h, w, mpp):
            return float(mask.fractions([[y, x]], h, w, mpp)[0])

    a = classify_regions(slide, lambda t: np.ones(len(t), int), mpp=2.0, tile=32, mask=OneAtATime(), batch=5)
    b = classify_regions(slide, lambda t: np.ones(len(t), int), mpp=2.0, tile=32, mask=mask, batch=1000)
    pd.testing.assert_frame_equal(a.table, b.table)
    assert a.classes == ("0", "1") and (a.table["class"] == "1").all()
