"""Why a slide's store holds no tile: the filter that removed the last tiles, in the manifest's words."""

from __future__ import annotations

__all__ = ["skip_reason"]


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
