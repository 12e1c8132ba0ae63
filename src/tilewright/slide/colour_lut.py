"""A full 3-D lookup table from 8-bit device RGB to 8-bit sRGB, built once with LittleCMS.

The table holds LittleCMS's answer for every one of the 2**24 8-bit RGB colours (a 256**3 grid,
so no interpolation is needed at all): 64 MiB of packed ``uint32`` entries, built in about a
second from a LittleCMS transform (through Pillow's ``ImageCms``) in chunks of 2**20 colours.
Applying it is one gather a pixel, done in chunks of 2**16 pixels that stay in cache:

1. ``cv2.cvtColor(RGB2RGBA)`` widens the pixels to 4-byte words; masked to their low 24 bits
   and widened to ``int64`` (numpy's index type, so the gather converts nothing) they are the
   table indices ``R + 256 G + 65536 B``;
2. ``numpy.take`` gathers the packed sRGB entries (``mode="wrap"``: every index is in range,
   and this mode measured about twice as fast as ``"clip"``);
3. ``cv2.cvtColor(RGBA2RGB)`` unpacks them into the pixels, in place.

All three release the GIL, so reader threads transform their blocks in parallel. Measured
against the alternatives on the same blocks (``benchmarks/colour_transform.py``): LittleCMS
itself through ``ImageCms.applyTransform`` (array to image and back) and trilinear/tetrahedral
interpolation of a 33**3 grid in numpy are both several times slower.

A table whose every entry lies within one code value of its index (a profile equivalent to sRGB,
up to LittleCMS's rounding) is recognized while it is built; such a table changes nothing, so
:meth:`SrgbTable.apply` then leaves the pixels as they are, at no cost.

Built tables are shared by every slide opened in the process with the same profile (the
newest :data:`CACHED_TABLES` are kept), so a cohort from one scanner builds its table once.

References
----------
.. [1] Marti Maria, LittleCMS 2 (lcms2) API documentation, https://www.littlecms.com/
"""

from __future__ import annotations

import threading
from collections import OrderedDict

import numpy as np

__all__ = ["SrgbTable", "table_for", "CACHED_TABLES"]

#: Tables kept in memory at once (64 MiB each), the most recently used.
CACHED_TABLES = 2

_CHUNK = 1 << 16  # pixels transformed at a time (the scratch stays in the CPU cache)
_BUILD = 1 << 20  # colours sent to LittleCMS at a time while building

_cache: OrderedDict = OrderedDict()
_cache_lock = threading.Lock()


class SrgbTable:
    """Device RGB -> sRGB for every 8-bit colour, from one LittleCMS transform.

    Parameters
    ----------
    transform : PIL.ImageCms.ImageCmsTransform
        An ``RGB`` -> ``RGB`` transform from the device profile to sRGB.

    Notes
    -----
    The table is built on first use (thread-safe), not when the object is made.
    """

    def __init__(self, transform):
        self._transform = transform
        self._table: np.ndarray | None = None
        self._identity = False
        self._lock = threading.Lock()
        self._scratch = threading.local()

    @property
    def identity(self) -> bool:
        """Whether every entry is within one code value of its own colour (nothing to do)."""
        self._build()
        return self._identity

    def _build(self) -> np.ndarray | None:
        if self._table is not None or self._identity:
            return self._table
        with self._lock:
            if self._table is None and not self._identity:
                self._table, self._identity = _build_table(self._transform)
        return self._table

    def apply(self, rgb: np.ndarray) -> np.ndarray:
        """Convert uint8 ``(..., 3)`` pixels to sRGB in place; returns ``rgb``.

        Any array whose last axis holds the three channels works; rows need not be contiguous
        in memory (such blocks go through a scratch copy).
        """
        table = self._build()
        if table is None or rgb.size == 0:
            return rgb
        if rgb.dtype != np.uint8 or rgb.shape[-1] != 3:
            raise ValueError(f"expected uint8 (..., 3) pixels, got {rgb.dtype} {rgb.shape}")
        buffers = self._buffers()
        if rgb.flags.c_contiguous:
            flat = rgb.reshape(-1, 3)
            for start in range(0, len(flat), _CHUNK):
                _gather(table, flat[start:start + _CHUNK], *buffers)
            return rgb
        rows = rgb.reshape(-1, rgb.shape[-2], 3) if rgb.ndim >= 2 else rgb.reshape(1, 1, 3)
        for row in rows:  # views with gaps between rows: one row (or a copy of it) at a time
            work = row if row.flags.c_contiguous else np.ascontiguousarray(row)
            for start in range(0, len(work), _CHUNK):
                _gather(table, work[start:start + _CHUNK], *buffers)
            if work is not row:
                row[...] = work
        return rgb

    def _buffers(self):
        s = self._scratch
        if getattr(s, "index", None) is None:  # this thread's scratch, reused (it stays in cache)
            s.words = np.empty((1, _CHUNK, 4), np.uint8)
            s.index = np.empty(_CHUNK, np.int64)
            s.packed = np.empty(_CHUNK, np.uint32)
        return s.words, s.index, s.packed


def _gather(table, pixels, words, index, packed) -> None:
    """Replace ``pixels`` ((n, 3) C-contiguous uint8, n <= _CHUNK) by their table entries."""
    import cv2

    n = len(pixels)
    src = pixels.reshape(1, n, 3)
    cv2.cvtColor(src, cv2.COLOR_RGB2RGBA, dst=words[:, :n])
    # little-endian words: R + 256 G + 65536 B (+ alpha << 24, masked), the order the table was built in
    np.bitwise_and(words[0, :n].view("<u4").reshape(n), 0xFFFFFF, out=index[:n], casting="unsafe")
    np.take(table, index[:n], out=packed[:n], mode="wrap")
    cv2.cvtColor(packed[:n].view(np.uint8).reshape(1, n, 4), cv2.COLOR_RGBA2RGB, dst=src)


def _build_table(transform) -> tuple[np.ndarray | None, bool]:
    """Every 8-bit colour through ``transform``: (packed uint32 table or None, identity)."""
    import cv2
    from PIL import Image, ImageCms

    table = np.empty(1 << 24, np.uint32)
    side = int(np.sqrt(_BUILD))
    codes = np.arange(_BUILD, dtype=np.uint32)
    rgb = np.empty((_BUILD, 3), np.uint8)
    rgb[:, 0] = codes & 255
    rgb[:, 1] = (codes >> 8) & 255
    deviation = 0
    for start in range(0, 1 << 24, _BUILD):
        rgb[:, 2] = start >> 16  # one blue value a chunk: chunks are 256 x 256 x 16 colour blocks
        rgb[:, 2] += (codes >> 16).astype(np.uint8)
        image = Image.fromarray(rgb.reshape(side, side, 3))
        out = np.asarray(ImageCms.applyTransform(image, transform)).reshape(_BUILD, 3)
        deviation = max(deviation, int(cv2.absdiff(out, rgb).max()))
        table[start:start + _BUILD] = cv2.cvtColor(out.reshape(1, _BUILD, 3), cv2.COLOR_RGB2RGBA).view(
            np.uint32).reshape(_BUILD)
    if deviation <= 1:
        return None, True
    return table, False


def table_for(key: str, transform) -> SrgbTable:
    """The process's table for a profile (``key``: its SHA-256 and the intent), made once."""
    with _cache_lock:
        table = _cache.get(key)
        if table is None:
            table = _cache[key] = SrgbTable(transform)
        _cache.move_to_end(key)
        while len(_cache) > CACHED_TABLES:
            _cache.popitem(last=False)
    return table
