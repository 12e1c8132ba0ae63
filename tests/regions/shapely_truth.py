"""Which tiles a region filter should keep, computed directly with shapely (the reference library).

A tile at target pixel ``(y, x)`` of side ``tile`` covers level-0 pixels ``[x f, (x + tile) f] x
[y f, (y + tile) f]`` with ``f = target µm/px / level-0 µm/px``; its region fraction is the area of
its intersection with the kept geometry over its own area. Tiles whose fraction lies within
``tol`` of the threshold are returned apart: float32 rounding may put them on either side.
"""

from __future__ import annotations

import numpy as np
import shapely


def grid(shape, tile):
    """Top-left corners of the full tiles of a grid anchored at 0 (the documented edge rule)."""
    return [(y, x) for y in range(0, shape[0] - tile + 1, tile) for x in range(0, shape[1] - tile + 1, tile)]


def region_fractions(corners, tile, f, geometry):
    boxes = shapely.box(*(np.asarray(v, dtype=np.float64) for v in (
        [x * f for _, x in corners], [y * f for y, _ in corners],
        [(x + tile) * f for _, x in corners], [(y + tile) * f for y, _ in corners])))
    return shapely.area(shapely.intersection(boxes, geometry)) / shapely.area(boxes)


def expected_tiles(shape, tile, f, geometry, min_region, tol=1e-5):
    """``(kept, unsure)``: sets of corners with fraction >= min_region, and those within ``tol``."""
    corners = grid(shape, tile)
    frac = region_fractions(corners, tile, f, geometry)
    kept = {c for c, v in zip(corners, frac) if v >= min_region + tol}
    unsure = {c for c, v in zip(corners, frac) if abs(v - min_region) < tol}
    return kept, unsure


def tile_boxes(yx, tile, mpp, level0_mpp):
    """Union of first-pass tiles (corners ``yx`` at ``mpp``) as a level-0 pixel geometry."""
    g = mpp / level0_mpp
    boxes = [shapely.box(x * g, y * g, (x + tile) * g, (y + tile) * g) for y, x in yx]
    return shapely.union_all(boxes) if boxes else shapely.MultiPolygon()
