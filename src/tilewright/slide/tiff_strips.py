"""Stripped TIFF pages: which can be read region by region, and row reads of uncompressed strips.

A strip spans the page's full width and ``RowsPerStrip`` rows; a compressed strip must be decoded
whole. Small strips behave like tiles. An uncompressed strip of any length is read row by row
(only the rows a region needs). A compressed strip decoding to more than :data:`MAX_STRIP_BYTES`
would be decoded whole for every small read, so such a level is not served.
"""

from __future__ import annotations

import numpy as np

from tilewright.errors import DamagedSlideError

__all__ = ["MAX_STRIP_BYTES", "strip_problem", "read_rows"]

#: Decoded size above which one compressed strip is too big to decode for every small read.
MAX_STRIP_BYTES = 48 * 2**20


def strip_problem(page, level: int) -> str | None:
    """Why a compressed stripped page cannot be read region by region, or None."""
    if page.is_tiled or int(page.compression) == 1:
        return None
    rows = min(int(page.chunks[-3]), int(page.imagelength))
    size = rows * int(page.imagewidth) * int(page.samplesperpixel)
    if size <= MAX_STRIP_BYTES:
        return None
    return (f"level {level} stores {rows} rows a compressed strip ({size / 2**20:.0f} MiB decoded): "
            "every small read would decode a whole strip; re-save the slide as a tiled TIFF")


def read_rows(pread, lv, level: int, box, out: np.ndarray, path) -> None:
    """Rows ``[y, y+h)`` x columns ``[x, x+w)`` of an uncompressed stripped level into ``out``.

    Parameters
    ----------
    pread : callable
        ``pread(n, offset) -> bytes`` on the slide file.
    lv : tiff_backend._Level (a tile_grid.GridLevel)
        The level (strip offsets and byte counts, width, samples, colour conversion).
    box : (int, int, int, int)
        ``(y, x, h, w)`` inside the level.

    Raises
    ------
    DamagedSlideError
        A strip holds fewer bytes than its rows need.
    """
    y, x, h, w = box
    row = lv.width * lv.samples
    for r in range(y // lv.tile_h, (y + h - 1) // lv.tile_h + 1):
        ty = r * lv.tile_h
        ya, yb = max(y, ty), min(y + h, ty + lv.tile_h)
        n = (yb - ya) * row
        data = pread(n, int(lv.offsets[r]) + (ya - ty) * row) if (yb - ty) * row <= lv.counts[r] else b""
        if len(data) < n:
            raise DamagedSlideError(
                f"strip {r} of level {level} holds fewer bytes than its rows need while reading "
                f"region y={y}, x={x}, h={h}, w={w}; the file is damaged", path)
        seg = np.frombuffer(data, np.uint8).reshape(yb - ya, lv.width, lv.samples)[:, x : x + w]
        out[ya - y : yb - y] = (seg if lv.convert is None else lv.convert(seg))[..., :3]
