"""A fair before/after: the colour audit of the same tiles read raw from the source slides and
as stored, factor by factor.

Both sides are measured on the same pixels: the same seeded sample of tile positions per slide,
at the same µm/px, split into tissue and background by the same masks, with the same metric
definitions and the same number of colour clusters. What differs is what the run did to the
stored tiles after reading them: stain normalization.
"""

from __future__ import annotations

import pandas as pd

from tilewright.audit.metrics import slide_metrics
from tilewright.audit.permutation import N_RESAMPLES
from tilewright.errors import ConfigError, StoreError, TilewrightError

__all__ = ["compare_audits", "compare_gaps", "before_after_table", "gap_findings", "audit_before_after",
           "pairing_note"]


def compare_audits(before, after) -> pd.DataFrame:
    """Cramér's V and p-values of every factor in two audits, side by side.

    Parameters
    ----------
    before, after : tilewright.audit.cohort.CohortAudit
        Two audits of the same cohort, best the two sides of :func:`audit_before_after`.

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
        Best the two sides of :func:`audit_before_after`.

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


def audit_before_after(cohort_or_dir, *, metadata=None, label: str | None = None, max_tiles: int = 64,
                       seed: int = 0, tsne: bool = True, n_resamples: int = N_RESAMPLES):
    """Audit the same sampled tiles raw from the source slides (before) and as stored (after).

    For every slide the same ``max_tiles`` tile positions are read twice: from the source slide
    at the store's µm/px with the run's recorded settings (raw colour) and from the store
    (normalized colour). One set of tissue masks, from the raw tiles by the rule stain
    estimation uses, selects the pixels of both sides; the metrics are the same; the number of
    colour clusters is chosen by silhouette on the raw side and used on both. So the two sides
    differ by stain normalization only.

    Parameters
    ----------
    cohort_or_dir, metadata, label, max_tiles, seed, tsne, n_resamples :
        As for :func:`tilewright.audit.cohort.audit_cohort`.

    Returns
    -------
    (CohortAudit, CohortAudit)
        Before (``source="source"``) and after (``source="tiles"``); both hold the same slides
        and a ``notes["_pairing"]`` sentence saying what they share and what differs. Slides whose
        source slide cannot be re-read are skipped on both sides.

    Raises
    ------
    StoreError
        When no slide's source can be re-read (for example the slides were moved).
    ConfigError
        As for :func:`~tilewright.audit.cohort.audit_cohort`.
    """
    from tilewright.audit.cohort import build_audit, ok_slides
    from tilewright.audit.source import read_pair

    if int(max_tiles) < 1:
        raise ConfigError(f"max_tiles must be at least 1, got {max_tiles}")
    folder, ok = ok_slides(cohort_or_dir)
    sides = ({}, {})
    previews = ({}, {})
    attrs, skipped = {}, []
    for slide_id in ok.index:
        try:
            pair = read_pair(folder, slide_id, max_tiles=int(max_tiles), seed=seed)
        except TilewrightError as exc:
            skipped.append({"slide_id": slide_id, "reason": exc.one_line()})
            continue
        for side, pixels in enumerate(pair):
            sides[side][slide_id] = slide_metrics(pixels)
            previews[side][slide_id] = pixels.preview
        attrs[slide_id] = pair[1].attrs
    if not attrs:
        detail = f" ({skipped[0]['reason']})" if skipped else ""
        raise StoreError(f"no slide could be read both from its source and its store{detail}", folder)
    common = dict(metadata=metadata, label=label, seed=seed, tsne=tsne, n_resamples=n_resamples)
    before = build_audit(folder, ok, sides[0], previews[0], attrs, list(skipped), source="source", **common)
    after = build_audit(folder, ok, sides[1], previews[1], attrs, list(skipped), source="tiles",
                        n_clusters=before.n_clusters, **common)
    note = pairing_note(attrs, int(max_tiles), seed, before.n_clusters)
    before.notes["_pairing"] = after.notes["_pairing"] = note
    return before, after


def pairing_note(attrs: dict, max_tiles: int, seed: int, k: int) -> str:
    """What the two sides of a before/after share and what differs between them."""
    mpps = sorted({float(a.get("mpp")) for a in attrs.values() if a.get("mpp") is not None})
    methods = sorted({str((a.get("normalizer") or {}).get("method", "none")) for a in attrs.values()})
    mpp = " / ".join(f"{m:g}" for m in mpps) or "the target"
    return (f"Both sides are computed from the same pixels: up to {max_tiles} tile positions a slide (seed {seed}) "
            f"at {mpp} µm/px, read raw from the source slide (before) and from the store (after), with the same "
            f"tissue pixels (optical-density norm >= 0.15 against the slide's glass, from the raw tiles), the same "
            f"metrics and k = {k} colour clusters on both sides. The only difference is stain normalization "
            f"({', '.join(methods)}).")
