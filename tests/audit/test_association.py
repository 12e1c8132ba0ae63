import math

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from tilewright.audit.association import (
    association_table,
    chi_square,
    contingency_table,
    cramers_v,
    kruskal_table,
)

TABLES = [
    [[12, 0], [1, 11]],
    [[5, 3, 2], [1, 6, 4], [3, 3, 8]],
    [[10, 20, 30, 40], [40, 30, 20, 10]],
    [[7, 1], [2, 6], [4, 4]],
]


@pytest.mark.parametrize("table", TABLES)
def test_chi_square_matches_scipy(table):
    ours = chi_square(table)
    # reference: scipy.stats.chi2_contingency (Pearson 1900), no continuity correction
    ref = stats.chi2_contingency(np.array(table), correction=False)
    assert ours.chi2 == pytest.approx(ref.statistic, rel=1e-12)
    assert ours.p_value == pytest.approx(ref.pvalue, rel=1e-9)
    assert ours.dof == ref.dof


def test_cramers_v_textbook_formula_on_hand_built_table():
    # hand-built 3 x 2 table; expected counts written out by hand from the margins
    observed = np.array([[8, 2], [3, 7], [5, 5]], float)
    n = 30.0
    rows, cols = [10, 10, 10], [16, 14]
    chi2 = sum((observed[i, j] - rows[i] * cols[j] / n) ** 2 / (rows[i] * cols[j] / n) for i in range(3) for j in range(2))
    # Cramér (1946): V = sqrt(chi2 / (n * (min(r, c) - 1)))
    expected_v = math.sqrt(chi2 / (n * (min(3, 2) - 1)))
    result = chi_square(observed)
    assert result.chi2 == pytest.approx(chi2, rel=1e-12)
    assert result.cramers_v == pytest.approx(expected_v, rel=1e-12)
    assert cramers_v(chi2, 30, 3, 2) == pytest.approx(expected_v, rel=1e-12)


def test_cramers_v_extremes():
    # ground truth constructed: one variable determines the other -> V = 1; identical rows -> V = 0
    assert chi_square([[9, 0, 0], [0, 4, 0], [0, 0, 6]]).cramers_v == pytest.approx(1.0)
    assert chi_square([[3, 6], [3, 6], [3, 6]]).cramers_v == pytest.approx(0.0)
    single = chi_square([[5, 5]])  # one row level: no association defined
    assert math.isnan(single.cramers_v) and single.p_value == 1.0


def test_chi_square_drops_empty_levels_and_rejects_bad_tables():
    # ground truth constructed: an all-zero row changes nothing
    assert chi_square([[4, 1], [0, 0], [1, 5]]).chi2 == pytest.approx(chi_square([[4, 1], [1, 5]]).chi2)
    with pytest.raises(ValueError):
        chi_square([[1, -1], [2, 3]])
    with pytest.raises(ValueError):
        chi_square([1, 2, 3])


def test_association_table_counts_and_missing_values():
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
    assert table.loc["scanner", "n_slides"] == 6  # two missing values left out
    ref = stats.chi2_contingency(pd.crosstab(clusters, factors["scanner"]).to_numpy(), correction=False)
    assert table.loc["scanner", "chi2"] == pytest.approx(ref.statistic)  # reference: scipy.stats
    assert list(contingency_table(clusters, factors["site"]).to_numpy().ravel()) == [4, 0, 0, 4]


def test_kruskal_table_matches_rank_formula():
    index = [f"s{i}" for i in range(9)]
    metrics = pd.DataFrame({"m": [1.0, 2.0, 3.0, 10.0, 11.0, 12.0, 4.0, 5.0, 6.0]}, index=index)
    factors = pd.DataFrame({"site": ["a"] * 3 + ["b"] * 3 + ["c"] * 3}, index=index)
    row = kruskal_table(metrics, factors).iloc[0]
    # Kruskal & Wallis (1952), no ties: H = 12 / (N (N + 1)) * sum(R_i^2 / n_i) - 3 (N + 1)
    ranks = {"a": [1, 2, 3], "b": [7, 8, 9], "c": [4, 5, 6]}
    n = 9
    h = 12 / (n * (n + 1)) * sum(sum(r) ** 2 / len(r) for r in ranks.values()) - 3 * (n + 1)
    assert row["h"] == pytest.approx(h)
    assert row["p_value"] == pytest.approx(stats.chi2.sf(h, 2))  # chi-square approximation, dof = k - 1
    constant = kruskal_table(pd.DataFrame({"m": [1.0] * 9}, index=index), factors).iloc[0]
    assert math.isnan(constant["h"])
