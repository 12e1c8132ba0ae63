"""Reading the embedded ICC profile and converting reads to sRGB (tw.open colour_profile=...)."""

from __future__ import annotations

import hashlib
import pickle

import cv2
import numpy as np
import pytest

import tilewright as tw
from colour_refs import delta_e, lcms_reference, write_profiled_slide
from tilewright.demo import icc

from .conftest import make_image

ADOBE = icc.matrix_trc_profile(**icc.ADOBE_RGB_1998)
WIDE = icc.matrix_trc_profile(**icc.SCANNER_B)


@pytest.fixture(scope="module")
def picture():
    return make_image(768, 1024, seed=3)


@pytest.fixture(scope="module")
def slides(tmp_path_factory, picture):
    folder = tmp_path_factory.mktemp("colour")
    return {
        "adobe": write_profiled_slide(folder / "adobe.tif", picture, ADOBE),
        "wide_svs": write_profiled_slide(folder / "wide.svs", picture, WIDE, layout="svs", factor=4,
                                         compression="jpeg"),
        "wide_x4": write_profiled_slide(folder / "wide_x4.tif", picture, WIDE, factor=4),
        "plain": write_profiled_slide(folder / "plain.tif", picture, None),
        "srgb": write_profiled_slide(folder / "srgb.tif", picture, icc.matrix_trc_profile(**icc.SRGB_IEC)),
    }


@pytest.mark.parametrize("backend", ["tiff", "openslide"])
@pytest.mark.parametrize("name, profile", [("adobe", ADOBE), ("wide_svs", WIDE)])
def test_both_backends_read_the_profile_as_stored(slides, backend, name, profile):
    with tw.open(slides[name], backend=backend) as s:
        # ground truth: the bytes written into tag 34675; OpenSlide is an independent reader of them
        assert s.colour.sha256 == hashlib.sha256(profile).hexdigest()
        assert s.colour.size == len(profile)
        assert s.colour.applied and s.colour.embedded
        spec = icc.SCANNER_B if name == "wide_svs" else icc.ADOBE_RGB_1998
        assert s.colour_profile == s.colour.description == spec["description"]
        assert s.colour.table == "matrix/TRC" and s.colour.intent == "relative colorimetric"
        assert s.colour.target == "sRGB (IEC 61966-2-1)"


@pytest.mark.parametrize("backend", ["tiff", "openslide"])
def test_level_reads_are_converted_as_littlecms_converts(slides, picture, backend):
    with tw.open(slides["adobe"], backend=backend) as s:
        got = s.read_level(0, 0, 0, *picture.shape[:2])
    want = lcms_reference(ADOBE, picture)  # reference: LittleCMS via Pillow ImageCms
    d = delta_e(got, want)
    assert d.mean() <= 1.0 and np.percentile(d, 99) <= 2.5
    assert np.abs(got.astype(int) - want).max() <= 1


@pytest.mark.parametrize("backend", ["tiff", "openslide"])
def test_ignore_returns_the_raw_pixels_bit_for_bit(slides, picture, backend):
    with tw.open(slides["adobe"], backend=backend, colour_profile="ignore") as s:
        assert not s.colour.applied and s.colour.embedded and s.colour_transform is None
        assert s.colour.label.endswith("(ignored)")
        np.testing.assert_array_equal(s.read_level(0, 0, 0, *picture.shape[:2]), picture)  # ground truth: written
        view = s.at_mpp(0.2428 * 2)
        with tw.open(slides["plain"], backend=backend) as plain:  # the same pixels without a profile
            np.testing.assert_array_equal(view.read(10, 20, 200, 300), plain.at_mpp(0.2428 * 2).read(10, 20, 200, 300))


def test_views_average_device_colour_then_convert(slides, picture):
    # level 0 at 0.2428 µm/px, next level x4: 3 x 0.2428 is computed from level 0 with k = 3
    with tw.open(slides["wide_x4"]) as s:
        view = s.at_mpp(0.2428 * 3)
        assert view.source_level == 0 and view.scale == 3.0
        got = view.read(0, 0, 256, 341)
        thumb = s.thumbnail(0.2428 * 3)
    # reference: OpenCV INTER_AREA of the device pixels, then LittleCMS
    area = cv2.resize(picture[:768, :1023], (341, 256), interpolation=cv2.INTER_AREA)
    want = lcms_reference(WIDE, area)
    assert np.abs(got.astype(int) - want).max() <= 1
    np.testing.assert_array_equal(thumb[:256, :341], got)  # the thumbnail takes the same path


def test_padding_outside_the_slide_stays_white(slides):
    with tw.open(slides["wide_x4"]) as s:
        h, w = s.dimensions
        block = s.read_level(0, h - 10, w - 10, 40, 40)
        view_block = s.at_mpp(0.2428 * 3).read(h // 3 - 2, w // 3 - 2, 20, 20)
    assert (block[10:, :] == 255).all() and (block[:, 10:] == 255).all()
    assert (view_block[5:, 5:] == 255).all()


def test_no_profile_means_no_transform(slides, picture):
    with tw.open(slides["plain"]) as s:
        assert s.colour_transform is None and not s.colour.embedded and s.colour_profile is None
        assert s.colour.label == "none" and s.colour.sha256 is None
        np.testing.assert_array_equal(s.read_level(0, 0, 0, *picture.shape[:2]), picture)


def test_an_srgb_profile_leaves_pixels_as_they_are(slides, picture):
    # sRGB built from IEC 61966-2-1 primaries and curve: equals LittleCMS's sRGB within rounding,
    # so the converted pixels are the stored ones (and no per-pixel work is done)
    with tw.open(slides["srgb"]) as s:
        np.testing.assert_array_equal(s.read_level(0, 0, 0, *picture.shape[:2]), picture)
        assert s.colour.applied and s.colour_transform.identity
        assert s.colour_transform.provenance()["srgb_equivalent"] is True


def test_a_pickled_slide_keeps_its_colour_setting(slides, picture):
    with tw.open(slides["adobe"], colour_profile="ignore") as s:
        again = pickle.loads(pickle.dumps(s))
    with again:
        assert not again.colour.applied
        np.testing.assert_array_equal(again.read_level(0, 0, 0, 64, 64), picture[:64, :64])


def test_colour_profile_argument_is_checked(slides):
    with pytest.raises(ValueError, match="colour_profile"):
        tw.open(slides["plain"], colour_profile="maybe")


def test_dask_arrays_of_the_two_settings_are_not_confused(slides, picture):
    import dask.array as da

    with tw.open(slides["adobe"]) as a, tw.open(slides["adobe"], colour_profile="ignore") as i:
        va, vi = a.at_mpp(0.2428 * 2).to_dask(chunk=128), i.at_mpp(0.2428 * 2).to_dask(chunk=128)
        assert va.name != vi.name  # one graph holding both must not share their chunks
        both = da.stack([va, vi]).compute(scheduler="synchronous")
        np.testing.assert_array_equal(both[0], a.at_mpp(0.2428 * 2).read(0, 0, *va.shape[:2]))
        np.testing.assert_array_equal(both[1], i.at_mpp(0.2428 * 2).read(0, 0, *vi.shape[:2]))
        assert not np.array_equal(both[0], both[1])


def test_profile_comes_from_the_slide_page_when_an_overview_comes_first(tmp_path, picture):
    """OME files often store the overview before the slide: the profile read is the slide's own."""
    import tifffile

    path = tmp_path / "macro_first.ome.tif"
    srgb = icc.matrix_trc_profile(**icc.SRGB_IEC)
    with tifffile.TiffWriter(path, ome=True) as t:
        # the overview carries another profile (sRGB), the slide its scanner's (Adobe RGB)
        t.write(make_image(120, 360, seed=9), photometric="rgb", compression="zlib", rowsperstrip=64,
                extratags=[(34675, 7, len(srgb), srgb, True)],
                metadata={"axes": "YXS", "Name": "overview", "PhysicalSizeX": 16.0, "PhysicalSizeY": 16.0})
        t.write(picture, tile=(256, 256), photometric="rgb", compression="zlib",
                extratags=[(34675, 7, len(ADOBE), ADOBE, True)],
                metadata={"axes": "YXS", "Name": "slide", "PhysicalSizeX": 0.2428, "PhysicalSizeY": 0.2428})
    with tw.open(path, backend="tiff") as s:
        assert s.dimensions == picture.shape[:2]  # the slide, not the overview, is level 0
        # ground truth: the bytes written into the slide page's tag 34675
        assert s.colour.sha256 == hashlib.sha256(ADOBE).hexdigest()
