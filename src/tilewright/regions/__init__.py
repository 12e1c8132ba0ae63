"""Tissue-type regions: keep only chosen classes of tissue, and two-stage tiling.

Modules: ``regionmap`` (:class:`RegionMap`), ``classify`` (:func:`classify_regions`, the first
pass), ``geojson`` (reading GeoJSON annotations: classes, feature kinds, repairs) and
``geojson_structure`` (the GeoJSON objects themselves), ``repair`` (ring-by-ring polygon repair,
the slide-bounds check), ``polygons`` (exact box coverage by polygons), ``tiletable``
(first-pass tile tables), ``labels`` (label rasters), ``classnames`` (class spellings and keep
lists), ``digest`` (content digests a store records), ``load`` (:func:`load_regions`, one file
per slide id for command-line and cohort runs, and the resume check of region content).
"""
