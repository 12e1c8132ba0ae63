"""Otsu's threshold on a set of real values (histogram method, 256 bins).

References
----------
.. [1] N. Otsu, "A threshold selection method from gray-level histograms", IEEE Transactions on
       Systems, Man, and Cybernetics 9(1):62-66, 1979.
"""

from __future__ import annotations

import numpy as np

__all__ = ["otsu_threshold"]


def otsu_threshold(values, nbins: int = 256) -> float:
    """Threshold that maximizes the between-class variance of a histogram of ``values``.

    The histogram has ``nbins`` equal bins spanning ``[min, max]`` of the finite values; the
    threshold is the centre of the last bin of the lower class, so values ``> threshold`` are the
    upper class.

    Parameters
    ----------
    values : array_like
        Real values of any shape (NaN and infinite values are ignored).
    nbins : int
        Number of histogram bins.

    Returns
    -------
    float
        The threshold. When all finite values are equal, that value.

    Raises
    ------
    ValueError
        If there is no finite value.

    References
    ----------
    .. [1] N. Otsu, "A threshold selection method from gray-level histograms", IEEE Transactions
           on Systems, Man, and Cybernetics 9(1):62-66, 1979.

    Examples
    --------
    >>> import numpy as np
    >>> values = np.r_[np.zeros(50), np.ones(50)]
    >>> bool(0.0 <= otsu_threshold(values) < 1.0)
    True
    """
    flat = np.asarray(values).reshape(-1)
    lo, hi, any_finite = np.inf, -np.inf, False
    for chunk in _chunks(flat):  # bounded memory: never a float64 copy of the whole input
        c = chunk[np.isfinite(chunk)]
        if c.size:
            any_finite = True
            lo, hi = min(lo, float(c.min())), max(hi, float(c.max()))
    if not any_finite:
        raise ValueError("otsu_threshold needs at least one finite value")
    if lo == hi:
        return lo
    counts = np.zeros(nbins, dtype=np.int64)
    for chunk in _chunks(flat):
        c = chunk[np.isfinite(chunk)]
        counts += np.histogram(c, bins=nbins, range=(lo, hi))[0]
    edges = np.histogram_bin_edges(np.array([lo, hi]), bins=nbins, range=(lo, hi))
    centres = (edges[:-1] + edges[1:]) / 2.0
    counts = counts.astype(np.float64)
    w1 = np.cumsum(counts)
    w2 = np.cumsum(counts[::-1])[::-1]
    with np.errstate(divide="ignore", invalid="ignore"):
        m1 = np.cumsum(counts * centres) / w1
        m2 = (np.cumsum((counts * centres)[::-1]) / w2[::-1])[::-1]
    between = w1[:-1] * w2[1:] * (m1[:-1] - m2[1:]) ** 2
    return float(centres[int(np.nanargmax(between))])


def _chunks(flat: np.ndarray, size: int = 1 << 18):
    """Float64 pieces of a flat array (histogram bin edges are computed in float64 either way)."""
    for i in range(0, flat.size, size):
        yield flat[i:i + size].astype(np.float64, copy=False)
