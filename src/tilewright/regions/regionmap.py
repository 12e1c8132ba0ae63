"""RegionMap: where on a slide each tissue type lies, and how much of any tile falls inside.

A region map answers one question for tile planning: what fraction of a box (given in pixels at
some µm/px) lies inside the union of the chosen classes? It is built from one of three sources:

* polygons (GeoJSON, level-0 pixels) — fractions are exact intersection areas
  (:class:`~tilewright.regions.polygons.PolygonCoverage`);
* a label raster aligned to the slide origin at any µm/px;
* a first-pass tile table (from a tissue-type classifier, see
  :func:`~tilewright.regions.classify.classify_regions`).

Rasters and tile tables are measured exactly as piecewise-constant images with a summed-area
table (:mod:`tilewright.tissue.raster`, Crow 1984).

References
----------
.. [1] F. C. Crow, "Summed-area tables for texture mapping", SIGGRAPH '84, Computer Graphics
       18(3):207-212, 1984.
.. [2] H. Butler et al., "The GeoJSON Format", IETF RFC 7946, 2016.
"""

from __future__ import annotations

import math
import os

import numpy as np

from tilewright.errors import RegionError

__all__ = ["RegionMap"]


class RegionMap:
    """Tissue-type regions of one slide, to keep or drop tiles by class.

    Do not call the constructor; use :meth:`from_geojson`, :meth:`from_raster`,
    :meth:`from_tiles` or :func:`tilewright.classify_regions`.

    Attributes
    ----------
    classes : tuple of str
        The class names, in order.
    level0_mpp : float or None
        Level-0 µm/px of the slide that polygon coordinates refer to (None until bound with
        :meth:`with_mpp`; raster and tile maps do not need it).
    table : pandas.DataFrame or None
        For maps made from a tile table or a classifier: the per-tile table (y, x, tile, mpp,
        class and, when soft, probabilities), ready to save with ``to_csv``/``to_parquet`` and
        reload with :meth:`from_tiles`.

    Examples
    --------
    >>> square = {"type": "Feature", "properties": {"classification": "tumour"},
    ...           "geometry": {"type": "Polygon",
    ...                        "coordinates": [[[0, 0], [400, 0], [400, 400], [0, 400], [0, 0]]]}}
    >>> regions = RegionMap.from_geojson(square, mpp=0.25)
    >>> float(regions.fraction("tumour", 0, 150, 100, 100, mpp=0.5))  # half inside
    0.5
    """

    def __init__(self, classes, *, kind, provenance, shapes=None, level0_mpp=None,
                 labels=None, label_values=None, coverage=None, raster_mpp=None, table=None,
                 raster_origin=(0.0, 0.0)):
        self._classes = tuple(classes)
        self._kind = kind
        self._provenance = dict(provenance)
        self._shapes = shapes
        self._level0_mpp = None if level0_mpp is None else _positive(level0_mpp, "level0_mpp")
        self._labels = labels
        self._label_values = label_values
        self._coverage = coverage
        self._raster_mpp = raster_mpp
        self._raster_origin = np.asarray(raster_origin, dtype=np.float64)  # (y, x) µm of the raster's corner
        self._table = table
        self._cache = {}  # keep-set -> PolygonCoverage or summed-area table (per instance)
        self._warned = set()  # absent keep-sets already warned about

    # construction ---------------------------------------------------------------------------
    @classmethod
    def from_geojson(cls, source, *, mpp=None, class_property=None, classes=None, default_class=None,
                     slide_shape=None, feature_kinds=None, object_types=None) -> "RegionMap":
        """Regions from GeoJSON polygons in level-0 pixel coordinates.

        Parameters
        ----------
        source : str, os.PathLike, dict or list
            A ``.geojson``/``.json`` file or decoded GeoJSON: FeatureCollection, Feature,
            GeometryCollection or a geometry; Polygon and MultiPolygon (with holes) carry area.
            Coordinates are ``[x, y]`` level-0 pixels (origin top-left, y down).
        mpp : float, optional
            Level-0 µm/px of the slide. Needed before measuring boxes given at other µm/px;
            may instead be bound later with :meth:`with_mpp` (``regions.with_mpp(slide.mpp)``).
        class_property : str, optional
            Feature property holding the class name; by default the first present of
            ``"classification"``, ``"class"``, ``"label"`` (a feature's ``"name"`` is not a class
            unless named here). Its value is a string, a number, or an object with a ``"name"``
            member. Names differing only in case or spacing are one class.
        classes : sequence of str, optional
            Allowed classes in order; a feature of another class raises RegionError.
            Default: every class found, in order of first appearance.
        default_class : str, optional
            Class of features without a class property (default: they are skipped, warned).
        slide_shape : (int, int), optional
            Level-0 (height, width); polygon parts beyond it are clipped away with a warning,
            and a file with more than half of its area outside is refused. Parts at negative
            coordinates are always clipped.
        feature_kinds : str or sequence of str, optional
            Kinds of feature to read, as named by an ``objectType``/``object_type`` property;
            default ``("annotation",)`` (detections and other objects are skipped, warned);
            ``"all"`` reads every feature. (``object_types=``: its old name, deprecated.)

        Returns
        -------
        RegionMap

        Raises
        ------
        RegionError
            Unreadable or invalid file, malformed geometry, unknown or missing class, or no
            polygon area inside the slide.

        Warns
        -----
        RegionRepairWarning
            For each documented repair: unclosed rings closed, invalid polygons repaired ring by
            ring (area as drawn and after repair reported), out-of-bounds parts clipped,
            null/empty/point/line geometry, unclassified features and other object types
            skipped, class spellings merged (see :mod:`tilewright.regions.geojson`).

        References
        ----------
        .. [1] H. Butler et al., "The GeoJSON Format", IETF RFC 7946, 2016.
        """
        from tilewright.regions.geojson import kinds_option

        kinds = kinds_option(feature_kinds, object_types, "RegionMap.from_geojson")
        return cls._geojson(source, mpp=mpp, class_property=class_property, classes=classes,
                            default_class=default_class, slide_shape=slide_shape, feature_kinds=kinds)

    @classmethod
    def _geojson(cls, source, *, mpp=None, warn=True, **options) -> "RegionMap":
        from tilewright.regions.digest import file_digest, json_digest
        from tilewright.regions.geojson import read_geojson

        parsed = read_geojson(source, warn=warn, **options)
        path = os.fspath(source) if isinstance(source, (str, os.PathLike)) else None
        provenance = {"kind": "geojson", "path": path, "n_features": parsed.n_features,
                      "repairs": list(parsed.repairs),
                      "digest": file_digest(path) if path is not None else json_digest(source)}
        return cls(tuple(parsed.shapes), kind="geojson", provenance=provenance, shapes=parsed.shapes,
                   level0_mpp=mpp)

    @classmethod
    def from_raster(cls, labels, mpp, classes) -> "RegionMap":
        """Regions from a label image aligned to the slide origin at ``mpp`` µm/px.

        Parameters
        ----------
        labels : array_like (H, W) of integers or booleans
            Pixel ``(i, j)`` covers ``[i * mpp, (i + 1) * mpp)`` µm down and
            ``[j * mpp, (j + 1) * mpp)`` µm across the slide.
        mpp : float
            µm/px of ``labels``.
        classes : sequence of str or dict
            A list names label values ``0, 1, ...`` in order; a dict maps label values to names
            (several values may share a name). Values not named belong to no class (for
            example background 0 when the dict does not mention it).

        Returns
        -------
        RegionMap

        Raises
        ------
        RegionError
            Labels not a 2-D integer image, bad ``mpp`` or empty ``classes``.
        """
        from tilewright.regions.labels import label_classes

        labels, values = label_classes(labels, classes)
        mpp = _positive(mpp, "mpp")
        provenance = {"kind": "raster", "path": None, "mpp": mpp, "shape": list(labels.shape)}
        return cls(tuple(values), kind="raster", provenance=provenance, labels=labels,
                   label_values={k: tuple(v) for k, v in values.items()}, raster_mpp=mpp)

    @classmethod
    def from_tiles(cls, table, tile=None, mpp=None, *, classes=None, soft=False) -> "RegionMap":
        """Regions from a first-pass per-tile table.

        Parameters
        ----------
        table : pandas.DataFrame, str or os.PathLike
            A DataFrame or a ``.csv``/``.parquet`` file with columns ``y``, ``x`` (top-left
            corners in pixels at ``mpp``) and either ``class`` (a name or integer id per tile) or
            one probability column per class. Tiles not listed belong to no class.
        tile : int, optional
            First-pass tile size in pixels; default: the table's constant ``tile`` column.
        mpp : float, optional
            µm/px of the table; default: the table's constant ``mpp`` column.
        classes : sequence of str, optional
            Class names (integer ids index into it) or the probability columns to use.
        soft : bool
            With probabilities: False (default) gives each tile its most probable class;
            True keeps the probabilities, so a fraction is the expected covered fraction.

        Returns
        -------
        RegionMap

        Raises
        ------
        RegionError
            See :func:`tilewright.regions.tiletable.read_tile_table`.
        """
        from tilewright.regions.tiletable import read_tile_table

        checked = read_tile_table(table, tile, mpp, classes=classes, soft=soft)
        return cls._from_checked_table(checked, checked.provenance("tiles", checked.path))

    @classmethod
    def _from_checked_table(cls, checked, provenance) -> "RegionMap":
        coverage, raster_mpp, origin = checked.coverage()
        return cls(checked.classes, kind=provenance["kind"], provenance=provenance,
                   coverage=dict(zip(checked.classes, coverage)), raster_mpp=raster_mpp,
                   table=checked.frame(), raster_origin=origin)

    def with_mpp(self, level0_mpp: float) -> "RegionMap":
        """A copy bound to the slide's level-0 µm/px (needed by polygon maps; no-op otherwise).

        Parameters
        ----------
        level0_mpp : float
            µm per level-0 pixel of the slide the polygons were drawn on (``slide.mpp``).

        Returns
        -------
        RegionMap
        """
        if self._shapes is None:
            return self
        clone = RegionMap(self._classes, kind=self._kind, provenance=self._provenance, shapes=self._shapes,
                          level0_mpp=level0_mpp)
        clone._cache = self._cache  # coverage objects live in level-0 pixels: valid at any binding
        return clone

    # queries --------------------------------------------------------------------------------
    @property
    def classes(self) -> tuple:
        return self._classes

    @property
    def level0_mpp(self):
        return self._level0_mpp

    @property
    def table(self):
        return None if self._table is None else self._table.copy()

    def present(self, keep) -> tuple:
        """``(present, absent)``: the kept classes these regions have (spelled as in
        :attr:`classes`) and the kept names they lack (covering nothing). Names match ignoring
        case and spacing; a string is split on commas (:func:`~tilewright.regions.classnames.match_keep`).
        """
        from tilewright.regions.classnames import match_keep

        return match_keep(self._classes, keep, self._provenance.get("path"))

    def resolve(self, keep) -> tuple:
        """The kept classes these regions have; absent ones cover nothing and are warned once.

        Raises
        ------
        RegionError
            Empty selection, or none of the kept names is one of :attr:`classes`.
        """
        from tilewright.regions.classnames import none_kept

        present, absent = self.present(keep)
        if not present:
            raise none_kept(absent, self._classes, self._provenance.get("path"))
        if absent and absent not in self._warned:
            import warnings

            from tilewright.regions.geojson import RegionRepairWarning

            self._warned.add(absent)
            warnings.warn(f"{self._provenance.get('path') or 'regions'}: kept class(es) "
                          f"{', '.join(map(repr, absent))} absent; they cover nothing here",
                          RegionRepairWarning, stacklevel=3)
        return present

    def fractions(self, keep, yx, h, w, mpp) -> np.ndarray:
        """Fraction of each box inside the union of the classes in ``keep``.

        Parameters
        ----------
        keep : str or sequence of str
            Class name(s) (a comma-separated string is split; names match ignoring case and
            spacing). Kept names these regions lack cover nothing (warned once); when none of
            them is here, RegionError.
        yx : array_like (N, 2) or (2,)
            Top-left corners of the boxes in pixels at ``mpp``.
        h, w : float
            Box height and width in pixels at ``mpp``.
        mpp : float
            µm/px of ``yx``, ``h`` and ``w``.

        Returns
        -------
        ndarray (N,) float32 in [0, 1]

        Raises
        ------
        RegionError
            Unknown class, a polygon map not bound to a level-0 µm/px, or bad box arguments.
        """
        names = self.resolve(keep)
        yx = np.asarray(yx, dtype=np.float64)
        if yx.ndim == 1 and yx.size == 2:
            yx = yx[None, :]
        if yx.ndim != 2 or yx.shape[1] != 2:
            raise RegionError(f"yx must have shape (N, 2), got {yx.shape}")
        mpp = _positive(mpp, "mpp")
        h = _positive(h, "h")
        w = _positive(w, "w")
        if len(yx) == 0:
            return np.zeros(0, dtype=np.float32)
        if self._shapes is not None:
            return self._polygon_fractions(names, yx, h, w, mpp)
        from tilewright.tissue.raster import box_fractions

        return box_fractions(self._sat(names), self._raster_mpp, yx - self._raster_origin / mpp, h, w, mpp)

    def fraction(self, cls, y, x, h, w, mpp) -> float:
        """Fraction of one box (pixels at ``mpp``, top-left ``(y, x)``) inside the class(es) ``cls``."""
        return float(self.fractions(cls, [[y, x]], h, w, mpp)[0])

    def to_dict(self) -> dict:
        """A small JSON-safe summary of the region source, for store provenance."""
        out = dict(self._provenance)
        out["classes"] = list(self._classes)
        if self._level0_mpp is not None:
            out["level0_mpp"] = self._level0_mpp
        return out

    def __repr__(self):
        where = self._provenance.get("path") or "in memory"
        return f"RegionMap({self._kind}, classes={list(self._classes)}, source={where})"

    def __getstate__(self):
        state = dict(self.__dict__)
        state["_cache"] = {}  # rebuilt lazily where the map is used (for example a worker process)
        return state

    # internals ------------------------------------------------------------------------------
    def _polygon_fractions(self, names, yx, h, w, mpp):
        if self._level0_mpp is None:
            raise RegionError("polygon regions are in level-0 pixels but the slide's level-0 µm/px is "
                              "unknown; use RegionMap.from_geojson(..., mpp=slide.mpp) or "
                              "regions.with_mpp(slide.mpp)", self._provenance.get("path"))
        coverage = self._cache.get(names)
        if coverage is None:
            import shapely

            from tilewright.regions.polygons import PolygonCoverage

            geoms = [self._shapes[n] for n in names if not self._shapes[n].is_empty]
            union = shapely.union_all(geoms) if len(geoms) > 1 else (geoms[0] if geoms else None)
            coverage = self._cache[names] = PolygonCoverage(union)
        f = mpp / self._level0_mpp
        y0, x0 = yx[:, 0] * f, yx[:, 1] * f
        return coverage.fractions(x0, y0, x0 + w * f, y0 + h * f).astype(np.float32)

    def _sat(self, names):
        sat = self._cache.get(names)
        if sat is None:
            from tilewright.tissue.raster import summed_area_table

            if self._labels is not None:
                values = [v for n in names for v in self._label_values[n]]
                raster = np.isin(self._labels, values)
            else:
                raster = np.zeros_like(self._coverage[names[0]])
                for n in names:
                    raster += self._coverage[n]
                np.minimum(raster, 1.0, out=raster)
            sat = self._cache[names] = summed_area_table(raster)
        return sat


def _positive(value, name):
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise RegionError(f"{name} must be a positive number, got {value!r}") from None
    if not (math.isfinite(v) and v > 0):
        raise RegionError(f"{name} must be a positive number, got {value!r}")
    return v
