"""How large a colour gap is: CIEDE2000 between the mean tissue colours of a factor's levels.

A cluster association (Cramér's V) says whether colour follows a factor, not by how much: two
sites can fall into separate colour clusters and still differ by a colour difference nobody can
see, or differ by one a model will learn. This module measures the size.

A slide's tissue colour is the mean CIELAB (D65, ``skimage.color.rgb2lab``) of its tissue pixels
(the audit's ``lab_l_mean``, ``lab_a_mean``, ``lab_b_mean``); a level's colour is the mean over its
slides; the gap between two levels is the CIEDE2000 difference of their colours. The interval
is a percentile bootstrap over slides: slides are redrawn with replacement within each level
(Efron & Tibshirani 1993), the gap recomputed, and the 2.5th and 97.5th percentiles reported.
A before/after comparison redraws the same slides on both sides (paired).

Sizes in words (common practice for CIEDE2000): below 1 not noticeable side by side, 1-3
noticeable on close comparison, above 3 visible at a glance.

References
----------
Sharma G, Wu W, Dalal EN (2005). The CIEDE2000 color-difference formula: implementation notes,
supplementary test data, and mathematical observations. Color Research & Application
30(1):21-30.
Efron B, Tibshirani RJ (1993). An Introduction to the Bootstrap. Chapman & Hall.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from tilewright.audit.permutation import stable_seed

__all__ = ["LAB_COLUMNS", "colour_gaps", "paired_gaps", "gap_words", "gap_sentence", "gap_summary", "gap_aim", "N_BOOTSTRAP",
           "AIM_SHARE", "AIM_MAX"]

LAB_COLUMNS = ("lab_l_mean", "lab_a_mean", "lab_b_mean")
#: Bootstrap redraws of the slides for each gap's interval.
N_BOOTSTRAP = 2000
#: CIEDE2000 below this: not noticeable side by side; above VISIBLE: visible at a glance.
SMALL = 1.0
VISIBLE = 3.0
_COLUMNS = ["factor", "level_a", "level_b", "n_a", "n_b", "gap", "gap_lo", "gap_hi"]
#: Factors with more levels than this get no gap table: batch factors (site, scanner, stain batch)
#: have a few levels, while a factor with a level a patient has O(levels²) pairs of one or two
#: slides each, none of them a batch (500 patients: 125,000 pairs x the bootstrap).
MAX_GAP_LEVELS = 24


def _deltae(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    from skimage.color import deltaE_ciede2000

    return np.asarray(deltaE_ciede2000(a, b), dtype=np.float64)


def _pairs(factors: pd.DataFrame, labs: pd.DataFrame):
    """(factor, level a, level b, row positions of a, row positions of b) for every level pair."""
    for factor in factors.columns:
        values = factors[factor].reindex(labs.index)
        levels = sorted(v for v in values.dropna().unique())
        if len(levels) > MAX_GAP_LEVELS:
            import logging

            logging.getLogger("tilewright").info("colour gaps: %s left out (%d levels; pairs are measured for "
                                                 "factors of at most %d)", factor, len(levels), MAX_GAP_LEVELS)
            continue
        positions = {lv: np.flatnonzero((values == lv).to_numpy()) for lv in levels}
        for i, a in enumerate(levels):
            for b in levels[i + 1:]:
                if len(positions[a]) and len(positions[b]):
                    yield factor, a, b, positions[a], positions[b]


def _gap_draws(labs: np.ndarray, pa: np.ndarray, pb: np.ndarray, rng: np.random.Generator, n: int) -> np.ndarray:
    """The gap for ``n`` bootstrap redraws of the slides of each level."""
    da = pa[rng.integers(0, len(pa), (n, len(pa)))]
    db = pb[rng.integers(0, len(pb), (n, len(pb)))]
    return _deltae(labs[da].mean(axis=1), labs[db].mean(axis=1))


def _valid(metrics: pd.DataFrame) -> pd.DataFrame:
    return metrics[list(LAB_COLUMNS)].dropna()


def colour_gaps(metrics: pd.DataFrame, factors: pd.DataFrame, *, n_bootstrap: int = N_BOOTSTRAP,
                seed: int = 0) -> pd.DataFrame:
    """The CIEDE2000 gap between every pair of levels of every factor, with a bootstrap interval.

    A factor with more than :data:`MAX_GAP_LEVELS` levels (a level a patient, say) is left out.

    Parameters
    ----------
    metrics : DataFrame
        Per-slide audit metrics (``lab_l_mean``, ``lab_a_mean``, ``lab_b_mean``), indexed by slide.
    factors : DataFrame
        Categorical factors indexed by slide.
    n_bootstrap : int
        Redraws of the slides for the interval.
    seed : int
        Seed of the redraws (mixed with the factor and level names).

    Returns
    -------
    DataFrame
        ``factor, level_a, level_b, n_a, n_b, gap, gap_lo, gap_hi``, one row a level pair.
    """
    return _one_side(_valid(metrics), factors, n_bootstrap, seed)


def _one_side(valid: pd.DataFrame, factors: pd.DataFrame, n_bootstrap: int, seed: int) -> pd.DataFrame:
    labs = valid.to_numpy(np.float64)
    rows = []
    for factor, a, b, pa, pb in _pairs(factors, valid):
        gap = float(_deltae(labs[pa].mean(axis=0), labs[pb].mean(axis=0)))
        draws = _gap_draws(labs, pa, pb, np.random.default_rng(stable_seed(seed, factor, a, b)), n_bootstrap)
        lo, hi = np.percentile(draws, [2.5, 97.5])
        rows.append([factor, a, b, len(pa), len(pb), gap, float(lo), float(hi)])
    return pd.DataFrame(rows, columns=_COLUMNS)


def paired_gaps(before: pd.DataFrame, after: pd.DataFrame, factors: pd.DataFrame, *,
                n_bootstrap: int = N_BOOTSTRAP, seed: int = 0) -> pd.DataFrame:
    """Every level pair's gap before and after (the same slides, the same redraws on both sides).

    Parameters
    ----------
    before, after : DataFrame
        Per-slide metrics of the two sides (for example raw and normalized tiles).
    factors : DataFrame
    n_bootstrap, seed :
        As for :func:`colour_gaps`.

    Returns
    -------
    DataFrame
        ``factor, level_a, level_b, n_a, n_b, gap_before, gap_before_lo, gap_before_hi, gap_after,
        gap_after_lo, gap_after_hi, change`` (``change``: after / before - 1; -0.84 is "84 %
        smaller"); slides missing a colour on either side are left out of both.
    """
    common = _valid(before).index.intersection(_valid(after).index)
    sides = [_one_side(_valid(m).loc[common], factors, n_bootstrap, seed) for m in (before, after)]
    keys = ["factor", "level_a", "level_b", "n_a", "n_b"]
    named = [side.rename(columns={c: c.replace("gap", f"gap_{when}", 1) for c in ("gap", "gap_lo", "gap_hi")})
             for side, when in zip(sides, ("before", "after"))]
    table = named[0].merge(named[1], on=keys)
    table["change"] = table["gap_after"] / table["gap_before"].where(table["gap_before"] > 0) - 1.0
    return table


def gap_words(gap: float) -> str:
    """``not noticeable`` / ``noticeable on close comparison`` / ``visible at a glance``."""
    if gap < SMALL:
        return "not noticeable side by side"
    return "noticeable on close comparison" if gap <= VISIBLE else "visible at a glance"


def gap_summary(table: pd.DataFrame) -> pd.DataFrame:
    """The largest gap of each factor (its level pair), from :func:`colour_gaps` or :func:`paired_gaps`."""
    if table.empty:
        return table
    key = "gap_before" if "gap_before" in table.columns else "gap"
    idx = table.groupby("factor", sort=False)[key].idxmax()
    return table.loc[idx].reset_index(drop=True)


def _interval(row, prefix: str) -> str:
    return f"{row[prefix]:.1f} [{row[prefix + '_lo']:.1f}-{row[prefix + '_hi']:.1f}]"


def gap_sentence(row, aliases: dict | None = None, names=("raw", "normalized")) -> str:
    """One sentence on a factor's largest gap (a row of :func:`gap_summary`)."""
    from tilewright.audit.findings import factor_name

    factor = factor_name(row["factor"], aliases)
    pair = f"{row['level_a']} / {row['level_b']}"
    if "gap_before" not in row.index:
        return (f"The {factor} colour gap ({pair}, CIEDE2000 of mean tissue colour, 95 % interval over slides) is "
                f"{_interval(row, 'gap')}: {gap_words(row['gap'])}.")
    change = row["change"]
    pct = "" if change is None or math.isnan(change) else f", {100 * change:+.0f} %"
    verdict = "widened" if row["gap_after"] > row["gap_before"] else "narrowed"
    return (f"The {factor} colour gap ({pair}, CIEDE2000 of mean tissue colour, 95 % interval over slides) "
            f"{verdict} from {_interval(row, 'gap_before')} in the {names[0]} to {_interval(row, 'gap_after')} in "
            f"the {names[1]}{pct}: now {gap_words(row['gap_after'])}.")


#: Aims of a normalization (issue 27): every level pair's gap after at most AIM_SHARE of before and
#: at most AIM_MAX (CIEDE2000), and no pair wider than before.
AIM_SHARE = 0.30
AIM_MAX = 3.0


def gap_aim(table: pd.DataFrame, factor: str = "site") -> tuple[bool, list[str]]:
    """Whether normalization closed ``factor``'s colour gaps, and one line a level pair.

    Parameters
    ----------
    table : DataFrame
        :func:`paired_gaps` (or :func:`tilewright.audit.compare.compare_gaps`) output.
    factor : str

    Returns
    -------
    (bool, list of str)
        True when every pair of ``factor``'s levels meets the aim (after <= AIM_SHARE x before,
        after <= AIM_MAX, not wider); lines like ``"site-north / site-south: site gap 5.6 -> 0.9
        (-84 %)"``. (False, []) when the factor is absent.
    """
    rows = table[table["factor"] == factor]
    lines, met = [], len(rows) > 0
    for _, row in rows.iterrows():
        before, after = float(row["gap_before"]), float(row["gap_after"])
        change = f" ({100 * (after / before - 1):+.0f} %)" if before > 0 else ""
        lines.append(f"{row['level_a']} / {row['level_b']}: {factor} gap {before:.1f} → {after:.1f}{change}")
        met &= after <= AIM_SHARE * before and after <= AIM_MAX and after <= before
    return met, lines
