"""The density a pixel needs to count as tissue: a feature per pixel and a threshold adapted to the
slide's own glass.

References
----------
.. [1] N. Otsu, "A threshold selection method from gray-level histograms", IEEE Transactions on
       Systems, Man, and Cybernetics 9(1):62-66, 1979.
.. [2] A. C. Ruifrok and D. A. Johnston, "Quantification of histochemical staining by color
       deconvolution", Analytical and Quantitative Cytology and Histology 23(4):291-299, 2001.
"""

from __future__ import annotations

import math

import numpy as np

from .density import channel_max, channel_min, find_glass, od_lookup, od_tables
from .exclusions import bands as _bands, smooth as _smooth
from .otsu import otsu_threshold

__all__ = ["tissue_feature", "density_threshold", "METHODS", "NOISE_SIGMAS", "MIN_FLOOR_OD", "NO_GLASS_FLOOR_OD"]

METHODS = ("od-otsu", "saturation-otsu")
_LOG_FLOOR = 1e-3  # OD below this is glass noise; keeps log10 finite
#: The floor of the density threshold is the glass's own median density plus this many robust
#: standard deviations of it (its noise), and never below MIN_FLOOR_OD (mean OD).
NOISE_SIGMAS = 6.0
MIN_FLOOR_OD = 0.008
#: Threshold used on a slide that shows no glass (mean OD against the fallback glass colour).
NO_GLASS_FLOOR_OD = 0.02


def tissue_feature(rgb: np.ndarray, mpp: float, *, method: str = "od-otsu", smooth_um: float = 8.0,
                   glass=None) -> np.ndarray:
    """The per-pixel quantity a method thresholds (smoothed by a Gaussian of ``smooth_um`` µm).

    ``"od-otsu"``: mean optical density over R, G, B relative to the glass colour.
    ``"saturation-otsu"``: HSV saturation ``(max - min) / max`` in [0, 1].

    Returns
    -------
    ndarray (H, W) float32
    """
    if method not in METHODS:
        raise ValueError(f"unknown tissue method {method!r}; choose one of {METHODS}")
    sigma = smooth_um / mpp
    h, w = rgb.shape[:2]
    feature = np.empty((h, w), np.float32)
    if method == "od-otsu":
        tables = od_tables(find_glass(rgb).colour if glass is None else glass)
    for r0, r1, a0, a1 in _bands(h, sigma):
        band = rgb[a0:a1]
        if method == "od-otsu":  # mean optical density over R, G, B, from 256-entry tables
            od = od_lookup(np.ascontiguousarray(band), tables)
            f = od[..., 0] + od[..., 1]
            f += od[..., 2]
            f /= np.float32(3)
            del od
        else:
            top = channel_max(band).astype(np.float32)
            f = top - channel_min(band)
            f /= np.maximum(top, np.float32(1.0))
        feature[r0:r1] = _smooth(f, sigma)[r0 - a0:r1 - a0]
    return feature


def density_threshold(feature: np.ndarray, survey, *, method: str = "od-otsu", sensitivity: float = 1.0,
                      min_od_floor: float | None = None, max_od_ceiling: float = 0.15,
                      min_saturation: float = 0.08):
    """The tissue threshold of a feature map and how it was reached.

    ``"od-otsu"``: Otsu's threshold on the log10 of the mean optical density (glass is a narrow
    peak near zero OD while pale and dense tissue span a decade, so the log scale keeps pale
    tissue with the tissue class), kept between a floor and ``max_od_ceiling``. The floor is the
    glass candidates' median density plus :data:`NOISE_SIGMAS` robust standard deviations
    (1.4826 median absolute deviations) of it, at least :data:`MIN_FLOOR_OD`: it follows the
    slide's own glass noise, so pale tissue on clean glass is kept and grainy glass is not split
    (or ``min_od_floor`` when given). Without glass, Otsu would split tissue from tissue: the
    threshold is :data:`NO_GLASS_FLOOR_OD`. Floor, ceiling and that level are divided by
    ``sensitivity``. ``"saturation-otsu"``: Otsu on the saturation, at least ``min_saturation``.

    Parameters
    ----------
    feature : ndarray (H, W) float32
        From :func:`tissue_feature`.
    survey : GlassSurvey
        From :func:`tilewright.tissue.density.find_glass` (``found`` and ``candidates`` used).

    Returns
    -------
    threshold, otsu, floor, noise : float
        ``otsu`` and ``noise`` (the glass's robust standard deviation) are NaN when not computed.

    References
    ----------
    .. [1] N. Otsu, IEEE Trans. Systems, Man, and Cybernetics 9(1):62-66, 1979.
    """
    if method != "od-otsu":
        otsu = otsu_threshold(feature)
        threshold = max(otsu, min_saturation)
        return threshold, otsu, threshold, math.nan
    level, noise = 0.0, math.nan
    found = bool(survey.found)
    if found and survey.candidates.any():  # the glass's own density: its level and noise (robust)
        g = feature[survey.candidates]
        if g.size > 1_000_000:  # an evenly strided subset is plenty for a median and a MAD
            g = g[:: g.size // 1_000_000 + 1]
        level = float(np.median(g))
        noise = float(1.4826 * np.median(np.abs(g - level)))
        del g
    if min_od_floor is not None:
        floor = min_od_floor
    elif found:
        floor = max(MIN_FLOOR_OD, level + NOISE_SIGMAS * (0.0 if math.isnan(noise) else noise))
    else:
        floor = NO_GLASS_FLOOR_OD
    floor /= sensitivity
    if not found:
        return floor, math.nan, floor, noise
    logs = np.maximum(feature, _LOG_FLOOR)
    otsu = 10.0 ** otsu_threshold(np.log10(logs, out=logs))
    del logs
    ceiling = max(max_od_ceiling / sensitivity, floor)
    return min(max(otsu, floor), ceiling), otsu, floor, noise
