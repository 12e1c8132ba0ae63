"""Otsu's threshold against scikit-image on the same values."""

import numpy as np
import pytest
from skimage.filters import threshold_otsu

from tilewright.tissue.mask import _LOG_FLOOR, tissue_feature, tissue_mask
from tilewright.tissue.otsu import otsu_threshold


@pytest.mark.parametrize("kind", ["bimodal", "uniform", "lognormal", "skewed"])
def test_equals_skimage(kind):
    rng = np.random.default_rng(7)
    values = {
        "bimodal": np.r_[rng.normal(0.03, 0.01, 5000), rng.normal(0.4, 0.1, 2000)],
        "uniform": rng.random(3000),
        "lognormal": rng.lognormal(-2.0, 0.8, 4000),
        "skewed": np.r_[rng.normal(-2.5, 0.05, 9000), rng.normal(-0.7, 0.3, 1000)],
    }[kind]
    # Otsu (1979); reference: skimage.filters.threshold_otsu
    assert otsu_threshold(values) == pytest.approx(threshold_otsu(values), rel=1e-12, abs=1e-12)


def test_constant_and_nonfinite():
    assert otsu_threshold(np.full(10, 0.2)) == 0.2  # ground truth: single value
    v = np.r_[np.zeros(20), np.ones(20), np.nan, np.inf]
    assert otsu_threshold(v) == pytest.approx(threshold_otsu(v[np.isfinite(v)]))  # reference: skimage
    with pytest.raises(ValueError):
        otsu_threshold([np.nan])


def test_mask_threshold_is_otsu_of_its_feature(he_layout):
    rgb = he_layout.render(8.0, 0, 0, *he_layout.shape_at(8.0))
    mask = tissue_mask(rgb, mpp=8.0, method="od-otsu")
    feature = tissue_feature(rgb, 8.0, glass=mask.params["glass"])
    values = np.log10(np.maximum(feature, _LOG_FLOOR)).astype(np.float64)
    want = 10.0 ** threshold_otsu(values)
    # Otsu (1979); reference: skimage.filters.threshold_otsu on the same values
    assert mask.params["otsu"] == pytest.approx(want, rel=1e-9)
    # the threshold is Otsu's, kept between the glass-noise floor and the ceiling
    assert mask.threshold == pytest.approx(min(max(want, mask.params["floor"]), mask.params["max_od_ceiling"]))

    sat = tissue_mask(rgb, mpp=8.0, method="saturation-otsu")
    feature = tissue_feature(rgb, 8.0, method="saturation-otsu")
    assert sat.params["otsu"] == pytest.approx(threshold_otsu(feature), rel=1e-9)  # reference: skimage
