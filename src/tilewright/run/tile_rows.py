"""Which planned tile each stored tile is: rows of a plan found by their corners."""

from __future__ import annotations

import numpy as np

__all__ = ["rows_of"]


def rows_of(planned_yx, stored_yx) -> np.ndarray:
    """Index into ``planned_yx`` of each corner of ``stored_yx`` (every stored corner is planned).

    Tiles are stored in block order and some may be dropped (the sharpness filter), so per-tile
    values known at planning (ink share, class fractions) are gathered by corner, not by position.

    Raises
    ------
    ValueError
        A stored corner that is not in the plan.
    """
    planned = np.asarray(planned_yx, np.int64).reshape(-1, 2)
    stored = np.asarray(stored_yx, np.int64).reshape(-1, 2)
    if not len(stored):
        return np.zeros(0, np.int64)
    width = int(max(planned[:, 1].max(initial=0), stored[:, 1].max(initial=0))) + 1
    keys = planned[:, 0] * width + planned[:, 1]
    order = np.argsort(keys, kind="stable")
    want = stored[:, 0] * width + stored[:, 1]
    at = np.searchsorted(keys[order], want)
    at = np.minimum(at, len(order) - 1)
    rows = order[at]
    if len(planned) == 0 or not np.array_equal(keys[rows], want):
        raise ValueError("a stored tile corner is not in the plan")
    return rows
