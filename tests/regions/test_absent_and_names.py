"""Kept classes a slide lacks, keep lists given as strings, and class names spelled differently."""

from __future__ import annotations

import json
import warnings

import numpy as np
import pandas as pd
import pytest
import shapely

from tilewright.errors import RegionError
from tilewright.regions.geojson import RegionRepairWarning
from tilewright.regions.regionmap import RegionMap
from tilewright.tissue.mask import TissueMask
from tilewright.tissue.plan import plan_tiles

MPP0 = 0.2527  # level-0 µm/px of a 40x scan (odd real-world value, common practice)
TUMOUR = [[100, 120], [900, 80], [1000, 700], [300, 950], [100, 120]]
STROMA = [[1100, 100], [1900, 100], [1900, 900], [1100, 900], [1100, 100]]


def _feature(ring, cls):
    return {"type": "Feature", "properties": {"classification": cls},
            "geometry": {"type": "Polygon", "coordinates": [ring]}}


@pytest.fixture
def tumour_only(tmp_path):
    path = tmp_path / "slide-7.geojson"
    path.write_text(json.dumps({"type": "FeatureCollection",
                                "features": [_feature(TUMOUR, "Tumor"), _feature(STROMA, "Stroma")]}))
    return path, RegionMap.from_geojson(path, mpp=MPP0)


def _shapely_fraction(geom, yx, size, mpp):
    f = mpp / MPP0
    return np.array([shapely.box(x * f, y * f, (x + size) * f, (y + size) * f).intersection(geom).area
                     / (size * f) ** 2 for y, x in yx])


def test_absent_kept_class_covers_nothing_and_is_warned_once(tumour_only):
    path, regions = tumour_only
    yx = np.array([[y, x] for y in range(0, 260, 23) for x in range(0, 520, 31)])
    with pytest.warns(RegionRepairWarning, match="'Necrosis' absent") as caught:
        got = regions.fractions(["Tumor", "Necrosis"], yx, 40, 40, 0.5)
        again = regions.fractions("Tumor,Necrosis", yx, 40, 40, 0.5)
    assert sum("absent" in str(w.message) for w in caught) == 1  # once per map and keep set
    # reference: shapely intersection areas of the Tumor polygon alone (Necrosis covers nothing)
    np.testing.assert_allclose(got, _shapely_fraction(shapely.Polygon(TUMOUR), yx, 40, 0.5), atol=1e-6)
    np.testing.assert_array_equal(got, again)
    assert 0 < got.mean() < 1


def test_no_kept_class_in_the_file_is_an_error_naming_it(tumour_only):
    path, regions = tumour_only
    with pytest.raises(RegionError, match="none of the kept classes \\('Necrosis', 'Fat'\\)") as info:
        regions.fractions("Necrosis,Fat", [[0, 0]], 10, 10, 0.5)
    assert str(path) in str(info.value) and "'Tumor', 'Stroma'" in str(info.value)
    present, absent = regions.present(" necrosis , TUMOR ")
    assert present == ("Tumor",) and absent == ("necrosis",)


def test_plan_tiles_splits_a_keep_string_like_fractions(tumour_only):
    _, regions = tumour_only

    class View:
        shape, mpp, scale = (300, 560), 0.5, 0.5 / MPP0

    mask = TissueMask(np.ones((40, 40), bool), mpp=8.0)
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # both classes exist: nothing to warn about
        as_string = plan_tiles(View(), mask, tile=32, min_tissue=0, regions=regions, keep="Tumor,Stroma",
                               min_region=0.3)
        as_list = plan_tiles(View(), mask, tile=32, min_tissue=0, regions=regions, keep=["Tumor", "Stroma"],
                             min_region=0.3)
    np.testing.assert_array_equal(as_string.yx, as_list.yx)
    # reference: shapely areas of the union of both classes
    union = shapely.union_all([shapely.Polygon(TUMOUR), shapely.Polygon(STROMA)])
    np.testing.assert_allclose(as_string.region, _shapely_fraction(union, as_string.yx, 32, 0.5), atol=1e-6)
    assert as_string.params["keep"] == ["Tumor", "Stroma"] and len(as_string) > 20


def test_class_names_differing_in_case_or_spacing_are_one_class():
    features = [_feature(TUMOUR, "Tumor"), _feature(STROMA, " tumor"), _feature(
        [[0, 1200], [400, 1200], [400, 1500], [0, 1500], [0, 1200]], "Tumor  core"),
        _feature([[500, 1200], [700, 1200], [700, 1500], [500, 1500], [500, 1200]], "tumor core")]
    with pytest.warns(RegionRepairWarning, match="differ only in case or spacing; merged as 'Tumor'"):
        regions = RegionMap.from_geojson({"type": "FeatureCollection", "features": features}, mpp=MPP0)
    assert regions.classes == ("Tumor", "Tumor core")
    yx = np.array([[y, x] for y in range(0, 250, 37) for x in range(0, 520, 41)])
    union = shapely.union_all([shapely.Polygon(TUMOUR), shapely.Polygon(STROMA)])
    # reference: shapely areas of both spellings' polygons together
    np.testing.assert_allclose(regions.fractions("TUMOR", yx, 50, 50, 0.5),
                               _shapely_fraction(union, yx, 50, 0.5), atol=1e-6)


def test_table_class_spellings_merge_too():
    table = pd.DataFrame({"y": [0, 0, 64], "x": [0, 64, 0], "class": ["Tumor", "tumor", "Stroma"]})
    with pytest.warns(RegionRepairWarning, match="merged as 'Tumor'"):
        regions = RegionMap.from_tiles(table, 64, 0.5)
    assert regions.classes == ("Tumor", "Stroma")
    # ground truth constructed above: the top two tiles are tumour, the box spans all four tile places
    assert regions.fraction("tumor", 0, 0, 128, 128, 0.5) == pytest.approx(0.5)
