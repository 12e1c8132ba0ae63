"""Binary helpers of the tissue mask (tilewright.tissue.morphology) against constructed layouts and
a reference library (scikit-image)."""

import numpy as np
import pytest

from tilewright.tissue.morphology import enclosed, hysteresis


def test_hysteresis_keeps_what_continues_the_strong_pixels_and_drops_isolated_noise():
    """Ground truth drawn here: a membrane found at the strong threshold in one stretch, the rest of
    it only over the weak one, and weak specks of noise apart from it."""
    values = np.zeros((60, 60), np.float32)
    values[30, 5:55] = 0.5  # the whole membrane is over the weak threshold 0.3
    values[30, 20:30] = 1.0  # found at the strong threshold 0.8 in part
    values[5, 5] = values[50, 10] = values[10, 50] = 0.5  # specks of noise
    got = hysteresis(values, 0.3, values > 0.8)
    want = np.zeros_like(got)
    want[30, 5:55] = True
    assert (got == want).all()


@pytest.mark.parametrize("seed", range(3))
def test_hysteresis_matches_scikit_image(seed):
    """Reference: scikit-image's labelling (skimage.measure.label, connectivity 2: 8-neighbour) of
    the pixels over the low threshold, keeping the components that hold a strong pixel (the rule of
    skimage.filters.apply_hysteresis_threshold, which labels 4-neighbour)."""
    from scipy.ndimage import gaussian_filter
    from skimage.measure import label

    values = gaussian_filter(np.random.default_rng(seed).random((120, 90)), 2.0)
    low, high = np.quantile(values, [0.7, 0.95])
    labels = label(values > low, connectivity=2)
    want = np.isin(labels, np.unique(labels[values > high])) & (labels > 0)
    assert (hysteresis(values, low, values > high) == want).all()


def test_enclosed_fills_a_walled_cell_and_not_open_glass():
    """A ring of wall (radius 8 px) encloses its inside within 10 px on every ray; a bare line
    encloses nothing on its open sides."""
    yy, xx = np.mgrid[:60, :60]
    ring = np.abs(np.hypot(yy - 30, xx - 30) - 8) < 1
    got = enclosed(ring, 10)
    assert got[30, 30] and not got[5, 5]
    line = np.zeros((60, 60), bool)
    line[30, :] = True
    assert not enclosed(line, 10)[20, 30]
