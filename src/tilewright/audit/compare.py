"""Two audits of one cohort side by side (best the two sides of
:func:`tilewright.audit.before_after.audit_before_after`): every factor's association and colour
gap before and after, and the sentences that say how they changed."""

from __future__ import annotations

import pandas as pd

__all__ = ["compare_audits", "compare_gaps", "before_after_table", "gap_findings"]


def compare_audits(before, after) -> pd.DataFrame:
    """Cramér's V and p-values of every factor in two audits, side by side.

    Parameters
    ----------
    before, after : tilewright.audit.cohort.CohortAudit
        Two audits of the same cohort, best the two sides of :func:`~tilewright.audit.before_after.audit_before_after`.

    Returns
    -------
    DataFrame
        Columns ``factor, cramers_v_before, cramers_v_after, p_adjusted_before,
        p_adjusted_after, p_value_before, p_value_after`` (V bias-corrected, p exact or by
        permutation, adjusted over the factors), one row per factor present in either audit,
        ordered as in ``before``.

    Examples
    --------
    >>> before, after = audit_before_after(out, metadata=meta)        # doctest: +SKIP
    >>> compare_audits(before, after)                                 # doctest: +SKIP
    """
    keep = ["factor", "cramers_v", "p_adjusted", "p_value"]
    left, right = before.associations[keep], after.associations[keep]
    table = left.merge(right, on="factor", how="outer", suffixes=("_before", "_after"), sort=False)
    order = {name: i for i, name in enumerate(left["factor"])}
    table["_order"] = table["factor"].map(lambda f: order.get(f, len(order)))
    table = table.sort_values("_order", kind="stable").drop(columns="_order").reset_index(drop=True)
    columns = ["factor", "cramers_v_before", "cramers_v_after", "p_adjusted_before", "p_adjusted_after",
               "p_value_before", "p_value_after"]
    return table[columns]


def compare_gaps(before, after) -> pd.DataFrame:
    """Every factor's level-pair colour gaps in two audits of the same slides, side by side.

    Parameters
    ----------
    before, after : tilewright.audit.cohort.CohortAudit
        Best the two sides of :func:`~tilewright.audit.before_after.audit_before_after`.

    Returns
    -------
    DataFrame
        :func:`tilewright.audit.gaps.paired_gaps`: ``factor, level_a, level_b, n_a, n_b,
        gap_before, gap_before_lo, gap_before_hi, gap_after, gap_after_lo, gap_after_hi, change``
        (CIEDE2000 of mean tissue colour, 95 % bootstrap intervals over slides, the same redraws
        on both sides).
    """
    from tilewright.audit.gaps import paired_gaps

    seed = (before.notes.get("_tests") or {}).get("seed", 0)
    return paired_gaps(before.metrics, after.metrics, before.factors, seed=seed)


def before_after_table(before, after, table=None) -> pd.DataFrame:
    """:func:`compare_audits` (or ``table``, its result already computed) with each factor's
    largest colour gap before and after beside its V (``gap_levels``, ``gap_before`` ...
    ``change``; the pair is the largest before)."""
    from tilewright.audit.gaps import gap_summary

    table = compare_audits(before, after) if table is None else table
    summary = gap_summary(compare_gaps(before, after))
    if summary.empty:
        return table
    summary = summary.assign(gap_levels=summary["level_a"].astype(str) + " / " + summary["level_b"].astype(str))
    keep = ["factor", "gap_levels", "gap_before", "gap_before_lo", "gap_before_hi", "gap_after", "gap_after_lo",
            "gap_after_hi", "change"]
    return table.merge(summary[keep], on="factor", how="left")


def gap_findings(before, after, names=("raw tiles", "normalized tiles")) -> list[str]:
    """One sentence a batch factor (not the label, aliases named with their factor) on how its
    largest colour gap changed, widest first."""
    from tilewright.audit.gaps import gap_sentence, gap_summary

    aliases = before.notes.get("_aliases") or {}
    hidden = {m for members in aliases.values() for m in members}
    summary = gap_summary(compare_gaps(before, after))
    if summary.empty:
        return []
    summary = summary.sort_values("gap_before", ascending=False)
    return [gap_sentence(row, aliases, names) for _, row in summary.iterrows()
            if row["factor"] != before.label and row["factor"] not in hidden]
