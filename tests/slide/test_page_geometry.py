"""Strips, pixel shape, orientation and ImageJ units: each read correctly or refused by name."""

from __future__ import annotations

import os

import numpy as np
import pytest
import tifffile

import tilewright as tw
from tilewright.errors import MissingResolutionError, SlideGeometryError, UnsupportedSlideError
from tilewright.slide.tiff_backend import TiffBackend

import vendor_corpus as vc

IMG = vc.image(700, 900, seed=21)


def test_single_raw_strip_reads_only_the_rows_needed(tmp_path, monkeypatch):
    path = tmp_path / "raw.tif"
    tifffile.imwrite(path, IMG, photometric="rgb", rowsperstrip=700, metadata=None,
                     resolution=(1e4 / 0.2527,) * 2, resolutionunit="CENTIMETER")
    sizes = []
    orig = TiffBackend._pread

    def spy(self, n, offset, *fd):
        sizes.append(n)
        return orig(self, n, offset, *fd)

    monkeypatch.setattr(TiffBackend, "_pread", spy)
    with tw.open(path) as s:
        got = s.read_level(0, 300, 450, 20, 30)
    np.testing.assert_array_equal(got, IMG[300:320, 450:480])  # ground truth written
    assert max(sizes) <= 20 * 900 * 3  # only the 20 rows asked for, not the 1.9 MB strip


def test_pread_is_repeated_until_every_byte_arrived(tmp_path, monkeypatch):
    # os.pread may return fewer bytes than asked (Linux caps one call at ~2 GiB); simulate a cap
    path = tmp_path / "tiles.tif"
    tifffile.imwrite(path, IMG, photometric="rgb", tile=(256, 256), compression="zlib", metadata=None,
                     resolution=(1e4 / 0.2527,) * 2, resolutionunit="CENTIMETER")
    real = os.pread
    monkeypatch.setattr(os, "pread", lambda fd, n, off: real(fd, min(n, 997), off))
    with tw.open(path) as s:
        np.testing.assert_array_equal(s.read_level(0, 0, 0, 700, 900), IMG)  # ground truth written


def test_huge_compressed_strip_is_refused_with_the_reason(tmp_path, monkeypatch):
    from tilewright.slide import tiff_strips

    path = tmp_path / "onestrip.tif"
    tifffile.imwrite(path, IMG, photometric="rgb", rowsperstrip=700, compression="zlib", metadata=None,
                     resolution=(1e4 / 0.2527,) * 2, resolutionunit="CENTIMETER")
    monkeypatch.setattr(tiff_strips, "MAX_STRIP_BYTES", 1 << 20)  # the strip decodes to 1.9 MB
    with pytest.raises(UnsupportedSlideError, match="strip") as e:
        tw.open(path)  # OpenSlide does not serve stripped TIFFs either: the tiff reason is kept
    assert str(path) in str(e.value) and "tiled" in str(e.value)


@pytest.mark.parametrize("backend", ["tiff", "openslide"])
def test_anisotropic_pixels_are_refused(tmp_path, backend):
    path = tmp_path / "aniso.tif"
    with tifffile.TiffWriter(path) as t:  # 0.25 x 0.5 µm pixels (ground truth constructed here)
        for k in (1, 2):
            t.write(IMG[::k, ::k], tile=(256, 256), photometric="rgb", compression="zlib", metadata=None,
                    resolution=(1e4 / (0.25 * k), 1e4 / (0.5 * k)), resolutionunit="CENTIMETER")
    with pytest.raises(SlideGeometryError, match="not square") as e:
        tw.open(path, backend=backend)
    assert str(path) in str(e.value) and "--source-mpp" in str(e.value)
    with tw.open(path, mpp=0.25, backend=backend) as s:  # the user's override says what is true
        assert s.mpp == 0.25


def test_anisotropy_within_one_percent_is_accepted(tmp_path):
    path = tmp_path / "near.tif"
    tifffile.imwrite(path, IMG, tile=(256, 256), photometric="rgb", metadata=None,
                     resolution=(1e4 / 0.2527, 1e4 / 0.2540), resolutionunit="CENTIMETER")
    with tw.open(path) as s:
        assert s.mpp == pytest.approx((0.2527 + 0.2540) / 2)  # mean of the two tags written


def test_orientation_other_than_top_left_is_refused(tmp_path):
    path = tmp_path / "rotated.tif"
    tifffile.imwrite(path, IMG, tile=(256, 256), photometric="rgb", metadata=None,
                     resolution=(1e4 / 0.2527,) * 2, resolutionunit="CENTIMETER",
                     extratags=[(274, "H", 1, 6, True)])  # Orientation 6: rotated 90° (TIFF 6.0)
    with pytest.raises(SlideGeometryError, match="Orientation") as e:
        tw.open(path)  # auto must not hand it to OpenSlide, which ignores the tag
    assert str(path) in str(e.value)


def test_imagej_units_in_the_description(tmp_path):
    path = tmp_path / "imagej.tif"
    tifffile.imwrite(path, IMG, imagej=True, resolution=(1 / 0.2265, 1 / 0.2265),
                     metadata={"unit": "micron"})
    with tifffile.TiffFile(path) as tf:  # what ImageJ writes: unit NONE, unit named in the description
        assert tf.pages[0].tags["ResolutionUnit"].value == 1 and "unit=micron" in tf.pages[0].description
    with tw.open(path) as s:
        assert s.mpp == pytest.approx(0.2265, rel=1e-5) and s.mpp_origin == "imagej"
        np.testing.assert_array_equal(s.read_level(0, 10, 20, 30, 40), IMG[10:40, 20:60])


def test_missing_resolution_names_the_source_mpp_option(tmp_path):
    path = tmp_path / "nores.tif"
    tifffile.imwrite(path, IMG, tile=(256, 256), photometric="rgb", metadata=None,
                     resolution=(40000, 40000), resolutionunit="NONE")
    with pytest.raises(MissingResolutionError) as e:
        tw.open(path)
    msg = str(e.value)
    assert "--source-mpp" in msg and "--mpp-table" in msg and "--mpp for all" not in msg
