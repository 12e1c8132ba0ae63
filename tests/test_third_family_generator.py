"""Checks of the third hard-slide family's GENERATOR (tests/third_family.py), not of the tissue mask:
what each draw's thumbnail shows must agree with what the draw says it drew. Ground truth: the
glass colour, light, stain vectors, faint-region densities and layouts recorded in each draw's
``info`` and ``truth``; the physics is Beer–Lambert (I = glass · light · 10^-OD)."""

import numpy as np
import pytest
from scipy import ndimage

from third_family import FINE, draw, light

SEEDS = (8, 12, 2, 29)  # curettage, resection, resection, strips: faint tissue, red cells, marks


@pytest.fixture(scope="module")
def draws():
    return {s: draw(s) for s in SEEDS}


def _od(d):
    """Optical density of each thumbnail pixel relative to the draw's glass under its light."""
    ref = np.asarray(d.info["glass"])[None, None, :] * light(d.info, d.rgb.shape[:2])[..., None]
    return -np.log10(np.maximum(d.rgb.astype(np.float64), 0.5) / ref)


def _clear_glass(d, margin=12):
    drawn = d.truth["tissue"] | d.truth["ink"]
    return ~ndimage.binary_dilation(drawn, iterations=margin)


def test_same_seed_same_slide(draws):
    again = draw(SEEDS[0])
    first = draws[SEEDS[0]]
    assert np.array_equal(again.rgb, first.rgb)
    assert all(np.array_equal(again.truth[k], first.truth[k]) for k in first.truth)
    assert again.info == first.info


def test_shapes_ranges_and_truth_maps_are_consistent(draws):
    for d in draws.values():
        h, w, _ = d.rgb.shape
        assert d.rgb.dtype == np.uint8 and 520 <= h <= 860 and 520 <= w <= 860
        assert 5.5 < d.mpp < 11.5 and 55 <= d.info["jpeg_quality"] <= 95
        if d.info["scan_mpp"] is None:
            assert 7.5 <= d.mpp <= 8.5
        else:  # a power-of-two level of a 0.24-0.5 µm/px scan
            k = np.log2(d.mpp / d.info["scan_mpp"])
            assert 0.24 <= d.info["scan_mpp"] <= 0.5 and abs(k - round(k)) < 1e-9
        assert all(220 <= g <= 250 for g in d.info["glass"])
        for key in ("tissue", "ink", "blood", "faint"):
            assert d.truth[key].shape == (h, w) and d.truth[key].dtype == bool
        assert not (d.truth["blood"] & ~d.truth["tissue"]).any()
        assert not (d.truth["faint"] & ~d.truth["tissue"]).any()
        assert not (d.truth["faint"] & d.truth["blood"]).any()
        assert d.truth["ink"].any() == bool(d.info["marks"])
        assert bool(d.info["faint_od"]) == d.truth["faint"].any()
        assert all(0.03 - 0.005 <= v <= 0.12 + 0.005 for v in d.info["faint_od"])
        for m in d.info["marks"]:
            assert m["where"] in ("glass", "tissue", "glass and tissue")
    assert any(d.info["marks"] for d in draws.values())


def test_glass_shows_the_drawn_glass_colour_within_noise(draws):
    for d in draws.values():
        clear = _clear_glass(d)
        assert clear.sum() > 1000
        seen = (d.rgb / light(d.info, d.rgb.shape[:2])[..., None])[clear]
        # the median of glass pixels: the drawn glass, to rounding, JPEG and the noise's median
        assert np.allclose(np.median(seen, axis=0), d.info["glass"], atol=1.5), (d.info["seed"],)
        spread = np.subtract(*np.percentile(seen, [84, 16], axis=0)) / 2
        assert (spread < 2.5 * d.info["noise_sd"] + 1).all()


def test_tissue_density_lies_in_the_span_of_the_drawn_stains(draws):
    for d in draws.values():
        h, e = np.asarray(d.info["stains"]["h"]), np.asarray(d.info["stains"]["e"])
        other = ndimage.binary_dilation(d.truth["ink"] | d.truth["blood"] | ~d.truth["tissue"], iterations=3)
        od = _od(d)[~other]
        od = od[od.sum(1) > 0.3]  # well above the noise
        assert len(od) > 500
        basis = np.c_[h, e]
        coef, *_ = np.linalg.lstsq(basis, od.T, rcond=None)
        rel = np.linalg.norm(od.T - basis @ coef, axis=0) / np.linalg.norm(od, axis=1)
        assert np.median(rel) < 0.08 and np.quantile(rel, 0.9) < 0.2, (d.info["seed"], np.median(rel))
        assert np.median(coef[0]) > 0 and np.median(coef[1]) > 0


def test_faint_regions_measure_their_recorded_density(draws):
    seen = 0
    for d in draws.values():
        if len(d.info["faint_od"]) != 1:  # one region: its pixels are the faint map
            continue
        core = ndimage.binary_erosion(d.truth["faint"], iterations=2)
        core &= ~ndimage.binary_dilation(d.truth["ink"], iterations=3)
        g = d.rgb[..., 1][core].astype(np.float64)
        ref = d.info["glass"][1] * light(d.info, d.rgb.shape[:2])[core]
        measured = -np.log10(g.mean() / ref.mean())
        assert abs(measured - d.info["faint_od"][0]) <= 0.01, (d.info["seed"], measured, d.info["faint_od"])
        seen += 1
    assert seen >= 2


def test_ink_over_glass_stands_out_of_the_glass_noise(draws):
    seen = 0
    for d in draws.values():
        ink = ndimage.binary_erosion(d.truth["ink"], iterations=1)
        ink &= ~ndimage.binary_dilation(d.truth["tissue"], iterations=3)
        if ink.sum() < 50:
            continue
        seen += 1
        off = np.abs(d.rgb / light(d.info, d.rgb.shape[:2])[..., None] - np.asarray(d.info["glass"]))[ink]
        assert (off.max(1) > 3 * d.info["noise_sd"]).mean() >= 0.98, d.info["seed"]
    assert seen >= 1


def test_red_cells_are_granular_not_a_flat_colour(draws):
    seen = 0
    for d in draws.values():
        core = ndimage.binary_erosion(d.truth["blood"], iterations=2) & ~d.truth["ink"]
        if core.sum() < 200:
            continue
        seen += 1
        g = d.rgb[..., 1].astype(np.float64)
        local = g - ndimage.uniform_filter(g, 5)  # what is left once smooth shading is taken out
        assert local[core].std() > 2 * d.info["noise_sd"], d.info["seed"]
        od = np.median(_od(d)[core], axis=0)  # haemoglobin: strong in green and blue, weak in red
        assert od[1] > 0.1 and od[1] > 2 * od[0] and od[2] > 1.5 * od[0], (d.info["seed"], od)
    assert seen >= 1


def test_fine_grid_is_at_most_a_third_of_the_thumbnail_pixel():
    assert FINE >= 3
