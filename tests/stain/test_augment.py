import numpy as np
import pytest
from skimage.color import rgb_from_hed

from tilewright import StainJitter
from tilewright.stain.density import rgb_to_od

from .synthetic import site_image, unit


def _concentrations(rgb):
    # reference: Ruifrok & Johnston (2001) vectors from skimage.color.rgb_from_hed, unit rows
    return rgb_to_od(rgb).reshape(-1, 3).astype(np.float64) @ np.linalg.inv(unit(rgb_from_hed))


def test_deterministic_for_a_seed():
    tiles = np.stack([site_image(s, "north", (48, 48)) for s in range(3)])
    a = StainJitter(seed=11)(tiles)
    b = StainJitter(seed=11)(tiles)
    np.testing.assert_array_equal(a, b)  # same seed, same output (constructed here)
    assert not np.array_equal(a, StainJitter(seed=12)(tiles))
    aug = StainJitter(seed=0)
    np.testing.assert_array_equal(aug(tiles, rng=5), aug(tiles, rng=5))
    assert not np.array_equal(a[0], a[1])  # one draw per tile


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_concentration_changes_stay_within_bounds(seed):
    sa, sb = 0.2, 0.1
    img = site_image(60 + seed, "north", (96, 96))
    out = StainJitter(sigma_alpha=sa, sigma_beta=sb, seed=seed)(img)
    c0, c1 = _concentrations(img), _concentrations(out)
    # pixels far from saturation, so 8-bit clipping does not bias the fit
    ok = (img.min(-1) > 30).ravel() & (out.min(-1) > 30).ravel() & (out.max(-1) < 250).ravel()
    alpha, beta = [], []
    for k in range(2):  # least-squares line c1 = alpha c0 + beta per stain (reference: numpy.polyfit)
        a, b = np.polyfit(c0[ok, k], c1[ok, k], 1)
        alpha.append(a)
        beta.append(b)
    alpha, beta = np.array(alpha), np.array(beta)
    tol = 0.02  # 8-bit rounding (from the quantization step of the OD lookup table)
    assert np.all(np.abs(alpha - 1) <= sa + tol)  # Tellez et al. (2018): alpha in [1-s, 1+s]
    assert np.all(np.abs(beta) <= sb + tol)  # Tellez et al. (2018): beta in [-s, s]
    # and the draw is what the augmenter says it drew
    exp_alpha, exp_beta = StainJitter(sigma_alpha=sa, sigma_beta=sb, seed=seed).sample(1)
    np.testing.assert_allclose(alpha, exp_alpha[0], atol=tol)
    np.testing.assert_allclose(beta, exp_beta[0], atol=tol)
    # the residual (DAB) channel is kept
    np.testing.assert_allclose(c1[ok, 2], c0[ok, 2], atol=0.03)


def test_zero_sigma_is_identity():
    img = site_image(70, "north", (48, 48))
    out = StainJitter(sigma_alpha=0, sigma_beta=0)(img)
    assert np.abs(out.astype(int) - img).max() <= 1  # identity map up to rounding


def test_bad_arguments():
    with pytest.raises(ValueError):
        StainJitter(sigma_alpha=1.5)
    with pytest.raises(TypeError):
        StainJitter()(np.zeros((8, 8, 3), np.float32))
