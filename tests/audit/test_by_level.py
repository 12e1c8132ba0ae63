"""Sharpness beside colour by factor level: medians against constructed values, the colour distance
against the published CIEDE2000 test pairs."""

import numpy as np
import pandas as pd
import pytest

from tilewright.audit.by_level import level_table


def _frames():
    # site-north: 3 slides, sharpness 400, 410, 420; Lab of Sharma, Wu & Dalal (2005) pair 1, sample 1
    # site-south: 2 slides, sharpness 700, 760; Lab of pair 1, sample 2
    ids = ["n1", "n2", "n3", "s1", "s2"]
    metrics = pd.DataFrame({
        "sharpness": [400.0, 410.0, 420.0, 700.0, 760.0],
        "lab_l_mean": [50.0] * 5,
        "lab_a_mean": [2.6772] * 3 + [0.0] * 2,
        "lab_b_mean": [-79.7751] * 3 + [-82.7485] * 2,
    }, index=pd.Index(ids, name="slide_id"))
    factors = pd.DataFrame({"site": ["site-north"] * 3 + ["site-south"] * 2,
                            "scanner": ["A", "A", "A", "B", "B"]}, index=metrics.index)
    return metrics, factors


def test_sharpness_and_colour_by_site():
    metrics, factors = _frames()
    table = level_table(metrics, factors).set_index(["factor", "level"])
    north, south = table.loc[("site", "site-north")], table.loc[("site", "site-south")]
    assert north["slides"] == 3 and south["slides"] == 2
    assert north["sharpness_median"] == 410.0 and south["sharpness_median"] == 730.0  # constructed
    assert north["sharpness_q1"] == 405.0 and north["sharpness_q3"] == 415.0
    assert north["sharpness_vs_rest"] == pytest.approx(410.0 / 730.0)
    # ground truth: Sharma, Wu & Dalal (2005), Table 1, pair 1: ΔE00 = 2.0425
    assert north["delta_e_vs_rest"] == pytest.approx(2.0425, abs=1e-4)
    assert south["delta_e_vs_rest"] == pytest.approx(2.0425, abs=1e-4)
    assert (north["lab_l"], north["lab_a"], north["lab_b"]) == (50.0, 2.6772, -79.7751)
    assert len(table) == 4  # every level of every factor


def test_a_factor_with_one_level_has_no_rest():
    metrics, factors = _frames()
    table = level_table(metrics, factors.assign(site="site-north")[["site"]])
    assert len(table) == 1 and np.isnan(table["delta_e_vs_rest"][0]) and np.isnan(table["sharpness_vs_rest"][0])
