"""Where decoded tiles go: per-thread decode buffers, and whole-factor block means written in place.

Both serve :class:`tilewright.slide.tile_grid.GridReader`: JPEG tiles are decoded into a buffer the
reading thread keeps (no fresh array a tile: its pages would be faulted in each time), placed where
libjpeg-turbo's colour conversion writes it through the cache; a view at a whole factor of the
level reduces each decoded tile straight into its place in the output.
"""

from __future__ import annotations

import numpy as np

__all__ = ["offset_tile_buffer", "reduce_into"]


def offset_tile_buffer(shape) -> np.ndarray:
    """An empty (h, w, 3) uint8 tile buffer whose start is 16 bytes off a 32-byte boundary.

    libjpeg-turbo's SIMD colour conversion writes 32-byte-aligned output with non-temporal
    stores, which bypass the cache: decoding a tile into an aligned buffer measured about 30 %
    slower than into one 16 bytes off alignment (``benchmarks/jpeg_verify.py`` decodes into
    these buffers on both paths, so its comparison does not depend on where malloc put them).
    """
    n = shape[0] * shape[1] * 3
    raw = np.empty(n + 48, np.uint8)
    start = (16 - raw.ctypes.data) % 32
    return raw[start:start + n].reshape(shape[0], shape[1], 3)


def reduce_into(src: np.ndarray, dst: np.ndarray) -> None:
    """``dst`` = the whole-factor block means of ``src`` (OpenCV ``INTER_AREA``: each target pixel
    the rounded mean of its block), written in place when OpenCV can address ``dst`` (a row-strided
    view of a larger array), else copied into it."""
    import cv2

    got = cv2.resize(src, (dst.shape[1], dst.shape[0]), dst=dst, interpolation=cv2.INTER_AREA)
    if got is not dst and not np.shares_memory(got, dst):
        dst[...] = got
