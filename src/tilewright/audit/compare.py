"""Before/after: compare two audits of the same cohort (for example raw thumbnails against
normalized tiles) factor by factor."""

from __future__ import annotations

import pandas as pd

__all__ = ["compare_audits"]


def compare_audits(before, after) -> pd.DataFrame:
    """Cramér's V and p-value of every factor in two audits, side by side.

    Parameters
    ----------
    before, after : tilewright.audit.cohort.CohortAudit
        Two audits of the same cohort, for example ``audit_cohort(out, source="thumbnail")``
        (raw colour) and ``audit_cohort(out, source="tiles")`` (normalized colour).

    Returns
    -------
    DataFrame
        Columns ``factor, cramers_v_before, cramers_v_after, p_value_before, p_value_after,
        ratio`` (after / before; NaN when before is 0), one row per factor present in either audit, ordered as in
        ``before``.

    Examples
    --------
    >>> raw = audit_cohort(out, source="thumbnail", metadata=meta)        # doctest: +SKIP
    >>> normalized = audit_cohort(out, source="tiles", metadata=meta)     # doctest: +SKIP
    >>> compare_audits(raw, normalized)                                   # doctest: +SKIP
    """
    left = before.associations[["factor", "cramers_v", "p_value"]]
    right = after.associations[["factor", "cramers_v", "p_value"]]
    table = left.merge(right, on="factor", how="outer", suffixes=("_before", "_after"), sort=False)
    order = {name: i for i, name in enumerate(left["factor"])}
    table["_order"] = table["factor"].map(lambda f: order.get(f, len(order)))
    table = table.sort_values("_order", kind="stable").drop(columns="_order").reset_index(drop=True)
    before_v = table["cramers_v_before"].where(table["cramers_v_before"] > 0)
    table["ratio"] = table["cramers_v_after"] / before_v
    columns = ["factor", "cramers_v_before", "cramers_v_after", "p_value_before", "p_value_after", "ratio"]
    return table[columns]
