"""Plain-language findings from the tests of a cohort audit.

An association is stated only when its Benjamini–Hochberg adjusted p-value is below 0.05
(exact or permutation p-values, :mod:`tilewright.audit.association`); otherwise the sentence
says there is no evidence of one. The strength word follows the bias-corrected Cramér's V
(Bergsma 2013): at least 0.5 *strong*, at least 0.3 *moderate*, else *weak* (common practice
for effect sizes of contingency tables, after Cohen 1988). A mean silhouette below 0.25 means
the clusters are weak (Kaufman & Rousseeuw 1990).

References
----------
Benjamini Y, Hochberg Y (1995). Journal of the Royal Statistical Society B 57(1):289-300.
Bergsma W (2013). Journal of the Korean Statistical Society 42(3):323-328.
Cohen J (1988). Statistical Power Analysis for the Behavioral Sciences, 2nd ed. Erlbaum.
Kaufman L, Rousseeuw PJ (1990). Finding Groups in Data: An Introduction to Cluster Analysis.
Wiley.
"""

from __future__ import annotations

import math

import pandas as pd

from tilewright.audit.association import association_test
from tilewright.audit.fdr import bh_adjust
from tilewright.audit.metrics import QUALITY_METRICS
from tilewright.audit.permutation import stable_seed

__all__ = ["LABEL_NAMES", "guess_label", "audit_findings", "quality_findings", "comparison_findings",
           "format_p", "factor_name", "identifier_sentence", "significant", "split_command"]

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


def format_p(p: float, adjusted: bool = False) -> str:
    """``p < 0.001`` or ``adjusted p = 0.03`` style text."""
    word = "adjusted p" if adjusted else "p"
    if p is None or (isinstance(p, float) and math.isnan(p)):
        return f"{word} n/a"
    return f"{word} < 0.001" if p < 0.001 else f"{word} = {p:.2g}"


def _v(value: float) -> str:
    return "n/a" if value is None or math.isnan(value) else f"{value:.2f}"


def _stats(row) -> str:
    return f"V = {_v(row['cramers_v'])}, {format_p(row['p_adjusted'], adjusted=True)}"


def _label(name: str) -> str:
    return "the label" if str(name).lower() == "label" else f"the label '{name}'"


def significant(row) -> bool:
    """An association row whose adjusted p-value is below 0.05."""
    p = row["p_adjusted"]
    return p is not None and not math.isnan(p) and p < ALPHA and not math.isnan(row["cramers_v"])


def _strength(v: float) -> str:
    return "strongly" if v >= STRONG_V else ("moderately" if v >= MODERATE_V else "weakly")


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


def split_command(audit, site: str) -> str:
    """The ``tilewright split`` command that keeps ``site`` apart in validation."""
    notes = getattr(audit, "notes", None) or {}
    patients = [c for c in notes.get("_identifiers", []) if "patient" in str(c).lower() or "case" in str(c).lower()]
    n_sites = int(audit.factors[site].dropna().nunique()) if site in audit.factors.columns else 2
    return (f"tilewright split {notes.get('_metadata') or 'META.csv'} --patient {patients[0] if patients else 'PATIENT'} "
            f"--label {audit.label or 'LABEL'} --site {site} --folds {max(2, min(5, n_sites))} --seed 0")


def audit_findings(audit) -> list[str]:
    """Sentences that say what the audit found about colour, most important first.

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
    n = len(audit.metrics)
    source = {"tiles": "stored tiles", "source": "sampled tile positions read raw from the source slides"}.get(
        audit.source, "slide thumbnails under the tissue mask")
    skipped = f" ({len(audit.skipped)} skipped, see the skipped table)" if len(audit.skipped) else ""
    out.append(f"{n} slides audited from {source}{skipped}.")
    if n < 3:
        out.append("Fewer than three slides: no clustering or association test is possible.")
        return out
    silhouette = audit.embedding.best_silhouette
    cluster_note = (f"{audit.n_clusters} colour clusters from {len(audit.embedding.features)} colour and stain "
                    f"metrics (mean silhouette {silhouette:.2f})")
    weak = ": weak structure" if silhouette < WEAK_SILHOUETTE else ""
    out.append(f"The slides form {cluster_note}{weak}.")
    table = audit.associations
    if table.empty:
        out.append("No metadata factor with two or more levels was given: add --metadata with site, scanner, label.")
        out.append(identifier_sentence(notes.get("_identifiers")))
        return [s for s in out if s]
    label = audit.label
    batch = table[(table["factor"] != label) & ~table["factor"].isin(hidden)]
    found = batch[[significant(r) for _, r in batch.iterrows()]]
    label_rows = table[table["factor"] == label]
    lv = label_rows.iloc[0] if label is not None and len(label_rows) else None

    def name(factor):
        return factor_name(factor, aliases)

    listed = "; ".join(f"{name(r['factor'])} {_strength(r['cramers_v'])} ({_stats(r)})" for _, r in found.iterrows())
    if len(found):
        sentence = f"Colour clusters follow {listed}"
        if lv is not None:
            sentence += (f"; they also follow {_label(label)} ({_stats(lv)})" if significant(lv)
                         else f"; no evidence that they follow {_label(label)} ({_stats(lv)})")
        out.append(sentence + ".")
    else:
        top = batch.iloc[0] if len(batch) else None
        largest = f" (largest: {name(top['factor'])}, {_stats(top)})" if top is not None else ""
        if lv is not None and significant(lv):
            out.append(f"Colour clusters follow {_label(label)} {_strength(lv['cramers_v'])} ({_stats(lv)}); "
                       f"no evidence that they follow a batch factor{largest}.")
        else:
            label_part = f" or {_label(label)} ({_stats(lv)})" if lv is not None else ""
            out.append(f"No evidence that colour clusters follow a batch factor{largest}{label_part}.")
    out.append(identifier_sentence(notes.get("_identifiers")))
    for _, row in found.iterrows():
        out.append(_metric_sentence(audit.kruskal, row["factor"], name(row["factor"])))
    out.extend(_confounding(audit, found, name))
    if len(found):
        names = ", ".join(name(f) for f in found["factor"])
        site = str(found.iloc[0]["factor"])
        normalized = audit.source == "tiles" and audit.normalized
        advice = ("stain normalization did not remove it" if normalized
                  else "normalize stain, re-run this audit on the normalized tiles")
        gap = _largest_gap(audit, site)
        if normalized and gap is not None and gap <= 3.0:
            advice = (f"stain normalization left a {site} colour gap of only {gap:.1f} CIEDE2000, but the colour "
                      "metrics still separate the levels")
        out.append(
            f"A model trained on these tiles could learn {names} instead of the label: {advice}, and keep {site} "
            f"apart in validation: {split_command(audit, site)}"
        )
    return [s for s in out if s]


def _largest_gap(audit, factor: str):
    """The factor's largest level-pair colour gap (:mod:`tilewright.audit.gaps`), or None."""
    gaps = getattr(audit, "gaps", None)
    if gaps is None or len(gaps) == 0 or "gap" not in gaps.columns:
        return None
    rows = gaps[gaps["factor"] == factor]
    return float(rows["gap"].max()) if len(rows) else None


def _confounding(audit, found: pd.DataFrame, name) -> list[str]:
    """Whether each associated batch factor also goes with the label (exact or permutation test,
    Benjamini–Hochberg adjusted over these tests); said only when significant."""
    label = audit.label
    if label is None or label not in audit.factors.columns or found.empty:
        return []
    tests = audit.notes.get("_tests", {}) if getattr(audit, "notes", None) else {}
    seed, n_resamples = tests.get("seed", 0), tests.get("n_resamples", 10_000)
    results = [association_test(audit.factors[f], audit.factors[label], seed=stable_seed(seed, f, label),
                                n_resamples=n_resamples) for f in found["factor"]]
    adjusted = bh_adjust([r.p_value for r in results])
    out = []
    for factor, result, p in zip(found["factor"], results, adjusted):
        if p < ALPHA:
            out.append(f"{name(factor)} and {_label(label)} are themselves associated (V = {_v(result.cramers_v)}, "
                       f"{format_p(p, adjusted=True)}): a model can use {factor} colour as a shortcut to the label.")
        else:
            out.append(f"No evidence that {factor} and {_label(label)} are associated (V = {_v(result.cramers_v)}, "
                       f"{format_p(p, adjusted=True)}).")
    return out


def _metric_sentence(kruskal: pd.DataFrame, factor: str, shown: str | None = None, top: int = 3) -> str:
    rows = kruskal[(kruskal["factor"] == factor) & (kruskal["p_adjusted"] < ALPHA)
                   & ~kruskal["metric"].isin(QUALITY_METRICS)].nsmallest(top, "p_adjusted")
    if rows.empty:
        return ""
    parts = [f"{r.metric} (H = {r.h:.1f}, {format_p(r.p_adjusted, adjusted=True)})" for r in rows.itertuples()]
    return f"Across {shown or factor}, the colour metrics that differ most are " + ", ".join(parts) + " (Kruskal–Wallis)."


QUALITY_WORDS = {"tissue_fraction": "tissue amount (tissue fraction)", "n_tiles": "tissue amount (tiles a slide)",
                 "sharpness": "sharpness"}


def quality_findings(audit) -> list[str]:
    """Sentences on tissue amount and sharpness across the factors (never part of the colour
    clusters); a difference is stated only at adjusted p < 0.05.

    Parameters
    ----------
    audit : tilewright.audit.cohort.CohortAudit

    Returns
    -------
    list of str
    """
    kruskal = audit.kruskal
    rows = kruskal[kruskal["metric"].isin(QUALITY_METRICS)]
    if rows.dropna(subset=["p_value"]).empty:
        return ["Tissue amount and sharpness could not be tested (no factor with two or more levels)."]
    out = []
    for r in rows[rows["p_adjusted"] < ALPHA].sort_values("p_adjusted").itertuples():
        out.append(f"{QUALITY_WORDS.get(r.metric, r.metric).capitalize()} differs across {r.factor} "
                   f"(H = {r.h:.1f}, {format_p(r.p_adjusted, adjusted=True)}; Kruskal–Wallis).")
    if not out:
        out.append("No evidence that tissue amount (tissue fraction, tiles a slide) or sharpness differ across "
                   "any factor (all adjusted p >= 0.05).")
    return out


def comparison_findings(table: pd.DataFrame, names: tuple[str, str], aliases: dict | None = None) -> list[str]:
    """Sentences on how each factor's association changed between two audits.

    An association is called present on a side only at adjusted p < 0.05; a change is never
    stated between two values that are both "no evidence".

    Parameters
    ----------
    table : DataFrame
        Output of :func:`tilewright.audit.compare.compare_audits`.
    names : (str, str)
        Names of the two audits (for example ``("raw tiles", "normalized tiles")``).
    aliases : dict, optional
        Factor -> its aliases (``CohortAudit.notes["_aliases"]``); an alias whose values match
        its group's first factor in both audits is named with it instead of repeated.
    """
    first, second = names
    out, quiet = [], []
    aliases = aliases or {}
    lead_of = {m: lead for lead, members in aliases.items() for m in members}
    cols = ["cramers_v_before", "cramers_v_after", "p_adjusted_before", "p_adjusted_after"]
    values = {row.factor: tuple(getattr(row, c) for c in cols) for row in table.itertuples()}
    for row in table.itertuples():
        lead = lead_of.get(row.factor)
        if lead is not None and _same(values.get(lead), values[row.factor]):
            continue
        shown = [m for m in aliases.get(row.factor, []) if _same(values.get(m), values[row.factor])]
        factor = f"{row.factor} (= {', '.join(shown)})" if shown else row.factor
        before = {"cramers_v": row.cramers_v_before, "p_adjusted": row.p_adjusted_before}
        after = {"cramers_v": row.cramers_v_after, "p_adjusted": row.p_adjusted_after}
        if any(math.isnan(v) for v in (row.cramers_v_before, row.cramers_v_after)):
            continue
        was, now = significant(before), significant(after)
        if was and not now:
            out.append(f"Colour clusters follow {factor} in the {first} ({_stats(before)}); in the {second} "
                       f"there is no evidence that they do ({_stats(after)}).")
        elif was and now:
            out.append(f"Colour clusters still follow {factor} in the {second} ({_stats(after)}; "
                       f"{first}: {_stats(before)}).")
        elif now:
            out.append(f"Colour clusters follow {factor} in the {second} only ({_stats(after)}; "
                       f"{first}: no evidence, {_stats(before)}).")
        else:
            quiet.append(str(factor))
    if quiet:
        out.append(f"No evidence that colour clusters follow {', '.join(quiet)} in either the {first} or the "
                   f"{second} (all adjusted p >= 0.05).")
    return out


def _same(a, b) -> bool:
    """Two tuples of statistics equal (NaN equals NaN)."""
    if a is None or b is None:
        return False
    return all((math.isnan(x) and math.isnan(y)) or abs(x - y) < 1e-12 for x, y in zip(a, b))
