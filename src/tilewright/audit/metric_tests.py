"""Does a metric differ across a factor's levels: Kruskal–Wallis H with exact or permutation
p-values, Benjamini–Hochberg adjusted over every test of the table.

The chi-square approximation of H needs five or more slides a group (Kruskal & Wallis 1952);
audits of 10-40 slides a site often have fewer, so the p-value of H comes from rearranging the
factor's levels over the slides (:mod:`tilewright.audit.permutation`): exact when there are few
rearrangements, otherwise from 10,000 or more seeded random ones. An audit runs some thirty
metrics against every factor, so the p-values are adjusted for the false discovery rate
(Benjamini & Hochberg 1995) over the whole table before any finding is stated.

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
from tilewright.audit.permutation import EXACT_LIMIT, N_RESAMPLES, rearrangements, stable_seed, upper_tail

__all__ = ["kruskal_h", "kruskal_test", "kruskal_table"]

KRUSKAL_COLUMNS = ["factor", "metric", "h", "p_value", "p_adjusted", "exact", "n_groups", "n_slides"]


def kruskal_h(values, codes) -> np.ndarray:
    """Kruskal–Wallis H (tie-corrected) of ``values`` grouped by each row of ``codes``.

    Parameters
    ----------
    values : array_like, shape (n,)
    codes : array_like of int, shape (n,) or (M, n)
        Group of every value; one grouping a row.

    Returns
    -------
    ndarray, shape (M,)
        ``H = [12 / (N (N + 1)) sum R_g^2 / n_g - 3 (N + 1)] / [1 - sum(t^3 - t) / (N^3 - N)]``
        with ``R_g`` the rank sums (mid-ranks for ties) and ``t`` the sizes of tied runs; NaN
        when every value is equal.

    References
    ----------
    Kruskal WH, Wallis WA (1952). Journal of the American Statistical Association
    47(260):583-621, equations (1.1) and (1.4).
    """
    values = np.asarray(values, dtype=np.float64)
    codes = np.atleast_2d(np.asarray(codes, dtype=np.int64))
    n = values.size
    ranks = stats.rankdata(values)
    _, ties = np.unique(values, return_counts=True)
    correction = 1.0 - float((ties.astype(np.float64) ** 3 - ties).sum()) / (n**3 - n)
    if correction <= 0:
        return np.full(codes.shape[0], np.nan)
    g = int(codes.max()) + 1
    m = codes.shape[0]
    flat = (np.arange(m)[:, None] * g + codes).ravel()
    sums = np.bincount(flat, weights=np.broadcast_to(ranks, codes.shape).ravel(), minlength=m * g).reshape(m, g)
    sizes = np.bincount(codes[0], minlength=g).astype(np.float64)
    used = sizes > 0
    h = 12.0 / (n * (n + 1)) * (sums[:, used] ** 2 / sizes[used]).sum(axis=1) - 3.0 * (n + 1)
    return h / correction


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
    """H and its p-value for present ``values`` and group ``codes`` (-1 never occurs here)."""
    if codes.size == 0 or np.unique(codes).size < 2 or np.ptp(values) == 0:
        return float("nan"), float("nan"), True
    codes = np.unique(codes, return_inverse=True)[1].astype(np.int64)
    rearranged = null(codes)
    h = float(kruskal_h(values, codes)[0])
    return h, upper_tail(kruskal_h(values, rearranged.codes), h, rearranged.exact), rearranged.exact


def kruskal_table(metrics: pd.DataFrame, factors: pd.DataFrame, *, seed: int = 0,
                  exact_limit: int = EXACT_LIMIT, n_resamples: int = N_RESAMPLES) -> pd.DataFrame:
    """Kruskal–Wallis test of every metric across the levels of every factor.

    Parameters
    ----------
    metrics : DataFrame
        Numeric per-slide metrics indexed by slide id.
    factors : DataFrame
        Categorical factors indexed by slide id.
    seed : int
        Seed of the random rearrangements (mixed with the factor's name).
    exact_limit, n_resamples :
        See :func:`kruskal_test`.

    Returns
    -------
    DataFrame
        Columns ``factor, metric, h, p_value, p_adjusted`` (Benjamini–Hochberg over every
        test of the table)``, exact, n_groups, n_slides``, sorted by factor then p-value.
    """
    rows = []
    table = metrics.apply(pd.to_numeric, errors="coerce").to_numpy(dtype=np.float64)
    for factor in factors.columns:
        levels = factors[factor].reindex(metrics.index)
        all_codes = pd.factorize(levels.astype(object), sort=True)[0].astype(np.int64)
        cache: dict = {}

        def null(codes, _factor=factor, _cache=cache):
            key = codes.tobytes()
            if key not in _cache:
                _cache[key] = rearrangements(codes, exact_limit=exact_limit, n_resamples=n_resamples,
                                             seed=stable_seed(seed, _factor))
            return _cache[key]

        for j, metric in enumerate(metrics.columns):
            keep = (all_codes >= 0) & ~np.isnan(table[:, j])
            h, p, exact = _test(table[keep, j], all_codes[keep], null)
            rows.append({"factor": factor, "metric": metric, "h": h, "p_value": p, "exact": exact,
                         "n_groups": int(np.unique(all_codes[keep]).size), "n_slides": int(keep.sum())})
    out = pd.DataFrame(rows, columns=[c for c in KRUSKAL_COLUMNS if c != "p_adjusted"])
    out.insert(4, "p_adjusted", bh_adjust(out["p_value"].to_numpy(dtype=np.float64)))
    return out.sort_values(["factor", "p_value"], na_position="last", kind="stable").reset_index(drop=True)
