"""Tile fractions of GeoJSON polygons (with holes) against shapely intersection areas."""

from __future__ import annotations

import numpy as np
import pytest
import shapely
from shapely.geometry import shape

from tilewright.errors import RegionError
from tilewright.regions.regionmap import RegionMap

LEVEL0_MPP = 0.25


def _ring(cx, cy, r, n, rng, wobble=0.25):
    angles = np.sort(rng.uniform(0, 2 * np.pi, n))
    radii = r * (1 + wobble * rng.uniform(-1, 1, n))
    pts = np.c_[cx + radii * np.cos(angles), cy + radii * np.sin(angles)].tolist()
    return pts + [pts[0]]


def _collection(seed=0):
    """Tumour: a star-shaped polygon with two holes plus a second polygon; stroma overlaps it."""
    rng = np.random.default_rng(seed)
    tumour = {"type": "MultiPolygon", "coordinates": [
        [_ring(3000, 3000, 2000, 60, rng),
         _ring(2500, 2600, 300, 12, rng, 0.1), _ring(3600, 3500, 400, 12, rng, 0.1)],
        [_ring(8000, 2500, 1200, 40, rng)]]}
    stroma = {"type": "Polygon", "coordinates": [_ring(5000, 3500, 1800, 50, rng)]}
    necrosis = {"type": "Polygon", "coordinates": [[[500, 7000], [2500, 7000], [2500, 8500], [500, 8500], [500, 7000]],
                                                   [[1000, 7500], [2000, 7500], [2000, 8000], [1000, 8000], [1000, 7500]]]}
    features = [
        {"type": "Feature", "properties": {"classification": {"name": "tumour"}}, "geometry": tumour},
        {"type": "Feature", "properties": {"classification": "stroma"}, "geometry": stroma},
        {"type": "Feature", "properties": {"classification": "necrosis"}, "geometry": necrosis},
    ]
    return {"type": "FeatureCollection", "features": features}


def _reference(collection, names):
    """Union of the named classes read independently with shapely.geometry.shape."""
    geoms = []
    for f in collection["features"]:
        cls = f["properties"]["classification"]
        cls = cls["name"] if isinstance(cls, dict) else cls
        if cls in names:
            geoms.append(shapely.make_valid(shape(f["geometry"])))
    return shapely.union_all(geoms)


@pytest.mark.parametrize("keep", [["tumour"], ["stroma"], ["tumour", "stroma"], ["necrosis"]])
@pytest.mark.parametrize("tile,mpp", [(256, 0.5), (100, 1.0), (37, 2.0)])
def test_fractions_match_shapely_areas(keep, tile, mpp):
    collection = _collection()
    regions = RegionMap.from_geojson(collection, mpp=LEVEL0_MPP)
    rng = np.random.default_rng(1)
    extent = 10000 * LEVEL0_MPP / mpp  # the annotated area in pixels at mpp
    yx = rng.uniform(-tile, extent, size=(400, 2))
    yx = np.vstack([yx, np.mgrid[0:extent:tile, 0:extent:tile].reshape(2, -1).T])
    got = regions.fractions(keep, yx, tile, tile, mpp)

    f = mpp / LEVEL0_MPP
    boxes = shapely.box(yx[:, 1] * f, yx[:, 0] * f, (yx[:, 1] + tile) * f, (yx[:, 0] + tile) * f)
    ref_geom = shapely.intersection(_reference(collection, keep), shapely.box(0, 0, 1e12, 1e12))
    expected = shapely.area(shapely.intersection(boxes, ref_geom)) / (tile * f) ** 2
    # reference: shapely intersection areas; the contract asks for agreement within 1 % of the tile
    np.testing.assert_allclose(got, expected, atol=0.01, rtol=0)
    assert got.dtype == np.float32 and got.shape == (len(yx),)
    assert ((got > 0) & (got < 1)).sum() > 10  # the sample includes many boundary tiles


def test_square_with_square_hole_exact():
    ring = {"type": "Feature", "properties": {"class": "tumour"}, "geometry": {"type": "Polygon", "coordinates": [
        [[0, 0], [1000, 0], [1000, 1000], [0, 1000], [0, 0]],
        [[250, 250], [750, 250], [750, 750], [250, 750], [250, 250]]]}}
    regions = RegionMap.from_geojson(ring, mpp=0.25)
    # ground truth constructed above: 1000^2 square minus a 500^2 hole = 0.75 of the square
    assert regions.fraction("tumour", 0, 0, 250, 250, 1.0) == pytest.approx(0.75, abs=1e-6)
    # a box wholly inside the hole: 0; half in the frame, half in the hole: 0.5
    assert regions.fraction("tumour", 300, 300, 400, 400, 0.25) == 0.0
    assert regions.fraction("tumour", 150, 75, 100, 100, 0.5) == pytest.approx(0.5, abs=1e-6)
    # the same physical box at another resolution gives the same fraction
    assert regions.fraction("tumour", 50, 50, 25, 25, 2.0) == pytest.approx(
        regions.fraction("tumour", 400, 400, 200, 200, 0.25), abs=1e-6)


def test_fractions_against_point_in_polygon_grid():
    """A second, non-shapely reference: counting grid points inside the polygon with holes."""
    from skimage.measure import points_in_poly

    collection = _collection(seed=4)
    feature = collection["features"][0]["geometry"]["coordinates"][0]  # outer ring + 2 holes
    single = {"type": "Feature", "properties": {"class": "t"}, "geometry": {"type": "Polygon", "coordinates": feature}}
    regions = RegionMap.from_geojson(single, mpp=1.0)
    y0, x0, size = 1500, 1800, 1000
    got = regions.fraction("t", y0, x0, size, size, 1.0)
    step = 2.0
    gy, gx = np.mgrid[y0 + step / 2:y0 + size:step, x0 + step / 2:x0 + size:step]
    pts = np.c_[gx.ravel(), gy.ravel()]
    inside = points_in_poly(pts, np.asarray(feature[0]))
    for hole in feature[1:]:
        inside &= ~points_in_poly(pts, np.asarray(hole))
    # reference: skimage.measure.points_in_poly on a 2 px grid (midpoint rule)
    assert got == pytest.approx(inside.mean(), abs=0.01)
    assert 0.05 < got < 0.95


def test_unknown_keep_and_unbound_mpp_are_clear_errors():
    regions = RegionMap.from_geojson(_collection())
    with pytest.raises(RegionError, match="level-0"):
        regions.fractions("tumour", [[0, 0]], 10, 10, 0.5)
    bound = regions.with_mpp(0.25)
    assert bound.fraction("tumour", 1400, 1400, 100, 100, 0.5) == pytest.approx(1.0)  # inside the star
    with pytest.raises(RegionError, match="'stroma', 'necrosis'|'tumour'") as info:
        bound.fractions("lymphocytes", [[0, 0]], 10, 10, 0.5)
    assert "lymphocytes" in str(info.value) and "necrosis" in str(info.value)
    # a comma-separated string chooses several classes
    both = bound.fractions("tumour,stroma", [[1400, 1400]], 100, 100, 0.5)
    assert both[0] == pytest.approx(1.0)
    assert bound.to_dict()["kind"] == "geojson" and bound.to_dict()["classes"] == ["tumour", "stroma", "necrosis"]


def test_pickled_and_threaded_use_agree():
    """Maps travel to worker processes (pickle) and are queried from threads."""
    import pickle
    from concurrent.futures import ThreadPoolExecutor

    regions = RegionMap.from_geojson(_collection(), mpp=LEVEL0_MPP)
    yx = np.random.default_rng(5).uniform(0, 5000, size=(300, 2))
    expected = regions.fractions("tumour", yx, 256, 256, 0.5)
    again = pickle.loads(pickle.dumps(regions))
    np.testing.assert_array_equal(again.fractions("tumour", yx, 256, 256, 0.5), expected)
    fresh = RegionMap.from_geojson(_collection(), mpp=LEVEL0_MPP)
    with ThreadPoolExecutor(4) as pool:
        results = list(pool.map(lambda part: fresh.fractions("tumour", part, 256, 256, 0.5), np.array_split(yx, 8)))
    np.testing.assert_array_equal(np.concatenate(results), expected)  # reference: the serial answer
