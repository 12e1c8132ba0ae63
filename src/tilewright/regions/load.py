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

from tilewright.errors import RegionError

__all__ = ["load_regions", "REGION_EXTENSIONS"]

_GEOJSON = (".geojson", ".json")
_TABLES = (".csv", ".parquet", ".pq")
#: File extensions :func:`load_regions` understands.
REGION_EXTENSIONS = _GEOJSON + _TABLES


def load_regions(path, slide_id, level0_mpp, *, slide_shape=None):
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
        Level-0 (height, width); GeoJSON parts beyond it are clipped (with a warning).

    Returns
    -------
    RegionMap or None
        None when the folder has no file for ``slide_id``, or a multi-slide table has no row
        for it.

    Raises
    ------
    RegionError
        The path does not exist, the folder holds several files for the slide, the extension is
        unknown, or the file is invalid.
    """
    from tilewright.regions.regionmap import RegionMap

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
        path = matches[0]
    elif not os.path.exists(path):
        raise RegionError("region path not found; give a GeoJSON/CSV/Parquet file or a folder of them", path)
    ext = os.path.splitext(path)[1].lower()
    if ext in _GEOJSON:
        return RegionMap.from_geojson(path, mpp=level0_mpp, slide_shape=slide_shape)
    if ext in _TABLES:
        return _load_table(path, slide_id)
    raise RegionError(f"unknown region file extension {ext!r}; use one of {', '.join(REGION_EXTENSIONS)}", path)


def _load_table(path, slide_id):
    from tilewright.regions.regionmap import RegionMap
    from tilewright.regions.tiletable import read_table_file, read_tile_table

    frame = read_table_file(path)
    if "slide_id" in frame.columns:
        frame = frame[frame["slide_id"].astype(str) == str(slide_id)]
        if len(frame) == 0:
            return None
    try:
        checked = read_tile_table(frame)
    except RegionError as exc:
        raise RegionError(exc.reason, path) from None
    provenance = {"kind": "tiles", "path": path, "tile": checked.tile, "mpp": checked.mpp,
                  "n_tiles": int(len(checked.yx)), "soft": checked.soft}
    return RegionMap._from_checked_table(checked, provenance)
