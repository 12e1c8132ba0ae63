"""at_mpp: area averaging against OpenCV INTER_AREA, seams, padding, level choice, dask."""

from __future__ import annotations

import math

import cv2
import numpy as np
import pytest

import tilewright as tw
from tilewright.slide.downsample import area_downsample

from .conftest import H0, W0, make_image


@pytest.fixture(scope="module")
def single_level(write):
    """Lossless, level 0 only, 0.25 µm/px: every view must be computed from level 0."""
    return write("single.tif", compression="zlib", n_levels=1, mpp=0.25)


def test_half_resolution_equals_cv2_inter_area(single_level, image):
    with tw.open(single_level) as s:
        view = s.at_mpp(0.5)
        assert view.source_level == 0 and view.scale == 2.0
        assert view.shape == (H0 // 2, W0 // 2)
        got = view.read(0, 0, *view.shape)
    ref = cv2.resize(image, (W0 // 2, H0 // 2), interpolation=cv2.INTER_AREA)
    np.testing.assert_array_equal(got, ref)  # reference: cv2.resize INTER_AREA


@pytest.mark.parametrize("slide_mpp", [0.2527, 0.2465])
def test_non_integer_factor_matches_cv2_within_one_level(single_level, image, slide_mpp):
    with tw.open(single_level, mpp=slide_mpp) as s:
        view = s.at_mpp(0.5, tolerance=0.0)
        s_ = 0.5 / slide_mpp
        assert view.scale == pytest.approx(s_)
        # shape convention: whole view pixels inside the slide, floor(H0 / scale); e.g.
        # 2048 * 0.2465 / 0.5 = 1009.66 -> 1009 (rounding to nearest would add a column that
        # reaches a third of a pixel past the last scanned column)
        assert view.shape == (math.floor(H0 / s_), math.floor(W0 / s_))
        got = view.read(0, 0, *view.shape)
    ref = cv2.resize(image, None, fx=1 / s_, fy=1 / s_, interpolation=cv2.INTER_AREA)
    # compare target pixels whose source footprint lies inside level 0
    hh, ww = int(H0 // s_), int(W0 // s_)
    diff = np.abs(got[:hh, :ww].astype(int) - ref[:hh, :ww])
    assert diff.max() <= 1  # reference: cv2 INTER_AREA; ±1 grey level from rounding
    assert (diff > 0).mean() < 0.01


def test_expected_shape_for_0_2527_fixture(write):
    path = write("mpp2527.tif", compression="jpeg", mpp=0.2527, n_levels=3)
    with tw.open(path) as s:
        assert s.mpp == pytest.approx(0.2527)
        view = s.at_mpp(0.5, tolerance=0.0)
        # ground truth: 2048 * 0.2527 / 0.5 = 1035.06 -> 1035; 1536 -> 776.29 -> 776
        assert view.shape == (776, 1035) and view.source_level == 0
        assert view.read(0, 0, *view.shape).shape == (776, 1035, 3)


@pytest.mark.parametrize("slide_mpp", [0.25, 0.2527, 0.3])
def test_one_large_read_equals_mosaic_of_small_reads(single_level, slide_mpp):
    with tw.open(single_level, mpp=slide_mpp) as s:
        view = s.at_mpp(0.5 if slide_mpp < 0.3 else 0.77, tolerance=0.0)
        y, x, h, w = 37, 101, 411, 533
        big = view.read(y, x, h, w)
        h1, w1 = 173, 289  # uneven split points, not aligned with tiles
        mosaic = np.concatenate([
            np.concatenate([view.read(y, x, h1, w1), view.read(y, x + w1, h1, w - w1)], 1),
            np.concatenate([view.read(y + h1, x, h - h1, w1),
                            view.read(y + h1, x + w1, h - h1, w - w1)], 1),
        ], 0)
    np.testing.assert_array_equal(big, mosaic)  # ground truth: the same region in one piece


def test_downsample_weights_are_global():
    # ground truth constructed here: a ramp averaged over [j*s, (j+1)*s) has mean
    # ((j + 0.5) * s - 0.5) for a ramp value equal to the source index
    s = 2.5
    src = np.tile(np.arange(100, dtype=np.uint8)[:, None, None], (1, 4, 3))
    full = area_downsample(src, 0, 0, 40, 1, s, 0, 0)
    j = np.arange(40)
    np.testing.assert_allclose(full[:, 0, 0], np.rint((j + 0.5) * s - 0.5), atol=1)
    part = area_downsample(src[25:60], 10, 0, 13, 1, s, 25, 0)
    np.testing.assert_array_equal(part, full[10:23])


def test_padding_outside_slide_is_white(single_level, image):
    with tw.open(single_level) as s:
        view = s.at_mpp(0.5)
        H, W = view.shape
        r = view.read(H - 10, W - 20, 30, 50)
        np.testing.assert_array_equal(r[10:], 255)  # ground truth: white padding
        np.testing.assert_array_equal(r[:, 20:], 255)
        np.testing.assert_array_equal(r[:10, :20], view.read(H - 10, W - 20, 10, 20))
        neg = view.read(-5, -5, 10, 10)
        np.testing.assert_array_equal(neg[:5], 255)
        np.testing.assert_array_equal(neg[5:, 5:], view.read(0, 0, 5, 5))
        np.testing.assert_array_equal(s.read_level(0, -3, 0, 5, 4)[3:], image[:2, :4])


def test_level_within_tolerance_used_as_is(write):
    path = write("jpeg_ifd.tif", compression="jpeg", layout="ifd")
    with tw.open(path, mpp=0.2506) as s:
        view = s.at_mpp(0.5)  # level 1 is 0.5012 µm/px, within the default 0.5 %
        assert view.source_level == 1 and view.level_scale == 1.0
        # the view's µm/px is the true one of its pixels, not the request
        assert view.mpp == pytest.approx(0.5012) and view.scale == 2.0
        lv = s.levels[1]
        np.testing.assert_array_equal(view.read(0, 0, lv.height, lv.width),
                                      s.read_level(1, 0, 0, lv.height, lv.width))
        strict = s.at_mpp(0.5, tolerance=0.0)
        assert strict.source_level == 0  # 0.5012 is coarser than 0.5: must come from level 0
        assert strict.mpp == pytest.approx(0.5)
        # nearest level at or finer than the target: 1.3 µm/px reads level 2 (1.0024)
        assert s.at_mpp(1.3).source_level == 2
    with tw.open(path, mpp=0.2527) as s:
        # level 1 is 0.5054 µm/px, 1.08 % off 0.5: by default resampled from level 0 so the
        # tiles are at 0.5; a looser tolerance reuses it as is and says so
        view = s.at_mpp(0.5)
        assert view.source_level == 0 and view.mpp == pytest.approx(0.5)
        loose = s.at_mpp(0.5, tolerance=0.05)
        assert loose.source_level == 1 and loose.mpp == pytest.approx(0.5054)


def test_thumbnail_reads_coarsest_adequate_level(write, monkeypatch):
    path = write("jpeg_ifd.tif", compression="jpeg", layout="ifd")
    with tw.open(path) as s:
        levels_read = []
        orig = s._reader.read
        monkeypatch.setattr(s._reader, "read",
                            lambda lv, *a: (levels_read.append(lv), orig(lv, *a))[1])
        thumb = s.thumbnail(8.0)
        assert set(levels_read) == {2}  # ground truth: level 2 (1.0 µm/px) is the coarsest
        view = s.at_mpp(8.0)
        np.testing.assert_array_equal(thumb, view.read(0, 0, *view.shape))
        assert thumb.shape[:2] == (round(H0 / 32), round(W0 / 32))


def test_finer_than_level0_is_refused(single_level):
    from tilewright.slide.wholeslide import ResolutionUnavailableError

    with tw.open(single_level) as s, pytest.raises(ResolutionUnavailableError):
        s.at_mpp(0.1)


def test_to_dask_is_lazy_and_matches_read(single_level, monkeypatch):
    with tw.open(single_level, mpp=0.2527) as s:
        view = s.at_mpp(0.5, tolerance=0.0)
        calls = []
        orig = s._reader.read
        monkeypatch.setattr(s._reader, "read", lambda *a: (calls.append(a), orig(*a))[1])
        arr = view.to_dask(chunk=300)
        assert calls == []  # nothing read until computed
        assert arr.shape == view.shape + (3,) and arr.chunksize == (300, 300, 3)
        sub = arr[100:700, 250:800].compute(scheduler="threads")
        assert calls
        np.testing.assert_array_equal(sub, view.read(100, 250, 600, 550))  # ground truth


def test_iter_blocks_covers_view_once(write):
    path = write("jpeg_ifd.tif", compression="jpeg", layout="ifd")
    with tw.open(path) as s:
        view = s.at_mpp(0.7, tolerance=0.0)
        full = view.read(0, 0, *view.shape)
        mosaic = np.zeros_like(full)
        hits = np.zeros(view.shape, int)
        for y, x, block in view.iter_blocks(200):
            mosaic[y:y + block.shape[0], x:x + block.shape[1]] = block
            hits[y:y + block.shape[0], x:x + block.shape[1]] += 1
        np.testing.assert_array_equal(hits, 1)  # ground truth: a partition of the view
        np.testing.assert_array_equal(mosaic, full)


def test_block_size_aligns_with_source_tiles(single_level):
    with tw.open(single_level) as s:
        view = s.at_mpp(0.5)
        b = view.block_size(1000)
        assert (b * 2) % 256 == 0  # ground truth: 256 px stored tiles, factor 2


@pytest.mark.parametrize("k", [2, 4])
def test_tile_by_tile_reduction_equals_cv2_inter_area(write, k):
    """Whole-factor views reduce each source tile as it is decoded (no level-resolution strip);
    every box, inside, across the far edges (odd level sizes: those fall back to the strip path)
    and past them, equals OpenCV INTER_AREA of the level-0 pixels padded with white."""
    img = make_image(1001, 1290, seed=3)  # odd height: the last block row straddles the level edge
    path = write(f"odd-{k}.tif", img=img, compression="zlib", n_levels=1, mpp=0.25)
    pad = np.full((-(-1001 // k) * k + 320, -(-1290 // k) * k + 320, 3), 255, np.uint8)
    pad[:1001, :1290] = img
    ref = cv2.resize(pad, (pad.shape[1] // k, pad.shape[0] // k), interpolation=cv2.INTER_AREA)
    rng = np.random.default_rng(k)
    with tw.open(path) as s:
        view = s.at_mpp(0.25 * k)
        assert view.level_scale == k and s.reduces(0, k, 0, 0, 512, 512)
        assert not s.reduces(0, k, 0, 0, 1001 + k - 1001 % k, 256 * k)  # crosses the odd edge: strip path
        boxes = [(0, 0, *view.shape), (view.shape[0] - 3, 5, 7, 40)]
        boxes += [tuple(int(v) for v in (rng.integers(0, 1001 // k), rng.integers(0, 1290 // k),
                                         rng.integers(1, 300 // k), rng.integers(1, 300 // k))) for _ in range(12)]
        for y, x, h, w in boxes:
            got = view.read(y, x, h, w)
            np.testing.assert_array_equal(got, ref[y:y + h, x:x + w], err_msg=str((y, x, h, w)))  # reference: cv2


def test_reduced_read_refuses_boxes_off_the_factor_grid(write):
    """A box whose edges are not multiples of the factor has target pixels straddling tiles'
    blocks: refused (ValueError) rather than averaged over the wrong source pixels."""
    path = write("odd-2.tif", img=make_image(1001, 1290, seed=3), compression="zlib", n_levels=1, mpp=0.25)
    with tw.open(path) as s:
        assert s.reduces(0, 2, 0, 0, 512, 512) and not s.reduces(0, 2, 1, 0, 512, 512)
        assert not s.reduces(0, 3, 0, 0, 768, 768)  # 256-px tiles are not a multiple of 3
        with pytest.raises(ValueError):
            s.read_level(0, 1, 0, 512, 512, factor=2)
        with pytest.raises(ValueError):
            s._reader.read(0, 2, 0, 6, 6, np.empty((2, 2, 3), np.uint8), 3)
