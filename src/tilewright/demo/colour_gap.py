"""How much of a between-site colour gap colour management alone closes (before stain normalization).

Each slide's tissue colour is the mean CIELAB of its tissue pixels at ``mpp`` (the tissue mask of
the colour-managed thumbnail, so both readings average the same pixels); a site's colour is the
mean over its slides; the gap between two sites is the CIEDE2000 colour difference of their
colours. The gap is measured twice: with every slide's embedded ICC profile ignored (device RGB
taken as sRGB, what a pipeline without colour management sees) and applied.

References
----------
.. [1] Sharma, G., Wu, W., Dalal, E. N. (2005). The CIEDE2000 color-difference formula:
   implementation notes, supplementary test data, and mathematical observations. Color Research
   & Application 30(1):21-30 (computed by ``skimage.color.deltaE_ciede2000``).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["SiteGap", "slide_tissue_lab", "site_colour_gap"]


@dataclass(frozen=True)
class SiteGap:
    """The colour gap between two sites with profiles ignored and applied (CIEDE2000)."""

    sites: tuple
    ignored: float
    applied: float

    @property
    def closed(self) -> float:
        """Fraction of the gap that applying the profiles closes (negative if it widens)."""
        return 1.0 - self.applied / self.ignored if self.ignored > 0 else 0.0

    def sentence(self) -> str:
        a, b = self.sites
        return (f"colour management alone closes {100 * self.closed:.0f} % of the {a} / {b} colour gap "
                f"(CIEDE2000 of mean tissue colour {self.ignored:.1f} with profiles ignored, "
                f"{self.applied:.1f} applied), before any stain normalization")


def slide_tissue_lab(path, *, mpp: float = 8.0) -> dict | None:
    """Mean CIELAB of a slide's tissue pixels, profile ignored and applied (None without tissue).

    Returns
    -------
    dict or None
        ``{"ignore": (L, a, b), "apply": (L, a, b)}``.
    """
    from skimage.color import rgb2lab

    from tilewright.slide.open import open as open_slide
    from tilewright.tissue.mask import tissue_mask

    pictures = {}
    for mode in ("apply", "ignore"):
        with open_slide(path, colour_profile=mode) as slide:
            pictures[mode] = slide.thumbnail(mpp)
    mask = np.asarray(tissue_mask(pictures["apply"], mpp=mpp).array, bool)
    if not mask.any():
        return None
    h, w = mask.shape
    return {mode: tuple(rgb2lab(rgb[:h, :w][mask][None])[0].mean(axis=0)) for mode, rgb in pictures.items()}


def site_colour_gap(slides_by_site: dict, *, mpp: float = 8.0) -> SiteGap:
    """The gap between two sites' tissue colour, profiles ignored and applied.

    Parameters
    ----------
    slides_by_site : dict
        Two sites -> their slide paths.
    mpp : float
        Resolution of the colour measurement (thumbnails).

    Returns
    -------
    SiteGap
    """
    from skimage.color import deltaE_ciede2000

    if len(slides_by_site) != 2:
        raise ValueError(f"give exactly two sites, got {len(slides_by_site)}")
    centres = {}
    for site, paths in slides_by_site.items():
        labs = [lab for lab in (slide_tissue_lab(p, mpp=mpp) for p in paths) if lab is not None]
        if not labs:
            raise ValueError(f"site {site!r} has no slide with tissue")
        centres[site] = {mode: np.mean([lab[mode] for lab in labs], axis=0) for mode in ("ignore", "apply")}
    a, b = centres
    gap = {mode: float(deltaE_ciede2000(centres[a][mode], centres[b][mode])) for mode in ("ignore", "apply")}
    return SiteGap((a, b), gap["ignore"], gap["apply"])
