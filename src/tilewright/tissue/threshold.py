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

__all__ = ["tissue_feature", "density_threshold", "glass_noise", "METHODS", "NOISE_SIGMAS", "MIN_FLOOR_OD", "QUANT_NOISE_LEVELS", "grey_level_od", "NO_GLASS_FLOOR_OD"]

METHODS = ("od-noise", "od-otsu", "saturation-otsu")
_LOG_FLOOR = 1e-3  # OD below this is glass noise; keeps log10 finite
#: The floor of the density threshold is the glass's own density level (its mode) plus this many robust
#: standard deviations of it (its noise), and never below MIN_FLOOR_OD (mean OD).
NOISE_SIGMAS = 6.0
MIN_FLOOR_OD = 0.008
#: The glass's noise is never taken below this share of one grey level of its own colour (mean OD of
#: one 8-bit step down from the glass). Rounding to 8 bits alone leaves 0.29 of a level (1/sqrt(12));
#: a light gradient divided out leaves a sawtooth of rounding bands, and JPEG flattens whole blocks to
#: one value, so the values below the glass's mode can sit within a hundredth of a level of it and
#: the measured noise collapse (the glass itself then crossed the threshold). 0.5: measured on the
#: tuning families of issue 28 (round 4).
QUANT_NOISE_LEVELS = 0.5
#: Threshold used on a slide that shows no glass (mean OD against the fallback glass colour).
NO_GLASS_FLOOR_OD = 0.02


def tissue_feature(rgb: np.ndarray, mpp: float, *, method: str = "od-noise", smooth_um: float = 8.0,
                   glass=None) -> np.ndarray:
    """The per-pixel quantity a method thresholds (smoothed by a Gaussian of ``smooth_um`` µm).

    ``"od-noise"``, ``"od-otsu"``: mean optical density over R, G, B relative to the glass colour.
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
    density = method != "saturation-otsu"
    if density:
        tables = od_tables(find_glass(rgb).colour if glass is None else glass)
    for r0, r1, a0, a1 in _bands(h, sigma):
        band = rgb[a0:a1]
        if density:  # mean optical density over R, G, B, from 256-entry tables
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


def grey_level_od(colour) -> float:
    """Mean optical density, over R, G, B, of one 8-bit grey level below the glass colour
    (``log10(g / (g - 1))`` a channel): the finest density step a thumbnail can show on that glass."""
    g = np.clip(np.asarray(colour, dtype=np.float64), 2.0, 255.0)
    return float(np.mean(np.log10(g / (g - 1.0))))


def glass_noise(values) -> tuple[float, float]:
    """Level and noise of the glass's density from the values of glass-like pixels.

    Faint tissue can look like glass pixel by pixel (bright and nearly grey), so some of the
    candidates are tissue, on a slide mostly covered by faint tissue most of them; tissue only
    ever adds density. The level is therefore the lowest peak of the values' histogram (64 bins
    from the 0.5th to the 95th percentile, smoothed over 7; a peak holding at least a tenth of
    the highest, not in the lowest bin, where densities clipped at zero pile up),
    not their median, and the noise is the robust standard deviation of the values *below* it
    (1.4826 times their median distance to the level): glass noise is symmetric, and that side
    holds no tissue.

    Returns
    -------
    level, noise : float
    """
    g = np.asarray(values, dtype=np.float64).reshape(-1)
    if g.size > 1_000_000:  # an evenly strided subset is plenty for a mode and a deviation
        g = g[:: g.size // 1_000_000 + 1]
    lo, hi = (float(v) for v in np.quantile(g, [0.005, 0.95]))
    if hi - lo <= 1e-9:
        return float(np.median(g)), 0.0
    counts, edges = np.histogram(g, bins=64, range=(lo, hi))
    counts = np.convolve(counts, [1, 2, 3, 4, 3, 2, 1], mode="same")
    padded = np.r_[-1, counts, -1]
    peaks = (counts >= padded[:-2]) & (counts >= padded[2:]) & (counts >= 0.1 * counts.max())
    peaks[0] = False  # the lowest bin is no peak of its own (clipped densities pile up there)
    peaks[int(np.argmax(counts))] = True
    k = int(np.flatnonzero(peaks)[0])
    level = 0.5 * (edges[k] + edges[k + 1])
    below = level - g[g <= level]
    noise = 1.4826 * float(np.median(below)) if below.size >= 20 else 1.4826 * float(np.median(np.abs(g - level)))
    return level, noise


def density_threshold(feature: np.ndarray, survey, *, method: str = "od-noise", sensitivity: float = 1.0,
                      min_od_floor: float | None = None, max_od_ceiling: float = 0.15,
                      min_saturation: float = 0.08):
    """The tissue threshold of a feature map and how it was reached.

    ``"od-noise"`` (default): the mean optical density over glass must clear the glass's own
    noise: the floor is the glass candidates' density level plus :data:`NOISE_SIGMAS` robust
    standard deviations of it (:func:`glass_noise`; the deviation never under
    :data:`QUANT_NOISE_LEVELS` of a grey level, :func:`grey_level_od`), at least :data:`MIN_FLOOR_OD` (or
    ``min_od_floor`` when given). Pale tissue on clean glass is kept (light eosin about 0.04 OD
    above glass in green is a mean OD of about 0.02), grainy glass is not split. ``"od-otsu"``:
    Otsu's threshold on the log10 of the mean optical density (glass is a narrow peak near zero
    OD while pale and dense tissue span a decade), kept between that floor and
    ``max_od_ceiling``; on a slide with much dense tissue it lies above faint tissue, which is
    then lost. Without glass either would split tissue from tissue: the threshold is
    :data:`NO_GLASS_FLOOR_OD`. Floor, ceiling and that level are divided by ``sensitivity``.
    ``"saturation-otsu"``: Otsu on the saturation, at least ``min_saturation``.

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
    if method not in METHODS:
        raise ValueError(f"unknown tissue method {method!r}; choose one of {METHODS}")
    if method == "saturation-otsu":
        otsu = otsu_threshold(feature)
        threshold = max(otsu, min_saturation)
        return threshold, otsu, threshold, math.nan
    level, noise = 0.0, math.nan
    found = bool(survey.found)
    if found and survey.candidates.any():  # the glass's own density: its level and noise (robust)
        level, noise = glass_noise(feature[survey.candidates])
        noise = max(0.0 if math.isnan(noise) else noise, QUANT_NOISE_LEVELS * grey_level_od(survey.colour))
    if min_od_floor is not None:
        floor = min_od_floor
    elif found:
        floor = max(MIN_FLOOR_OD, level + NOISE_SIGMAS * (0.0 if math.isnan(noise) else noise))
    else:
        floor = NO_GLASS_FLOOR_OD
    floor /= sensitivity
    if not found or method == "od-noise":
        return floor, math.nan, floor, noise
    logs = np.maximum(feature, _LOG_FLOOR)
    otsu = 10.0 ** otsu_threshold(np.log10(logs, out=logs))
    del logs
    ceiling = max(max_od_ceiling / sensitivity, floor)
    return min(max(otsu, floor), ceiling), otsu, floor, noise
