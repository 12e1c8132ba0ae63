"""Benjamini–Hochberg adjusted p-values (false discovery rate).

References
----------
Benjamini Y, Hochberg Y (1995). Controlling the false discovery rate: a practical and powerful
approach to multiple testing. Journal of the Royal Statistical Society B 57(1):289-300.
"""

from __future__ import annotations

import numpy as np

__all__ = ["bh_adjust"]


def bh_adjust(p_values) -> np.ndarray:
    """Benjamini–Hochberg (1995) adjusted p-values.

    For the ``m`` p-values present sorted as ``p_(1) <= ... <= p_(m)``, the adjusted value of
    ``p_(i)`` is ``min(1, min_{j >= i} m p_(j) / j)``; rejecting where it is below ``q``
    controls the false discovery rate at ``q`` for independent (or positively dependent) tests.

    Parameters
    ----------
    p_values : array_like of float
        p-values in [0, 1]; NaN entries (tests that could not be run) stay NaN and do not
        count in ``m``.

    Returns
    -------
    ndarray of float
        Same shape as ``p_values``.

    Raises
    ------
    ValueError
        For a p-value outside [0, 1].

    References
    ----------
    Benjamini Y, Hochberg Y (1995). Journal of the Royal Statistical Society B 57(1):289-300.
    """
    p = np.asarray(p_values, dtype=np.float64)
    out = np.full(p.shape, np.nan)
    flat = p.ravel()
    present = np.flatnonzero(~np.isnan(flat))
    if present.size == 0:
        return out
    values = flat[present]
    if (values < 0).any() or (values > 1).any():
        raise ValueError("p-values must lie in [0, 1]")
    m = values.size
    order = np.argsort(values, kind="stable")
    scaled = values[order] * m / np.arange(1, m + 1)
    adjusted = np.minimum.accumulate(scaled[::-1])[::-1]
    result = np.empty(m)
    result[order] = np.minimum(adjusted, 1.0)
    flat_out = out.ravel()
    flat_out[present] = result
    return flat_out.reshape(p.shape)
