"""How strongly slide clusters follow a metadata factor: contingency tables, Pearson's
statistic, Cramér's V with Bergsma's bias correction, and exact or permutation p-values.

Small cohorts make two classical habits misleading. Cramér's V is biased upward in small tables
(a random three-level factor on 12 slides gives V near 0.4 on average), so the bias-corrected V
of Bergsma (2013) is what the audit shows. And the chi-square approximation of Pearson's
statistic needs expected counts near five or more (Cochran 1954), far from what 10-40 slides
split into clusters × levels give, so p-values come from the statistic's exact conditional
distribution: every rearrangement of the factor's levels over the slides (margins fixed), all
enumerated when few, otherwise 10,000 or more seeded random ones
(:mod:`tilewright.audit.permutation`).

References
----------
Bergsma W (2013). A bias-correction for Cramér's V and Tschuprow's T. Journal of the Korean
Statistical Society 42(3):323-328.
Cramér H (1946). Mathematical Methods of Statistics. Princeton University Press, section 21.9.
Pearson K (1900). Philosophical Magazine 50(302):157-175.
Cochran WG (1954). Some methods for strengthening the common chi-square tests. Biometrics
10(4):417-451.
Freeman GH, Halton JH (1951). Note on an exact treatment of contingency, goodness of fit and
other problems of significance. Biometrika 38(1/2):141-149.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import special, stats

from tilewright.audit.fdr import bh_adjust
from tilewright.audit.permutation import (BLOCK_VALUES, EXACT_LIMIT, N_RESAMPLES, reaching, rearrangements, stable_seed,
                                          tail_p)

__all__ = [
    "ChiSquare",
    "AssociationTest",
    "contingency_table",
    "chi_square",
    "cramers_v",
    "bergsma_v",
    "association_test",
    "association_table",
]

#: Columns of :func:`association_table`.
ASSOCIATION_COLUMNS = ["factor", "cramers_v", "p_value", "p_adjusted", "cramers_v_uncorrected", "exact",
                       "n_rearrangements", "chi2", "dof", "n_slides", "n_levels", "n_clusters", "alias_of"]


@dataclass(frozen=True)
class ChiSquare:
    """Pearson's statistic of a contingency table with the classical large-sample p-value.

    Attributes
    ----------
    chi2 : float
        Test statistic (no continuity correction).
    p_value : float
        Upper tail of the chi-square distribution with ``dof`` degrees of freedom (asymptotic:
        not used for findings, see :func:`association_test`).
    dof : int
        ``(rows - 1) * (columns - 1)`` after dropping empty rows and columns.
    n : int
        Number of observations in the table.
    cramers_v : float
        Uncorrected ``sqrt(chi2 / (n * (min(rows, columns) - 1)))``; NaN when a side has one level.
    cramers_v_corrected : float
        Bergsma's (2013) bias-corrected V (:func:`bergsma_v`).
    """

    chi2: float
    p_value: float
    dof: int
    n: int
    cramers_v: float
    cramers_v_corrected: float


@dataclass(frozen=True)
class AssociationTest:
    """Exact or permutation test of independence of two labellings of the same slides.

    Attributes
    ----------
    cramers_v : float
        Bias-corrected Cramér's V (Bergsma 2013).
    cramers_v_uncorrected : float
    p_value : float
        Share of rearrangements whose statistic reaches the observed one (exact), or
        ``(1 + b) / (1 + B)`` of ``B`` seeded random rearrangements.
    exact : bool
    n_rearrangements : int
        Rearrangements enumerated or drawn.
    chi2, dof, n, rows, columns :
        Pearson's statistic, degrees of freedom, slides, non-empty levels on each side.
    """

    cramers_v: float
    cramers_v_uncorrected: float
    p_value: float
    exact: bool
    n_rearrangements: int
    chi2: float
    dof: int
    n: int
    rows: int
    columns: int


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


def _clean(table) -> np.ndarray:
    observed = np.asarray(table, dtype=np.float64)
    if observed.ndim != 2:
        raise ValueError(f"a contingency table must be two-dimensional, got shape {observed.shape}")
    if (observed < 0).any():
        raise ValueError("a contingency table holds counts; it has negative entries")
    return observed[observed.sum(axis=1) > 0][:, observed.sum(axis=0) > 0]


def chi_square(table) -> ChiSquare:
    """Pearson's statistic, its asymptotic p-value and Cramér's V of a contingency table.

    Parameters
    ----------
    table : array_like, shape (r, c)
        Non-negative counts. Rows or columns that sum to zero are dropped first.

    Returns
    -------
    ChiSquare
        When fewer than two non-empty rows or columns remain, the statistic is 0, the p-value 1
        and V is NaN (the factor cannot be associated with anything).

    Raises
    ------
    ValueError
        For negative counts or a table that is not two-dimensional.

    References
    ----------
    Pearson K (1900). Philosophical Magazine 50(302):157-175.
    Cramér H (1946). Mathematical Methods of Statistics. Princeton University Press.
    Bergsma W (2013). Journal of the Korean Statistical Society 42(3):323-328.
    """
    observed = _clean(table)
    n = int(round(observed.sum()))
    r, c = observed.shape if observed.size else (0, 0)
    if r < 2 or c < 2:
        return ChiSquare(0.0, 1.0, 0, n, float("nan"), float("nan"))
    expected = np.outer(observed.sum(axis=1), observed.sum(axis=0)) / n
    chi2 = float(((observed - expected) ** 2 / expected).sum())
    dof = (r - 1) * (c - 1)
    return ChiSquare(chi2, float(stats.chi2.sf(chi2, dof)), dof, n, cramers_v(chi2, n, r, c),
                     bergsma_v(chi2, n, r, c))


def cramers_v(chi2: float, n: int, rows: int, columns: int) -> float:
    """Cramér's V (uncorrected): ``sqrt(chi2 / (n * (min(rows, columns) - 1)))``.

    Returns NaN when ``min(rows, columns) < 2``. Biased upward in small tables; findings use
    :func:`bergsma_v`.

    References
    ----------
    Cramér H (1946). Mathematical Methods of Statistics. Princeton University Press, p. 282.
    """
    k = min(rows, columns) - 1
    if k < 1 or n <= 0:
        return float("nan")
    return float(min(1.0, math.sqrt(chi2 / (n * k))))


def bergsma_v(chi2: float, n: int, rows: int, columns: int) -> float:
    """Bias-corrected Cramér's V of Bergsma (2013).

    With ``phi2 = chi2 / n``::

        phi2~ = max(0, phi2 - (r - 1)(c - 1) / (n - 1))
        r~ = r - (r - 1)^2 / (n - 1),   c~ = c - (c - 1)^2 / (n - 1)
        V~ = sqrt(phi2~ / min(r~ - 1, c~ - 1))

    ``(r - 1)(c - 1) / (n - 1)`` is the expected ``phi2`` of independent variables, so V~ is
    near 0 on average under independence; a table where one side determines the other keeps
    V~ = 1 for the usual square cases.

    Parameters
    ----------
    chi2 : float
        Pearson's statistic.
    n : int
        Observations.
    rows, columns : int
        Non-empty levels on each side.

    Returns
    -------
    float
        In [0, 1]; NaN when a side has one level or ``n`` is too small for the correction.

    References
    ----------
    Bergsma W (2013). A bias-correction for Cramér's V and Tschuprow's T. Journal of the Korean
    Statistical Society 42(3):323-328.
    """
    if min(rows, columns) < 2 or n <= 1:
        return float("nan")
    phi2 = max(0.0, chi2 / n - (rows - 1) * (columns - 1) / (n - 1))
    r = rows - (rows - 1) ** 2 / (n - 1)
    c = columns - (columns - 1) ** 2 / (n - 1)
    k = min(r, c) - 1
    if k <= 0:
        return float("nan")
    return float(min(1.0, math.sqrt(phi2 / k)))


def _codes(values) -> np.ndarray:
    return pd.factorize(pd.Series(list(values), dtype=object), sort=True)[0].astype(np.int64)


def association_test(rows, columns, *, statistic: str = "chi2", exact_limit: int = EXACT_LIMIT,
                     n_resamples: int = N_RESAMPLES, seed=0) -> AssociationTest:
    """Exact or permutation test of independence of two labellings, with Cramér's V.

    The levels of ``columns`` are rearranged over the observations (both margins stay fixed,
    the conditional test of Fisher 1935 and Freeman & Halton 1951); every distinct rearrangement
    is enumerated when there are at most ``exact_limit``, otherwise ``n_resamples`` seeded
    random ones are drawn.

    Parameters
    ----------
    rows, columns : array_like
        Aligned labels (for example colour cluster and site of every slide); pairs with a
        missing value are left out.
    statistic : {"chi2", "probability"}
        ``"chi2"``: tables with Pearson's statistic at least the observed one are as extreme
        (the order of V); ``"probability"``: tables at most as probable as the observed one
        (Freeman & Halton 1951; for 2 × 2 tables this is Fisher's exact test, two-sided).
    exact_limit, n_resamples, seed :
        See :func:`tilewright.audit.permutation.rearrangements`.

    Returns
    -------
    AssociationTest
        p-value 1 and V NaN when either side has fewer than two levels.

    References
    ----------
    Freeman GH, Halton JH (1951). Biometrika 38(1/2):141-149.
    Bergsma W (2013). Journal of the Korean Statistical Society 42(3):323-328.
    """
    if statistic not in ("chi2", "probability"):
        raise ValueError(f"statistic must be 'chi2' or 'probability', got {statistic!r}")
    frame = pd.DataFrame({"r": list(rows), "c": list(columns)}).dropna()
    row_codes, col_codes = _codes(frame["r"]), _codes(frame["c"])
    n = int(len(frame))
    r = int(row_codes.max()) + 1 if n else 0
    c = int(col_codes.max()) + 1 if n else 0
    if r < 2 or c < 2:
        return AssociationTest(float("nan"), float("nan"), 1.0, True, 1, 0.0, 0, n, r, c)
    null = rearrangements(col_codes, exact_limit=exact_limit, n_resamples=n_resamples, seed=seed)
    observed = _tables(row_codes, col_codes[None, :], r, c)
    row_sums = np.bincount(row_codes, minlength=r).astype(np.float64)
    col_sums = np.bincount(col_codes, minlength=c).astype(np.float64)
    chi2 = _pearson(observed, row_sums, col_sums, n)[0]
    reached = 0
    # blocks of rearrangements: memory bounded whatever the slides and levels (r x c cells a row)
    for block in null.blocks(max(n, BLOCK_VALUES * n // max(n, r * c * 2))):
        tables = _tables(row_codes, block, r, c)
        if statistic == "chi2":
            reached += int(reaching(_pearson(tables, row_sums, col_sums, n), chi2))
        else:  # less probable is more extreme: compare minus the log-probability's variable part
            reached += int(reaching(_log_cells(tables), _log_cells(observed)[0]))
    p = tail_p(reached, null.count, null.exact)
    return AssociationTest(
        cramers_v=bergsma_v(chi2, n, r, c), cramers_v_uncorrected=cramers_v(chi2, n, r, c), p_value=float(p),
        exact=null.exact, n_rearrangements=null.count, chi2=float(chi2), dof=(r - 1) * (c - 1), n=n, rows=r,
        columns=c,
    )


def _tables(row_codes: np.ndarray, col_codes: np.ndarray, r: int, c: int) -> np.ndarray:
    """(M, r, c) counts of every row of ``col_codes`` against the fixed ``row_codes``."""
    m = col_codes.shape[0]
    flat = (np.arange(m)[:, None] * (r * c) + row_codes[None, :] * c + col_codes).ravel()
    return np.bincount(flat, minlength=m * r * c).reshape(m, r, c).astype(np.float64)


def _pearson(tables: np.ndarray, row_sums: np.ndarray, col_sums: np.ndarray, n: int) -> np.ndarray:
    """Pearson's statistic of tables with fixed margins: ``n (sum n_ij^2 / (R_i C_j) - 1)``."""
    # clipped at 0: for an independent table rounding can leave -1e-16
    return np.maximum(n * ((tables**2 / np.outer(row_sums, col_sums)).sum(axis=(1, 2)) - 1.0), 0.0)


def _log_cells(tables: np.ndarray) -> np.ndarray:
    """``sum log(n_ij!)``: with fixed margins the hypergeometric log-probability of a table is a
    constant minus this, so larger means less probable."""
    return special.gammaln(tables + 1.0).sum(axis=(1, 2))


def association_table(clusters: pd.Series, factors: pd.DataFrame, *, seed: int = 0,
                      exact_limit: int = EXACT_LIMIT, n_resamples: int = N_RESAMPLES,
                      aliases: dict | None = None) -> pd.DataFrame:
    """Exact or permutation test and bias-corrected Cramér's V of clusters against every factor.

    Parameters
    ----------
    clusters : Series
        Cluster of each slide, indexed by slide id.
    factors : DataFrame
        Categorical factors (one column each), indexed by slide id; missing values are left out
        of that factor's table.
    seed : int
        Seed of the random rearrangements (mixed with the factor's name, so a factor's p-value
        does not depend on which other factors are tested).
    exact_limit, n_resamples :
        See :func:`association_test`.
    aliases : dict, optional
        First factor -> factors splitting the slides exactly like it
        (:func:`tilewright.audit.factors.alias_groups`): a group is tested once, under its first
        factor, and counted once in the adjustment; the others get its row, with ``alias_of``.

    Returns
    -------
    DataFrame
        Columns ``factor, cramers_v`` (Bergsma-corrected)``, p_value, p_adjusted``
        (Benjamini-Hochberg over the factors tested)``, cramers_v_uncorrected, exact,
        n_rearrangements, chi2, dof, n_slides, n_levels, n_clusters, alias_of`` (the factor whose
        test a row repeats, or None), sorted by decreasing corrected V.
    """
    rows = []
    members = {m: lead for lead, ms in (aliases or {}).items() for m in ms}
    for name in factors.columns:
        if name in members:
            continue
        aligned = factors[name].reindex(clusters.index)
        test = association_test(clusters.to_numpy(), aligned.to_numpy(), exact_limit=exact_limit,
                                n_resamples=n_resamples, seed=stable_seed(seed, name))
        rows.append({
            "factor": name, "cramers_v": test.cramers_v, "p_value": test.p_value,
            "cramers_v_uncorrected": test.cramers_v_uncorrected, "exact": test.exact,
            "n_rearrangements": test.n_rearrangements, "chi2": test.chi2, "dof": test.dof,
            "n_slides": test.n, "n_levels": int(aligned.dropna().nunique()),
            "n_clusters": int(clusters[aligned.notna()].nunique()),
        })  # fmt: skip
    out = pd.DataFrame(rows, columns=[c for c in ASSOCIATION_COLUMNS if c not in ("p_adjusted", "alias_of")])
    out.insert(3, "p_adjusted", bh_adjust(out["p_value"].to_numpy(dtype=np.float64)))
    out = repeat_for_aliases(out, members)
    return out.sort_values(["cramers_v", "p_value"], ascending=[False, True], na_position="last",
                           kind="stable").reset_index(drop=True)


def repeat_for_aliases(table: pd.DataFrame, members: dict) -> pd.DataFrame:
    """``table`` (one row a tested factor, column ``factor``) with each alias given its group's
    rows, marked ``alias_of``; tested rows get ``alias_of`` None."""
    table = table.assign(alias_of=None)
    extra = [table[table["factor"] == lead].assign(factor=m, alias_of=lead) for m, lead in members.items()]
    return pd.concat([table, *extra], ignore_index=True) if extra else table

