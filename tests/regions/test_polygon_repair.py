"""Invalid polygons with holes: shells and holes repaired apart, the area change reported.

Expected areas are constructed from the rectangles below and cross-checked with shapely's areas
of the same sets (shapely: the reference library for planar geometry).
"""

from __future__ import annotations

import numpy as np
import pytest
import shapely

from tilewright.regions.geojson import RegionRepairWarning
from tilewright.regions.regionmap import RegionMap

MPP0 = 0.2265  # an odd 40x level-0 µm/px (common practice)
SHELL = [[0, 0], [1000, 0], [1000, 1000], [0, 1000], [0, 0]]


def _rect(x0, y0, x1, y1):
    return [[x0, y0], [x1, y0], [x1, y1], [x0, y1], [x0, y0]]


CASES = {
    # hole crossing the shell's right edge: only its inside part is cut away
    "hole crossing the shell": (SHELL, _rect(800, 200, 1200, 600), 1000 * 1000 - 200 * 400),
    # hole sharing the shell's left edge: cut away, not lost
    "hole sharing an edge": (SHELL, _rect(0, 300, 300, 700), 1000 * 1000 - 300 * 400),
    # hole wholly outside the shell: changes nothing (it must not add area)
    "hole outside the shell": (SHELL, _rect(1500, 100, 1800, 400), 1000 * 1000),
    # a bow-tie shell (two triangles of 250 000 px² each) with a hole inside its left lobe
    "bow-tie shell with a hole": ([[0, 0], [1000, 1000], [1000, 0], [0, 1000], [0, 0]],
                                  _rect(50, 400, 250, 600), 2 * 250_000 - 200 * 200),
}


@pytest.mark.parametrize("name", list(CASES))
def test_invalid_polygon_with_hole_repairs_to_shell_minus_hole(name):
    shell, hole, expected = CASES[name]
    assert not shapely.Polygon(shell, [hole]).is_valid  # reference: shapely calls the drawing invalid
    # reference: shapely's area of the repaired shell minus the hole, equal to the constructed value
    reference = shapely.make_valid(shapely.Polygon(shell)).difference(shapely.Polygon(hole)).area
    assert reference == pytest.approx(expected)
    feature = {"type": "Feature", "properties": {"classification": "tumour"},
               "geometry": {"type": "Polygon", "coordinates": [shell, hole]}}
    with pytest.warns(RegionRepairWarning, match="area as drawn") as caught:
        regions = RegionMap.from_geojson(feature, mpp=MPP0, slide_shape=(4000, 4000))
    covered = regions.fraction("tumour", 0, 0, 2000, 2000, MPP0) * 2000 * 2000
    assert covered == pytest.approx(expected, rel=1e-6)
    # the warning reports the area as drawn and after repair; reference for "as drawn": shapely's
    # area of the unrepaired rings (signed shoelace sums; a bow-tie's lobes cancel), at least 0
    drawn = max(0.0, shapely.Polygon(shell).area - shapely.Polygon(hole).area)
    message = " ".join(str(w.message) for w in caught)
    assert f"area as drawn {drawn:,.0f} px² -> {expected:,.0f} px² after repair" in message


def test_hole_crossing_the_shell_cuts_only_inside():
    shell, hole, _ = CASES["hole crossing the shell"]
    feature = {"type": "Feature", "properties": {"classification": "tumour"},
               "geometry": {"type": "Polygon", "coordinates": [shell, hole]}}
    with pytest.warns(RegionRepairWarning):
        regions = RegionMap.from_geojson(feature, mpp=1.0)
    # boxes in the hole's inside part, beside it, and in its outside part (constructed above)
    f = regions.fractions("tumour", np.array([[300, 850], [700, 850], [300, 1050]]), 100, 100, 1.0)
    np.testing.assert_allclose(f, [0.0, 1.0, 0.0], atol=1e-9)


def test_valid_polygons_are_not_reported():
    feature = {"type": "Feature", "properties": {"classification": "tumour"},
               "geometry": {"type": "Polygon", "coordinates": [SHELL, _rect(200, 200, 400, 400)]}}
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("error")
        regions = RegionMap.from_geojson(feature, mpp=1.0)
    assert regions.fraction("tumour", 0, 0, 1000, 1000, 1.0) == pytest.approx(1 - 0.04)
