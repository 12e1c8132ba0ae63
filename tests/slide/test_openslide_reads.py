"""Reads through the OpenSlide backend: OpenSlide's premultiplied pixels composited onto white in a
caller's buffer, equal to openslide-python's own ``read_region`` composited the textbook way, from
any number of reader threads."""

from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor

import numpy as np
import pytest

import tilewright as tw
from tilewright.slide import openslide_backend as osb


def _reference(path, level, y, x, h, w):
    """openslide-python's PIL image (straight alpha) composited onto white in floating point."""
    import openslide

    s = openslide.OpenSlide(str(path))
    try:
        ds = s.level_downsamples[level]
        rgba = np.asarray(s.read_region((int(round(x * ds)), int(round(y * ds))), level, (w, h))).astype(float)
    finally:
        s.close()
    a = rgba[..., 3:] / 255.0
    return rgba[..., :3] * a + 255.0 * (1.0 - a), rgba[..., 3]


def test_opaque_regions_equal_openslide_read_region(write):
    path = write("jpeg_svs.tif", compression="jpeg", quality=90, layout="svs")
    with tw.open(path, backend="openslide") as s:
        for level, (y, x, h, w) in [(0, (517, 901, 300, 255)), (1, (10, 7, 200, 301)), (0, (1500, 2000, 36, 48))]:
            got = s.read_level(level, y, x, h, w)
            want, alpha = _reference(path, level, y, x, h, w)
            assert alpha.min() == 255
            np.testing.assert_array_equal(got, want.astype(np.uint8))  # reference: openslide-python


def test_transparent_pixels_become_white(write):
    path = write("jpeg_svs.tif", compression="jpeg", quality=90, layout="svs")
    backend = osb.OpenSlideBackend(str(path))
    try:
        h0, w0 = backend.level_shapes[0]
        out = np.zeros((64, 80, 3), np.uint8)
        backend.read(0, h0 - 40, w0 - 50, 64, 80, out)  # past the corner: OpenSlide draws it transparent
        want, alpha = _reference(path, 0, h0 - 40, w0 - 50, 64, 80)
        assert alpha.min() == 0 and alpha.max() == 255
        # reference: openslide-python's un-premultiplied RGBA composited onto white; it rounds
        # twice (premultiply in OpenSlide, un-premultiply in openslide-python), so 1 level apart
        assert np.abs(out.astype(int) - want).max() <= 1
        assert (out[alpha == 0] == 255).all()  # ground truth: nothing there is glass
    finally:
        backend.close()


def test_pil_route_gives_the_same_pixels(write, monkeypatch):
    path = write("jpeg_svs.tif", compression="jpeg", quality=90, layout="svs")
    backend = osb.OpenSlideBackend(str(path))
    try:
        h0, w0 = backend.level_shapes[0]
        box = (h0 - 100, w0 - 120, 128, 160)
        direct = np.empty((128, 160, 3), np.uint8)
        backend.read(0, *box, direct)
        monkeypatch.setattr(backend, "_fill", None)  # as with an openslide-python lacking the C entry
        via_pil = np.empty_like(direct)
        backend.read(0, *box, via_pil)
        # ground truth: the same OpenSlide pixels; the PIL route un-premultiplies and
        # premultiplies again, which may move a partly transparent pixel by one level
        assert np.abs(direct.astype(int) - via_pil).max() <= 1
    finally:
        backend.close()


@pytest.mark.parametrize("threads", [2, 4])
def test_reader_threads_read_what_one_thread_reads(write, threads):
    path = write("jpeg_svs.tif", compression="jpeg", quality=90, layout="svs")
    with tw.open(path, backend="openslide") as s:
        view = s.at_mpp(s.mpp * 2.5)  # fractional scale: strips of many sizes per thread
        boxes = [(y, x, 190, 230) for y in range(0, view.shape[0], 170) for x in range(0, view.shape[1], 210)]
        serial = [view.read(*b) for b in boxes]
        with ThreadPoolExecutor(threads) as pool:
            parallel = list(pool.map(lambda b: view.read(*b), boxes))
    for p, q in zip(serial, parallel):
        np.testing.assert_array_equal(p, q)  # ground truth: single-threaded reads
