"""Strict JPEG decoding (tilewright.slide.jpeg_strict), against libjpeg-turbo through imagecodecs
and against streams and headers constructed here."""

import imagecodecs
import numpy as np
import pytest

from tilewright.slide.jpeg_check import entropy_bounds, jpeg_in_sync
from tilewright.slide.jpeg_strict import colour_signature, complete_stream, decode_strict


def _image(seed=0, shape=(64, 96)):
    rng = np.random.default_rng(seed)
    ramp = np.linspace(40, 220, shape[1])[None, :, None]
    return np.clip(ramp + rng.normal(0, 12, shape + (3,)), 0, 255).astype(np.uint8)


def _abbreviate(stream: bytes) -> tuple[bytes, bytes]:
    """Split an interchange stream into a tables-only stream (SOI, DQT, DHT, EOI) and an
    abbreviated image stream without them, as TIFF JPEG tiles store it (TIFF TN2)."""
    tables, image, i = [b"\xff\xd8"], [b"\xff\xd8"], 2
    while True:
        marker, length = stream[i + 1], int.from_bytes(stream[i + 2:i + 4], "big")
        seg = stream[i:i + 2 + length]
        if marker == 0xDA:
            image.append(stream[i:])
            break
        (tables if marker in (0xDB, 0xC4) else image).append(seg)
        i += 2 + length
    return b"".join(tables) + b"\xff\xd9", b"".join(image)


def test_strict_decode_equals_libjpeg_and_splices_tables():
    # reference: the same libjpeg-turbo decode through imagecodecs, tables passed separately
    full = imagecodecs.jpeg8_encode(np.tile(_image(1), (2, 2, 1)), level=90)
    tables, abbrev = _abbreviate(full)
    want = imagecodecs.jpeg8_decode(abbrev, tables=tables)
    assert np.array_equal(want, imagecodecs.jpeg8_decode(full))  # the split is faithful
    stream = complete_stream(abbrev, tables)
    got = decode_strict(stream, np.empty((128, 192, 3), np.uint8))
    assert got is not None and np.array_equal(got, want)
    assert colour_signature(stream) == colour_signature(full)
    assert complete_stream(full, None) == full


def test_desynchronized_streams_mostly_refused():
    """Ground truth: byte flips the probe check (jpeg_check) finds out of sync, in a stream built
    here. libjpeg reports nearly all as warnings; a desync that ends within the bytes libjpeg had
    already buffered draws none (the blind spot OpenSlide shares, RELIABILITY.md)."""
    data = imagecodecs.jpeg8_encode(np.tile(_image(2), (4, 3, 1)), level=90)
    out = np.empty((256, 288, 3), np.uint8)
    assert decode_strict(data, out) is not None
    start, end = entropy_bounds(data)
    desync = refused = 0
    for k in range(start + 20, end - 20, 37):
        bad = bytearray(data)
        bad[k] ^= 0xFF
        bad = bytes(bad)
        try:
            in_sync = jpeg_in_sync(bad, imagecodecs.jpeg8_decode(bad), imagecodecs.jpeg8_decode)
        except imagecodecs.Jpeg8Error:  # the flip made a marker: not a desync case
            continue
        if not in_sync:
            desync += 1
            refused += decode_strict(bad, out) is None
    assert desync >= 10 and refused >= 0.8 * desync, (refused, desync)
    assert decode_strict(data[: len(data) // 2], out) is None  # truncated
    assert decode_strict(data, np.empty((128, 128, 3), np.uint8)) is None  # not the expected size


@pytest.mark.parametrize("app, ids, expect", [
    (b"\xff\xe0\x00\x10JFIF\x00\x01\x01\x00\x00\x01\x00\x01\x00\x00", (1, 2, 3), (True, None)),
    (b"\xff\xee\x00\x0eAdobe\x00\x64\x00\x00\x00\x00\x00", (1, 2, 3), (False, 0)),
    (b"", (82, 71, 66), (False, None)),  # 'R', 'G', 'B' component ids, no marker
])
def test_colour_signature_of_constructed_headers(app, ids, expect):
    # ground truth: headers assembled here from T.81 B.2.2 (SOF0) and B.2.3 (SOS) segments
    comps = b"".join(bytes((i, 0x11, 0)) for i in ids)
    sof = b"\xff\xc0" + (8 + 3 * len(ids)).to_bytes(2, "big") + b"\x08\x00\x10\x00\x10" + bytes((len(ids),)) + comps
    sos = b"\xff\xda" + (6 + 2 * len(ids)).to_bytes(2, "big") + bytes((len(ids),)) + \
        b"".join(bytes((i, 0)) for i in ids) + b"\x00\x3f\x00"
    sig = colour_signature(b"\xff\xd8" + app + sof + sos + b"\x00\x00")
    assert sig == expect + (tuple((i, 1, 1) for i in ids),)
    assert colour_signature(b"not a jpeg") is None
    assert colour_signature(b"\xff\xd8" + app) is None  # no frame, no scan
