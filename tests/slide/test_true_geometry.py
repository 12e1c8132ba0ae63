"""True µm/px of every raster, one resolution per cohort, edges, whole-pixel OpenSlide reads.

Slides here are scans at real odd resolutions (0.2428 and 0.4991 µm/px) with pyramids that mix
x2, x4 and x32 levels whose sizes are the ceiling of level 0's over the downsample (so
OpenSlide's own level downsample, the mean of the two size ratios, is not a whole number).
"""

from __future__ import annotations

import math
import pickle

import numpy as np
import pytest
import tifffile

import tilewright as tw
from tilewright.demo.pyramid import write_pyramid

H0, W0 = 1003, 1301  # odd sizes: every reduced level has a partial last row and column


@pytest.fixture(scope="module")
def noise():
    return np.random.default_rng(7).integers(0, 256, (H0, W0, 3), dtype=np.uint8)


@pytest.fixture(scope="module")
def mixed(tmp_path_factory, noise):
    """Lossless 0.2428 µm/px scan with x4 and x32 levels (0.9712 and 7.7696 µm/px)."""
    path = tmp_path_factory.mktemp("true-geometry") / "mixed.tif"
    write_pyramid(path, noise, mpp=0.2428, tile=256, compression="zlib", downsamples=(1, 4, 32))
    return path


def test_thumbnail_carries_the_true_mpp_of_a_reused_level(mixed):
    with tw.open(mixed) as s:
        thumb = s.thumbnail(8.0)
        # ground truth: level 2 is 0.2428 * 32 = 7.7696 µm/px, 2.9 % off 8: reused as is
        assert thumb.mpp == pytest.approx(0.2428 * 32)
        assert thumb.shape[:2] == (H0 // 32, W0 // 32)  # whole level pixels inside the slide
        np.testing.assert_array_equal(thumb, s.read_level(2, 0, 0, H0 // 32, W0 // 32))
        # no level within 5 % of 6 µm/px: area-averaged from level 1, at exactly 6
        assert s.thumbnail(6.0).mpp == pytest.approx(6.0)
        # a slice is the same pixels (same µm/px); arithmetic results are plain arrays
        assert thumb[10:, 5:].mpp == thumb.mpp
        assert type(thumb.mean()) is not type(thumb) and type(thumb + 1) is np.ndarray
        assert pickle.loads(pickle.dumps(thumb)).mpp == thumb.mpp
        mask = tw.tissue_mask(s, mpp=8.0)
        assert mask.mpp == pytest.approx(0.2428 * 32)  # the mask takes the thumbnail's µm/px
        assert tw.tissue_mask(thumb).mpp == thumb.mpp  # also when given the pixels


def test_default_tolerance_keeps_one_resolution(tmp_path, noise):
    path = tmp_path / "x2.tif"
    write_pyramid(path, noise, mpp=0.2428, tile=256, compression="zlib", downsamples=(1, 2, 32))
    with tw.open(path) as s:
        # level 1 is 0.4856 µm/px, 2.9 % finer than 0.5: resampled from it to exactly 0.5
        view = s.at_mpp(0.5)
        assert view.source_level == 1 and view.mpp == pytest.approx(0.5)
        assert view.level_scale == pytest.approx(0.5 / 0.4856)
        assert view.scale == pytest.approx(0.5 / 0.2428)
        # within the tolerance (0.3 %) the level is used as is and the view says 0.4856
        near = s.at_mpp(0.487)
        assert near.level_scale == 1.0 and near.mpp == pytest.approx(0.4856)
        # the tolerance is settable: 5 % reuses the level for 0.5, at its true µm/px
        loose = s.at_mpp(0.5, tolerance=0.05)
        assert loose.source_level == 1 and loose.mpp == pytest.approx(0.4856)
        with pytest.raises(ValueError):
            s.at_mpp(0.5, tolerance=1.5)


def test_view_shape_rounds_down_inside_the_scanned_area(mixed):
    with tw.open(mixed) as s:
        for mpp in (0.2428 * 4, 0.5, 0.8123, 2.3):
            view = s.at_mpp(mpp)
            scale = view.mpp / 0.2428
            # ground truth: the last view pixel ends at or before the last scanned row/column
            assert view.shape == (math.floor(H0 / scale + 1e-9), math.floor(W0 / scale + 1e-9))
            assert view.shape[0] * scale <= H0 and view.shape[1] * scale <= W0
            # rounding to nearest would have added a pixel past the edge for some of these
        view = s.at_mpp(0.2428 * 4)  # level 1 as is: 251 x 326 level pixels, the last partial
        assert view.shape == (250, 325)


def test_view_never_reads_past_a_level_whose_axes_differ(tmp_path, noise):
    # a level whose size is not level 0's over one whole number: y ratio 4.06, x ratio 3.95
    path = tmp_path / "aniso.tif"
    import cv2

    lv = cv2.resize(noise, (329, 247), interpolation=cv2.INTER_AREA)
    with tifffile.TiffWriter(path) as tf:
        for i, img in enumerate((noise, lv)):
            tf.write(img, tile=(256, 256), photometric="rgb", compression="zlib",
                     resolution=(1e4 / 0.2428 / (1 if i == 0 else 4),) * 2, resolutionunit="CENTIMETER",
                     subfiletype=1 if i else 0)
    # the tiff backend does not take such a page as a level (its sides fit no one downsample);
    # OpenSlide does
    with tw.open(path, backend="openslide") as s:
        ds = s.levels[1].downsample
        assert ds == pytest.approx((H0 / 247 + W0 / 329) / 2)  # one downsample: the mean ratio
        view = s.at_mpp(s.levels[1].mpp)
        # bounded by the level's own rows (247 < 1003 / 4.006) and by level 0's extent in x
        assert view.shape == (247, math.floor(W0 / ds))
        assert view.shape[1] <= 329
        block = view.read(0, 0, *view.shape)
        assert not (block == 255).all(axis=-1).all(axis=1).any()  # no all-white padded row


def test_openslide_reads_whole_pixel_positions(mixed, noise):
    with tifffile.TiffFile(mixed) as tf:
        level1 = tf.pages[1].asarray()  # reference decoder: tifffile
    with tw.open(mixed, backend="openslide") as o, tw.open(mixed, backend="tiff") as t:
        assert o._reader._downsamples[1] != 4.0  # OpenSlide's own downsample is not whole
        # at x = 101 the old fractional origin shifted the level by a fraction and OpenSlide
        # interpolated; every position must now give the level's own pixels
        for y, x, h, w in [(0, 101, 40, 60), (13, 7, 100, 1), (200, 250, 51, 76), (0, 0, 251, 326)]:
            np.testing.assert_array_equal(o.read_level(1, y, x, h, w), level1[y:y + h, x:x + w])
        # the same view pixels from both backends, at every position, for targets that use
        # level 1 as is, resample it, or resample level 0
        for mpp in (0.9712, 1.37, 0.61):
            vo, vt = o.at_mpp(mpp), t.at_mpp(mpp)
            assert vo.source_level == vt.source_level and vo.shape == vt.shape
            np.testing.assert_array_equal(vo.read(0, 0, *vo.shape), vt.read(0, 0, *vt.shape))
            rng = np.random.default_rng(3)
            for _ in range(12):
                y, x = rng.integers(0, vo.shape[0]), rng.integers(0, vo.shape[1])
                np.testing.assert_array_equal(vo.read(y, x, 37, 41), vt.read(y, x, 37, 41))


def test_openslide_jpeg_matches_tiff_within_decoder_rounding(tmp_path):
    from tilewright.demo.synth import random_layout

    lay = random_layout(1003 * 0.4991, 1301 * 0.4991, seed=4)
    image = lay.render(0.4991, 0, 0, 1003, 1301)
    path = tmp_path / "jpeg20x.tif"
    write_pyramid(path, image, mpp=0.4991, tile=256, compression="jpeg", quality=90,
                  downsamples=(1, 2, 16))
    with tw.open(path, backend="openslide") as o, tw.open(path, backend="tiff") as t:
        for mpp in (0.9982, 1.1, 2.0):  # level 1 as is; level 1 resampled by 1.10 and 2.004
            vo, vt = o.at_mpp(mpp), t.at_mpp(mpp)
            a, b = vo.read(0, 0, *vo.shape).astype(int), vt.read(0, 0, *vt.shape).astype(int)
            # reference: OpenSlide (libjpeg-turbo); decoders may differ by a few levels in
            # chroma upsampling and IDCT (common practice); a shifted read would differ by far
            # more on this texture
            assert np.abs(a - b).max() <= 8 and np.abs(a - b).mean() <= 1.0


def test_openslide_level_too_large_to_read_whole_is_not_used(mixed, monkeypatch):
    import tilewright.slide.openslide_backend as ob

    monkeypatch.setattr(ob, "WHOLE_LEVEL_PIXELS", 2000)  # level 1 (81 826 px) is now too large
    with tw.open(mixed, backend="openslide") as o, tw.open(mixed, backend="tiff") as t:
        assert o._reader.exact_levels == (True, False, True)
        view = o.at_mpp(1.2)
        assert view.source_level == 0  # resampled from the nearest level OpenSlide reads exactly
        ref = t.at_mpp(1.2)
        assert ref.source_level == 1  # the tiff backend reads level 1 exactly
        with pytest.raises(ValueError, match="whole-pixel"):
            o.read_level(1, 5, 5, 10, 10)
        thumb = o.thumbnail(8.0)  # level 2 (1 312 px) is read whole, at its true µm/px
        assert thumb.mpp == pytest.approx(0.2428 * 32)
        np.testing.assert_array_equal(thumb, t.thumbnail(8.0))
