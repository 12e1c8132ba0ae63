import math
from fractions import Fraction

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from scipy.stats import contingency

from tilewright.audit.association import (
    association_table,
    association_test,
    bergsma_v,
    chi_square,
    contingency_table,
    cramers_v,
)
from tilewright.audit.permutation import count_rearrangements, rearrangements

TABLES = [
    [[12, 0], [1, 11]],
    [[5, 3, 2], [1, 6, 4], [3, 3, 8]],
    [[10, 20, 30, 40], [40, 30, 20, 10]],
    [[7, 1], [2, 6], [4, 4]],
]


def labels_of(table):
    """Row and column label of every observation of a contingency table."""
    table = np.asarray(table)
    r, c = np.indices(table.shape)
    return np.repeat(r.ravel(), table.ravel()), np.repeat(c.ravel(), table.ravel())


@pytest.mark.parametrize("table", TABLES)
def test_chi_square_and_uncorrected_v_match_scipy(table):
    ours = chi_square(table)
    # reference: scipy.stats.chi2_contingency (Pearson 1900), no continuity correction
    ref = stats.chi2_contingency(np.array(table), correction=False)
    assert ours.chi2 == pytest.approx(ref.statistic, rel=1e-12)
    assert ours.p_value == pytest.approx(ref.pvalue, rel=1e-9)
    assert ours.dof == ref.dof
    # reference: scipy.stats.contingency.association, Cramér (1946) V without correction
    assert ours.cramers_v == pytest.approx(contingency.association(np.array(table), method="cramer"), rel=1e-12)


def bergsma_by_hand(table):
    """Bergsma (2013) bias-corrected V in exact rational arithmetic, written out from the paper's
    definitions (phi2~ = max(0, phi2 - (k-1)(r-1)/(n-1)), k~ = k - (k-1)^2/(n-1),
    r~ = r - (r-1)^2/(n-1), V~ = sqrt(phi2~ / min(k~-1, r~-1))). No worked value of the paper is
    at hand here, so the expectation is constructed independently of the code under test."""
    rows = [sum(r) for r in table]
    cols = [sum(c) for c in zip(*table)]
    n = sum(rows)
    chi2 = sum(Fraction((table[i][j] * n - rows[i] * cols[j]) ** 2, n * rows[i] * cols[j])
               for i in range(len(rows)) for j in range(len(cols)))
    r, k = len(rows), len(cols)
    phi2 = max(Fraction(0), chi2 / n - Fraction((k - 1) * (r - 1), n - 1))
    rt = r - Fraction((r - 1) ** 2, n - 1)
    kt = k - Fraction((k - 1) ** 2, n - 1)
    return math.sqrt(phi2 / min(kt - 1, rt - 1))


@pytest.mark.parametrize("table", TABLES + [[[6, 1, 0], [1, 5, 2]], [[4, 0, 0, 1], [0, 3, 1, 0], [1, 0, 4, 0]]])
def test_bergsma_v_against_exact_arithmetic(table):
    result = chi_square(table)
    assert result.cramers_v_corrected == pytest.approx(bergsma_by_hand(table), rel=1e-12)
    rows, cols = labels_of(table)
    assert association_test(rows, cols).cramers_v == pytest.approx(bergsma_by_hand(table), rel=1e-12)


def test_bergsma_v_limits():
    # ground truth constructed: independence (identical rows) gives 0, and so does a small-table
    # V that is no larger than its bias; one side determining the other gives 1
    assert bergsma_v(0.0, 30, 3, 2) == 0.0
    assert chi_square([[9, 0, 0], [0, 4, 0], [0, 0, 6]]).cramers_v_corrected == pytest.approx(1.0)
    assert chi_square([[1, 2], [2, 1]]).cramers_v > 0.3 and chi_square([[1, 2], [2, 1]]).cramers_v_corrected == 0.0
    # Bergsma (2013): the correction vanishes as n grows, so V~ tends to Cramér's V (scipy reference)
    big = np.array([[5200, 3100, 1700], [2900, 4100, 3000]]) * 100
    assert chi_square(big).cramers_v_corrected == pytest.approx(contingency.association(big, method="cramer"), rel=1e-4)
    assert math.isnan(bergsma_v(4.0, 10, 1, 3)) and math.isnan(cramers_v(4.0, 10, 1, 3))


def test_chi_square_drops_empty_levels_and_rejects_bad_tables():
    # ground truth constructed: an all-zero row changes nothing
    assert chi_square([[4, 1], [0, 0], [1, 5]]).chi2 == pytest.approx(chi_square([[4, 1], [1, 5]]).chi2)
    with pytest.raises(ValueError):
        chi_square([[1, -1], [2, 3]])
    with pytest.raises(ValueError):
        chi_square([1, 2, 3])
    single = chi_square([[5, 5]])  # one row level: no association defined
    assert math.isnan(single.cramers_v) and single.p_value == 1.0


@pytest.mark.parametrize("table", [[[3, 1], [1, 3]], [[5, 0], [1, 4]], [[1, 6], [4, 2]], [[0, 5], [3, 1]],
                                   [[6, 2], [1, 7]]])
def test_probability_ordering_is_fishers_exact_test_on_2x2(table):
    rows, cols = labels_of(table)
    ours = association_test(rows, cols, statistic="probability")
    assert ours.exact
    # reference: scipy.stats.fisher_exact, two-sided (Fisher 1935)
    assert ours.p_value == pytest.approx(stats.fisher_exact(np.array(table)).pvalue, rel=1e-10)


def chi2_statistic(rows, n_rows, n_cols):
    """Pearson's statistic of ``rows`` against a rearranged column labelling (vectorized over
    leading axes), as scipy.stats.permutation_test calls it."""
    def statistic(cols, axis=-1):
        cols = np.asarray(cols)
        a = (rows[:, None] == np.arange(n_rows)).astype(float)
        b = (cols[..., :, None] == np.arange(n_cols)).astype(float)
        table = np.einsum("si,...sj->...ij", a, b)
        expected = table.sum(-1)[..., :, None] * table.sum(-2)[..., None, :] / rows.size
        return np.where(expected > 0, (table - expected) ** 2 / np.where(expected > 0, expected, 1), 0).sum((-1, -2))
    return statistic


@pytest.mark.parametrize("seed", [3, 4, 5])
def test_exact_p_equals_scipy_exact_permutation_test(seed):
    rng = np.random.default_rng(seed)
    rows, cols = rng.integers(0, 3, 8), rng.integers(0, 3, 8)
    ours = association_test(rows, cols)
    assert ours.exact and ours.n_rearrangements == count_rearrangements(np.unique(cols, return_inverse=True)[1])
    # reference: scipy.stats.permutation_test, every one of the 8! orderings of the column labels
    ref = stats.permutation_test((cols,), chi2_statistic(rows, 3, 3), permutation_type="pairings",
                                 n_resamples=np.inf, vectorized=True, alternative="greater")
    assert ours.p_value == pytest.approx(ref.pvalue, rel=1e-12)


def test_random_rearrangements_agree_with_scipy_within_sampling_error():
    rng = np.random.default_rng(11)
    rows = np.repeat([0, 1, 2], 8)
    cols = np.where(rng.random(24) < 0.6, rows % 2, rng.integers(0, 2, 24))  # a moderate association
    ours = association_test(rows, cols, n_resamples=20_000, seed=1)
    assert not ours.exact and ours.n_rearrangements == 20_000
    ref = stats.permutation_test((cols,), chi2_statistic(rows, 3, 2), permutation_type="pairings",
                                 n_resamples=20_000, vectorized=True, alternative="greater", random_state=2)
    # reference: scipy.stats.permutation_test; two independent Monte Carlo estimates of one p
    se = math.sqrt(2 * ref.pvalue * (1 - ref.pvalue) / 20_000)
    assert abs(ours.p_value - ref.pvalue) < 4 * se + 1e-4
    # seeded: the same seed repeats, another seed gives another sample
    assert association_test(rows, cols, n_resamples=20_000, seed=1).p_value == ours.p_value
    assert association_test(rows, cols, n_resamples=20_000, seed=9).p_value != ours.p_value


def test_rearrangements_enumerate_each_distinct_one_once():
    codes = np.array([0, 0, 1, 2, 2, 2])
    exact = rearrangements(codes)
    # multinomial coefficient 6! / (2! 1! 3!) = 60, each a permutation of the same multiset
    assert exact.exact and exact.count == 60 == len({tuple(r) for r in exact.codes})
    assert all(sorted(r) == sorted(codes) for r in exact.codes.tolist())
    drawn = rearrangements(codes, exact_limit=10, n_resamples=500, seed=3)
    assert not drawn.exact and drawn.codes.shape == (500, 6)
    assert (np.sort(drawn.codes, axis=1) == np.sort(codes)).all()


def test_association_table_counts_missing_values_and_adjustment():
    index = [f"s{i}" for i in range(8)]
    clusters = pd.Series([0, 0, 0, 0, 1, 1, 1, 1], index=index)
    factors = pd.DataFrame(
        {"site": ["a"] * 4 + ["b"] * 4, "label": ["x", "y"] * 4, "scanner": ["p", "q", None, "p", "q", "p", "q", None]},
        index=index,
    )
    table = association_table(clusters, factors).set_index("factor")
    # ground truth constructed above: site follows the clusters exactly, label not at all
    assert table.loc["site", "cramers_v"] == pytest.approx(1.0)
    assert table.loc["label", "cramers_v"] == pytest.approx(0.0)
    # exact: 2 of the C(8, 4) = 70 rearrangements split the slides like the clusters
    assert table.loc["site", "p_value"] == pytest.approx(2 / 70) and table.loc["site", "exact"]
    assert table.loc["scanner", "n_slides"] == 6  # two missing values left out
    ref = stats.chi2_contingency(pd.crosstab(clusters, factors["scanner"]).to_numpy(), correction=False)
    assert table.loc["scanner", "chi2"] == pytest.approx(ref.statistic)  # reference: scipy.stats
    # reference: scipy.stats.false_discovery_control (Benjamini & Hochberg 1995) over the factors
    expected = stats.false_discovery_control(table["p_value"].to_numpy(), method="bh")
    np.testing.assert_allclose(table["p_adjusted"].to_numpy(), expected, rtol=1e-12)
    assert list(contingency_table(clusters, factors["site"]).to_numpy().ravel()) == [4, 0, 0, 4]
