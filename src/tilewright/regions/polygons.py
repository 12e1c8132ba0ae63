"""Exact coverage of axis-aligned boxes by polygons (areas of intersection, not a rasterization).

A union of polygons is cut into small pieces (recursive bisection of any piece with many
vertices), indexed with an STR-tree (Leutenegger et al. 1997), and each box is measured against
only the pieces it touches: boxes lying wholly inside a piece count in full, the others by the
area of their intersection with the piece. Pieces of one union do not overlap, so the per-piece
areas add up to the exact covered area.

References
----------
.. [1] S. T. Leutenegger, M. A. Lopez and J. Edgington, "STR: a simple and efficient algorithm
       for R-tree packing", Proceedings of the 13th International Conference on Data
       Engineering (ICDE), 1997, pp. 497-506.
"""

from __future__ import annotations

import threading

import numpy as np

__all__ = ["PolygonCoverage"]

_MAX_VERTICES = 256  # pieces larger than this are bisected so that each box intersection stays cheap
_MAX_DEPTH = 24


class PolygonCoverage:
    """Covered fraction of boxes by a fixed (Multi)Polygon, vectorized over boxes.

    Parameters
    ----------
    geometry : shapely Polygon or MultiPolygon
        A valid polygonal geometry (for example ``shapely.union_all`` of a class's polygons).
    """

    def __init__(self, geometry):
        import shapely

        pieces = []
        for part in _parts(geometry):
            _bisect(part, pieces, 0)
        self._pieces = np.asarray(pieces, dtype=object)
        self._area = float(sum(p.area for p in pieces))
        self._tree = shapely.STRtree(self._pieces) if pieces else None
        if pieces:
            shapely.prepare(self._pieces)
        # GEOS builds parts of prepared geometries lazily on first use; queries from several
        # threads (a threaded cohort run) therefore go through one lock per coverage object.
        self._lock = threading.Lock()

    def __getstate__(self):
        return {"pieces": list(self._pieces)}

    def __setstate__(self, state):
        import shapely

        self.__init__(shapely.MultiPolygon(state["pieces"]) if state["pieces"] else None)

    @property
    def area(self) -> float:
        """Total area of the geometry (square units of its coordinates)."""
        return self._area

    @property
    def n_pieces(self) -> int:
        """Number of pieces the geometry was cut into for indexing."""
        return len(self._pieces)

    def fractions(self, x0, y0, x1, y1) -> np.ndarray:
        """Fraction of each box ``[x0, x1] x [y0, y1]`` covered by the geometry.

        Parameters
        ----------
        x0, y0, x1, y1 : array_like (N,)
            Box corners in the geometry's coordinates, ``x1 > x0`` and ``y1 > y0``.

        Returns
        -------
        ndarray (N,) float64
            Covered area / box area, in [0, 1].
        """
        import shapely

        x0, y0, x1, y1 = (np.asarray(v, dtype=np.float64).ravel() for v in (x0, y0, x1, y1))
        n = x0.size
        out = np.zeros(n, dtype=np.float64)
        if n == 0 or self._tree is None:
            return out
        box_area = (x1 - x0) * (y1 - y0)
        boxes = shapely.box(x0, y0, x1, y1)
        with self._lock:
            box_idx, piece_idx = self._tree.query(boxes, predicate="intersects")
            if box_idx.size == 0:
                return out
            pieces = self._pieces[piece_idx]
            whole = shapely.contains_properly(pieces, boxes[box_idx])
            covered = np.where(whole, box_area[box_idx], 0.0)
            cut = ~whole
            if cut.any():
                covered[cut] = shapely.area(shapely.intersection(boxes[box_idx[cut]], pieces[cut]))
        np.add.at(out, box_idx, covered)
        return np.clip(out / box_area, 0.0, 1.0)


def _parts(geometry):
    if geometry is None or geometry.is_empty:
        return []
    if geometry.geom_type == "MultiPolygon":
        return [g for g in geometry.geoms if not g.is_empty]
    if geometry.geom_type == "Polygon":
        return [geometry]
    raise TypeError(f"expected a Polygon or MultiPolygon, got {geometry.geom_type}")


def _bisect(polygon, out, depth):
    """Append pieces of ``polygon`` with at most ``_MAX_VERTICES`` vertices each to ``out``."""
    import shapely

    if shapely.get_num_coordinates(polygon) <= _MAX_VERTICES or depth >= _MAX_DEPTH:
        out.append(polygon)
        return
    xmin, ymin, xmax, ymax = polygon.bounds
    if xmax - xmin >= ymax - ymin:
        mid = 0.5 * (xmin + xmax)
        halves = (shapely.box(xmin - 1, ymin - 1, mid, ymax + 1), shapely.box(mid, ymin - 1, xmax + 1, ymax + 1))
    else:
        mid = 0.5 * (ymin + ymax)
        halves = (shapely.box(xmin - 1, ymin - 1, xmax + 1, mid), shapely.box(xmin - 1, mid, xmax + 1, ymax + 1))
    for half in halves:
        piece = shapely.intersection(polygon, half)
        for part in _polygon_parts(piece):
            _bisect(part, out, depth + 1)


def _polygon_parts(geom):
    if geom.is_empty:
        return []
    kind = geom.geom_type
    if kind == "Polygon":
        return [geom] if geom.area > 0 else []
    if kind in ("MultiPolygon", "GeometryCollection"):
        return [p for g in geom.geoms for p in _polygon_parts(g)]
    return []
