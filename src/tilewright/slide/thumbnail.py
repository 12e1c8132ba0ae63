"""Thumbnail: slide pixels that carry the µm/px of their own pixels.

A thumbnail is read from the coarsest pyramid level that serves it; a level within the
thumbnail tolerance of the requested µm/px is used as is, so its pixels may be 7.78 µm wide
when 8 was asked for. Whatever is derived from it (tissue mask, glass colour, QC picture, the
store's ``thumbnail`` and ``mask``) must use the µm/px of these pixels, not the request: the
error of the request grows with the distance from the slide origin (3 % at 20 mm is 560 µm).
"""

from __future__ import annotations

import numpy as np

__all__ = ["Thumbnail"]


class Thumbnail(np.ndarray):
    """A uint8 (H, W, 3) array of slide pixels with the true µm/px of its pixels in ``.mpp``.

    Pixel ``(i, j)`` covers the slide area ``[i*mpp, (i+1)*mpp) x [j*mpp, (j+1)*mpp)`` µm from
    the slide origin. Slices and views keep ``.mpp`` (the pixel size does not change); results
    of arithmetic are plain arrays. ``np.asarray(thumbnail)`` gives the plain pixels.

    Parameters
    ----------
    array : array_like
        The pixels.
    mpp : float
        µm per pixel of ``array``.
    """

    def __new__(cls, array, mpp: float):
        obj = np.asarray(array).view(cls)
        obj.mpp = float(mpp)
        return obj

    def __array_finalize__(self, obj):
        self.mpp = getattr(obj, "mpp", None)

    def __array_wrap__(self, obj, context=None, return_scalar=False):
        # ufunc results (sums, means, comparisons) are no longer slide pixels: plain arrays
        arr = np.asarray(obj)
        return arr[()] if return_scalar else arr

    def __reduce__(self):
        return _rebuild, (np.asarray(self), self.mpp)

    def __repr__(self) -> str:
        return f"Thumbnail(shape={self.shape}, mpp={self.mpp!r})"


def _rebuild(array, mpp):
    return Thumbnail(array, mpp)
