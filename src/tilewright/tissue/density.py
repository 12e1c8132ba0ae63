"""Optical density of brightfield RGB relative to the glass, the quantity tissue is found by.

Transmitted light through a stained section follows the Beer–Lambert law, so optical density
``OD = log10(I0 / I)`` is proportional to the amount of stain and adds up over stains (and over
marker ink lying on top). ``I0`` is the colour of blank glass, estimated from the brightest part
of the slide.

References
----------
.. [1] A. C. Ruifrok and D. A. Johnston, "Quantification of histochemical staining by color
       deconvolution", Analytical and Quantitative Cytology and Histology 23(4):291-299, 2001.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

__all__ = ["GlassSurvey", "find_glass", "glass_colour", "optical_density", "od_lookup", "od_tables", "channel_mean", "channel_max", "channel_min",
           "black_ink", "dark_debris"]

#: Glass colours darker than this (mean of RGB) are not trusted; the slide is probably all tissue.
_MIN_GLASS_LEVEL = 180.0


def channel_mean(a: np.ndarray) -> np.ndarray:
    """Mean over the last axis of size 3 (explicit sums: much faster than a reduction over 3)."""
    return (a[..., 0] + a[..., 1] + a[..., 2]) / np.asarray(3, dtype=a.dtype)


def channel_max(a: np.ndarray) -> np.ndarray:
    """Maximum over the last axis of size 3."""
    return np.maximum(np.maximum(a[..., 0], a[..., 1]), a[..., 2])


def channel_min(a: np.ndarray) -> np.ndarray:
    """Minimum over the last axis of size 3."""
    return np.minimum(np.minimum(a[..., 0], a[..., 1]), a[..., 2])


def glass_colour(rgb: np.ndarray, *, top: float = 0.02) -> np.ndarray:
    """Estimate the RGB of blank glass as the median colour of the brightest pixels.

    Parameters
    ----------
    rgb : ndarray (H, W, 3) uint8
        A thumbnail of the slide.
    top : float
        Fraction of brightest pixels (by R + G + B) whose per-channel median is the estimate.

    Returns
    -------
    ndarray (3,) float64
        Glass colour in 0-255. When the brightest pixels are darker than a mean of 180 (a slide
        covered edge to edge, common practice) white ``(255, 255, 255)`` is returned instead.
    """
    px = np.asarray(rgb).reshape(-1, 3)
    n = px.shape[0]
    if n == 0:
        return np.full(3, 255.0)
    # brightness R + G + B takes 766 values: a histogram finds the k-th brightest level without
    # sorting (and without an index per pixel, which would cost 8 bytes a pixel)
    total = px[:, 0].astype(np.uint16)
    total += px[:, 1]
    total += px[:, 2]
    k = max(1, int(round(n * top)))
    counts = np.zeros(766, np.int64)
    for start in range(0, n, 1 << 18):  # bincount in chunks: it makes an int64 copy of its input
        counts += np.bincount(total[start:start + (1 << 18)], minlength=766)
    above = np.cumsum(counts[::-1])[::-1]  # above[t]: pixels at least as bright as t
    level = int(np.flatnonzero(above >= k)[-1])  # the k-th brightest pixel has this brightness
    chosen = total > level
    need = k - int(chosen.sum())  # ties at ``level``: the first ones in raster order
    if need > 0:
        tie = total == level
        del total
        for start in range(0, n, 1 << 18):  # bounded index arrays
            idx = np.flatnonzero(tie[start:start + (1 << 18)])[:need]
            chosen[start + idx] = True
            need -= idx.size
            if need == 0:
                break
        del tie
    colour = np.median(px[chosen].astype(np.float64), axis=0)
    if colour.mean() < _MIN_GLASS_LEVEL:
        return np.full(3, 255.0)
    return colour


def optical_density(rgb: np.ndarray, glass=None) -> np.ndarray:
    """Per-channel optical density of ``rgb`` relative to the glass colour, clipped at 0.

    Parameters
    ----------
    rgb : ndarray (..., 3) uint8
        Brightfield RGB.
    glass : array_like (3,), optional
        Colour of blank glass (0-255); estimated with :func:`glass_colour` when omitted.

    Returns
    -------
    ndarray (..., 3) float32
        ``log10(glass / max(rgb, 1))``, never negative.

    References
    ----------
    .. [1] A. C. Ruifrok and D. A. Johnston, "Quantification of histochemical staining by color
           deconvolution", Analytical and Quantitative Cytology and Histology 23(4):291-299, 2001.
    """
    rgb = np.asarray(rgb)
    if glass is None:
        glass = glass_colour(rgb)
    return od_lookup(rgb, od_tables(glass))


def od_lookup(rgb: np.ndarray, tables: np.ndarray) -> np.ndarray:
    """``tables[c, rgb[..., c]]`` for each channel: a uint8 RGB image through :func:`od_tables`.

    One OpenCV table look-up (``cv2.LUT``) for contiguous uint8 images, a numpy ``take`` per
    channel otherwise; the values are the tables' own either way.
    """
    rgb = np.asarray(rgb)
    if rgb.dtype == np.uint8 and rgb.ndim >= 2 and rgb.shape[-1] == 3 and rgb.flags.c_contiguous and rgb.size:
        import cv2

        lut = np.ascontiguousarray(np.asarray(tables, np.float32).T).reshape(256, 1, 3)
        return cv2.LUT(rgb.reshape(-1, 1, 3), lut).reshape(rgb.shape)
    out = np.empty(rgb.shape, np.float32)
    for c in range(3):  # a 256-entry table per channel: no float copy of the image
        np.take(tables[c], rgb[..., c], out=out[..., c])
    return out


def od_tables(glass) -> np.ndarray:
    """Optical density of every 8-bit level of each channel: ``tables[c, v]`` is the OD of value
    ``v`` in channel ``c`` (``log10(glass_c / max(v, 1))``, clipped at 0), float32.

    Indexing these tables with a uint8 image gives exactly :func:`optical_density` at 4 bytes a
    value and no intermediate float image.

    Parameters
    ----------
    glass : array_like (3,)
        Colour of blank glass (0-255).

    Returns
    -------
    ndarray (3, 256) float32
    """
    glass = np.asarray(glass, dtype=np.float32).reshape(3, 1)
    levels = np.maximum(np.arange(256, dtype=np.float32), np.float32(1.0))
    tables = np.log10(glass / levels[None, :])
    return np.maximum(tables, np.float32(0.0), out=tables)


#: Glass is bright and nearly grey: at most this saturation ((max - min) / max of R, G, B).
GLASS_MAX_SATURATION = 0.08
#: A slide shows glass when at least this fraction of its thumbnail (and 50 pixels) looks like it.
GLASS_MIN_FRACTION = 0.005


class GlassSurvey(NamedTuple):
    """Where a thumbnail shows blank glass and what colour it is.

    Attributes
    ----------
    colour : ndarray (3,) float64
        Glass colour (0-255): measured when ``found``, else the fallback.
    found : bool
        Whether enough glass-like pixels were seen.
    candidates : ndarray (H, W) bool
        Bright, nearly grey pixels (the glass candidates).
    n_pixels : int
        How many candidates there are.
    """

    colour: np.ndarray
    found: bool
    candidates: np.ndarray
    n_pixels: int


def find_glass(rgb: np.ndarray, *, fallback=None, max_saturation: float = GLASS_MAX_SATURATION,
               min_fraction: float = GLASS_MIN_FRACTION, top: float = 0.02) -> GlassSurvey:
    """Find the blank glass of a thumbnail: bright, nearly grey pixels, and their colour.

    Blank glass transmits nearly all the light and tints it little (a scanner's white balance
    or the mounting medium give tints such as RGB (232, 234, 226), saturation 0.03); stained
    tissue, even pale, is coloured. Candidates are pixels whose smallest channel is at least
    160 and whose saturation ``(max - min) / max`` is at most ``max_saturation``. With at least
    ``min_fraction`` of the pixels (and 50) as candidates, the glass colour is the per-channel
    median of the brightest candidates (``top`` of the whole image, the rule of
    :func:`glass_colour`). Otherwise the slide shows no glass (tissue from edge to edge) and the
    colour is ``fallback`` (white when None): tissue is never taken for glass.

    Parameters
    ----------
    rgb : ndarray (H, W, 3) uint8
    fallback : array_like (3,), optional
        Glass colour to use when none is found (for example the median glass of the cohort).
    max_saturation, min_fraction, top : float
        See above.

    Returns
    -------
    GlassSurvey
    """
    arr = np.asarray(rgb)
    h, w = arr.shape[:2]
    candidates = np.empty((h, w), bool)
    # the largest channel spread allowed at each brightness: uint8 work only, a table look-up
    import cv2

    allowed = np.floor(max_saturation * np.arange(256)).clip(0, 255).astype(np.uint8)
    for r0 in range(0, h, 256):  # uint8 temporaries a band at a time
        band = arr[r0:r0 + 256]
        top_ = np.ascontiguousarray(channel_max(band))
        low = channel_min(band)
        out = candidates[r0:r0 + 256]
        np.less_equal(top_ - low, cv2.LUT(top_, allowed), out=out)  # top_ >= low: no wrap-around
        out &= low >= 160
    n = int(candidates.sum())
    white = np.full(3, 255.0) if fallback is None else np.asarray(fallback, dtype=np.float64)
    if n < max(50, min_fraction * h * w):
        return GlassSurvey(white, False, candidates, n)
    pixels = arr[candidates]
    if n > 1_000_000:  # an evenly strided subset is plenty for a median colour
        pixels = pixels[:: n // 1_000_000 + 1]
    colour = glass_colour(pixels[:, None, :], top=min(1.0, top * h * w / n))
    if colour.mean() < _MIN_GLASS_LEVEL:
        return GlassSurvey(white, False, candidates, n)
    return GlassSurvey(colour, True, candidates, n)


def black_ink(od: np.ndarray, *, min_od: float = 0.3, grey: float = 1.0) -> np.ndarray:
    """Pixels of black marker (or grey debris): dense and nearly grey.

    Parameters
    ----------
    od : ndarray (..., 3)
        Optical density.
    min_od : float
        Smallest channel OD must exceed this (0.3 passes half the light in every channel).
    grey : float
        The smallest channel OD must be at least ``grey`` times the spread (max - min) over the
        channels. A flat absorber over tissue keeps a small spread and a large minimum; H&E alone
        has a minimum under half its spread (Ruifrok & Johnston hematoxylin: 0.29 vs 0.41).

    Returns
    -------
    ndarray (...) bool
    """
    od = np.asarray(od, dtype=np.float32)
    low = channel_min(od)
    return (low > min_od) & (low >= grey * (channel_max(od) - low))


def dark_debris(od: np.ndarray, *, min_od: float = 0.9) -> np.ndarray:
    """Very dense pixels of any colour (folds, debris, bubbles' edges), mean OD above ``min_od``."""
    return channel_mean(np.asarray(od, dtype=np.float32)) > min_od
