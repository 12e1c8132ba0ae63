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

import numpy as np

__all__ = ["glass_colour", "optical_density", "channel_mean", "channel_max", "channel_min"]

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
    if px.shape[0] == 0:
        return np.full(3, 255.0)
    total = px[:, 0].astype(np.int32) + px[:, 1] + px[:, 2]
    k = max(1, int(round(px.shape[0] * top)))
    idx = np.argpartition(total, px.shape[0] - k)[px.shape[0] - k:]
    colour = np.median(px[idx].astype(np.float64), axis=0)
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
    glass = np.asarray(glass, dtype=np.float32)
    od = np.log10(glass / np.maximum(rgb.astype(np.float32), 1.0))
    return np.maximum(od, 0.0, out=od)
