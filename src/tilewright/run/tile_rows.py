"""Per-tile values known when tiles are planned, for the tiles a store keeps: rows found by corner."""

from __future__ import annotations

import numpy as np

__all__ = ["rows_of", "per_tile_arrays"]


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


def per_tile_arrays(plan, stored_yx, regions_info) -> dict:
    """The plan's per-tile values for the tiles stored (a subset of the plan, in store order).

    ``ink_share``: each tile's share of marker ink (the store's ``ink`` array is the slide's ink
    mask picture). With regions, ``region_fractions``: one column a class of
    ``regions_info["classes_stored"]`` (set here; kept classes the slide lacks are columns of zeros).
    """
    rows = rows_of(plan.yx, stored_yx)
    out = {"ink_share": plan.ink[rows]}
    if regions_info is not None and plan.class_fractions is not None:
        absent = list(regions_info.get("absent") or [])
        fractions = plan.class_fractions[rows]
        out["region_fractions"] = np.concatenate([fractions, np.zeros((len(rows), len(absent)), np.float32)], axis=1)
        regions_info["classes_stored"] = list(plan.classes) + absent
    return out
