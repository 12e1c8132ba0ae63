"""Colour gaps are measured between the levels of batch-like factors only: a factor with a level a
patient would give O(levels²) pairs of one or two slides (issue 30: the audit at 10,000 slides).
Ground truth: constructed slide colours whose level means and CIEDE2000 are known."""

from __future__ import annotations

import numpy as np
import pandas as pd
from skimage.color import deltaE_ciede2000

from tilewright.audit.gaps import MAX_GAP_LEVELS, colour_gaps


def _cohort(n_sites: int, per_site: int, seed: int = 3):
    rng = np.random.default_rng(seed)
    ids = [f"s{i:04d}" for i in range(n_sites * per_site)]
    site = np.repeat([f"site-{k}" for k in range(n_sites)], per_site)
    lab = np.column_stack([rng.normal(55, 1, len(ids)) + (site == "site-1") * 6.0,
                           rng.normal(20, 1, len(ids)), rng.normal(-8, 1, len(ids))])
    metrics = pd.DataFrame(lab, index=ids, columns=["lab_l_mean", "lab_a_mean", "lab_b_mean"])
    patient = [f"p{i // 2}" for i in range(len(ids))]  # two slides a patient
    return metrics, pd.DataFrame({"site": site, "patient": patient}, index=ids)


def test_many_level_factor_is_left_out_and_site_pairs_are_exact():
    metrics, factors = _cohort(3, 40)
    assert factors["patient"].nunique() > MAX_GAP_LEVELS
    gaps = colour_gaps(metrics, factors, n_bootstrap=200)
    assert set(gaps["factor"]) == {"site"} and len(gaps) == 3  # 3 site pairs, no patient pair
    row = gaps[(gaps["level_a"] == "site-0") & (gaps["level_b"] == "site-1")].iloc[0]
    means = metrics.groupby(factors["site"]).mean()
    want = float(deltaE_ciede2000(means.loc["site-0"].to_numpy(), means.loc["site-1"].to_numpy()))  # skimage
    assert abs(row["gap"] - want) < 1e-9
    assert row["gap_lo"] <= row["gap"] <= row["gap_hi"]


def test_factor_at_the_level_limit_is_still_measured():
    metrics, factors = _cohort(MAX_GAP_LEVELS, 3)
    gaps = colour_gaps(metrics, factors[["site"]], n_bootstrap=50)
    assert len(gaps) == MAX_GAP_LEVELS * (MAX_GAP_LEVELS - 1) // 2
