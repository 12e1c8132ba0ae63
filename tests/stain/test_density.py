import numpy as np
import pytest

from tilewright.stain.density import MAX_OD, od_lut, od_to_rgb, rgb_to_od


def test_od_edges_are_finite():
    od = rgb_to_od(np.array([[[0, 1, 255]]], np.uint8))
    assert np.all(np.isfinite(od))
    assert od[0, 0, 2] == 0.0  # glass (I = I0) has zero optical density: Beer–Lambert law
    assert od[0, 0, 0] == pytest.approx(np.log10(255), rel=1e-6)  # 0 clipped to 1: from the definition
    assert od[0, 0, 0] == od[0, 0, 1] == pytest.approx(MAX_OD, rel=1e-6)


def test_od_matches_beer_lambert_definition():
    levels = np.arange(1, 256)
    expected = -np.log10(levels / 255.0)  # Beer–Lambert law, I0 = 255
    np.testing.assert_allclose(od_lut()[1:], expected, rtol=1e-6, atol=1e-7)


def test_round_trip_is_exact_for_every_level():
    rgb = np.stack([np.arange(256, dtype=np.uint8)] * 3, axis=-1)[1:]  # level 0 clips to 1
    np.testing.assert_array_equal(od_to_rgb(rgb_to_od(rgb)), rgb)  # inverse functions


def test_od_to_rgb_saturates_and_handles_nan():
    out = od_to_rgb(np.array([[-1.0, 50.0, np.nan]]))
    np.testing.assert_array_equal(out, [[255, 0, 255]])  # clipped: constructed above


def test_od_is_additive_over_stains():
    # Beer–Lambert: OD of a two-stain mixture is the sum of each stain's OD (before quantization)
    h = np.array([0.65, 0.70, 0.29])
    e = np.array([0.07, 0.99, 0.11])
    rgb = np.rint(255 * 10 ** (-(0.5 * h + 0.3 * e))).astype(np.uint8)
    np.testing.assert_allclose(rgb_to_od(rgb[None]), (0.5 * h + 0.3 * e)[None], atol=0.01)


def test_bad_input_types():
    with pytest.raises(TypeError):
        rgb_to_od(np.zeros((2, 2, 3), np.float32))
    with pytest.raises(ValueError):
        rgb_to_od(np.zeros((2, 2, 4), np.uint8))
