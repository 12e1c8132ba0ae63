"""Where each frame of a DICOM instance lies in its file: read once, then frames are positional reads.

Native (uncompressed) Pixel Data holds the frames back to back. Encapsulated Pixel Data (JPEG,
JPEG 2000) is a sequence of items: first the Basic Offset Table (possibly empty), then the
fragments of the frames, each item an 8-byte header (tag FFFE,E000 and a 32-bit length) and its
bytes, closed by a sequence delimiter (FFFE,E0DD). A frame is one fragment or several in a row.

The table of a level is taken, in this order, from:

- the Extended Offset Table (7FE0,0001) and its lengths (7FE0,0002), when every frame is one
  fragment (offset to the next frame = 8 + length): no reading at all;
- for a file in an object store, the Basic Offset Table when it lists every frame: each frame is
  the span of items up to the next frame's offset, its item structure checked when it is read
  (reading every item header would read the whole file there);
- otherwise one pass over the item headers (8 bytes read a fragment), which also settles where
  the Pixel Data ends (a truncated file has fewer complete items than frames). Fragments are
  grouped into frames by the Basic Offset Table when it is present, one a frame when there are
  as many as frames, else at the items that start a codestream (JPEG SOI, JPEG 2000 SOC).

A frame made of several fragments is described by the span of its items, headers included, and
its level gets an ``unwrap`` that joins the fragments' bytes.

References
----------
.. [1] DICOM PS3.5, A.4 "Transfer Syntaxes for Encapsulation of Encoded Pixel Data" (items,
   Basic Offset Table, fragments, sequence delimiter) and 7.1.2 (data element encoding: explicit
   VR OB/OW with a 4-byte length, implicit VR).
.. [2] DICOM PS3.3, C.7.6.3 "Image Pixel Module" (Extended Offset Table, Extended Offset Table
   Lengths).
"""

from __future__ import annotations

import struct
from typing import NamedTuple

import numpy as np

from tilewright.errors import DamagedSlideError, UnsupportedSlideError

__all__ = ["FrameTable", "PixelData", "find_pixel_data", "frame_table", "join_fragments"]

_PIXEL_DATA_TAG = b"\xe0\x7f\x10\x00"  # (7FE0,0010) little endian
_ITEM = b"\xfe\xff\x00\xe0"  # (FFFE,E000)
_DELIMITER = b"\xfe\xff\xdd\xe0"  # (FFFE,E0DD)
_UNDEFINED = 0xFFFFFFFF
_STARTS = (b"\xff\xd8", b"\xff\x4f")  # JPEG SOI, JPEG 2000 codestream SOC


class PixelData(NamedTuple):
    """Where the Pixel Data element's value starts, and its length (None: encapsulated, undefined)."""

    value_offset: int
    length: int | None


class FrameTable(NamedTuple):
    """File offset and byte count of every frame, in frame order; ``fragmented``: some frame is
    several items (its span starts at its first item header; see :func:`join_fragments`)."""

    offsets: np.ndarray
    counts: np.ndarray
    fragmented: bool


def find_pixel_data(src, position: int, path) -> PixelData:
    """The Pixel Data element at ``position`` (where a header read stopping before the pixels ended).

    Raises
    ------
    UnsupportedSlideError
        No Pixel Data element there (then another reader must parse the file).
    """
    head = src.read_cached(12, position)
    if head[:4] != _PIXEL_DATA_TAG or len(head) < 8:
        raise UnsupportedSlideError("the Pixel Data element is not where its header ends", path)
    if head[4:6] in (b"OB", b"OW"):  # explicit VR: 2 reserved bytes, 4-byte length
        if len(head) < 12:
            raise DamagedSlideError("truncated: the file ends in the Pixel Data header; copy the slide again", path)
        length, start = struct.unpack("<I", head[8:12])[0], position + 12
    else:  # implicit VR little endian: the length follows the tag
        length, start = struct.unpack("<I", head[4:8])[0], position + 8
    return PixelData(start, None if length == _UNDEFINED else length)


def _items(src, start: int, size: int, path) -> list[tuple[int, int]]:
    """(header offset, value length) of every item from ``start`` to the sequence delimiter."""
    items, pos = [], start
    while pos + 8 <= size:
        head = src.read_cached(8, pos)
        if head[:4] == _DELIMITER:
            return items
        if head[:4] != _ITEM:
            raise DamagedSlideError(
                f"encapsulated pixel data is broken at byte {pos} (no item tag where item {len(items)} "
                "should start); the file is damaged", path)
        length = struct.unpack("<I", head[4:8])[0]
        items.append((pos, length))
        pos += 8 + length
    if pos > size or items and items[-1][0] + 8 + items[-1][1] > size:
        raise DamagedSlideError(
            f"truncated: the encapsulated pixel data runs past the end of the file ({size} bytes) "
            f"after {len(items) - 1} complete items; copy the slide again", path)
    return items  # the file ends right after the last item (no delimiter): tolerated


def frame_table(src, pixels: PixelData, n_frames: int, frame_bytes: int, path, *,
                extended: tuple[bytes, bytes] | None = None) -> FrameTable:
    """Offsets and byte counts of the ``n_frames`` frames of one instance.

    Parameters
    ----------
    src : ByteSource
        The instance file (see :mod:`tilewright.location.byte_source`).
    pixels : PixelData
        See :func:`find_pixel_data`.
    n_frames : int
        NumberOfFrames.
    frame_bytes : int
        Bytes of one native frame (rows x columns x samples; unused for encapsulated data).
    extended : (bytes, bytes), optional
        Extended Offset Table and Extended Offset Table Lengths (little-endian 64-bit values).

    Raises
    ------
    DamagedSlideError
        Truncated file, broken item structure, or fewer frames than the header declares.
    """
    size = src.size
    if pixels.length is not None:  # native: frames back to back
        if pixels.length < n_frames * frame_bytes or pixels.value_offset + n_frames * frame_bytes > size:
            raise DamagedSlideError(
                f"truncated: the pixel data holds fewer bytes than {n_frames} frames of {frame_bytes} "
                f"need (file of {size} bytes); copy the slide again", path)
        offsets = pixels.value_offset + np.arange(n_frames, dtype=np.int64) * frame_bytes
        return FrameTable(offsets, np.full(n_frames, frame_bytes, np.int64), False)
    head = src.read_cached(8, pixels.value_offset)
    if len(head) < 8 or head[:4] != _ITEM:
        raise DamagedSlideError("the encapsulated pixel data has no Basic Offset Table item; the file is damaged", path)
    bot_len = struct.unpack("<I", head[4:8])[0]
    base = pixels.value_offset + 8 + bot_len  # offsets of both tables count from here
    if extended is not None:
        table = _from_extended(extended, base, n_frames)
        if table is not None:
            return table
    if src.remote and bot_len == 4 * n_frames and n_frames:
        table = _from_basic(src, src.read_cached(bot_len, pixels.value_offset + 8), base, size, path)
        if table is not None:
            return table
    items = _items(src, base, size, path)
    if len(items) == n_frames:
        heads = np.array([o for o, _ in items], np.int64)
        return FrameTable(heads + 8, np.array([n for _, n in items], np.int64), False)
    if bot_len:
        bot = np.frombuffer(src.read_cached(bot_len, pixels.value_offset + 8), "<u4").astype(np.int64)
        starts = [base + int(o) for o in bot]
        where = {o: i for i, (o, _) in enumerate(items)}
        firsts = [where.get(o) for o in starts]
        if None in firsts:
            raise DamagedSlideError("the Basic Offset Table points between fragments; the file is damaged", path)
    else:
        firsts = [i for i, (o, n) in enumerate(items) if n >= 2 and src.read_cached(2, o + 8) in _STARTS]
    if len(firsts) < n_frames:
        raise DamagedSlideError(
            f"the encapsulated pixel data holds {len(firsts)} frames where the header declares "
            f"{n_frames}; the file is truncated or damaged, copy the slide again", path)
    if len(firsts) > n_frames:
        raise UnsupportedSlideError(
            f"the fragments of the encapsulated pixel data cannot be grouped into its {n_frames} frames", path)
    ends = firsts[1:] + [len(items)]
    offsets = np.array([items[a][0] for a in firsts], np.int64)
    last = [items[b - 1] for b in ends]
    counts = np.array([o + 8 + n for o, n in last], np.int64) - offsets
    return FrameTable(offsets, counts, True)


def _from_basic(src, bot: bytes, base: int, size: int, path) -> FrameTable | None:
    """The frame table of a remote file from its Basic Offset Table: each frame the span of items
    from its offset to the next frame's, checked when read (``join_fragments``), so opening costs
    a request or two instead of reading every item header of the file. None when the table is not
    strictly increasing from 0 (then the item pass decides)."""
    starts = base + np.frombuffer(bot, "<u4").astype(np.int64)
    if starts[0] != base or (len(starts) > 1 and (np.diff(starts) < 8).any()) or starts[-1] + 8 > size:
        return None
    last = _items(src, int(starts[-1]), size, path)  # the last frame's items, to the delimiter
    end = last[-1][0] + 8 + last[-1][1] if last else int(starts[-1])
    counts = np.append(np.diff(starts), end - starts[-1]).astype(np.int64)
    return FrameTable(starts.astype(np.int64), counts, True)


def _from_extended(extended, base: int, n_frames: int) -> FrameTable | None:
    """The frame table from the Extended Offset Table, or None unless every frame is one item."""
    offsets = np.frombuffer(bytes(extended[0]), "<u8").astype(np.int64)
    lengths = np.frombuffer(bytes(extended[1]), "<u8").astype(np.int64)
    if len(offsets) != n_frames or len(lengths) != n_frames:
        return None
    if n_frames > 1 and not np.array_equal(np.diff(offsets), lengths[:-1] + 8):
        return None  # several fragments a frame: the item pass sorts them out
    return FrameTable(base + offsets + 8, lengths, False)


def join_fragments(span) -> bytes:
    """A frame's bytes from the span of its items (each: 8-byte header, value)."""
    span = memoryview(span)
    parts, pos = [], 0
    while pos + 8 <= len(span):
        if bytes(span[pos:pos + 4]) != _ITEM:
            raise ValueError(f"no item tag at byte {pos} of the frame's fragments")
        n = struct.unpack("<I", span[pos + 4:pos + 8])[0]
        parts.append(span[pos + 8:pos + 8 + n])
        pos += 8 + n
    return b"".join(parts)
