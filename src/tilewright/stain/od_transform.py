"""Fast linear maps in optical-density space for 8-bit RGB images.

Macenko normalization and stain augmentation both reduce to ``OD' = OD @ A + b`` per pixel
(unmix with one stain matrix, rescale concentrations, remix with another), followed by the
inverse Beer–Lambert law ``I' = 255 * 10**(-OD')``. This module applies such a map with float32
OpenCV kernels: a uint8 -> float32 lookup table for the optical density, ``cv2.transform`` for
the 3x3 (or 3x4) matrix, ``cv2.exp`` and a saturating conversion back to uint8. Pixels are
processed in blocks so that no full-image float temporary is ever allocated.

When the input's glass is tinted, the lookup table gives OD relative to that glass (one column
per channel, clipped at 0), so measuring against the slide's own incident light costs nothing
extra. Rendering with an incident light ``I0_out`` other than white is the offset
``log10(255 / I0_out)``.
"""

from __future__ import annotations

import numpy as np

from .density import LN10, WHITE, check_glass, check_rgb, glass_od_lut, od_lut

__all__ = ["apply_od_affine", "BLOCK_PIXELS"]

#: Pixels per block: one 256-px tile; the two float32 temporaries (0.8 MB each) stay in the
#: core's own cache. Blocks four times larger ran the tile pipeline's Macenko transform about a
#: third slower (97 against 143 ms of CPU for 628 tiles, ``benchmarks/run_all.py`` slide).
BLOCK_PIXELS = 1 << 16


def apply_od_affine(rgb, matrix, offset=None, *, out=None, glass=None) -> np.ndarray:
    """Apply ``OD' = OD @ matrix + offset`` to every pixel and return uint8 RGB.

    Parameters
    ----------
    rgb : array_like, uint8, shape (..., 3)
        Image or batch of images.
    matrix : array_like, shape (3, 3)
        Row-vector map applied to each pixel's OD (``od_row @ matrix``).
    offset : array_like, shape (3,), optional
        Added OD after the matrix.
    out : ndarray, uint8, optional
        Destination with the same shape as ``rgb`` (may be ``rgb`` itself).
    glass : array_like (3,), optional
        RGB of the input's blank glass: ``OD = max(0, log10(glass / I))`` per channel. Default
        pure white (``OD = log10(255 / I)``).

    Returns
    -------
    ndarray, uint8, same shape as ``rgb``
        ``round(255 * 10**(-OD'))`` saturated to ``0..255``.

    References
    ----------
    Ruifrok AC, Johnston DA (2001). Quantification of histochemical staining by color
    deconvolution. Analytical and Quantitative Cytology and Histology 23(4):291-299.
    """
    import cv2

    arr = check_rgb(rgb)
    if out is None:
        out = np.empty_like(arr)
    elif out.shape != arr.shape or out.dtype != np.uint8:
        raise ValueError(f"out must be uint8 with shape {arr.shape}, got {out.dtype} {out.shape}")
    src = np.ascontiguousarray(arr).reshape(-1, 1, 3)
    direct = out.flags.c_contiguous
    dst = out.reshape(-1, 1, 3) if direct else np.empty_like(src)
    # cv2.transform uses column vectors: dst = m @ src; fold in -ln(10) so that exp gives 10**-OD.
    m = np.zeros((3, 4), np.float32)
    m[:, :3] = np.asarray(matrix, np.float64).T * -LN10
    if offset is not None:
        m[:, 3] = np.asarray(offset, np.float64).reshape(3) * -LN10
    lut = od_lut() if check_glass(glass) is None else np.ascontiguousarray(glass_od_lut(glass)).reshape(256, 1, 3)
    n = src.shape[0]
    block = min(BLOCK_PIXELS, max(n, 1))
    od = np.empty((block, 1, 3), np.float32)
    work = np.empty((block, 1, 3), np.float32)
    for start in range(0, n, block):
        stop = min(start + block, n)
        k = stop - start
        o, w = od[:k], work[:k]
        cv2.LUT(src[start:stop], lut, dst=o)
        cv2.transform(o, m, dst=w)
        cv2.threshold(w, 1.0, 1.0, cv2.THRESH_TRUNC, dst=w)  # min(w, 1): exp(1) * 255 saturates; avoids inf
        cv2.exp(w, dst=o)
        cv2.convertScaleAbs(o, dst=dst[start:stop], alpha=float(WHITE))
    if not direct:
        out[...] = dst.reshape(out.shape)
    return out
