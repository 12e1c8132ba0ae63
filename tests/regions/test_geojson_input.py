"""GeoJSON edge cases: out-of-bounds, self-intersecting, empty and malformed input.

Each case gives either a RegionError naming the file and the fix, or the documented repair
(with a RegionRepairWarning) — never another exception.
"""

from __future__ import annotations

import json
import warnings

import numpy as np
import pytest
import shapely
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from tilewright.errors import RegionError
from tilewright.regions.geojson import RegionRepairWarning
from tilewright.regions.regionmap import RegionMap


def _feature(coords, cls="tumour", kind="Polygon"):
    return {"type": "Feature", "properties": {"classification": cls},
            "geometry": None if coords is None else {"type": kind, "coordinates": coords}}


def _covered_area(regions, keep, extent=1e5):
    """Total covered level-0 area, measured as the fraction of one box spanning the slide."""
    return regions.fraction(keep, 0, 0, extent, extent, regions.level0_mpp) * extent * extent


def _write(tmp_path, obj, name="regions.geojson"):
    path = tmp_path / name
    path.write_text(obj if isinstance(obj, str) else json.dumps(obj))
    return path


def test_out_of_bounds_parts_are_clipped_with_warning(tmp_path):
    # rectangle from -100 to 300 in x and 850 to 1050 in y on a slide 1000 px high, 2000 wide:
    # 45 000 of its 80 000 px² (56 %) lie inside, so it is clipped (more than half outside is refused)
    sq = [[[-100, 850], [300, 850], [300, 1050], [-100, 1050], [-100, 850]]]
    path = _write(tmp_path, {"type": "FeatureCollection", "features": [_feature(sq)]})
    with pytest.warns(RegionRepairWarning, match="clipped 43.75% of the annotated area"):
        regions = RegionMap.from_geojson(path, mpp=1.0, slide_shape=(1000, 2000))
    # ground truth constructed above: inside the slide x in [0, 300], y in [850, 1000]
    assert _covered_area(regions, "tumour", 5000) == pytest.approx(300 * 150, rel=1e-6)
    assert regions.fraction("tumour", 850, 0, 150, 300, 1.0) == pytest.approx(1.0)


def test_entirely_outside_is_an_error_or_an_empty_class(tmp_path):
    outside = [[[3000, 3000], [3100, 3000], [3100, 3100], [3000, 3100], [3000, 3000]]]
    inside = [[[10, 10], [20, 10], [20, 20], [10, 20], [10, 10]]]
    path = _write(tmp_path, {"type": "FeatureCollection", "features": [_feature(outside)]})
    with pytest.raises(RegionError, match="inside the slide") as info:
        RegionMap.from_geojson(path, mpp=1.0, slide_shape=(1000, 1000))
    assert str(path) in str(info.value)
    inside = [[[10, 10], [210, 10], [210, 210], [10, 210], [10, 10]]]  # larger than the stray square
    both = {"type": "FeatureCollection", "features": [_feature(outside, "stroma"), _feature(inside)]}
    with pytest.warns(RegionRepairWarning, match="entirely outside"):
        regions = RegionMap.from_geojson(both, mpp=1.0, slide_shape=(1000, 1000))
    assert regions.classes == ("stroma", "tumour")
    assert regions.fraction("stroma", 0, 0, 1000, 1000, 1.0) == 0.0


def test_self_intersecting_polygon_is_repaired(tmp_path):
    # a bow-tie: two triangles meeting at (50, 50), each of area 50 * 100 / 2 = 2500
    bowtie = [[[0, 0], [100, 100], [100, 0], [0, 100], [0, 0]]]
    assert not shapely.Polygon(bowtie[0]).is_valid  # reference: shapely calls it invalid
    path = _write(tmp_path, {"type": "FeatureCollection", "features": [_feature(bowtie)]})
    with pytest.warns(RegionRepairWarning, match="make_valid"):
        regions = RegionMap.from_geojson(path, mpp=1.0)
    # ground truth constructed above: two triangles of 2500 px^2 each
    assert _covered_area(regions, "tumour", 1000) == pytest.approx(5000, rel=1e-6)
    # left triangle spans x 0..50 between the diagonals: the box x 0..50, y 0..100 is half covered
    assert regions.fraction("tumour", 0, 0, 100, 50, 1.0) == pytest.approx(0.5, abs=1e-6)


def test_empty_geometry_is_skipped_or_an_error(tmp_path):
    good = [[[0, 0], [10, 0], [10, 10], [0, 10], [0, 0]]]
    empties = [_feature(None), _feature([]), _feature([[]]), _feature([[[5, 5], [5, 5], [5, 5], [5, 5]]]),
               {"type": "Feature", "properties": {"classification": "tumour"},
                "geometry": {"type": "GeometryCollection", "geometries": []}}]
    with pytest.warns(RegionRepairWarning, match="null or empty"):
        regions = RegionMap.from_geojson({"type": "FeatureCollection", "features": empties + [_feature(good)]}, mpp=1.0)
    assert _covered_area(regions, "tumour", 100) == pytest.approx(100)  # ground truth: the 10 x 10 square
    path = _write(tmp_path, {"type": "FeatureCollection", "features": empties})
    with pytest.raises(RegionError, match="no polygon with area") as info:
        RegionMap.from_geojson(path, mpp=1.0)
    assert str(path) in str(info.value)
    with pytest.raises(RegionError, match="no polygon"):
        RegionMap.from_geojson({"type": "FeatureCollection", "features": []})


def test_points_and_lines_are_skipped_and_rings_closed():
    square_open = [[[0, 0], [10, 0], [10, 10], [0, 10]]]  # last position missing (RFC 7946 wants it)
    features = [_feature(square_open), _feature([3, 4], kind="Point"), _feature([[0, 0], [5, 5]], kind="LineString")]
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        regions = RegionMap.from_geojson({"type": "FeatureCollection", "features": features}, mpp=1.0)
    messages = " ".join(str(w.message) for w in caught if issubclass(w.category, RegionRepairWarning))
    assert "closed unclosed rings" in messages and "point/line" in messages
    assert _covered_area(regions, "tumour", 100) == pytest.approx(100)


def test_unknown_or_missing_class(tmp_path):
    sq = [[[0, 0], [10, 0], [10, 10], [0, 10], [0, 0]]]
    path = _write(tmp_path, {"type": "FeatureCollection", "features": [_feature(sq, "tumor")]})
    with pytest.raises(RegionError, match="'tumor'") as info:
        RegionMap.from_geojson(path, classes=["tumour", "stroma"])
    assert str(path) in str(info.value) and "classes=" in str(info.value)
    unclassed = {"type": "Feature", "properties": {"note": "x"}, "geometry": {"type": "Polygon", "coordinates": sq}}
    with pytest.raises(RegionError, match="no feature with area has a class.*without a class property"):
        RegionMap.from_geojson(unclassed)
    assert RegionMap.from_geojson(unclassed, default_class="tissue").classes == ("tissue",)
    assert RegionMap.from_geojson(unclassed, class_property="note").classes == ("x",)
    # classes= fixes the order and may name classes absent from the file
    assert RegionMap.from_geojson(_feature(sq, "stroma"), classes=["tumour", "stroma"]).classes == ("tumour", "stroma")


@pytest.mark.parametrize("text,match", [
    ("", "empty"),
    ("{not json", "not valid JSON at line 1"),
    ('{"type": "Topology"}', "FeatureCollection"),
    ('[1, 2]', "not a GeoJSON object"),
    ('{"type": "Feature", "properties": {"class": "a"}, "geometry": {"type": "Polygon", "coordinates": [[["a", 1]]]}}',
     "not \\[x, y\\] numbers"),
    ('{"type": "Feature", "properties": {"class": "a"}, "geometry": {"type": "Polygon", "coordinates": [[[0, 0], [1, 0], [NaN, 1], [0, 0]]]}}',
     "not finite"),
    ('{"type": "Feature", "properties": {"class": "a"}, "geometry": {"type": "Polygon", "coordinates": [[0, 0], [1, 0], [1, 1]]}}',
     "ring must be a list|positions"),
    ('{"type": "Feature", "properties": {"class": "a"}, "geometry": {"type": "Circle", "coordinates": [0, 0]}}',
     "unknown geometry type"),
])
def test_malformed_files_name_the_file_and_the_fix(tmp_path, text, match):
    path = _write(tmp_path, text)
    with pytest.raises(RegionError, match=match) as info:
        RegionMap.from_geojson(path)
    assert str(path) in str(info.value)


def test_missing_file(tmp_path):
    with pytest.raises(RegionError, match="not found"):
        RegionMap.from_geojson(tmp_path / "nope.geojson")


_json = st.recursive(
    st.none() | st.booleans() | st.integers(-5, 5) | st.floats(allow_nan=True) | st.sampled_from(
        ["Polygon", "MultiPolygon", "Feature", "FeatureCollection", "GeometryCollection", "Point", "tumour"]),
    lambda children: st.lists(children, max_size=5) | st.dictionaries(
        st.sampled_from(["type", "coordinates", "features", "geometry", "geometries", "properties",
                         "classification", "name"]), children, max_size=5),
    max_leaves=40)


@settings(max_examples=300, deadline=None, derandomize=True, suppress_health_check=[HealthCheck.too_slow])
@given(_json)
def test_arbitrary_json_never_crashes(data):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RegionRepairWarning)
        try:
            regions = RegionMap.from_geojson(data, mpp=1.0, default_class="x")
        except RegionError:
            return
    f = regions.fractions(regions.classes[0], [[0, 0], [3, 2]], 4, 4, 1.0)
    assert np.all((f >= 0) & (f <= 1))


@settings(max_examples=150, deadline=None, derandomize=True)
@given(st.lists(st.tuples(st.integers(-20, 120), st.integers(-20, 120)), min_size=0, max_size=9))
def test_random_rings_repair_to_shapely_make_valid(points):
    ring = [list(p) for p in points] + ([list(points[0])] if points else [])
    feature = _feature([ring])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RegionRepairWarning)
        try:
            regions = RegionMap.from_geojson(feature, mpp=1.0, slide_shape=(100, 100))
        except RegionError:
            # only when no more than half of the area lies inside the slide (documented refusal)
            # reference: shapely.make_valid area, and its part inside the slide
            if len(set(points)) >= 3:
                whole = shapely.make_valid(shapely.Polygon(ring))
                ref = whole.intersection(shapely.box(0, 0, 100, 100))
                assert ref.area <= 0.5 * whole.area + 1e-9
            return
    ref = shapely.make_valid(shapely.Polygon(ring)).intersection(shapely.box(0, 0, 100, 100))
    # reference: shapely.make_valid (the documented repair), clipped to the 100 x 100 slide
    assert _covered_area(regions, "tumour", 100) == pytest.approx(ref.area, rel=1e-6, abs=1e-6)
