"""Tissue: masks, artifact filters and tile planning.

- :mod:`.mask` — ``tissue_mask`` / ``TissueMask`` (optical density + Otsu with a floor, clean-up,
  ink and optional dark-debris exclusion; box tissue fractions at any µm/px)
- :mod:`.plan` — ``plan_tiles`` / ``TilePlan`` (grid anchored at the origin, edge rule, regions,
  reproducible spread ``max_tiles`` sampling)
- :mod:`.sharpness` — ``sharpness`` (variance of the Laplacian per tile)
- :mod:`.overlay` — ``render_overlay`` (QC picture drawn with OpenCV)
- :mod:`.threshold` — the density feature and a threshold adapted to the slide's own glass
- :mod:`.exclusions` — ink (over glass and tissue) and dark debris, in bands of rows
- :mod:`.plane` — the slide's H&E plane, fitted with the Ruifrok & Johnston plane as the prior
- :mod:`.density`, :mod:`.ink`, :mod:`.otsu`, :mod:`.raster` — the pieces they are built from

Nothing is imported here, so importing the package does no work.
"""
