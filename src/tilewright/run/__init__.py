"""Running the pipeline: one slide (tile_slide) and a cohort on dask (tile_cohort)."""
