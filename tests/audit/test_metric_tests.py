import math

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from tilewright.audit.fdr import bh_adjust
from tilewright.audit.metric_tests import kruskal_h, kruskal_table, kruskal_test


def test_h_matches_scipy_with_and_without_ties():
    rng = np.random.default_rng(0)
    values = np.round(rng.normal(size=14), 1)  # rounding makes ties
    codes = np.array([0] * 4 + [1] * 5 + [2] * 5)
    groups = [values[codes == g] for g in range(3)]
    # reference: scipy.stats.kruskal (tie-corrected H, Kruskal & Wallis 1952)
    assert kruskal_h(values, codes)[0] == pytest.approx(stats.kruskal(*groups).statistic, rel=1e-12)
    distinct = rng.normal(size=9)
    assert kruskal_h(distinct, np.repeat([0, 1, 2], 3))[0] == pytest.approx(
        stats.kruskal(distinct[:3], distinct[3:6], distinct[6:]).statistic, rel=1e-12)


def kruskal_statistic(*samples, axis=-1):
    return stats.kruskal(*samples, axis=axis).statistic


@pytest.mark.parametrize("seed", [1, 2])
def test_exact_p_equals_scipy_exact_permutation_test(seed):
    rng = np.random.default_rng(seed)
    values = rng.normal(size=10) + np.repeat([0.0, 0.8, 1.6], [3, 3, 4])
    groups = np.repeat(["north", "south", "west"], [3, 3, 4])
    h, p, exact = kruskal_test(values, groups)
    # reference: scipy.stats.permutation_test over every partition of the 10 values into groups of 3, 3, 4
    ref = stats.permutation_test((values[:3], values[3:6], values[6:]), kruskal_statistic, n_resamples=np.inf,
                                 vectorized=True, alternative="greater")
    assert exact and h == pytest.approx(ref.statistic) and p == pytest.approx(ref.pvalue, rel=1e-12)


def test_random_rearrangements_agree_with_scipy_within_sampling_error():
    rng = np.random.default_rng(5)
    values = rng.normal(size=30) + np.repeat([0.0, 0.5, 0.7], 10)
    groups = np.repeat([0, 1, 2], 10)
    h, p, exact = kruskal_test(values, groups, n_resamples=20_000, seed=4)
    assert not exact  # 30! / (10!)^3 rearrangements: far too many to enumerate
    ref = stats.permutation_test((values[:10], values[10:20], values[20:]), kruskal_statistic, n_resamples=20_000,
                                 vectorized=True, alternative="greater", random_state=8)
    se = math.sqrt(2 * ref.pvalue * (1 - ref.pvalue) / 20_000)  # two independent Monte Carlo estimates
    assert abs(p - ref.pvalue) < 4 * se + 1e-4


def test_bh_matches_scipy_and_keeps_missing_values():
    rng = np.random.default_rng(2)
    p = np.concatenate([rng.uniform(size=25) ** 3, [0.0, 1.0, 0.04, 0.04]])
    # reference: scipy.stats.false_discovery_control(method="bh"), Benjamini & Hochberg (1995)
    np.testing.assert_allclose(bh_adjust(p), stats.false_discovery_control(p, method="bh"), rtol=1e-12)
    with_nan = np.array([0.01, np.nan, 0.04, 0.03])
    out = bh_adjust(with_nan)
    assert math.isnan(out[1])
    np.testing.assert_allclose(out[[0, 2, 3]], stats.false_discovery_control([0.01, 0.04, 0.03]), rtol=1e-12)
    assert bh_adjust([]).size == 0
    with pytest.raises(ValueError):
        bh_adjust([0.2, 1.5])


def test_kruskal_table_adjusts_within_each_factor_and_section():
    index = [f"s{i}" for i in range(9)]
    metrics = pd.DataFrame({"m": [1.0, 2.0, 3.0, 10.0, 11.0, 12.0, 4.0, 5.0, 6.0],
                            "flat": [1.0] * 9, "noise": [3.0, 1.0, 2.0, 2.5, 1.5, 3.5, 0.5, 4.0, 2.2],
                            "amount": [0.2, 0.3, 0.1, 0.5, 0.4, 0.6, 0.9, 0.8, 0.7]}, index=index)
    factors = pd.DataFrame({"site": ["a"] * 3 + ["b"] * 3 + ["c"] * 3,
                            "batch": ["x", "y", "z"] * 3}, index=index)
    sections = {"m": "colour", "flat": "colour", "noise": "colour", "amount": "quality"}
    table = kruskal_table(metrics, factors, sections=sections)
    site = table[table["factor"] == "site"].set_index("metric")
    # Kruskal & Wallis (1952), no ties: H = 12 / (N (N + 1)) * sum(R_i^2 / n_i) - 3 (N + 1)
    ranks = {"a": [1, 2, 3], "b": [7, 8, 9], "c": [4, 5, 6]}
    h = 12 / (9 * 10) * sum(sum(r) ** 2 / len(r) for r in ranks.values()) - 3 * 10
    assert site.loc["m", "h"] == pytest.approx(h)
    # ground truth constructed: groups in rank order; 3! of the 9! / (3!)^3 = 1680 partitions
    # reach the largest H (the three blocks of ranks, in any order)
    assert site.loc["m", "p_value"] == pytest.approx(6 / 1680) and site.loc["m", "exact"]
    assert math.isnan(site.loc["flat", "h"]) and math.isnan(site.loc["flat", "p_adjusted"])
    # reference: scipy.stats.false_discovery_control within each factor x section family
    for (_, section), family in table.dropna(subset=["p_value"]).groupby(["factor", "section"]):
        expected = stats.false_discovery_control(family["p_value"].to_numpy())
        np.testing.assert_allclose(family["p_adjusted"].to_numpy(), expected, rtol=1e-12)
    # a one-test family is not adjusted
    assert site.loc["amount", "p_adjusted"] == site.loc["amount", "p_value"]
