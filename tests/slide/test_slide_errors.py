"""Bad input gets its typed error naming the file (never a crash or a hang)."""

from __future__ import annotations

import numpy as np
import pytest
import tifffile

import tilewright as tw
from tilewright.errors import (
    DamagedSlideError,
    EmptyFileError,
    NotAnImageError,
    SlideNotFoundError,
    SlideTooLargeError,
    TilewrightError,
    UnsupportedSlideError,
)

pytestmark = pytest.mark.timeout(60)


def _check(exc_info, path):
    err = exc_info.value
    assert isinstance(err, TilewrightError)
    assert err.path == str(path) and str(path) in str(err)  # names the file


def test_missing_file(tmp_path):
    path = tmp_path / "nope.svs"
    with pytest.raises(SlideNotFoundError) as e:
        tw.open(path)
    _check(e, path)
    assert isinstance(e.value, FileNotFoundError)


def test_folder_is_not_a_slide(tmp_path):
    with pytest.raises(SlideNotFoundError) as e:
        tw.open(tmp_path)
    _check(e, tmp_path)


def test_zero_byte_file(tmp_path):
    path = tmp_path / "empty.tif"
    path.write_bytes(b"")
    with pytest.raises(EmptyFileError) as e:
        tw.open(path)
    _check(e, path)


@pytest.mark.parametrize("name", ["notes.tif", "notes.svs", "notes.dat"])
def test_text_is_not_an_image(tmp_path, name):
    path = tmp_path / name
    path.write_text("slide_id,mpp\nb,0.25\n")
    with pytest.raises(NotAnImageError) as e:
        tw.open(path)
    _check(e, path)


def test_random_bytes_are_not_an_image(tmp_path):
    path = tmp_path / "blob.bin"
    path.write_bytes(np.random.default_rng(0).integers(0, 256, 4096, np.uint8).tobytes())
    with pytest.raises((NotAnImageError, UnsupportedSlideError)) as e:
        tw.open(path)
    _check(e, path)


def test_truncated_tiff(write, tmp_path):
    src = write("jpeg_ifd.tif", compression="jpeg", layout="ifd")
    data = src.read_bytes()
    for frac in (0.5, 0.99):
        path = tmp_path / f"cut{frac}.tif"
        path.write_bytes(data[: int(len(data) * frac)])
        with pytest.raises(DamagedSlideError) as e:
            tw.open(path)
        _check(e, path)
    header_only = tmp_path / "header.tif"
    header_only.write_bytes(data[:6])
    with pytest.raises(DamagedSlideError) as e:
        tw.open(header_only)
    _check(e, header_only)


def test_corrupt_tile_raises_on_read_naming_region(write, tmp_path):
    src = write("jpeg_ifd.tif", compression="jpeg", layout="ifd")
    path = tmp_path / "corrupt.tif"
    data = bytearray(src.read_bytes())
    with tifffile.TiffFile(src) as tf:
        page = tf.pages[0]
        i = page.chunked[1] + 1  # tile row 1, column 1 (source px 256..511)
        off, n = page.dataoffsets[i], page.databytecounts[i]
    data[off : off + n] = b"\x00" * n  # wipe the JPEG stream, markers included
    path.write_bytes(bytes(data))
    with tw.open(path) as s:
        s.read_level(0, 0, 0, 200, 200)  # untouched tiles still read
        with pytest.raises(DamagedSlideError) as e:
            s.at_mpp(0.4).read(0, 0, 400, 400)  # level 0, factor 1.6
        _check(e, path)
        assert "region" in str(e.value) and "level 0" in str(e.value)


def test_unsupported_tiff_kinds(tmp_path):
    # 16-bit greyscale and a multi-channel stack are not RGB slides for the tiff backend
    # (auto would hand them to OpenSlide, which converts anything it opens to RGBA)
    gray = tmp_path / "gray16.tif"
    tifffile.imwrite(gray, np.zeros((64, 64), np.uint16), tile=(16, 16))
    stack = tmp_path / "stack.tif"
    tifffile.imwrite(stack, np.zeros((5, 64, 64), np.uint8), tile=(16, 16),
                     photometric="minisblack")
    for path in (gray, stack):
        with pytest.raises(UnsupportedSlideError) as e:
            tw.open(path, backend="tiff")
        _check(e, path)


def test_png_is_unsupported(tmp_path):
    import cv2

    path = tmp_path / "photo.png"
    cv2.imwrite(str(path), np.zeros((32, 32, 3), np.uint8))
    with pytest.raises(UnsupportedSlideError) as e:
        tw.open(path)
    _check(e, path)


def test_absurd_dimensions_refused_before_allocation(tmp_path):
    path = tmp_path / "huge.tif"
    tifffile.imwrite(path, np.zeros((64, 64, 3), np.uint8), tile=(16, 16), photometric="rgb",
                     resolution=(40000, 40000), resolutionunit="CENTIMETER")
    with tifffile.TiffFile(path, mode="r+b") as tf:  # declare 2^21 x 2^21 px
        tf.pages[0].tags["ImageWidth"].overwrite(2**21)
        tf.pages[0].tags["ImageLength"].overwrite(2**21)
    with pytest.raises(SlideTooLargeError) as e:
        tw.open(path)
    _check(e, path)


def test_bad_backend_name_and_closed_slide(write):
    path = write("jpeg_ifd.tif", compression="jpeg", layout="ifd")
    with pytest.raises(ValueError):
        tw.open(path, backend="magic")
    s = tw.open(path)
    s.close()
    s.close()  # idempotent
    with pytest.raises(ValueError, match="closed"):
        s.read_level(0, 0, 0, 4, 4)
