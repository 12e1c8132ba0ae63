"""Tissue-type regions: keep only chosen classes of tissue, and two-stage tiling.

Modules: ``regionmap`` (:class:`RegionMap`), ``classify`` (:func:`classify_regions`, the first
pass), ``geojson`` (reading and repairing GeoJSON polygons), ``polygons`` (exact box coverage by
polygons), ``tiletable`` (first-pass tile tables), ``load`` (:func:`load_regions`, one file per
slide id for command-line runs).
"""
