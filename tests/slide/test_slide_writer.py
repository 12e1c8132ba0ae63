"""The pyramid writer: renderer streaming equals the in-memory path; level geometry."""

from __future__ import annotations

import numpy as np
import pytest
import tifffile

import tilewright as tw
from tilewright.demo.pyramid import level_shapes, write_pyramid

from .conftest import make_image


def test_renderer_equals_array(tmp_path):
    img = make_image(700, 900, seed=11)
    calls = []

    def render(y, x, h, w):
        calls.append((y, x, h, w))
        return img[y : y + h, x : x + w]

    a, b = tmp_path / "a.tif", tmp_path / "b.tif"
    sa = write_pyramid(a, img, compression="zlib", tile=128, factor=2, n_levels=3)
    sb = write_pyramid(b, render, shape=img.shape[:2], compression="zlib", tile=128,
                       factor=2, n_levels=3)
    assert sa == sb == [(700, 900), (350, 450), (175, 225)]  # ceil(H0 / 2**k)
    assert max(h for _, _, h, _ in calls) == 128  # one strip of tiles per call
    with tifffile.TiffFile(a) as ta, tifffile.TiffFile(b) as tb:
        for pa, pb in zip(ta.pages, tb.pages):
            np.testing.assert_array_equal(pa.asarray(), pb.asarray())  # ground truth: array path
        np.testing.assert_array_equal(ta.pages[0].asarray(), img)


def test_level_shapes_with_odd_sizes_and_factor_4(tmp_path):
    assert level_shapes((1001, 3000), 4, None, 256) == [(1001, 3000), (251, 750), (63, 188)]
    img = make_image(301, 517, seed=2)
    path = tmp_path / "odd.svs"
    write_pyramid(path, img, compression="zlib", factor=4, n_levels=2, layout="svs", tile=64)
    with tw.open(path) as s:
        assert [(lv.height, lv.width, lv.downsample) for lv in s.levels] == \
            [(301, 517, 1.0), (76, 130, 4.0)]  # ground truth: ceil(301/4), ceil(517/4)
        # edge cells of the reduced level average only the pixels that exist
        edge = img[300:301, 516:517].astype(float).mean(axis=(0, 1))
        np.testing.assert_allclose(s.read_level(1, 75, 129, 1, 1)[0, 0], np.rint(edge), atol=0)


def test_renderer_shape_checked(tmp_path):
    with pytest.raises(ValueError):
        write_pyramid(tmp_path / "x.tif", lambda y, x, h, w: np.zeros((1, 1, 3), np.uint8),
                      shape=(64, 64), n_levels=1)
