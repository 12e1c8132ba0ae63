"""The cohort's default stain target: the median of its slides' own stain estimates."""

from __future__ import annotations

import numpy as np

from tilewright.errors import TilewrightError
from tilewright.run.config import TilingConfig

__all__ = ["cohort_target", "slide_estimate", "slide_glass"]

#: Slides sampled (evenly over the sorted list) to build the cohort target.
MAX_SLIDES = 24


def slide_glass(thumbnail, mask) -> list[float] | None:
    """RGB of the slide's blank glass (the incident light of the Beer–Lambert law), or None
    for white: the median colour of the thumbnail's background away from tissue
    (:func:`tilewright.stain.density.estimate_glass`; common practice)."""
    from tilewright.stain.density import estimate_glass

    params = getattr(mask, "params", None) or {}
    if params.get("glass_found") is False:  # no glass on the slide: the mask's fallback colour
        glass = [float(v) for v in params.get("glass", (255.0, 255.0, 255.0))]
        return None if min(glass) >= 255.0 else glass
    background = ~np.asarray(mask.array, bool)
    for extra in ("ink", "dark"):
        if getattr(mask, extra, None) is not None:
            background &= ~np.asarray(getattr(mask, extra), bool)
    glass = estimate_glass(thumbnail, background)
    return None if glass is None else [float(v) for v in glass]


def slide_estimate(path: str, config: dict, mpp: float | None) -> dict | None:
    """A normalizer fitted to one slide's sample of tissue tiles, its optical density measured
    against the slide's own glass colour (None when impossible, or for Macenko when the estimate
    is implausible: :func:`tilewright.stain.estimate.implausible`)."""
    from tilewright.run.reference import sample_tiles
    from tilewright.slide.open import open as open_slide
    from tilewright.stain.registry import make_normalizer
    from tilewright.tissue.mask import tissue_mask
    from tilewright.tissue.plan import plan_tiles

    cfg = TilingConfig.from_dict(config)
    try:
        with open_slide(path, mpp=mpp, verify=cfg.verify_jpeg, colour_profile=cfg.colour_profile) as slide:
            view = cfg.view(slide)
            thumbnail = slide.thumbnail(cfg.mask_mpp)  # read once: the mask and the glass colour share it
            mask = tissue_mask(thumbnail, mpp=getattr(thumbnail, "mpp", cfg.mask_mpp), **cfg.mask_options())
            plan = plan_tiles(view, mask, tile=cfg.tile, stride=cfg.stride, min_tissue=cfg.min_tissue,
                              max_tiles=cfg.stain_sample, seed=cfg.seed)
            sample = sample_tiles(view, plan.yx, cfg.tile, cfg.stain_sample, cfg.seed, threads=cfg.threads)
            glass = slide_glass(thumbnail, mask)
        if len(sample) == 0:
            return None
        fitted = make_normalizer(cfg.normalizer).fit(sample, glass=glass)
        if cfg.normalizer == "macenko":
            from tilewright.stain.estimate import StainProfile, implausible

            if implausible(StainProfile(fitted.stain_matrix, fitted.max_concentrations, 0)):
                return None  # a failed estimate does not pull the cohort's median
        return fitted.to_dict()
    except TilewrightError:
        return None  # the slide's own run will report why


def cohort_target(paths, config: TilingConfig, mpps, compute) -> dict | None:
    """Median target over up to :data:`MAX_SLIDES` slides, or None if no slide could be estimated.

    ``compute(fn, args_list)`` runs the estimates (in this process or on the cluster).
    """
    from tilewright.stain.registry import normalizer_from_dict

    order = np.argsort(paths)
    if len(order) > MAX_SLIDES:
        order = order[np.linspace(0, len(order) - 1, MAX_SLIDES).round().astype(int)]
    args = [(paths[i], config.to_dict(), mpps[i]) for i in order]
    fitted = [normalizer_from_dict(d) for d in compute(slide_estimate, args) if d is not None]
    if not fitted:
        return None
    return type(fitted[0]).from_median(fitted).to_dict()
