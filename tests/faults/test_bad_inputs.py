"""Bad slide files: each gets its typed error naming the file, before any large allocation."""

from __future__ import annotations

import struct
import tracemalloc

import numpy as np
import pytest
import tifffile

import tilewright as tw
from tilewright.errors import (
    DamagedSlideError,
    EmptyFileError,
    ImplausibleResolutionError,
    MissingResolutionError,
    NotAnImageError,
    SlideTooLargeError,
    TilewrightError,
)

pytestmark = pytest.mark.timeout(60)

_IMG = np.full((512, 768, 3), 235, np.uint8)
_IMG[100:300, 100:500] = (150, 60, 120)  # ground truth constructed here


def _named(exc, path):
    assert isinstance(exc, TilewrightError) and exc.path == str(path) and str(path) in str(exc)


def test_truncated_zero_byte_and_text(slide, tmp_path):
    data = slide("whole.tif").read_bytes()
    for frac in (0.02, 0.5, 0.97):
        cut = tmp_path / f"cut{frac}.tif"
        cut.write_bytes(data[: int(len(data) * frac)])
        with pytest.raises(DamagedSlideError) as e:
            tw.open(cut)
        _named(e.value, cut)
    empty = tmp_path / "empty.svs"
    empty.write_bytes(b"")
    with pytest.raises(EmptyFileError) as e:
        tw.open(empty)
    _named(e.value, empty)
    text = tmp_path / "notes.ome.tif"
    text.write_text("patient list, do not open\n")
    with pytest.raises(NotAnImageError) as e:
        tw.open(text)
    _named(e.value, text)


def _set_long(raw: bytearray, entry_offset: int, code: int, value: int, byteorder: str) -> None:
    """Rewrite one IFD entry as a LONG holding ``value`` (classic TIFF: 12-byte entries)."""
    raw[entry_offset:entry_offset + 12] = struct.pack(byteorder + "HHII", code, 4, 1, value)


@pytest.mark.parametrize("side", [(3_000_000, 3_000_000), (900_000, 900_000), (0, 512)])
def test_absurd_dimensions_refused_before_allocation(tmp_path, side):
    path = tmp_path / "huge.tif"
    tifffile.imwrite(path, _IMG, tile=(256, 256), photometric="rgb",
                     resolution=(1e4 / 0.25, 1e4 / 0.25), resolutionunit="CENTIMETER")
    raw = bytearray(path.read_bytes())
    with tifffile.TiffFile(path) as tf:
        tags = tf.pages[0].tags
        bo = tf.byteorder
        entries = {t.code: t.offset for t in tags.values()}
    _set_long(raw, entries[256], 256, side[1], bo)  # ImageWidth
    _set_long(raw, entries[257], 257, side[0], bo)  # ImageLength
    path.write_bytes(bytes(raw))
    tracemalloc.start()
    try:
        with pytest.raises((SlideTooLargeError, DamagedSlideError)) as e:
            tw.open(path)
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    _named(e.value, path)
    assert peak < 64 * 2**20  # nothing near the declared size was allocated (common practice)


def test_levels_out_of_order_use_level0_resolution(tmp_path):
    """IFDs smallest first: levels sorted by size, µm/px from the full-size page's own tags."""
    path = tmp_path / "order.tif"
    with tifffile.TiffWriter(path) as t:
        t.write(_IMG[::2, ::2], tile=(256, 256), resolution=(1e4 / 0.5, 1e4 / 0.5),
                resolutionunit="CENTIMETER", compression="zlib")
        t.write(_IMG, tile=(256, 256), resolution=(1e4 / 0.25, 1e4 / 0.25),
                resolutionunit="CENTIMETER", compression="zlib")
        t.write(_IMG[:128, :128], tile=(128, 128), compression="zlib")  # a label: other aspect
    with tw.open(path) as s:
        assert s.dimensions == (512, 768)
        assert s.mpp == pytest.approx(0.25)  # ground truth: the tags written for the full page
        assert [lv[:2] for lv in s.levels] == [(512, 768), (256, 384)]  # label is not a level
        assert [lv.downsample for lv in s.levels] == [1.0, 2.0]
        assert np.array_equal(s.read_level(0, 0, 0, 512, 768), _IMG)
        view = s.at_mpp(0.5)
        assert view.source_level == 1 and view.shape == (256, 384)


def _tiff_with(path, **kw):
    tifffile.imwrite(path, _IMG, tile=(256, 256), photometric="rgb", **kw)
    return path


@pytest.mark.parametrize("kind", ["tags_zero", "aperio_nan", "aperio_negative", "aperio_zero",
                                  "ome_nan", "ome_negative", "ome_zero", "unit_none"])
def test_unusable_resolution_is_a_typed_error_and_override_works(tmp_path, kind):
    path = tmp_path / f"{kind}.tif"
    if kind == "tags_zero":
        _tiff_with(path, resolution=((0, 1), (0, 1)), resolutionunit="CENTIMETER")
    elif kind.startswith("aperio"):
        value = {"aperio_nan": "nan", "aperio_negative": "-0.25", "aperio_zero": "0"}[kind]
        _tiff_with(path, description=f"Aperio Image Library v12\n768x512 |AppMag = 40|MPP = {value}")
    elif kind.startswith("ome"):
        value = {"ome_nan": float("nan"), "ome_negative": -0.25, "ome_zero": 0.0}[kind]
        tifffile.imwrite(path, _IMG, tile=(256, 256), photometric="rgb", ome=True,
                         metadata={"axes": "YXS", "PhysicalSizeX": value, "PhysicalSizeY": value})
    else:
        _tiff_with(path, resolution=(40000, 40000), resolutionunit="NONE")
    with pytest.raises((ImplausibleResolutionError, MissingResolutionError)) as e:
        tw.open(path)
    _named(e.value, path)
    assert "mpp" in str(e.value)  # says how to fix it
    with tw.open(path, mpp=0.25) as s:
        assert s.mpp == 0.25 and s.mpp_origin == "override"
        assert np.array_equal(s.read_level(0, 0, 0, 512, 768), _IMG)
