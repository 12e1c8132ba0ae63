"""Variance of the Laplacian (common practice) against scipy, and its response to blur."""

import cv2
import numpy as np
import pytest
from scipy import ndimage

from tilewright.demo.synth import random_layout
from tilewright.tissue.sharpness import sharpness


@pytest.fixture(scope="module")
def tissue_tiles():
    layout = random_layout(2000, 2000, seed=9, n_islands=1)
    cy, cx = int(1000 / 0.5), int(1000 / 0.5)
    return np.stack([layout.render(0.5, cy - 128 + 64 * i, cx - 128, 128, 128) for i in range(4)])


def test_equals_reference_laplacian(tissue_tiles):
    got = sharpness(tissue_tiles)
    assert got.shape == (4,) and got.dtype == np.float32
    for tile, score in zip(tissue_tiles, got):
        grey = cv2.cvtColor(tile.astype(np.float32), cv2.COLOR_RGB2GRAY)  # reference: OpenCV BT.601
        # reference: scipy.ndimage.laplace (4-neighbour), "mirror" = OpenCV's BORDER_REFLECT_101
        want = ndimage.laplace(grey.astype(np.float64), mode="mirror").var()
        assert score == pytest.approx(want, rel=1e-4)


def test_blur_lowers_the_score(tissue_tiles):
    tile = tissue_tiles[0]
    scores = [sharpness(tile)[0]]
    for sigma in (0.8, 1.6, 3.2):
        scores.append(sharpness(cv2.GaussianBlur(tile, (0, 0), sigma))[0])
    assert all(a > b for a, b in zip(scores, scores[1:]))  # common practice: blur removes edges
    assert scores[-1] < 0.2 * scores[0]


def test_shapes():
    flat = np.full((3, 16, 16, 3), 120, np.uint8)
    np.testing.assert_array_equal(sharpness(flat), 0.0)  # ground truth: no edges
    grey = np.zeros((1, 16, 16), np.uint8)
    grey[0, :, 8:] = 100
    # ground truth: a vertical step of 100 gives Laplacian +-100 on two columns of 16 rows
    want = np.var(np.r_[np.full(16, 100.0), np.full(16, -100.0), np.zeros(16 * 14)])
    assert sharpness(grey)[0] == pytest.approx(want)
    with pytest.raises(ValueError):
        sharpness(np.zeros((2, 2, 2, 2, 3), np.uint8))
