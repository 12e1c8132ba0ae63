"""The zarr v3 tile store (one group a slide) and the cohort manifest."""
