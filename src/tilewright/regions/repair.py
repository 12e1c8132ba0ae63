"""Repairing annotation polygons and checking them against the slide they belong to.

Polygon repair keeps shells and holes apart: an invalid polygon's outer ring and each of its
holes are made valid on their own (``shapely.make_valid``, polygonal parts kept), then the holes
are subtracted from the shell. Repairing the rings together (by even-odd parity, as a plain
``make_valid`` of the whole polygon does) turns a hole that crosses the shell's boundary or lies
outside it into *added* area and loses a hole sharing an edge with the shell. The area as drawn
(shoelace area of the outer ring minus the holes' areas) is kept so that warnings can report
how much a repair changed.

Bounds: annotation coordinates are level-0 pixels ``[x, y]`` (RFC 7946 position order, x to the
right, y down). Parts outside the slide are clipped with a warning giving the share of area
lost; when more than half of the annotated area lies outside, the file does not fit the slide
and reading it fails, with a hint when swapping x and y would make it fit (a file written in
``[y, x]`` order).

References
----------
.. [1] H. Butler et al., "The GeoJSON Format", IETF RFC 7946, 2016 (section 3.1.1: positions
       are x, y).
"""

from __future__ import annotations

import numpy as np

from tilewright.errors import RegionError

__all__ = ["repair_polygon", "polygonal", "fit_to_slide", "MOSTLY_OUTSIDE"]

#: Above this share of the annotated area outside the slide, the file does not fit the slide.
MOSTLY_OUTSIDE = 0.5
_FITS = 0.99  # share inside a swapped [y, x] reading needs for the swap hint
_FAR = 1e15  # stands in for "no upper bound" when the slide size is unknown


def polygonal(geom):
    """Only the polygonal parts of a geometry, as a Polygon or MultiPolygon (maybe empty)."""
    import shapely

    if geom.is_empty:
        return shapely.MultiPolygon()
    kind = geom.geom_type
    if kind in ("Polygon", "MultiPolygon"):
        return geom
    if kind == "GeometryCollection":
        polys = []
        for part in geom.geoms:
            part = polygonal(part)
            polys.extend(part.geoms if part.geom_type == "MultiPolygon" else [part] if not part.is_empty else [])
        return shapely.MultiPolygon(polys) if polys else shapely.MultiPolygon()
    return shapely.MultiPolygon()


def _shoelace(ring) -> float:
    x, y = ring[:, 0], ring[:, 1]
    return 0.5 * abs(float(np.dot(x[:-1], y[1:]) - np.dot(x[1:], y[:-1])))


def repair_polygon(shell, holes):
    """A valid polygonal geometry for one polygon given as rings.

    Parameters
    ----------
    shell : ndarray (M, 2)
        Closed outer ring, ``[x, y]`` positions.
    holes : list of ndarray (M, 2)
        Closed inner rings.

    Returns
    -------
    geometry : shapely Polygon or MultiPolygon
        The polygon itself when valid; otherwise the valid shell minus the union of the valid
        holes (each ring made valid on its own with ``shapely.make_valid``).
    drawn : float or None
        None when the polygon was valid; otherwise its area as drawn: the shoelace area of the
        outer ring minus the shoelace areas of the holes (at least 0; the lobes of a bow-tie
        cancel in the shoelace sum).
    """
    import shapely

    poly = shapely.Polygon(shell, holes)
    if poly.is_valid:
        return poly, None
    drawn = max(0.0, _shoelace(shell) - sum(_shoelace(h) for h in holes))
    outer = polygonal(shapely.make_valid(shapely.Polygon(shell)))
    cuts = [polygonal(shapely.make_valid(shapely.Polygon(h))) for h in holes]
    cuts = [c for c in cuts if not c.is_empty]
    if cuts and not outer.is_empty:
        outer = polygonal(shapely.difference(outer, shapely.union_all(cuts)))
    return outer, drawn


def fit_to_slide(shapes: dict, slide_shape, path) -> tuple[dict, list]:
    """Clip per-class geometries to the slide; refuse a file that mostly lies outside it.

    Parameters
    ----------
    shapes : dict
        Class name -> valid polygonal geometry in level-0 pixels ``[x, y]``.
    slide_shape : (int, int) or None
        Level-0 (height, width). None: only negative coordinates are clipped.
    path : str or None
        The region file, for messages.

    Returns
    -------
    shapes : dict
        Clipped geometries (a class lying wholly outside becomes empty).
    notes : list of str
        Repair messages (clipped share of the area, classes dropped).

    Raises
    ------
    RegionError
        More than :data:`MOSTLY_OUTSIDE` of the annotated area lies outside the slide (with a
        hint when the coordinates read as ``[y, x]`` would fit).
    """
    import shapely

    height, width = (float(v) for v in slide_shape) if slide_shape is not None else (_FAR, _FAR)
    frame = shapely.box(0.0, 0.0, width, height)
    inside = {name: _inside(geom, frame, width, height) for name, geom in shapes.items()}
    total = sum(g.area for g in shapes.values())  # classes overlapping count twice: a share, not an area
    share_out = 0.0 if total <= 0 else max(0.0, 1.0 - sum(g.area for g in inside.values()) / total)
    where = (f"the slide ({int(width)} x {int(height)} level-0 px, width x height)" if slide_shape is not None
             else "the slide (x, y >= 0)")
    swapped = _swapped_share_inside(shapes, frame, total) if slide_shape is not None and share_out > 0 else 0.0
    swap_hint = ""
    if swapped >= _FITS:
        swap_hint = (f"; read as [y, x], {swapped:.0%} of it would lie inside: the file looks written in [y, x] "
                     "order, export positions as [x, y] (GeoJSON order, x to the right)")
    if total > 0 and share_out > MOSTLY_OUTSIDE:
        raise RegionError(
            f"only {1 - share_out:.0%} of the annotated area lies inside {where}{swap_hint or ''}"
            + ("" if swap_hint else "; check that the file belongs to this slide and that its coordinates "
               "are level-0 pixels [x, y] (not µm, not another level)"), path)
    notes, clipped, outside, out = [], [], [], {}
    for name, geom in shapes.items():
        if geom.is_empty:
            out[name] = geom
            continue
        kept = inside[name]
        if kept.area < geom.area * (1 - 1e-9):
            (outside if kept.is_empty else clipped).append(name)
        out[name] = kept
    if clipped:
        notes.append(f"clipped {share_out:.2%} of the annotated area lying outside {where} from classes "
                     f"{', '.join(map(repr, clipped))}{swap_hint}")
    if outside:
        notes.append(f"dropped classes lying entirely outside the slide: {', '.join(map(repr, outside))}")
    return out, notes


def _inside(geom, frame, width, height):
    """The part of ``geom`` inside the slide (no intersection computed when its bounds fit)."""
    import shapely

    if geom.is_empty:
        return geom
    x0, y0, x1, y1 = geom.bounds
    if x0 >= 0 and y0 >= 0 and x1 <= width and y1 <= height:
        return geom
    return polygonal(shapely.intersection(geom, frame))


def _swapped_share_inside(shapes, frame, total) -> float:
    """Share of the annotated area inside the slide when positions are read as [y, x]."""
    import shapely

    inside = 0.0
    for geom in shapes.values():
        if not geom.is_empty:
            inside += shapely.intersection(shapely.transform(geom, lambda xy: xy[:, ::-1]), frame).area
    return inside / total if total > 0 else 0.0
