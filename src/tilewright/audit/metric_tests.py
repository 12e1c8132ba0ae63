"""Does a metric differ across a factor's levels: Kruskal–Wallis H with exact or permutation
p-values, Benjamini–Hochberg adjusted within each family of tests.

The chi-square approximation of H needs five or more slides a group (Kruskal & Wallis 1952);
audits of 10-40 slides a site often have fewer, so the p-value of H comes from rearranging the
factor's levels over the slides (:mod:`tilewright.audit.permutation`): exact when there are few
rearrangements, otherwise from 10,000 or more seeded random ones. An audit runs some thirty
metrics against every factor, so the p-values are adjusted for the false discovery rate
(Benjamini & Hochberg 1995) before any finding is stated. A family is one factor's metrics of one
report section (its ~27 colour and stain metrics; its tissue-amount and sharpness metrics): the
question each family answers is "which of these metrics differ across this factor".

References
----------
Kruskal WH, Wallis WA (1952). Use of ranks in one-criterion variance analysis. Journal of the
American Statistical Association 47(260):583-621.
Benjamini Y, Hochberg Y (1995). Journal of the Royal Statistical Society B 57(1):289-300.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import stats

from tilewright.audit.fdr import bh_adjust
from tilewright.audit.permutation import EXACT_LIMIT, N_RESAMPLES, reaching, rearrangements, stable_seed, tail_p

__all__ = ["kruskal_h", "kruskal_test", "kruskal_table"]

KRUSKAL_COLUMNS = ["factor", "metric", "section", "h", "p_value", "p_adjusted", "exact", "n_groups", "n_slides",
                   "alias_of"]


def kruskal_h(values, codes) -> np.ndarray:
    """Kruskal–Wallis H (tie-corrected) of ``values`` grouped by each row of ``codes``.

    Parameters
    ----------
    values : array_like, shape (n,) or (n, K)
        One variable, or K variables tested against the same groupings.
    codes : array_like of int, shape (n,) or (M, n)
        Group of every value; one grouping a row (all with the same group sizes).

    Returns
    -------
    ndarray, shape (M,) or (M, K)
        ``H = [12 / (N (N + 1)) sum R_g^2 / n_g - 3 (N + 1)] / [1 - sum(t^3 - t) / (N^3 - N)]``
        with ``R_g`` the rank sums (mid-ranks for ties) and ``t`` the sizes of tied runs; NaN
        when every value is equal.

    References
    ----------
    Kruskal WH, Wallis WA (1952). Journal of the American Statistical Association
    47(260):583-621, equations (1.1) and (1.4).
    """
    values = np.asarray(values, dtype=np.float64)
    single = values.ndim == 1
    table = values[:, None] if single else values
    codes = np.atleast_2d(np.asarray(codes, dtype=np.int64))
    n, k = table.shape
    ranks = stats.rankdata(table, axis=0)
    correction = np.array([1.0 - float(((t := np.unique(col, return_counts=True)[1].astype(np.float64)) ** 3 - t).sum())
                           / (n**3 - n) for col in table.T])
    g = int(codes.max()) + 1
    sizes = np.bincount(codes[0], minlength=g).astype(np.float64)
    used = sizes > 0
    h = np.empty((codes.shape[0], k))
    step = max(1, 4_000_000 // (min(g, ONE_HOT_GROUPS) * n))
    for start in range(0, codes.shape[0], step):
        block = codes[start:start + step]
        sums = _rank_sums(block, ranks, g)
        h[start:start + step] = (12.0 / (n * (n + 1)) * (sums[:, used, :] ** 2 / sizes[used][None, :, None]).sum(axis=1)
                                 - 3.0 * (n + 1))
    with np.errstate(divide="ignore", invalid="ignore"):
        h = np.where(correction > 0, h / np.where(correction > 0, correction, 1.0), np.nan)
    return h[:, 0] if single else h


#: Up to this many groups the rank sums are one matrix product with one-hot group indicators;
#: with more (a factor with a level a patient) they are counted, at a cost that does not grow
#: with the number of groups.
ONE_HOT_GROUPS = 16


def _rank_sums(block: np.ndarray, ranks: np.ndarray, g: int) -> np.ndarray:
    """(m, g, K) sums of ``ranks`` (n, K) over each group of each row of ``block`` (m, n)."""
    m, n = block.shape
    k = ranks.shape[1]
    if g <= ONE_HOT_GROUPS:
        onehot = (block[:, None, :] == np.arange(g)[None, :, None]).astype(np.float64)
        return (onehot.reshape(-1, n) @ ranks).reshape(m, g, k)
    flat = (np.arange(m, dtype=np.int64)[:, None] * g + block).ravel()
    sums = np.empty((m, g, k))
    for j in range(k):
        sums[:, :, j] = np.bincount(flat, weights=np.tile(ranks[:, j], m), minlength=m * g).reshape(m, g)
    return sums


def kruskal_test(values, groups, *, exact_limit: int = EXACT_LIMIT, n_resamples: int = N_RESAMPLES,
                 seed=0) -> tuple[float, float, bool]:
    """Kruskal–Wallis H of ``values`` across ``groups`` and its exact or permutation p-value.

    Parameters
    ----------
    values : array_like of float
    groups : array_like
        Level of every value (aligned; pairs with a missing value are left out).
    exact_limit, n_resamples, seed :
        See :func:`tilewright.audit.permutation.rearrangements`.

    Returns
    -------
    (h, p_value, exact)
        NaN H and p when fewer than two groups have data or every value is equal.
    """
    values = pd.to_numeric(pd.Series(list(values), dtype=object), errors="coerce").to_numpy(dtype=np.float64)
    codes = pd.factorize(pd.Series(list(groups), dtype=object), sort=True)[0].astype(np.int64)
    keep = (codes >= 0) & ~np.isnan(values)
    return _test(values[keep], codes[keep], lambda c: rearrangements(
        c, exact_limit=exact_limit, n_resamples=n_resamples, seed=seed))


def _test(values: np.ndarray, codes: np.ndarray, null) -> tuple[float, float, bool]:
    """H and its p-value for present ``values`` and group ``codes``."""
    h, p, exact = _tests(values[:, None], codes, null)
    return float(h[0]), float(p[0]), exact


def _tests(table: np.ndarray, codes: np.ndarray, null) -> tuple[np.ndarray, np.ndarray, bool]:
    """H and p-values of the K columns of ``table`` (n, K), all present, against ``codes``."""
    k = table.shape[1]
    nan = np.full(k, np.nan)
    if codes.size == 0 or np.unique(codes).size < 2:
        return nan, nan.copy(), True
    codes = np.unique(codes, return_inverse=True)[1].astype(np.int64)
    varies = np.ptp(table, axis=0) > 0
    if not varies.any():
        return nan, nan.copy(), True
    rearranged = null(codes)
    observed = kruskal_h(table[:, varies], codes)[0]
    reached = np.zeros(observed.size, dtype=np.int64)
    for block in rearranged.blocks():  # memory bounded whatever the number of slides
        reached += reaching(kruskal_h(table[:, varies], block), observed)
    h, p = nan.copy(), nan.copy()
    h[varies] = observed
    p[varies] = [tail_p(reached[j], rearranged.count, rearranged.exact) for j in range(observed.size)]
    return h, p, rearranged.exact


def kruskal_table(metrics: pd.DataFrame, factors: pd.DataFrame, *, sections: dict | None = None, seed: int = 0,
                  exact_limit: int = EXACT_LIMIT, n_resamples: int = N_RESAMPLES,
                  aliases: dict | None = None) -> pd.DataFrame:
    """Kruskal–Wallis test of every metric across the levels of every factor.

    Parameters
    ----------
    metrics : DataFrame
        Numeric per-slide metrics indexed by slide id.
    factors : DataFrame
        Categorical factors indexed by slide id.
    sections : dict, optional
        Metric -> section name (for example ``"colour"`` / ``"quality"``); p-values are adjusted
        within each factor × section. Default: one section.
    seed : int
        Seed of the random rearrangements (mixed with the factor's name).
    exact_limit, n_resamples :
        See :func:`kruskal_test`.
    aliases : dict, optional
        As for :func:`tilewright.audit.association.association_table`: an alias group is tested
        once; its other factors repeat the first one's rows (``alias_of``).

    Returns
    -------
    DataFrame
        Columns ``factor, metric, section, h, p_value, p_adjusted`` (Benjamini–Hochberg within
        each factor × section)``, exact, n_groups, n_slides, alias_of``, sorted by factor then
        p-value. H and p are NaN when fewer than two groups have data or all values are equal.
    """
    from tilewright.audit.association import repeat_for_aliases

    rows = []
    members = {m: lead for lead, ms in (aliases or {}).items() for m in ms}
    table = metrics.apply(pd.to_numeric, errors="coerce").to_numpy(dtype=np.float64)
    for factor in factors.columns:
        if factor in members:
            continue
        levels = factors[factor].reindex(metrics.index)
        all_codes = pd.factorize(levels.astype(object), sort=True)[0].astype(np.int64)
        cache: dict = {}

        def null(codes, _factor=factor, _cache=cache):
            key = codes.tobytes()
            if key not in _cache:
                _cache[key] = rearrangements(codes, exact_limit=exact_limit, n_resamples=n_resamples,
                                             seed=stable_seed(seed, _factor))
            return _cache[key]

        present = (all_codes >= 0)[:, None] & ~np.isnan(table)
        by_mask: dict = {}
        for j in range(table.shape[1]):  # metrics present on the same slides are tested together
            by_mask.setdefault(present[:, j].tobytes(), []).append(j)
        results = {}
        for columns in by_mask.values():
            keep = present[:, columns[0]]
            h, p, exact = _tests(table[np.ix_(keep, columns)], all_codes[keep], null)
            for i, j in enumerate(columns):
                results[j] = (h[i], p[i], exact, int(np.unique(all_codes[keep]).size), int(keep.sum()))
        for j, metric in enumerate(metrics.columns):
            h, p, exact, groups, slides = results[j]
            rows.append({"factor": factor, "metric": metric, "section": (sections or {}).get(metric, "all"),
                         "h": float(h), "p_value": float(p), "exact": exact, "n_groups": groups, "n_slides": slides})
    out = pd.DataFrame(rows, columns=[c for c in KRUSKAL_COLUMNS if c not in ("p_adjusted", "alias_of")])
    adjusted = np.full(len(out), np.nan)
    for _, family in out.groupby(["factor", "section"], sort=False).groups.items():
        index = np.asarray(family)
        adjusted[index] = bh_adjust(out["p_value"].to_numpy(dtype=np.float64)[index])
    out.insert(5, "p_adjusted", adjusted)
    out = repeat_for_aliases(out, members)
    return out.sort_values(["factor", "p_value"], na_position="last", kind="stable").reset_index(drop=True)
