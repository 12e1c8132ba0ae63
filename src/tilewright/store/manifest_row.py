"""The manifest row a complete store stands for, read from its attributes alone.

A run writes a row for each slide it tiles; a store kept from an earlier run, or found in a folder
without a manifest, gets its row from what the store recorded (:func:`kept_row`). Here too: why a
store holds no tile (the filter that removed the last tiles, in the manifest's words) and the
status that says so (``skipped``, or ``all-ink`` when ink took the tissue), the stain outcome
columns and the tissue area. The row's fields are those of
:class:`tilewright.run.slide.SlideResult` (a test checks they agree).
"""

from __future__ import annotations

__all__ = ["kept_row", "skip_reason", "skip_status", "stain_columns", "tissue_mm2", "NO_TILE_STATUSES",
           "ALL_INK_SHARE"]

#: Statuses of a slide whose store holds no tile: ``skipped`` (blank, too little tissue, filters)
#: and ``all-ink`` (marker ink or the dark-region filter removed what was found: not a blank slide).
NO_TILE_STATUSES = ("skipped", "all-ink")
#: A slide without tiles whose tissue mask lost at least this share of what was found on it to
#: marker ink or the dark-region filter is ``all-ink``.
ALL_INK_SHARE = 0.5


def skip_status(attrs: dict) -> tuple[str, str]:
    """Manifest status and reason of a store that holds no tile.

    ``all-ink`` when no tile met the tissue criteria and marker ink or the dark-region filter
    removed at least :data:`ALL_INK_SHARE` of what the density threshold found (the store's
    ``tissue_mask`` attributes): the slide is not blank, its tissue (or what was taken for it)
    went to the filters, and a person should look. Else ``skipped`` with :func:`skip_reason`.
    """
    mask = attrs.get("tissue_mask") or {}
    removed = mask.get("removed_share")
    if (attrs.get("plan") or {}).get("n_tissue") == 0 and removed is not None and removed >= ALL_INK_SHARE:
        return "all-ink", (f"all tissue is ink: marker ink (or the dark-region filter) removed {removed:.0%} of what "
                           f"was found on the slide ({mask.get('ink_share', 0):.0%} ink), leaving no tile; it is not "
                           "blank: look at its QC picture in qc/, and if the 'ink' is tissue, tile it with "
                           "exclude_ink = false (exclude_dark = false) in a --config file")
    return "skipped", skip_reason(attrs)


def skip_reason(attrs: dict) -> str:
    """One line naming the filter that removed every tile of a store (tissue, regions, sharpness).

    Parameters
    ----------
    attrs : dict
        The store's attributes (``plan`` holds the tile counts after each planning filter,
        ``config`` the thresholds, ``regions`` the region source).

    Returns
    -------
    str
        For the manifest's ``error`` column of a skipped slide.
    """
    plan = attrs.get("plan") or {}
    config = attrs.get("config") or {}
    n_grid, n_tissue, n_region = (plan.get(k) for k in ("n_grid", "n_tissue", "n_region"))
    if n_grid == 0:
        return (f"the slide is smaller than one tile ({attrs.get('tile')} px at {attrs.get('mpp')} µm/px); "
                "choose a smaller --tile")
    if n_tissue == 0:
        return (f"no tile met the tissue criteria (blank slide or too little tissue; --min-tissue "
                f"{config.get('min_tissue')}): lower --min-tissue or check the tissue mask in qc/")
    n_ink = plan.get("n_ink")
    if n_ink == 0 and n_tissue:
        return (f"the ink cap removed all {n_tissue} tissue tiles (each more than --max-ink {plan.get('max_ink')} "
                "marker ink): raise --max-ink or check the ink mask in qc/")
    regions = attrs.get("regions") or {}
    if regions and n_region == 0:
        where = regions.get("path") or "the regions given"
        return (f"the region filter removed all {n_tissue} tissue tiles: none has --min-region "
                f"{regions.get('min_region')} of its area in the kept classes "
                f"({', '.join(regions.get('keep') or [])}) of {where}; check the classes kept and the file")
    n_planned = n_region if n_region is not None else n_tissue
    if config.get("min_sharpness") is not None:
        return (f"the sharpness filter removed all {n_planned} planned tiles (variance of the Laplacian below "
                f"--min-sharpness {config.get('min_sharpness')}): lower it or check the scan's focus")
    return "no tile was stored"


def stain_columns(attrs: dict) -> dict:
    """The manifest's stain columns from a store's attributes (empty when it was not checked)."""
    outcome = attrs.get("stain_outcome") or {}
    return {"stain_check": outcome.get("check", ""), "stain_delta_e_raw": outcome.get("delta_e_raw"),
            "stain_delta_e": outcome.get("delta_e")}


def tissue_mm2(a: dict) -> float | None:
    """Tissue area in mm² from a store's attributes (stores made before it was recorded: from the
    tissue fraction of the slide's area at level 0)."""
    if a.get("tissue_mm2") is not None:
        return float(a["tissue_mm2"])
    try:
        h, w = a["dimensions"]
        return round(float(a["tissue_fraction"]) * h * w * float(a["mpp_source"]) ** 2 / 1e6, 4)
    except (KeyError, TypeError, ValueError):
        return None


def kept_row(final, slide_id: str, path: str, a: dict) -> dict:
    """The manifest row of the complete store ``final`` kept from an earlier run (``a``: its
    attributes): the fields of a run's :class:`~tilewright.run.slide.SlideResult`, ``kept`` true."""
    from tilewright.slide.colour import colour_label

    n = int(a.get("n_tiles") or 0)
    status, reason = ("ok", "") if n else skip_status(a)
    return {"slide_id": slide_id, "source": path, "status": status, "error": reason, "n_tiles": n,
            "mpp_source": a.get("mpp_source"), "objective": a.get("objective"), "source_level": a.get("source_level"),
            "seconds": None, "store": str(final), "colour_profile": colour_label(a.get("colour_profile")),
            "warnings": "; ".join(a.get("warnings") or ()), "source_sha256": (a.get("source") or {}).get("sha256") or "",
            "mpp_origin": a.get("mpp_origin") or "", "kept": True, **stain_columns(a), "tissue_mm2": tissue_mm2(a),
            "bytes": 0}
