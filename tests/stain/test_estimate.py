import numpy as np
import pytest
from skimage import data
from skimage.color import rgb_from_hed

from tilewright import estimate_stains
from tilewright.errors import StainEstimationError
from tilewright.stain.macenko import estimate_stain_profile

from .synthetic import RJ_DAB, RJ_E, RJ_H, angle_deg, random_stain_mixtures, render, synthetic_tissue, unit


def test_reference_vectors_match_skimage():
    # Ruifrok & Johnston (2001) vectors as shipped in skimage.color.rgb_from_hed
    np.testing.assert_allclose(rgb_from_hed, np.stack([RJ_H, RJ_E, RJ_DAB]), atol=1e-12)


@pytest.mark.parametrize("seed", range(5))
def test_recovers_random_stain_pairs_within_3_degrees(seed):
    # random stain pairs near Ruifrok & Johnston (2001) H and E, with pure-stain pixels
    truth, conc = random_stain_mixtures(np.random.default_rng(seed))
    # noiseless Beer–Lambert mixtures (float, no 8-bit rounding)
    od = conc @ truth
    rgb_float = 255.0 * 10.0 ** (-od)
    rgb = np.clip(np.rint(rgb_float), 0, 255).astype(np.uint8).reshape(200, 200, 3)
    est = estimate_stains(rgb, beta=0.15, alpha=1.0)  # Macenko et al. (2009) defaults
    assert est.shape == (2, 3)
    np.testing.assert_allclose(np.linalg.norm(est, axis=1), 1.0, atol=1e-6)
    assert angle_deg(est[0], truth[0]) < 3.0  # ground truth constructed above
    assert angle_deg(est[1], truth[1]) < 3.0  # ground truth constructed above


def test_immunohistochemistry_hematoxylin_and_dab():
    # skimage.data.immunohistochemistry(): real hematoxylin + DAB micrograph
    est = estimate_stains(data.immunohistochemistry())
    assert angle_deg(est[0], RJ_H) < 15.0  # Ruifrok & Johnston (2001) hematoxylin
    assert angle_deg(est[1], RJ_DAB) < angle_deg(est[1], RJ_E)  # Ruifrok & Johnston (2001)


def test_hematoxylin_first_regardless_of_input_order(rng):
    img = synthetic_tissue(rng, np.stack([RJ_E, RJ_H]))  # constructed with eosin listed first
    est = estimate_stains(img)
    assert angle_deg(est[0], RJ_H) < 3.0  # ground truth constructed above
    assert angle_deg(est[1], RJ_E) < 3.0


def test_profile_max_concentrations(rng):
    from scipy.stats import gamma

    stains = unit(np.stack([RJ_H, RJ_E]))
    scale = (0.5, 0.8)
    img = synthetic_tissue(rng, stains, scale=scale)
    prof = estimate_stain_profile(img)
    # Ground truth constructed above: among tissue pixels each stain is 0 in 1/7 of them (the
    # other stain's pure pixels) and gamma(2, 0.35 * scale) otherwise, so its 99th percentile
    # solves 1/7 + 6/7 F(x) = 0.99 (reference: scipy.stats.gamma.ppf).
    q = (0.99 - 1 / 7) / (6 / 7)
    for k in range(2):
        expected = gamma.ppf(q, 2.0, scale=0.35 * scale[k])
        assert prof.max_concentrations[k] == pytest.approx(expected, rel=0.1)
    assert prof.n_tissue_pixels > 5000


def test_blank_glass_raises():
    glass = np.full((64, 64, 3), 250, np.uint8)
    with pytest.raises(StainEstimationError):
        estimate_stains(glass)


def test_single_stain_raises():
    conc = np.zeros((64, 64, 2))
    conc[..., 0] = np.linspace(0.2, 1.5, 64 * 64).reshape(64, 64)
    with pytest.raises(StainEstimationError):
        estimate_stains(render(unit(np.stack([RJ_H, RJ_E])), conc))  # one stain constructed above


def test_bad_parameters():
    img = np.zeros((8, 8, 3), np.uint8)
    with pytest.raises(ValueError):
        estimate_stains(img, alpha=60)
    with pytest.raises(TypeError):
        estimate_stains(img.astype(float))


def test_strided_subset_of_large_inputs_agrees(rng):
    img = synthetic_tissue(rng, np.stack([RJ_H, RJ_E]), shape=(256, 256))
    full = estimate_stains(img)
    subset = estimate_stains(img, max_pixels=10_000)  # every 7th pixel
    # ground truth: the full-image estimate computed above
    assert angle_deg(full[0], subset[0]) < 1.5 and angle_deg(full[1], subset[1]) < 1.5
