"""Find and load the region file of one slide (for command-line and cohort runs).

Accepted files:

* GeoJSON (``.geojson``, ``.json``): polygons in level-0 pixels, read with
  :meth:`RegionMap.from_geojson` (class from the ``classification``/``class``/``label``/``name``
  property) and bound to the slide's level-0 µm/px.
* Tile tables (``.csv``, ``.parquet``, ``.pq``): read with :meth:`RegionMap.from_tiles`; they must
  carry constant ``tile`` and ``mpp`` columns (as the ``.table`` of
  :func:`~tilewright.regions.classify.classify_regions` does). A table with a ``slide_id``
  column may hold many slides; only the rows of the slide asked for are used.

``path`` is either such a file (used for the slide asked for; a multi-slide table is filtered
by ``slide_id``) or a folder holding one file per slide named ``<slide_id>.<ext>``.
"""

from __future__ import annotations

import os

import numpy as np

from tilewright.errors import RegionError

__all__ = ["load_regions", "region_file", "region_digest", "region_change", "REGION_EXTENSIONS"]

_GEOJSON = (".geojson", ".json")
_TABLES = (".csv", ".parquet", ".pq")
#: File extensions :func:`load_regions` understands.
REGION_EXTENSIONS = _GEOJSON + _TABLES


def region_file(path, slide_id):
    """The region file of ``slide_id``: ``path`` itself, or its match in a folder (None: no file).

    Raises
    ------
    RegionError
        The path does not exist, or the folder holds several files for the slide.
    """
    path = os.fspath(path)
    if os.path.isdir(path):
        matches = sorted(
            os.path.join(path, name) for name in os.listdir(path)
            if any(name.lower().endswith(ext) and name[: -len(ext)] == str(slide_id) for ext in REGION_EXTENSIONS))
        if not matches:
            return None
        if len(matches) > 1:
            raise RegionError(f"several region files for slide {slide_id!r}: "
                              f"{', '.join(os.path.basename(m) for m in matches)}; keep one", path)
        return matches[0]
    if not os.path.exists(path):
        raise RegionError("region path not found; give a GeoJSON/CSV/Parquet file or a folder of them", path)
    return path


def load_regions(path, slide_id, level0_mpp, *, slide_shape=None, class_property=None, default_class=None,
                 feature_kinds=None, warn=True):
    """The RegionMap of one slide from a region file or a folder of them.

    Parameters
    ----------
    path : str or os.PathLike
        A region file, or a folder with files named ``<slide_id>.geojson`` (or ``.json``,
        ``.csv``, ``.parquet``, ``.pq``).
    slide_id : str
        The slide's id (its file name without extensions).
    level0_mpp : float
        The slide's level-0 µm/px, to which GeoJSON pixel coordinates are bound.
    slide_shape : (int, int), optional
        Level-0 (height, width); GeoJSON parts beyond it are clipped (with a warning), and
        annotations or table tiles lying outside it are refused.
    class_property, default_class, feature_kinds : optional
        GeoJSON options (see :meth:`RegionMap.from_geojson`).
    warn : bool
        Issue repairs as warnings (True), or only record them in ``to_dict()["repairs"]``.

    Returns
    -------
    RegionMap or None
        None when the folder has no file for ``slide_id``, or a multi-slide table has no row
        for it. ``to_dict()["digest"]`` identifies the content the slide uses.

    Raises
    ------
    RegionError
        The path does not exist, the folder holds several files for the slide, the extension is
        unknown, or the file is invalid or does not fit the slide.
    """
    from tilewright.regions.regionmap import RegionMap

    path = region_file(path, slide_id)
    if path is None:
        return None
    ext = os.path.splitext(path)[1].lower()
    if ext in _GEOJSON:
        return RegionMap._geojson(path, mpp=level0_mpp, slide_shape=slide_shape, class_property=class_property,
                                  default_class=default_class, feature_kinds=feature_kinds, warn=warn)
    if ext in _TABLES:
        checked = _slide_table(path, slide_id)
        if checked is None:
            return None
        _table_fits(checked, level0_mpp, slide_shape, path)
        return _table_map(checked, path, warn)
    raise RegionError(f"unknown region file extension {ext!r}; use one of {', '.join(REGION_EXTENSIONS)}", path)


def region_digest(path, slide_id):
    """``(file, digest)`` of the region content ``slide_id`` uses now; ``(None, None)`` without one.

    The digest equals ``load_regions(...).to_dict()["digest"]`` for unchanged content: the file's
    bytes for GeoJSON, the slide's checked rows for a tile table.
    """
    from tilewright.regions.digest import file_digest, table_digest

    found = region_file(path, slide_id)
    if found is None:
        return None, None
    if os.path.splitext(found)[1].lower() in _TABLES:
        checked = _slide_table(found, slide_id)
        return found, None if checked is None else table_digest(checked)
    try:
        return found, file_digest(found)
    except OSError as exc:
        raise RegionError(f"cannot read the region file ({exc.strerror or exc}); check permissions", found) from None


def region_change(stored: dict | None, regions_path, slide_id) -> str | None:
    """Why a store's regions differ from the region file as it is now, or None when they match.

    Parameters
    ----------
    stored : dict or None
        The store's ``attrs["regions"]``.
    regions_path : str
        The run's region file or folder (``TilingConfig.regions``).
    slide_id : str
    """
    found, digest = region_digest(regions_path, slide_id)
    before = (stored or {}).get("digest")
    if digest == before:
        return None
    if found is None:
        return f"the slide's region file is gone from {regions_path}"
    if before is None:
        return f"the store records no digest of its region file; cannot tell whether {found} changed"
    return f"region file {found} changed since the store was made (content {before[:15]}... -> {digest[:15]}...)"


def _slide_table(path, slide_id):
    """The checked rows of ``slide_id`` in a table file (all rows without a slide_id column)."""
    from tilewright.regions.tiletable import check_table, read_table_file

    frame = read_table_file(path)
    if "slide_id" in frame.columns:
        frame = frame[frame["slide_id"].astype(str) == str(slide_id)]
        if len(frame) == 0:
            return None
    try:
        return check_table(frame, None, None, None, False, path, api=False)
    except RegionError as exc:
        raise RegionError(exc.reason, path) from None


def _table_fits(checked, level0_mpp, slide_shape, path):
    """Refuse a table whose tiles start outside the slide (hint when read as [y, x] they fit)."""
    if slide_shape is None or level0_mpp is None or not len(checked.yx):
        return
    extent = np.asarray(slide_shape, dtype=np.float64) * float(level0_mpp) / checked.mpp + 1.0  # table px
    outside = (checked.yx >= extent).any(axis=1)
    if not outside.any():
        return
    swapped = (checked.yx[:, ::-1] >= extent).any(axis=1)
    hint = ("; read with y and x swapped every tile would lie inside: the y and x columns look exchanged"
            if not swapped.any() else
            f"; check that the table belongs to this slide and that its mpp column ({checked.mpp:g}) is the "
            "µm/px its y, x and tile are given at")
    raise RegionError(f"{int(outside.sum())} of {len(outside)} table tiles start outside the slide "
                      f"({int(extent[0] - 1)} x {int(extent[1] - 1)} px high x wide at the table's "
                      f"{checked.mpp:g} µm/px){hint}", path)


def _table_map(checked, path, warn):
    from tilewright.regions.regionmap import RegionMap

    if warn:
        checked.warn_notes(path)
    return RegionMap._from_checked_table(checked, checked.provenance("tiles", path, repairs=list(checked.notes)))
