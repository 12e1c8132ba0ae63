"""CIE L*a*b* conversions of 8-bit RGB with OpenCV's float32 kernels.

The space is CIE 1976 L*a*b* of sRGB under the D65 white point (2° observer), the same space as
``skimage.color.rgb2lab``: L* in 0..100, a* and b* roughly in -128..127. OpenCV's *8-bit* Lab
(L scaled by 255/100, a and b offset by 128, rounded) is deliberately not used: it quantizes.
Here uint8 RGB is scaled to 0..1 float32 and converted with ``cv2.COLOR_RGB2Lab`` /
``cv2.COLOR_Lab2RGB``, which agree with scikit-image to about 0.2 L*a*b* units.

References
----------
CIE 15:2004, Colorimetry, 3rd edition. Commission Internationale de l'Eclairage.
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np

from .density import WHITE, check_rgb

__all__ = ["rgb_to_lab", "lab_to_rgb"]


@lru_cache(maxsize=1)
def _unit_lut() -> np.ndarray:
    lut = (np.arange(256, dtype=np.float64) / WHITE).astype(np.float32)
    lut.flags.writeable = False
    return lut


def rgb_to_lab(rgb) -> np.ndarray:
    """CIE L*a*b* (D65) of uint8 sRGB pixels.

    Parameters
    ----------
    rgb : array_like, uint8, shape (..., 3)

    Returns
    -------
    ndarray, float32, same shape
        L* in 0..100, a*, b* in about -128..127 (as ``skimage.color.rgb2lab``).
    """
    import cv2

    arr = check_rgb(rgb)
    flat = np.ascontiguousarray(arr).reshape(-1, 1, 3)
    lab = cv2.cvtColor(cv2.LUT(flat, _unit_lut()), cv2.COLOR_RGB2Lab)
    return lab.reshape(arr.shape)


def lab_to_rgb(lab) -> np.ndarray:
    """uint8 sRGB of CIE L*a*b* (D65) values, saturated to 0..255.

    Parameters
    ----------
    lab : array_like, float, shape (..., 3)

    Returns
    -------
    ndarray, uint8, same shape
    """
    import cv2

    lab = np.asarray(lab, np.float32)
    flat = np.ascontiguousarray(lab).reshape(-1, 1, 3)
    rgb = cv2.cvtColor(flat, cv2.COLOR_Lab2RGB)
    np.maximum(rgb, 0, out=rgb)
    return cv2.convertScaleAbs(rgb, alpha=float(WHITE)).reshape(lab.shape)
