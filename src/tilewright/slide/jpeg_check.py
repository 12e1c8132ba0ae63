"""Telling a damaged JPEG tile from a good one when the decoder does not say so.

A baseline JPEG carries no checksum, and libjpeg(-turbo) treats damage in the entropy-coded
data as a *warning*: a flipped byte usually desynchronizes the Huffman decoder, which then
either runs out of data before the last block ("premature end of data segment": the rest of
the tile is filled with grey) or finishes the last block with bytes to spare ("extraneous
bytes before marker"). Both return an image of garbage without an error through imagecodecs
(and Pillow). OpenSlide turns these warnings into errors; this module gives the direct TIFF
path the same strictness with the decoder that reads the pixels.

The checks used by default are cheaper: a sentinel MCU row decoded with the tile (see
:mod:`tilewright.slide.jpeg_sentinel`) or a strict decode (see :mod:`tilewright.slide.jpeg_strict`);
when either refuses a tile, the probe check below settles.

The probe check, the reference (about 3x the decoding cost), uses two probe decodes:

- *used to the end*: inverting every bit of the last bytes of the entropy-coded data must
  change the decoded pixels (an in-sync decoder needs every byte; a decoder that finished
  early never read them). Inverting, not dropping: a dropped tail is read as zero bits, and
  zero bits are often exactly what the tail held (short end-of-block codes);
- *not past the end*: appending bytes before the EOI marker must not change them (an in-sync
  decoder stops after the last block; one that ran out of data now decodes the extra bytes).

What cannot be detected from the file alone: damage that keeps the stream in sync (a flipped
bit inside a coefficient's magnitude, or a Huffman code swapped for another of the same
length) changes one or a few 8 x 8 blocks and decodes without any inconsistency — for that
only a checksum of the original file helps (the store records the source's digest).
Streams with restart markers resynchronize at every marker, so only their last interval is
checked this way.

References
----------
.. [1] ITU-T Recommendation T.81 (1992) | ISO/IEC 10918-1. Information technology — Digital
   compression and coding of continuous-tone still images: Annex F (sequential DCT-based
   mode, Huffman coding), B.1.1.5 (entropy-coded data segments and byte stuffing).
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

__all__ = ["entropy_bounds", "jpeg_in_sync"]

_PROBE_TAIL = 2          # bytes of entropy data inverted by the "used to the end" probe
_PROBE_PAD = b"\x55\xaa" * 8  # appended by the "not past the end" probe (never 0xFF)


def entropy_bounds(data: bytes) -> tuple[int, int] | None:
    """Start and end (exclusive) of the entropy-coded data of a single-scan JPEG.

    Parameters
    ----------
    data : bytes
        One JPEG stream (SOI ... EOI), possibly abbreviated (tables elsewhere).

    Returns
    -------
    (int, int) or None
        Byte offsets ``[start, end)`` between the SOS header and the EOI marker; None when
        the stream cannot be checked this way (no SOS/EOI found, more than one scan).
    """
    n = len(data)
    if n < 4 or data[0] != 0xFF or data[1] != 0xD8:
        return None
    i = 2
    while i + 4 <= n:
        if data[i] != 0xFF:
            return None
        marker = data[i + 1]
        if marker == 0xFF:  # fill byte
            i += 1
            continue
        length = (data[i + 2] << 8) | data[i + 3]
        if marker == 0xDA:  # SOS: the entropy-coded data follows its header
            start = i + 2 + length
            end = data.rfind(b"\xff\xd9")
            if end <= start:
                return None
            if data.find(b"\xff\xda", start, end) != -1:
                return None  # a second scan (progressive): not checked here
            return start, end
        i += 2 + length
    return None


def jpeg_in_sync(data: bytes, decoded: np.ndarray, decode: Callable[[bytes], np.ndarray]) -> bool:
    """Whether the Huffman decoder consumed exactly the entropy-coded data of ``data`` (probes).

    Parameters
    ----------
    data : bytes
        The JPEG tile as stored.
    decoded : ndarray
        ``decode(data)``, already computed.
    decode : callable
        The decoder used for ``decoded`` (same tables and options).

    Returns
    -------
    bool
        False when the stream is desynchronized (the tile holds garbage); True when it is in
        sync or cannot be checked (see :func:`entropy_bounds`).
    """
    bounds = entropy_bounds(data)
    if bounds is None:
        return True
    start, end = bounds
    if end - start <= _PROBE_TAIL + 1:
        return True
    cut = end - _PROBE_TAIL
    if data[cut - 1] == 0xFF:  # never split a stuffed 0xFF 0x00 pair
        cut -= 1
    tail = bytes(255 - b for b in data[cut:end].replace(b"\xff\x00", b"\xff"))
    try:
        inverted = decode(data[:cut] + tail.replace(b"\xff", b"\xff\x00") + data[end:])
    except Exception:  # noqa: BLE001 - a probe that fails to decode says nothing
        inverted = None
    if inverted is not None and np.array_equal(inverted, decoded):
        return False  # the last bytes were never read: the decoder finished early
    try:
        longer = decode(data[:end] + _PROBE_PAD + data[end:])
    except Exception:  # noqa: BLE001
        return True
    return bool(np.array_equal(longer, decoded))  # differs: the decoder ran out of data
