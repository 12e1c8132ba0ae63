"""Read region polygons from GeoJSON (RFC 7946) into shapely geometries, one union per class.

Coordinates are level-0 pixels of the slide, ``[x, y]`` in GeoJSON order (x to the right, y down,
origin at the top-left corner of the slide). What is accepted and what is repaired:

* ``FeatureCollection``, ``Feature``, ``GeometryCollection`` and bare geometry objects, plus a
  plain JSON list of features. Nested ``GeometryCollection`` members are flattened.
* ``Polygon`` and ``MultiPolygon`` with holes carry area. ``Point``/``LineString`` and their multi
  forms have none: they are skipped with a :class:`RegionRepairWarning`.
* A third coordinate (z) is ignored. Ring orientation is not checked (RFC 7946 section 3.1.6
  asks parsers not to reject rings for their winding).
* An unclosed ring is closed (repair, warned). A ring with fewer than three distinct positions
  has no area: a degenerate outer ring makes the polygon empty, a degenerate hole is dropped.
* Self-intersecting or otherwise invalid polygons are repaired with ``shapely.make_valid`` and
  only their polygonal parts are kept (repair, warned).
* Parts outside the slide (negative coordinates, or beyond ``slide_shape`` when given) are
  clipped away (repair, warned). A class lying entirely outside is left empty (warned).
* Features whose geometry is ``null`` or empty are skipped (warned). When nothing with area
  remains, a :class:`~tilewright.errors.RegionError` is raised.
* Anything that cannot be read as the standard describes (non-numeric or non-finite
  coordinates, a wrong nesting depth, an unknown geometry type, a missing class) raises
  :class:`~tilewright.errors.RegionError` naming the file, the feature and the fix.

References
----------
.. [1] H. Butler, M. Daly, A. Doyle, S. Gillies, S. Hagen and T. Schaub, "The GeoJSON Format",
       IETF RFC 7946, August 2016.
"""

from __future__ import annotations

import json
import math
import numbers
import warnings
from dataclasses import dataclass, field

import numpy as np

from tilewright.errors import RegionError

__all__ = ["RegionRepairWarning", "DEFAULT_CLASS_PROPERTIES", "ParsedRegions", "read_geojson"]

#: Feature properties searched, in order, for the class name when none is named.
DEFAULT_CLASS_PROPERTIES = ("classification", "class", "label", "name")

_AREA_TYPES = ("Polygon", "MultiPolygon")
_NO_AREA_TYPES = ("Point", "MultiPoint", "LineString", "MultiLineString")
_FAR = 1e15  # stands in for "no upper bound" when the slide size is unknown


class RegionRepairWarning(UserWarning):
    """A region file was readable but had to be repaired (clipped, closed, made valid, skipped)."""


@dataclass
class ParsedRegions:
    """Result of :func:`read_geojson`: one shapely (Multi)Polygon per class, and what was fixed."""

    shapes: dict  # class name -> shapely geometry (union of that class's polygons)
    n_features: int = 0
    repairs: list = field(default_factory=list)


def read_geojson(source, *, class_property=None, classes=None, default_class=None,
                 slide_shape=None) -> ParsedRegions:
    """Parse GeoJSON into per-class shapely geometries in level-0 pixel coordinates.

    Parameters
    ----------
    source : str, os.PathLike or dict or list
        A path to a ``.geojson``/``.json`` file, or already-decoded GeoJSON.
    class_property : str, optional
        Feature property holding the class. Default: the first present of
        :data:`DEFAULT_CLASS_PROPERTIES`. The value is a string, a number, or an object with a
        ``"name"`` member.
    classes : sequence of str, optional
        The allowed classes, in order. A feature of any other class raises RegionError.
        Default: every class found, in order of first appearance.
    default_class : str, optional
        Class of features that carry no class property (default: such features are an error).
    slide_shape : (int, int), optional
        Level-0 (height, width) of the slide; parts beyond are clipped away.

    Returns
    -------
    ParsedRegions

    Raises
    ------
    RegionError
        Unreadable file, invalid JSON, malformed geometry, unknown or missing class, or no
        geometry with area.

    References
    ----------
    .. [1] H. Butler et al., "The GeoJSON Format", IETF RFC 7946, 2016.
    """
    from tilewright.regions.source import parse_source

    return parse_source(source, _load_json,
                        lambda data, path: _parse(data, path, class_property, classes, default_class, slide_shape))


def _parse(data, path, class_property, classes, default_class, slide_shape):
    import shapely

    where = _Where(path)
    features = _features(data, where)
    allowed = None if classes is None else [str(c) for c in classes]
    if allowed is not None and len(set(allowed)) != len(allowed):
        raise RegionError(f"classes= has duplicate names {allowed}; give each class once", path)

    parts: dict[str, list] = {name: [] for name in (allowed or [])}
    skipped_empty, skipped_no_area, repaired, closed = [], [], [], []
    for i, feature in enumerate(features):
        geometry, properties = feature
        polygons = _polygons_of(geometry, where.at(i), skipped_no_area, closed, i)
        if not polygons:
            skipped_empty.append(i)
            continue
        name = _class_of(properties, class_property, default_class, where.at(i))
        if allowed is not None and name not in allowed:
            raise RegionError(
                f"{where.at(i)} has class {name!r}, which is not among the classes given "
                f"({', '.join(allowed)}); add it to classes= or fix the feature's class property", path)
        for shell, holes in polygons:
            poly = shapely.Polygon(shell, holes)
            if not poly.is_valid:
                poly = _polygonal(shapely.make_valid(poly))
                repaired.append(i)
            if not poly.is_empty:
                parts.setdefault(name, []).append(poly)

    repairs = []
    if closed:
        repairs.append(f"closed unclosed rings in features {_short(closed)}")
    if repaired:
        repairs.append(f"repaired invalid (e.g. self-intersecting) polygons with shapely.make_valid "
                       f"in features {_short(repaired)}")
    if skipped_no_area:
        repairs.append(f"skipped point/line geometry without area in features {_short(skipped_no_area)}")
    if skipped_empty:
        repairs.append(f"skipped features with null or empty geometry: {_short(skipped_empty)}")

    bound = (slide_shape[1], slide_shape[0]) if slide_shape is not None else (_FAR, _FAR)
    frame = shapely.box(0.0, 0.0, float(bound[0]), float(bound[1]))
    shapes, clipped, outside = {}, [], []
    for name, polys in parts.items():
        if not polys:
            shapes[name] = shapely.MultiPolygon()
            continue
        union = _polygonal(shapely.union_all(polys))
        inside = _polygonal(shapely.intersection(union, frame))
        if inside.area < union.area * (1 - 1e-9):
            (outside if inside.is_empty else clipped).append(name)
        shapes[name] = inside
    if clipped:
        repairs.append(f"clipped parts outside the slide (x, y < 0"
                       f"{'' if slide_shape is None else ' or beyond ' + str(tuple(slide_shape))}) "
                       f"from classes {', '.join(map(repr, clipped))}")
    if outside:
        repairs.append(f"dropped classes lying entirely outside the slide: {', '.join(map(repr, outside))}")
    if all(g.is_empty for g in shapes.values()):
        raise RegionError(
            "no polygon with area inside the slide (empty, null, point/line-only or out-of-bounds "
            "geometry); coordinates must be level-0 pixels [x, y] with Polygon or MultiPolygon "
            "geometry" + ("" if not repairs else "; " + "; ".join(repairs)), path)
    for message in repairs:
        warnings.warn(f"{path or 'GeoJSON'}: {message}", RegionRepairWarning, stacklevel=4)
    return ParsedRegions(shapes, len(features), repairs)


class _Where:
    """Names a feature in error messages."""

    def __init__(self, path):
        self.path = path

    def at(self, i):
        return f"feature {i}"


def _short(indices, limit=8):
    shown = ", ".join(str(i) for i in indices[:limit])
    return shown + (f" and {len(indices) - limit} more" if len(indices) > limit else "")


def _load_json(path):
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


def _features(data, where):
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


def _polygons_of(geometry, where, no_area, closed, index, depth=0):
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
            out.extend(_polygons_of(member, where, no_area, closed, index, depth + 1))
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
        if not isinstance(pos, (list, tuple)) or len(pos) < 2 or not all(_is_number(v) for v in pos[:2]):
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


def _is_number(v):
    return isinstance(v, numbers.Real) and not isinstance(v, (bool, np.bool_))


def _class_of(properties, class_property, default_class, where):
    keys = (class_property,) if class_property is not None else DEFAULT_CLASS_PROPERTIES
    for key in keys:
        if key in properties and properties[key] is not None:
            value = properties[key]
            if isinstance(value, dict):
                value = value.get("name")
            if isinstance(value, str) and value.strip():
                return value.strip()
            if _is_number(value):
                return str(int(value)) if float(value).is_integer() else str(value)
            raise RegionError(f"{where}: class property {key!r} is {properties[key]!r}; give a class name "
                              "(a string, or an object with a 'name')")
    if default_class is not None:
        return str(default_class)
    raise RegionError(f"{where} has no class property ({' / '.join(map(repr, keys))}); add one to each "
                      "feature, name the property with class_property=, or pass default_class=")


def _polygonal(geom):
    """Only the polygonal parts of a geometry, as a Polygon or MultiPolygon (maybe empty)."""
    import shapely

    if geom.is_empty:
        return shapely.MultiPolygon()
    kind = geom.geom_type
    if kind in _AREA_TYPES:
        return geom
    if kind == "GeometryCollection":
        polys = []
        for part in geom.geoms:
            part = _polygonal(part)
            polys.extend(part.geoms if part.geom_type == "MultiPolygon" else [part] if not part.is_empty else [])
        return shapely.MultiPolygon(polys) if polys else shapely.MultiPolygon()
    return shapely.MultiPolygon()
