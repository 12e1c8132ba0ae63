"""Exact box coverage (summed-area table, bilinear at fractional corners) vs brute force."""

import numpy as np
import pytest
from hypothesis import given, settings, strategies as st

from tilewright.tissue.raster import box_fractions, summed_area_table


def brute_force(raster, factor, yx, h, w):
    """Upsample the raster by an integer factor (nearest) and count covered fine pixels."""
    fine = raster.astype(np.float64).repeat(factor, 0).repeat(factor, 1)
    out = []
    for y, x in yx:
        out.append(fine[max(y, 0):max(y + h, 0), max(x, 0):max(x + w, 0)].sum() / (h * w))
    return np.array(out)


def test_sat_matches_cumsum():
    rng = np.random.default_rng(0)
    r = rng.random((7, 9)) > 0.5
    sat = summed_area_table(r)
    # ground truth: direct sums of the leading blocks
    for i in range(8):
        for j in range(10):
            assert sat[i, j] == r[:i, :j].sum()


@settings(max_examples=60, deadline=None, derandomize=True)
@given(seed=st.integers(0, 10_000), factor=st.sampled_from([1, 2, 3, 4, 16]),
       h=st.integers(1, 40), w=st.integers(1, 40))
def test_box_fractions_equal_brute_force_on_upsampled_raster(seed, factor, h, w):
    rng = np.random.default_rng(seed)
    raster = rng.random((6, 8)) > 0.4
    raster_mpp = 8.0
    mpp = raster_mpp / factor  # boxes on a finer grid, corners anywhere (not raster aligned)
    H, W = raster.shape[0] * factor, raster.shape[1] * factor
    yx = np.stack([rng.integers(-h // 2, H, 12), rng.integers(-w // 2, W, 12)], axis=1)
    got = box_fractions(summed_area_table(raster), raster_mpp, yx, h, w, mpp)
    want = brute_force(raster, factor, yx, h, w)  # ground truth constructed above
    np.testing.assert_allclose(got, want, atol=1e-6)


def test_box_coarser_than_raster_and_past_edge():
    raster = np.zeros((8, 8), bool)
    raster[:4, :4] = True
    sat = summed_area_table(raster)
    # one box at 16 µm/px covering 2x2 raster px of 8 µm/px per box px: raster quarter = 1/4 of 8x8
    assert box_fractions(sat, 8.0, [[0, 0]], 4, 4, 16.0)[0] == pytest.approx(0.25)  # ground truth
    # a box hanging off the top-left corner: only the in-slide quarter can be covered
    assert box_fractions(sat, 8.0, [[-2, -2]], 4, 4, 8.0)[0] == pytest.approx(0.25)
    # entirely outside
    assert box_fractions(sat, 8.0, [[100, 100]], 4, 4, 8.0)[0] == 0.0


def test_box_size_must_be_positive():
    with pytest.raises(ValueError):
        box_fractions(summed_area_table(np.ones((2, 2))), 1.0, [[0, 0]], 0, 2, 1.0)
