"""How strongly slide clusters follow a metadata factor: contingency tables, chi-square,
Cramér's V, and per-metric Kruskal–Wallis tests.

The chi-square statistic is computed here from the observed and expected counts (no continuity
correction), so the tests can check it against ``scipy.stats.chi2_contingency(table,
correction=False)`` as an independent reference.

References
----------
Cramér H (1946). Mathematical Methods of Statistics. Princeton University Press, section 21.9.
Pearson K (1900). On the criterion that a given system of deviations from the probable in the
case of a correlated system of variables is such that it can be reasonably supposed to have
arisen from random sampling. Philosophical Magazine 50(302):157-175.
Kruskal WH, Wallis WA (1952). Use of ranks in one-criterion variance analysis. Journal of the
American Statistical Association 47(260):583-621.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import stats

__all__ = [
    "ChiSquare",
    "contingency_table",
    "chi_square",
    "cramers_v",
    "association_table",
    "kruskal_table",
]


@dataclass(frozen=True)
class ChiSquare:
    """Pearson chi-square test of independence of a contingency table.

    Attributes
    ----------
    chi2 : float
        Test statistic (no continuity correction).
    p_value : float
        Upper tail of the chi-square distribution with ``dof`` degrees of freedom.
    dof : int
        ``(rows - 1) * (columns - 1)`` after dropping empty rows and columns.
    n : int
        Number of observations in the table.
    cramers_v : float
        ``sqrt(chi2 / (n * (min(rows, columns) - 1)))``; NaN when a side has one level.
    """

    chi2: float
    p_value: float
    dof: int
    n: int
    cramers_v: float


def contingency_table(rows, columns) -> pd.DataFrame:
    """Counts of each (row level, column level) pair, ignoring pairs with a missing value.

    Parameters
    ----------
    rows, columns : array_like
        Two aligned sequences of labels (for example cluster and site of every slide).

    Returns
    -------
    DataFrame
        One row per level of ``rows``, one column per level of ``columns``, integer counts.
    """
    frame = pd.DataFrame({"row": list(rows), "column": list(columns)}).dropna()
    if frame.empty:
        return pd.DataFrame(dtype=np.int64)
    return pd.crosstab(frame["row"], frame["column"]).astype(np.int64)


def chi_square(table) -> ChiSquare:
    """Pearson chi-square test of independence and Cramér's V of a contingency table.

    Parameters
    ----------
    table : array_like, shape (r, c)
        Non-negative counts. Rows or columns that sum to zero are dropped first.

    Returns
    -------
    ChiSquare
        Statistic, p-value, degrees of freedom, count and Cramér's V. When fewer than two
        non-empty rows or columns remain, the statistic is 0, the p-value 1 and V is NaN
        (the factor cannot be associated with anything).

    Raises
    ------
    ValueError
        For negative counts or a table that is not two-dimensional.

    References
    ----------
    Pearson K (1900). Philosophical Magazine 50(302):157-175.
    Cramér H (1946). Mathematical Methods of Statistics. Princeton University Press.
    """
    observed = np.asarray(table, dtype=np.float64)
    if observed.ndim != 2:
        raise ValueError(f"a contingency table must be two-dimensional, got shape {observed.shape}")
    if (observed < 0).any():
        raise ValueError("a contingency table holds counts; it has negative entries")
    observed = observed[observed.sum(axis=1) > 0][:, observed.sum(axis=0) > 0]
    n = int(round(observed.sum()))
    r, c = observed.shape if observed.size else (0, 0)
    if r < 2 or c < 2:
        return ChiSquare(chi2=0.0, p_value=1.0, dof=0, n=n, cramers_v=float("nan"))
    expected = np.outer(observed.sum(axis=1), observed.sum(axis=0)) / n
    chi2 = float(((observed - expected) ** 2 / expected).sum())
    dof = (r - 1) * (c - 1)
    p_value = float(stats.chi2.sf(chi2, dof))
    return ChiSquare(chi2=chi2, p_value=p_value, dof=dof, n=n, cramers_v=cramers_v(chi2, n, r, c))


def cramers_v(chi2: float, n: int, rows: int, columns: int) -> float:
    """Cramér's V: a chi-square statistic scaled to 0 (independent) .. 1 (one determines the other).

    Parameters
    ----------
    chi2 : float
        Pearson chi-square statistic of the table.
    n : int
        Number of observations.
    rows, columns : int
        Table shape (non-empty levels on each side).

    Returns
    -------
    float
        ``sqrt(chi2 / (n * (min(rows, columns) - 1)))``, or NaN when ``min(rows, columns) < 2``.

    References
    ----------
    Cramér H (1946). Mathematical Methods of Statistics. Princeton University Press, p. 282.
    """
    k = min(rows, columns) - 1
    if k < 1 or n <= 0:
        return float("nan")
    return float(min(1.0, math.sqrt(chi2 / (n * k))))


def association_table(clusters: pd.Series, factors: pd.DataFrame) -> pd.DataFrame:
    """Chi-square test and Cramér's V of clusters against every factor.

    Parameters
    ----------
    clusters : Series
        Cluster of each slide, indexed by slide id.
    factors : DataFrame
        Categorical factors (one column each), indexed by slide id; missing values are left out
        of that factor's table.

    Returns
    -------
    DataFrame
        Columns ``factor, cramers_v, p_value, chi2, dof, n_slides, n_levels, n_clusters``,
        sorted by decreasing Cramér's V.
    """
    rows = []
    for name in factors.columns:
        aligned = factors[name].reindex(clusters.index)
        table = contingency_table(clusters.to_numpy(), aligned.to_numpy())
        result = chi_square(table.to_numpy()) if table.size else chi_square(np.zeros((0, 0)))
        rows.append(
            {
                "factor": name,
                "cramers_v": result.cramers_v,
                "p_value": result.p_value,
                "chi2": result.chi2,
                "dof": result.dof,
                "n_slides": result.n,
                "n_levels": int(aligned.dropna().nunique()),
                "n_clusters": int(clusters[aligned.notna()].nunique()),
            }
        )
    columns = ["factor", "cramers_v", "p_value", "chi2", "dof", "n_slides", "n_levels", "n_clusters"]
    out = pd.DataFrame(rows, columns=columns)
    return out.sort_values("cramers_v", ascending=False, na_position="last", kind="stable").reset_index(
        drop=True
    )


def kruskal_table(metrics: pd.DataFrame, factors: pd.DataFrame) -> pd.DataFrame:
    """Kruskal–Wallis H test of every metric across the levels of every factor.

    Parameters
    ----------
    metrics : DataFrame
        Numeric per-slide metrics indexed by slide id.
    factors : DataFrame
        Categorical factors indexed by slide id.

    Returns
    -------
    DataFrame
        Columns ``factor, metric, h, p_value, n_groups, n_slides``, sorted by factor then
        p-value. H and p are NaN when fewer than two groups have data or all values are equal.

    References
    ----------
    Kruskal WH, Wallis WA (1952). Journal of the American Statistical Association
    47(260):583-621.
    """
    rows = []
    for factor in factors.columns:
        levels = factors[factor].reindex(metrics.index)
        for metric in metrics.columns:
            values = pd.to_numeric(metrics[metric], errors="coerce")
            keep = levels.notna() & values.notna()
            groups = [g.to_numpy() for _, g in values[keep].groupby(levels[keep], observed=True)]
            groups = [g for g in groups if g.size]
            h = p = float("nan")
            if len(groups) >= 2 and np.ptp(np.concatenate(groups)) > 0:
                try:
                    h, p = (float(x) for x in stats.kruskal(*groups))
                except ValueError:  # every value identical
                    pass
            rows.append(
                {
                    "factor": factor,
                    "metric": metric,
                    "h": h,
                    "p_value": p,
                    "n_groups": len(groups),
                    "n_slides": int(keep.sum()),
                }
            )
    out = pd.DataFrame(rows, columns=["factor", "metric", "h", "p_value", "n_groups", "n_slides"])
    return out.sort_values(["factor", "p_value"], na_position="last", kind="stable").reset_index(drop=True)
