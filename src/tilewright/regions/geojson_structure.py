"""GeoJSON structure: the file read as JSON, features flattened, rings checked (RFC 7946).

Turns a decoded GeoJSON object into ``(geometry, properties)`` pairs and a geometry into
``(shell, holes)`` rings of ``[x, y]`` positions; the meaning of the features (classes, repairs,
bounds) is :mod:`tilewright.regions.geojson`'s.

References
----------
.. [1] H. Butler et al., "The GeoJSON Format", IETF RFC 7946, 2016.
"""

from __future__ import annotations

import json
import math
import numbers

import numpy as np

from tilewright.errors import RegionError

__all__ = ["Where", "short", "load_json", "features_of", "polygons_of", "is_number"]

_AREA_TYPES = ("Polygon", "MultiPolygon")
_NO_AREA_TYPES = ("Point", "MultiPoint", "LineString", "MultiLineString")


class Where:
    """Names a feature in error messages."""

    def __init__(self, path):
        self.path = path

    def at(self, i):
        return f"feature {i}"


def short(indices, limit=8):
    shown = ", ".join(str(i) for i in indices[:limit])
    return shown + (f" and {len(indices) - limit} more" if len(indices) > limit else "")


def load_json(path):
    try:
        with open(path, "rb") as fh:
            raw = fh.read()
    except FileNotFoundError:
        raise RegionError("region file not found; check the path", path) from None
    except OSError as exc:
        raise RegionError(f"cannot read the region file ({exc.strerror or exc}); check permissions", path) from None
    if not raw.strip():
        raise RegionError("region file is empty; export the annotations again as GeoJSON", path)
    try:
        return json.loads(raw)
    except (UnicodeDecodeError, json.JSONDecodeError) as exc:
        where = f" at line {exc.lineno}, column {exc.colno}" if isinstance(exc, json.JSONDecodeError) else ""
        raise RegionError(f"not valid JSON{where}; export the annotations as GeoJSON (RFC 7946)", path) from None


def features_of(data, where):
    """Flatten the top-level object into a list of (geometry, properties)."""
    if isinstance(data, (list, tuple)):
        items = data
    elif isinstance(data, dict):
        kind = data.get("type")
        if kind == "FeatureCollection":
            items = data.get("features")
            if not isinstance(items, (list, tuple)):
                raise RegionError("FeatureCollection has no 'features' list; fix the file", where.path)
        elif kind == "Feature" or kind in _AREA_TYPES + _NO_AREA_TYPES + ("GeometryCollection",):
            items = [data]
        else:
            raise RegionError(f"top-level GeoJSON type {kind!r} is not a FeatureCollection, Feature or "
                              f"geometry; export the annotations as GeoJSON (RFC 7946)", where.path)
    else:
        raise RegionError(f"top-level JSON value is a {type(data).__name__}, not a GeoJSON object; "
                          f"export the annotations as GeoJSON (RFC 7946)", where.path)
    out = []
    for i, item in enumerate(items):
        if not isinstance(item, dict):
            raise RegionError(f"{where.at(i)} is a {type(item).__name__}, not a GeoJSON object", where.path)
        if item.get("type") == "Feature":
            props = item.get("properties")
            if props is not None and not isinstance(props, dict):
                raise RegionError(f"{where.at(i)} has 'properties' that is not an object", where.path)
            out.append((item.get("geometry"), props or {}))
        else:  # a bare geometry: no properties
            out.append((item, {}))
    return out


def polygons_of(geometry, where, no_area, closed, index, depth=0):
    """(shell, [holes]) tuples of a geometry object; [] for null/empty/area-less geometry."""
    if geometry is None:
        return []
    if not isinstance(geometry, dict):
        raise RegionError(f"{where}: geometry is a {type(geometry).__name__}, not a GeoJSON geometry object")
    kind = geometry.get("type")
    if kind == "GeometryCollection":
        members = geometry.get("geometries")
        if members is None:
            return []
        if not isinstance(members, (list, tuple)) or depth > 16:
            raise RegionError(f"{where}: GeometryCollection needs a 'geometries' list")
        out = []
        for member in members:
            out.extend(polygons_of(member, where, no_area, closed, index, depth + 1))
        return out
    if kind in _NO_AREA_TYPES:
        no_area.append(index)
        return []
    if kind not in _AREA_TYPES:
        raise RegionError(f"{where}: unknown geometry type {kind!r}; use Polygon or MultiPolygon (RFC 7946)")
    coords = geometry.get("coordinates")
    if coords is None or (isinstance(coords, (list, tuple)) and not coords):
        return []
    if not isinstance(coords, (list, tuple)):
        raise RegionError(f"{where}: {kind} coordinates must be a list")
    polygons = [coords] if kind == "Polygon" else coords
    out = []
    for polygon in polygons:
        if not isinstance(polygon, (list, tuple)):
            raise RegionError(f"{where}: {kind} coordinates nest too shallowly; a Polygon is a list of "
                              "rings, each a list of [x, y] positions")
        if not polygon:
            continue
        rings = [_ring(r, where, closed, index) for r in polygon]
        if rings[0] is None:  # degenerate outer ring: no area
            continue
        out.append((rings[0], [r for r in rings[1:] if r is not None]))
    return out


def _ring(ring, where, closed, index):
    """An (M, 2) float array of a linear ring, closed; None when it has no area."""
    if not isinstance(ring, (list, tuple)):
        raise RegionError(f"{where}: a ring must be a list of [x, y] positions")
    pts = []
    for pos in ring:
        if not isinstance(pos, (list, tuple)) or len(pos) < 2 or not all(is_number(v) for v in pos[:2]):
            raise RegionError(f"{where}: position {pos!r} is not [x, y] numbers; rings are lists of "
                              "[x, y] positions in level-0 pixels")
        x, y = float(pos[0]), float(pos[1])
        if not (math.isfinite(x) and math.isfinite(y)):
            raise RegionError(f"{where}: position {pos!r} is not finite")
        pts.append((x, y))
    if len(set(pts)) < 3:
        return None
    if pts[0] != pts[-1]:
        pts.append(pts[0])
        if index not in closed:
            closed.append(index)
    return np.asarray(pts, dtype=np.float64)


def is_number(v):
    return isinstance(v, numbers.Real) and not isinstance(v, (bool, np.bool_))
