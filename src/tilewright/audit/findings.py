"""Plain-language findings from the association tables of a cohort audit.

Thresholds (common practice for effect sizes of contingency tables, Cohen 1988 for small
tables): Cramér's V of at least 0.5 with p < 0.05 is a *strong* association, at least 0.3 with
p < 0.05 a *moderate* one; a mean silhouette below 0.25 means the clusters are weak (Kaufman &
Rousseeuw 1990).

References
----------
Cohen J (1988). Statistical Power Analysis for the Behavioral Sciences, 2nd ed. Erlbaum.
Kaufman L, Rousseeuw PJ (1990). Finding Groups in Data: An Introduction to Cluster Analysis.
Wiley.
"""

from __future__ import annotations

import math

import pandas as pd

from tilewright.audit.association import chi_square, contingency_table

__all__ = ["LABEL_NAMES", "guess_label", "audit_findings", "comparison_findings", "format_p",
           "factor_name", "identifier_sentence"]

#: Column names taken as the training label when no label column is named.
LABEL_NAMES = ("label", "class", "target", "subtype", "diagnosis", "outcome", "y")
STRONG_V = 0.5
MODERATE_V = 0.3
ALPHA = 0.05
WEAK_SILHOUETTE = 0.25


def guess_label(columns) -> str | None:
    """The first column whose name (case-insensitive) is a usual label name, else None."""
    lowered = {str(c).lower(): c for c in columns}
    for name in LABEL_NAMES:
        if name in lowered:
            return lowered[name]
    return None


def format_p(p: float) -> str:
    """``p < 0.001`` or ``p = 0.03`` style text."""
    if p is None or (isinstance(p, float) and math.isnan(p)):
        return "p n/a"
    return "p < 0.001" if p < 0.001 else f"p = {p:.2g}"


def _v(value: float) -> str:
    return "n/a" if value is None or math.isnan(value) else f"{value:.2f}"


def _label(name: str) -> str:
    return "the label" if str(name).lower() == "label" else f"the label '{name}'"


def factor_name(factor: str, aliases: dict | None) -> str:
    """``site`` or, when other factors split the slides the same way, ``site (= scanner, mpp_source)``."""
    others = (aliases or {}).get(factor) or []
    return f"{factor} (= {', '.join(others)})" if others else str(factor)


def identifier_sentence(identifiers) -> str:
    """Why identifier columns were not tested ("" when there are none)."""
    identifiers = list(identifiers or [])
    if not identifiers:
        return ""
    if len(identifiers) == 1:
        return f"{identifiers[0]} looks like an identifier (one value a slide); not tested."
    return f"{', '.join(identifiers)} look like identifiers (one value a slide); not tested."


def _strength(row) -> str:
    v, p = row["cramers_v"], row["p_value"]
    if math.isnan(v) or p >= ALPHA:
        return "none"
    return "strong" if v >= STRONG_V else ("moderate" if v >= MODERATE_V else "weak")


def audit_findings(audit) -> list[str]:
    """Sentences that say what the audit found, most important first.

    Parameters
    ----------
    audit : tilewright.audit.cohort.CohortAudit

    Returns
    -------
    list of str
    """
    out = []
    notes = getattr(audit, "notes", None) or {}
    aliases = notes.get("_aliases") or {}
    hidden = {name for members in aliases.values() for name in members}
    id_note = identifier_sentence(notes.get("_identifiers"))
    n = len(audit.metrics)
    source = "stored tiles" if audit.source == "tiles" else "slide thumbnails under the tissue mask"
    skipped = f" ({len(audit.skipped)} skipped, see the skipped table)" if len(audit.skipped) else ""
    out.append(f"{n} slides audited from {source}{skipped}.")
    if n < 3:
        out.append("Fewer than three slides: no clustering or association test is possible.")
        return out
    silhouette = audit.embedding.best_silhouette
    cluster_note = f"{audit.n_clusters} colour clusters (mean silhouette {silhouette:.2f})"
    if silhouette < WEAK_SILHOUETTE:
        out.append(f"The slides form {cluster_note}: weak structure, so associations below are only indicative.")
    else:
        out.append(f"The slides form {cluster_note}.")
    table = audit.associations
    if table.empty:
        out.append("No metadata factor with two or more levels was given: add --metadata with site, scanner, label.")
        out.append(id_note)
        return [s for s in out if s]
    label = audit.label
    # aliases (factors splitting the slides exactly like a listed one) are named with it
    batch = table[(table["factor"] != label) & ~table["factor"].isin(hidden)]
    label_row = table[table["factor"] == label]
    top = batch.iloc[0] if len(batch) else None
    strong = batch[[_strength(r) in ("strong", "moderate") for _, r in batch.iterrows()]]

    def name(factor):
        return factor_name(factor, aliases)

    if label is not None and len(label_row) and top is not None:
        lv = label_row.iloc[0]
        if len(strong) and _strength(lv) in ("none", "weak"):
            out.append(
                f"Colour clusters follow {name(top['factor'])} (V = {_v(top['cramers_v'])}, {format_p(top['p_value'])}) "
                f"and not {_label(label)} (V = {_v(lv['cramers_v'])})."
            )
        elif len(strong):
            out.append(
                f"Colour clusters follow both {name(top['factor'])} (V = {_v(top['cramers_v'])}) and "
                f"{_label(label)} (V = {_v(lv['cramers_v'])}); check whether {top['factor']} and the label are confounded."
            )
        elif _strength(lv) in ("strong", "moderate"):
            out.append(
                f"Colour clusters follow {_label(label)} (V = {_v(lv['cramers_v'])}) and no batch factor "
                f"(largest: {name(top['factor'])}, V = {_v(top['cramers_v'])})."
            )
        else:
            out.append(
                f"Colour clusters follow neither a batch factor (largest: {name(top['factor'])}, V = "
                f"{_v(top['cramers_v'])}) nor {_label(label)} (V = {_v(lv['cramers_v'])})."
            )
    elif top is not None:
        if len(strong):
            out.append(f"Colour clusters follow {name(top['factor'])} (V = {_v(top['cramers_v'])}, {format_p(top['p_value'])}).")
        else:
            out.append(
                f"Colour clusters follow no factor strongly (largest: {name(top['factor'])}, V = {_v(top['cramers_v'])}, "
                f"{format_p(top['p_value'])})."
            )
    out.append(id_note)
    for _, row in strong.iterrows():
        out.append(_metric_sentence(audit.kruskal, row["factor"], name(row["factor"])))
        if label is not None and label in audit.factors.columns:
            confound = chi_square(contingency_table(audit.factors[row["factor"]], audit.factors[label]).to_numpy())
            if not math.isnan(confound.cramers_v) and confound.cramers_v >= MODERATE_V:
                out.append(
                    f"{name(row['factor'])} and {_label(label)} are themselves associated "
                    f"(V = {confound.cramers_v:.2f}): a model can use {row['factor']} colour as a shortcut to the label."
                )
    if len(strong):
        names = ", ".join(name(f) for f in strong["factor"])
        out.append(
            f"A model trained on these tiles could learn {names} instead of the label: normalize stain, "
            "re-run this audit on the normalized tiles, and keep sites apart in validation."
        )
    return [s for s in out if s]


def _metric_sentence(kruskal: pd.DataFrame, factor: str, shown: str | None = None, top: int = 3) -> str:
    rows = kruskal[(kruskal["factor"] == factor) & (kruskal["p_value"] < ALPHA)].nsmallest(top, "p_value")
    if rows.empty:
        return ""
    parts = [f"{r.metric} (H = {r.h:.1f}, {format_p(r.p_value)})" for r in rows.itertuples()]
    return f"Across {shown or factor}, the metrics that differ most are " + ", ".join(parts) + " (Kruskal–Wallis)."


def comparison_findings(table: pd.DataFrame, names: tuple[str, str], aliases: dict | None = None) -> list[str]:
    """Sentences on how each factor's association changed between two audits.

    Parameters
    ----------
    table : DataFrame
        Output of :func:`tilewright.audit.compare.compare_audits`.
    names : (str, str)
        Names of the two audits (for example ``("raw", "normalized")``).
    aliases : dict, optional
        Factor -> its aliases (``CohortAudit.notes["_aliases"]``); an alias whose values match
        its group's first factor in both audits is named with it instead of repeated.
    """
    first, second = names
    out = []
    aliases = aliases or {}
    lead_of = {m: lead for lead, members in aliases.items() for m in members}
    values = {row.factor: (row.cramers_v_before, row.cramers_v_after) for row in table.itertuples()}
    for row in table.itertuples():
        lead = lead_of.get(row.factor)
        if lead is not None and _same(values.get(lead), values[row.factor]):
            continue
        shown = [m for m in aliases.get(row.factor, []) if _same(values.get(m), values[row.factor])]
        factor = f"{row.factor} (= {', '.join(shown)})" if shown else row.factor
        before, after = row.cramers_v_before, row.cramers_v_after
        if math.isnan(before) or math.isnan(after):
            continue
        change = (after - before) / before * 100 if before > 0 else float("nan")
        if after <= before / 2:
            verb = "fell"
        elif after < before:
            verb = "fell slightly"
        elif after > before:
            verb = "rose"
        else:
            verb = "stayed"
        pct = "" if math.isnan(change) else f" ({change:+.0f} %)"
        out.append(
            f"Association of colour clusters with {factor} {verb} from V = {before:.2f} ({first}) "
            f"to V = {after:.2f} ({second}){pct}."
        )
    return out


def _same(a, b) -> bool:
    """Two (before, after) pairs of Cramér's V equal (NaN equals NaN)."""
    if a is None or b is None:
        return False
    return all((math.isnan(x) and math.isnan(y)) or abs(x - y) < 1e-12 for x, y in zip(a, b))
