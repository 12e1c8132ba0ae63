"""Area-averaging downsampling with weights fixed by global coordinates.

Target pixel ``j`` covers the source interval ``[j*s, (j+1)*s)`` (``s`` = source pixels per
target pixel, any real ``s >= 1``); its value is the mean of the source over that interval,
each source pixel weighted by the length of its overlap. The weights depend only on the
global index ``j``, never on where a read starts, so one large read equals the mosaic of
smaller reads bit for bit. The filter is separable: rows first, then columns, in float32,
rounded to the nearest integer at the end.

For an integer ``s`` each target pixel is the plain mean of an ``s x s`` block, and the block
grid is aligned with every read, so OpenCV's ``INTER_AREA`` (which rounds the integer mean)
computes it directly and fast.

References
----------
.. [1] OpenCV documentation, ``cv::resize`` with ``INTER_AREA``: "resampling using pixel area
   relation". https://docs.opencv.org/4.x/da/d54/group__imgproc__transform.html
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["source_span", "area_weights", "area_downsample", "integer_factor"]


def integer_factor(scale: float, eps: float = 1e-9) -> int | None:
    """``round(scale)`` when ``scale`` is an integer within ``eps``, else None."""
    k = round(scale)
    return int(k) if k >= 1 and abs(scale - k) <= eps * max(1.0, scale) else None


def source_span(start: int, n: int, scale: float) -> tuple[int, int]:
    """Source index range ``[lo, hi)`` that target pixels ``[start, start+n)`` cover."""
    k = integer_factor(scale)
    if k is not None:
        return start * k, (start + n) * k
    lo = math.floor(start * scale)
    hi = math.ceil((start + n) * scale)
    return lo, hi


def area_weights(start: int, n: int, scale: float, src_lo: int, src_n: int):
    """Sparse weight matrix (n x src_n) mapping source samples to target samples.

    Parameters
    ----------
    start, n : int
        First target index (global) and number of targets.
    scale : float
        Source samples per target sample.
    src_lo, src_n : int
        Global index of the first source sample held, and how many are held.

    Returns
    -------
    scipy.sparse.csr_matrix
        float32 weights; each row sums to 1.
    """
    import scipy.sparse as sp

    j = np.arange(start, start + n, dtype=np.float64)
    a = j * scale
    b = (j + 1.0) * scale  # same expression as source_span, so spans and weights agree
    i0 = np.floor(a).astype(np.int64)
    kmax = int(math.ceil(scale)) + 1
    idx = i0[:, None] + np.arange(kmax)[None, :]
    w = np.minimum(b[:, None], idx + 1) - np.maximum(a[:, None], idx)
    w = np.where(w > 1e-9, w, 0.0) / scale
    idx = idx - src_lo
    used = idx[w > 0]
    if used.size and (used.min() < 0 or used.max() >= src_n):
        raise ValueError("source block does not cover the requested targets")
    idx = np.clip(idx, 0, src_n - 1)
    indptr = np.arange(0, n * kmax + 1, kmax)
    return sp.csr_matrix((w.astype(np.float32).ravel(), idx.ravel(), indptr),
                         shape=(n, src_n))


def area_downsample(src: np.ndarray, y: int, x: int, h: int, w: int, scale: float,
                    src_y: int, src_x: int, out: np.ndarray | None = None,
                    weights: dict | None = None) -> np.ndarray:
    """Target pixels ``[y, y+h) x [x, x+w)`` from a source block, by area averaging.

    Parameters
    ----------
    src : ndarray
        uint8 (Hs, Ws, C) source pixels; must cover :func:`source_span` of the targets.
    y, x, h, w : int
        Target box in global target coordinates.
    scale : float
        Source pixels per target pixel (>= 1).
    src_y, src_x : int
        Global source coordinates of ``src[0, 0]``.
    out : ndarray, optional
        uint8 (h, w, C) array (may be a view) to write the result into.
    weights : dict, optional
        Cache of column weight matrices, reused across calls with the same columns
        (a read made of several row strips computes them once).

    Returns
    -------
    ndarray
        uint8 (h, w, C).

    References
    ----------
    .. [1] OpenCV ``INTER_AREA`` (see module docstring); this function equals it within
       one grey level (rounding) when the box starts at the global origin.
    """
    import cv2

    k = integer_factor(scale)
    if k == 1:
        res = src[y - src_y : y - src_y + h, x - src_x : x - src_x + w]
    elif k is not None:
        oy, ox = y * k - src_y, x * k - src_x
        block = src[oy : oy + h * k, ox : ox + w * k]
        if block.shape[:2] != (h * k, w * k):
            raise ValueError("source block does not cover the requested targets")
        if out is not None and out.flags.c_contiguous:
            res = cv2.resize(block, (w, h), dst=out, interpolation=cv2.INTER_AREA)
            if res is out or np.shares_memory(res, out):
                return out
        else:
            res = cv2.resize(block, (w, h), interpolation=cv2.INTER_AREA)
    else:
        return _fractional(src, y, x, h, w, scale, src_y, src_x, out, weights)
    if out is None:
        return np.ascontiguousarray(res)
    out[...] = res
    return out


def _fractional(src, y, x, h, w, scale, src_y, src_x, out, weights):
    """Separable exact-overlap weights as sparse matrices, float32, rounded."""
    hs, ws, c = src.shape
    wy = area_weights(y, h, scale, src_y, hs)
    key = (x, w, src_x, ws)
    wx = weights.get(key) if weights is not None else None
    if wx is None:
        wx = area_weights(x, w, scale, src_x, ws)
        if weights is not None:
            weights[key] = wx
    rows = wy @ src.reshape(hs, ws * c).astype(np.float32)  # (h, ws*c)
    cols = rows.reshape(h, ws, c).transpose(1, 0, 2).reshape(ws, h * c)
    res = wx @ cols  # (w, h*c)
    np.rint(res, out=res)  # a convex combination of 0..255 stays within 0..255
    if out is None:
        out = np.empty((h, w, c), np.uint8)
    np.copyto(out, res.reshape(w, h, c).transpose(1, 0, 2), casting="unsafe")
    return out
