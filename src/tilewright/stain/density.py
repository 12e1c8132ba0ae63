"""Optical density (Beer–Lambert law) for 8-bit RGB images.

Transmitted light falls exponentially with the amount of stain it crosses, so the optical
density ``OD = -log10(I / I0)`` of each colour channel is additive over stains (Beer–Lambert
law). Here ``I0 = 255`` (blank glass) and ``I`` is clipped to at least 1 so that a black pixel
has a finite OD of ``log10(255) ≈ 2.41`` and white glass has an OD of exactly 0.

The forward conversion is a 256-entry float32 lookup table (no logarithm per pixel); the inverse
is ``I = 255 * 10**(-OD)`` rounded and saturated to ``0..255``.

References
----------
Ruifrok AC, Johnston DA (2001). Quantification of histochemical staining by color
deconvolution. Analytical and Quantitative Cytology and Histology 23(4):291-299.
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np

__all__ = ["WHITE", "MAX_OD", "od_lut", "rgb_to_od", "od_to_rgb", "check_rgb"]

#: Transmitted intensity of blank glass (I0 in the Beer–Lambert law).
WHITE = 255
#: Optical density of a pixel with intensity 0 (clipped to 1 before the logarithm).
MAX_OD = float(np.log10(255.0))

LN10 = float(np.log(10.0))


@lru_cache(maxsize=1)
def od_lut() -> np.ndarray:
    """Float32 lookup table mapping each 8-bit intensity to its optical density.

    Returns
    -------
    ndarray, shape (256,), float32, read-only
        ``lut[i] = -log10(max(i, 1) / 255)``; ``lut[255] == 0`` and ``lut[0] == lut[1]``.
    """
    levels = np.maximum(np.arange(256, dtype=np.float64), 1.0)
    lut = (-np.log10(levels / WHITE)).astype(np.float32)
    lut[WHITE] = 0.0
    lut.flags.writeable = False
    return lut


def check_rgb(rgb, name: str = "rgb") -> np.ndarray:
    """Return ``rgb`` as a uint8 ndarray whose last axis has 3 channels.

    Parameters
    ----------
    rgb : array_like
        Image or batch of images, shape ``(..., 3)``, dtype uint8.
    name : str
        Argument name used in error messages.

    Returns
    -------
    ndarray
        The same data (no copy when already a uint8 ndarray).

    Raises
    ------
    TypeError
        When the dtype is not uint8.
    ValueError
        When the last axis does not hold 3 channels.
    """
    arr = np.asarray(rgb)
    if arr.dtype != np.uint8:
        raise TypeError(
            f"{name} must be uint8 RGB (0..255), got dtype {arr.dtype}; "
            "convert with skimage.util.img_as_ubyte first"
        )
    if arr.ndim < 2 or arr.shape[-1] != 3:
        raise ValueError(f"{name} must have shape (..., 3) (RGB last), got {arr.shape}")
    return arr


def rgb_to_od(rgb) -> np.ndarray:
    """Optical density of every channel of an 8-bit RGB image.

    Parameters
    ----------
    rgb : array_like, uint8, shape (..., 3)
        Image or batch of images.

    Returns
    -------
    ndarray, float32, same shape
        ``-log10(max(I, 1) / 255)`` per channel; 0 for 255, ``MAX_OD`` for 0 and 1.

    Raises
    ------
    TypeError, ValueError
        For a non-uint8 or non-RGB input.

    References
    ----------
    Ruifrok AC, Johnston DA (2001). Quantification of histochemical staining by color
    deconvolution. Analytical and Quantitative Cytology and Histology 23(4):291-299.

    Examples
    --------
    >>> import numpy as np
    >>> rgb_to_od(np.array([[255, 0, 25]], np.uint8)).round(3)
    array([[0.   , 2.407, 1.009]], dtype=float32)
    """
    arr = check_rgb(rgb)
    return od_lut()[arr]


def od_to_rgb(od) -> np.ndarray:
    """8-bit RGB intensities of given optical densities (inverse of :func:`rgb_to_od`).

    Parameters
    ----------
    od : array_like, float, shape (..., 3)
        Optical densities; negative values (brighter than glass) saturate to 255 and very large
        ones to 0. NaN maps to 255.

    Returns
    -------
    ndarray, uint8, same shape
        ``round(255 * 10**(-OD))`` saturated to ``0..255``.
    """
    od = np.asarray(od, dtype=np.float32)
    intensity = np.exp(np.nan_to_num(od, nan=0.0) * np.float32(-LN10)) * np.float32(WHITE)
    np.clip(intensity, 0, WHITE, out=intensity)
    return np.rint(intensity).astype(np.uint8)
