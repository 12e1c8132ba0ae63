"""The tiff and OpenSlide backends agree (OpenSlide as an independent decoder of the same file)."""

from __future__ import annotations

import numpy as np
import pytest

import tilewright as tw

REGIONS = [(0, 0, 300, 400), (517, 901, 700, 655), (1400, 1900, 136, 148), (250, 250, 1, 1)]


@pytest.mark.parametrize("layout", ["ifd", "svs"])
def test_lossless_pyramid_identical_pixels(write, image, layout):
    path = write(f"lossless_{layout}.tif", compression="zlib", layout=layout, objective=40)
    with tw.open(path, backend="tiff") as a, tw.open(path, backend="openslide") as b:
        assert a.backend == "tiff" and b.backend == "openslide"
        # reference: OpenSlide's level geometry
        assert [(lv.height, lv.width) for lv in a.levels] == \
               [(lv.height, lv.width) for lv in b.levels]
        for y, x, h, w in REGIONS:
            ra = a.read_level(0, y, x, h, w)
            rb = b.read_level(0, y, x, h, w)
            np.testing.assert_array_equal(ra, rb)  # reference: OpenSlide decode
            np.testing.assert_array_equal(ra, image[y:y + h, x:x + w])  # ground truth written
        for lv in range(1, len(a.levels)):
            hh, ww = a.levels[lv].height, a.levels[lv].width
            np.testing.assert_array_equal(a.read_level(lv, 0, 0, hh, ww),
                                          b.read_level(lv, 0, 0, hh, ww))  # reference: OpenSlide


@pytest.mark.parametrize("layout", ["ifd", "svs"])
def test_jpeg_pyramid_within_jpeg_tolerance(write, image, layout):
    path = write(f"jpeg_{layout}.tif", compression="jpeg", quality=90, layout=layout)
    with tw.open(path, backend="tiff") as a, tw.open(path, backend="openslide") as b:
        for y, x, h, w in REGIONS:
            ra = a.read_level(0, y, x, h, w).astype(int)
            rb = b.read_level(0, y, x, h, w).astype(int)
            # reference: OpenSlide (libjpeg-turbo); tolerance: decoders may differ in chroma
            # upsampling and IDCT by a few levels (common practice)
            assert np.abs(ra - rb).max() <= 8
            assert np.abs(ra - rb).mean() <= 1.0
            if h * w >= 10_000:
                # ground truth written; quality-90 JPEG of this texture stays near it on average
                assert np.abs(ra - image[y:y + h, x:x + w]).mean() < 6


def test_ome_subifd_levels_are_area_reductions(write, image):
    import cv2

    path = write("ome_zlib.ome.tif", compression="zlib", layout="ome")
    with tw.open(path) as s:
        assert s.backend == "tiff" and len(s.levels) == 3 and s.mpp_origin == "ome"
        lv1 = s.levels[1]
        assert (lv1.height, lv1.width, lv1.downsample) == (768, 1024, 2.0)
        got = s.read_level(1, 0, 0, lv1.height, lv1.width)
        ref = cv2.resize(image, (1024, 768), interpolation=cv2.INTER_AREA)
        np.testing.assert_array_equal(got, ref)  # reference: cv2 INTER_AREA of level 0


def test_auto_prefers_tiff_and_falls_back(write):
    path = write("lossless_ifd.tif", compression="zlib", layout="ifd")
    with tw.open(path) as s:
        assert s.backend == "tiff"  # tiff serves it with levels and resolution
    # SubIFD pyramid without resolution tags: tiff has no µm/px; OpenSlide sees the same tags
    nores = write("nores.tif", compression="zlib", mpp=None, n_levels=2)
    with tw.open(nores, mpp=0.5) as s:
        assert s.backend == "tiff" and s.mpp == 0.5 and s.mpp_origin == "override"


def test_region_reads_touch_only_needed_tiles(write, monkeypatch):
    from tilewright.slide.tiff_backend import TiffBackend

    path = write("jpeg_ifd.tif", compression="jpeg", layout="ifd")
    seen = []
    orig = TiffBackend._fetch_row

    def spy(self, offs, cnts, *fd):
        seen.append(len(offs))
        return orig(self, offs, cnts, *fd)

    monkeypatch.setattr(TiffBackend, "_fetch_row", spy)
    with tw.open(path, backend="tiff") as s:
        s.read_level(0, 300, 300, 100, 100)  # inside tile (1, 1) of 256 px tiles
        assert seen == [1]  # ground truth: one 256 px tile covers [256, 512)
        seen.clear()
        s.read_level(0, 250, 250, 20, 20)  # straddles 4 tiles
        assert seen == [2, 2]


def test_concurrent_reads_from_threads(write):
    from concurrent.futures import ThreadPoolExecutor

    path = write("jpeg_ifd.tif", compression="jpeg", layout="ifd")
    with tw.open(path) as s:
        view = s.at_mpp(0.5, tolerance=0.0)
        boxes = [(y, x, 200, 230) for y in range(0, 700, 150) for x in range(0, 1000, 170)]
        serial = [view.read(*b) for b in boxes]
        with ThreadPoolExecutor(4) as pool:
            parallel = list(pool.map(lambda b: view.read(*b), boxes))
        for p, q in zip(serial, parallel):
            np.testing.assert_array_equal(p, q)  # ground truth: single-threaded reads


def test_pickle_reopens_by_path(write):
    import pickle

    path = write("jpeg_ifd.tif", compression="jpeg", layout="ifd")
    with tw.open(path, mpp=0.26) as s:
        view = s.at_mpp(1.0)
        v2 = pickle.loads(pickle.dumps(view))
        assert v2.slide.mpp == 0.26 and v2.shape == view.shape
        np.testing.assert_array_equal(v2.read(10, 20, 50, 60), view.read(10, 20, 50, 60))
        v2.slide.close()


def test_tiff_backend_never_imports_openslide(write):
    import subprocess
    import sys

    path = write("jpeg_ifd.tif", compression="jpeg", layout="ifd")
    code = ("import sys, tilewright as tw\n"
            f"s = tw.open({str(path)!r}); s.at_mpp(0.5).read(0, 0, 64, 64); s.close()\n"
            "assert 'openslide' not in sys.modules, 'openslide imported'\n")
    subprocess.run([sys.executable, "-c", code], check=True)


def test_ome_series_pyramid(tmp_path):
    """OME-TIFF storing each resolution as its own Image series."""
    import cv2
    import tifffile

    from .conftest import make_image

    img = make_image(600, 800)
    small = cv2.resize(img, (400, 300), interpolation=cv2.INTER_AREA)
    path = tmp_path / "series.ome.tif"
    with tifffile.TiffWriter(path, ome=True) as t:
        for arr, mpp in ((img, 0.25), (small, 0.5)):
            t.write(arr, tile=(128, 128), photometric="rgb", compression="zlib",
                    metadata={"axes": "YXS", "PhysicalSizeX": mpp, "PhysicalSizeY": mpp})
    with tw.open(path) as s:
        assert s.backend == "tiff" and s.mpp == 0.25
        assert [(lv.height, lv.width, lv.downsample) for lv in s.levels] == \
            [(600, 800, 1.0), (300, 400, 2.0)]  # ground truth written above
        np.testing.assert_array_equal(s.read_level(1, 0, 0, 300, 400), small)
        np.testing.assert_array_equal(s.read_level(0, 100, 200, 50, 60),
                                      img[100:150, 200:260])
