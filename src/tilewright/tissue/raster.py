"""Exact box coverage of a raster: what fraction of a rectangle (given at any µm/px) a mask covers.

A mask raster is a piecewise-constant function over the slide. Its 2-D cumulative integral at
fractional coordinates is exactly the bilinear interpolation of the summed-area table
(Crow 1984), so the covered area of any axis-aligned box, at any resolution, follows from four
interpolated look-ups. This serves tissue masks and region maps alike.

References
----------
.. [1] F. C. Crow, "Summed-area tables for texture mapping", SIGGRAPH '84, Computer Graphics
       18(3):207-212, 1984.
"""

from __future__ import annotations

import numpy as np

__all__ = ["summed_area_table", "box_fractions"]


def summed_area_table(raster: np.ndarray) -> np.ndarray:
    """Summed-area table with a leading zero row and column.

    Parameters
    ----------
    raster : ndarray (H, W)
        Boolean or numeric coverage values (1 = covered).

    Returns
    -------
    ndarray (H + 1, W + 1)
        ``sat[i, j]`` is the sum of ``raster[:i, :j]``: int32 counts for a boolean raster (int64
        past 2**31 pixels), float64 otherwise.
    """
    raster = np.asarray(raster)
    if raster.dtype == bool:  # exact integer counts at half the memory of float64
        dtype = np.int32 if raster.size < 2**31 else np.int64
    else:
        dtype = np.float64
    sat = np.zeros((raster.shape[0] + 1, raster.shape[1] + 1), dtype=dtype)
    np.cumsum(np.cumsum(raster, axis=0, dtype=dtype), axis=1, out=sat[1:, 1:])
    return sat


def _cumulative(sat: np.ndarray, y: np.ndarray, x: np.ndarray) -> np.ndarray:
    """Integral of the raster over [0, y) x [0, x) at fractional coordinates (clamped)."""
    h, w = sat.shape[0] - 1, sat.shape[1] - 1
    y = np.clip(y, 0.0, h)
    x = np.clip(x, 0.0, w)
    y0 = np.minimum(np.floor(y).astype(np.int64), max(h - 1, 0))
    x0 = np.minimum(np.floor(x).astype(np.int64), max(w - 1, 0))
    fy = y - y0
    fx = x - x0
    s00 = sat[y0, x0]
    s01 = sat[y0, x0 + 1]
    s10 = sat[y0 + 1, x0]
    s11 = sat[y0 + 1, x0 + 1]
    return s00 * (1 - fy) * (1 - fx) + s01 * (1 - fy) * fx + s10 * fy * (1 - fx) + s11 * fy * fx


def box_fractions(sat: np.ndarray, raster_mpp: float, yx, h: float, w: float, mpp: float) -> np.ndarray:
    """Covered fraction of boxes given in pixels at another resolution.

    Parameters
    ----------
    sat : ndarray
        Summed-area table from :func:`summed_area_table` of a raster at ``raster_mpp`` µm/px whose
        origin is the slide origin.
    raster_mpp : float
        µm/px of the raster.
    yx : array_like (N, 2) or (2,)
        Top-left corners of the boxes in pixels at ``mpp``.
    h, w : float
        Box height and width in pixels at ``mpp``.
    mpp : float
        µm/px of the box coordinates.

    Returns
    -------
    ndarray (N,) float32
        Covered area / box area. Parts of a box beyond the raster count as not covered.
    """
    yx = np.atleast_2d(np.asarray(yx, dtype=np.float64))
    if h <= 0 or w <= 0:
        raise ValueError(f"box size must be positive, got h={h}, w={w}")
    f = mpp / raster_mpp
    y0 = yx[:, 0] * f
    x0 = yx[:, 1] * f
    y1 = y0 + h * f
    x1 = x0 + w * f
    area = _cumulative(sat, y1, x1) - _cumulative(sat, y0, x1) - _cumulative(sat, y1, x0) + _cumulative(sat, y0, x0)
    return np.clip(area / ((h * f) * (w * f)), 0.0, 1.0).astype(np.float32)
