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
* Invalid polygons (self-intersecting rings, holes crossing or outside their shell, holes
  sharing an edge with it) are repaired ring by ring: the outer ring and each hole are made
  valid on their own (``shapely.make_valid``, polygonal parts kept), then the holes are
  subtracted (repair, warned with the area as drawn and after repair;
  :mod:`tilewright.regions.repair`).
* Parts outside the slide (negative coordinates, or beyond ``slide_shape`` when given) are
  clipped away (repair, warned with the share of area lost). A class lying entirely outside is
  left empty (warned). When more than half of the annotated area lies outside the slide the file
  is refused, with a hint when it reads as ``[y, x]``.
* Features whose geometry is ``null`` or empty are skipped (warned). When nothing with area
  remains, a :class:`~tilewright.errors.RegionError` is raised.
* A feature without a class property is skipped (warned), unless ``default_class`` is given;
  a file in which no feature has a class is refused. A feature's ``name`` is not a class.
* Features with an object-type property (``objectType``/``object_type``) other than
  ``"annotation"`` (for example exported cell detections) are skipped (warned) unless their type
  is asked for with ``feature_kinds``. Features without that property are annotations.
* Class names differing only in case or spacing are one class (warned; see
  :mod:`tilewright.regions.classnames`).
* Anything that cannot be read as the standard describes (non-numeric or non-finite
  coordinates, a wrong nesting depth, an unknown geometry type, a class property that is not a
  name) raises :class:`~tilewright.errors.RegionError` naming the file, the feature and the fix.

References
----------
.. [1] H. Butler, M. Daly, A. Doyle, S. Gillies, S. Hagen and T. Schaub, "The GeoJSON Format",
       IETF RFC 7946, August 2016.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field

from tilewright.errors import RegionError
from tilewright.regions.classnames import ClassNames, class_key
from tilewright.regions.geojson_structure import Where, features_of, is_number, load_json, polygons_of, short
from tilewright.regions.repair import fit_to_slide, polygonal, repair_polygon

__all__ = ["RegionRepairWarning", "DEFAULT_CLASS_PROPERTIES", "OBJECT_TYPE_PROPERTIES", "DEFAULT_FEATURE_KINDS",
           "ParsedRegions", "read_geojson", "kinds_option"]

#: Feature properties searched, in order, for the class name when none is named. A feature's
#: ``name`` is its own label (for example "Annotation 3"), not a class: it is never read as one
#: unless named with ``class_property="name"``.
DEFAULT_CLASS_PROPERTIES = ("classification", "class", "label")
#: Feature properties that say what kind of object a feature is (an annotation, a detected cell ...).
OBJECT_TYPE_PROPERTIES = ("objectType", "object_type")
#: Feature kinds (the object-type property's values) read by default; features of other kinds
#: (detections, cells, tiles) are skipped.
DEFAULT_FEATURE_KINDS = ("annotation",)



class RegionRepairWarning(UserWarning):
    """A region file was readable but had to be repaired (clipped, closed, made valid, skipped)."""


@dataclass
class ParsedRegions:
    """Result of :func:`read_geojson`: one shapely (Multi)Polygon per class, and what was fixed."""

    shapes: dict  # class name -> shapely geometry (union of that class's polygons)
    n_features: int = 0
    repairs: list = field(default_factory=list)


def read_geojson(source, *, class_property=None, classes=None, default_class=None,
                 slide_shape=None, feature_kinds=None, warn=True, object_types=None) -> ParsedRegions:
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
        Class of features that carry no class property (default: such features are skipped,
        with a warning).
    slide_shape : (int, int), optional
        Level-0 (height, width) of the slide; parts beyond are clipped away, and a file mostly
        outside it is refused.
    feature_kinds : str or sequence of str, optional
        Kinds of feature to read, as named by their ``objectType``/``object_type`` property
        (compared ignoring case); default ``("annotation",)``; ``"all"`` reads every feature.
    warn : bool
        Issue each repair as a :class:`RegionRepairWarning` (True) or only return it in
        ``ParsedRegions.repairs`` (False; a cohort run logs them instead).
    object_types : str or sequence of str, optional
        Old name of ``feature_kinds`` (DeprecationWarning; removed in the next release).

    Returns
    -------
    ParsedRegions

    Raises
    ------
    RegionError
        Unreadable file, invalid JSON, malformed geometry, a class not among ``classes``, no
        classified geometry with area, or annotations lying mostly outside the slide.

    References
    ----------
    .. [1] H. Butler et al., "The GeoJSON Format", IETF RFC 7946, 2016.
    """
    from tilewright.regions.source import parse_source

    feature_kinds = kinds_option(feature_kinds, object_types, "read_geojson")
    return parse_source(source, load_json,
                        lambda data, path: _parse(data, path, class_property, classes, default_class, slide_shape,
                                                   feature_kinds, warn))


def kinds_option(feature_kinds, object_types, where: str):
    """``feature_kinds``, or its old name ``object_types`` given instead (with a DeprecationWarning)."""
    if object_types is None:
        return feature_kinds
    import warnings

    warnings.warn(f"{where}(object_types=) is renamed feature_kinds=; the old keyword will be removed in the next "
                  "release", DeprecationWarning, stacklevel=3)
    if feature_kinds is not None:
        raise RegionError(f"{where}: give feature_kinds= alone (object_types= is its old name)")
    return object_types


def _parse(data, path, class_property, classes, default_class, slide_shape, feature_kinds, warn):
    where = Where(path)
    features = features_of(data, where)
    allowed = None if classes is None else [" ".join(str(c).split()) for c in classes]
    if allowed is not None and len({class_key(c) for c in allowed}) != len(allowed):
        raise RegionError(f"classes= has duplicate names {allowed}; give each class once", path)
    wanted = _wanted_kinds(feature_kinds)
    names = ClassNames(allowed or ())
    parts: dict[str, list] = {name: [] for name in (allowed or [])}
    skipped_empty, skipped_no_area, closed, unclassified, named = [], [], [], [], []
    other_objects: dict[str, list] = {}
    repaired, drawn_area, repaired_area = [], 0.0, 0.0
    for i, (geometry, properties) in enumerate(features):
        kind = _object_type(properties)
        if wanted is not None and kind is not None and kind.casefold() not in wanted:
            other_objects.setdefault(kind, []).append(i)
            continue
        polygons = polygons_of(geometry, where.at(i), skipped_no_area, closed, i)
        if not polygons:
            skipped_empty.append(i)
            continue
        name = _class_of(properties, class_property, default_class, where.at(i))
        if name is None:
            unclassified.append(i)
            if isinstance(properties.get("name"), str) and properties["name"].strip():
                named.append((i, properties["name"].strip()))
            continue
        name = names.add(name)
        if allowed is not None and name not in allowed:
            raise RegionError(
                f"{where.at(i)} has class {name!r}, which is not among the classes given "
                f"({', '.join(allowed)}); add it to classes= or fix the feature's class property", path)
        for shell, holes in polygons:
            poly, drawn = repair_polygon(shell, holes)
            if drawn is not None:
                if i not in repaired:
                    repaired.append(i)
                drawn_area += drawn
                repaired_area += poly.area
            if not poly.is_empty:
                parts.setdefault(name, []).append(poly)

    repairs = list(names.notes())
    if closed:
        repairs.append(f"closed unclosed rings in features {short(closed)}")
    if repaired:
        repairs.append(f"repaired invalid (e.g. self-intersecting) polygons in features {short(repaired)}: outer "
                       f"rings and holes made valid separately (shapely.make_valid), holes subtracted; area as "
                       f"drawn {drawn_area:,.0f} px² -> {repaired_area:,.0f} px² after repair "
                       f"({_change(drawn_area, repaired_area)})")
    if skipped_no_area:
        repairs.append(f"skipped point/line geometry without area in features {short(skipped_no_area)}")
    if skipped_empty:
        repairs.append(f"skipped features with null or empty geometry: {short(skipped_empty)}")
    for kind, idx in other_objects.items():
        repairs.append(f"ignored {len(idx)} feature(s) of object type {kind!r} (features {short(idx)}); object "
                       f"types read: {', '.join(sorted(wanted))} (choose with --feature-kinds / feature_kinds=)")
    if unclassified:
        repairs.append(_unclassified_note(unclassified, named, class_property))

    shapes = {name: (polygonal(_union(polys)) if polys else _empty()) for name, polys in parts.items()}
    if all(g.is_empty for g in shapes.values()):
        if unclassified and not any(parts.values()):
            raise RegionError(
                f"no feature with area has a class ({_unclassified_note(unclassified, named, class_property)})",
                path)
        raise RegionError(
            "no polygon with area inside the slide (empty, null, point/line-only or out-of-bounds "
            "geometry); coordinates must be level-0 pixels [x, y] with Polygon or MultiPolygon "
            "geometry" + ("" if not repairs else "; " + "; ".join(repairs)), path)
    shapes, clipped = fit_to_slide(shapes, slide_shape, path)
    repairs.extend(clipped)
    if all(g.is_empty for g in shapes.values()):
        raise RegionError("no polygon with area inside the slide; " + "; ".join(repairs), path)
    if warn:
        for message in repairs:
            warnings.warn(f"{path or 'GeoJSON'}: {message}", RegionRepairWarning, stacklevel=5)
    return ParsedRegions(shapes, len(features), repairs)


def _union(polys):
    import shapely

    return polys[0] if len(polys) == 1 else shapely.union_all(polys)


def _empty():
    import shapely

    return shapely.MultiPolygon()


def _change(before, after):
    if before > 0:
        return f"{(after - before) / before:+.1%}"
    return f"{after - before:+,.0f} px²"


def _unclassified_note(indices, named, class_property):
    keys = (class_property,) if class_property is not None else DEFAULT_CLASS_PROPERTIES
    note = (f"skipped {len(indices)} feature(s) without a class property ({' / '.join(map(repr, keys))}): "
            f"features {short(indices)}; name the class property with --class-property / class_property=, "
            "or give unclassified features a class with --default-class / default_class=")
    if named and class_property is None:
        i, label = named[0]
        note += (f" (feature {i} has a 'name', {label!r}, which is not taken as a class; use "
                 "--class-property name to read names as classes)")
    return note


def _class_of(properties, class_property, default_class, where):
    keys = (class_property,) if class_property is not None else DEFAULT_CLASS_PROPERTIES
    for key in keys:
        if key in properties and properties[key] is not None:
            value = properties[key]
            if isinstance(value, dict):
                value = value.get("name")
            if value is None or (isinstance(value, str) and not value.strip()):
                continue  # a blank class: unclassified
            if isinstance(value, str):
                return value.strip()
            if is_number(value):
                return str(int(value)) if float(value).is_integer() else str(value)
            raise RegionError(f"{where}: class property {key!r} is {properties[key]!r}; give a class name "
                              "(a string, or an object with a 'name')")
    if default_class is not None and str(default_class).strip():
        return str(default_class).strip()
    return None


def _object_type(properties):
    """The feature's object type (a string), or None when it does not say."""
    for key in OBJECT_TYPE_PROPERTIES:
        value = properties.get(key)
        if isinstance(value, str) and value.strip():
            return value.strip()
    return None


def _wanted_kinds(feature_kinds):
    """Case-folded feature kinds to read, or None for every feature."""
    if feature_kinds is None:
        return {t.casefold() for t in DEFAULT_FEATURE_KINDS}
    if isinstance(feature_kinds, str):
        feature_kinds = feature_kinds.split(",")
    wanted = {str(t).strip().casefold() for t in feature_kinds if str(t).strip()}
    if "all" in wanted:
        return None
    if not wanted:
        raise RegionError("feature_kinds= is empty; name the kinds of feature to read (for example 'annotation') "
                          "or 'all'")
    return wanted
