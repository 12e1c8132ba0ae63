"""OpenSlide backend: every format OpenSlide reads (SVS, NDPI, MRXS, SCN, BIF, DICOM, ...).

openslide-python is imported when the backend is first used, never at package import.
OpenSlide handles are safe to share between threads (the C library locks internally), and the
library call releases the GIL (ctypes). So that two reader threads read twice as fast as one, a
read holds the GIL as little as possible: OpenSlide fills a per-thread buffer (no fresh 4 bytes a
pixel allocated and zeroed a read) and its premultiplied ARGB pixels are composited onto white
with numpy ufuncs (which release the GIL too), instead of openslide-python's PIL image, whose
conversion and copy to numpy hold the GIL for most of a read's non-decoding time.

References
----------
.. [1] Goode, A., Gilbert, B., Harkes, J., Jukic, D., Satyanarayanan, M. (2013). OpenSlide: A
   vendor-neutral software foundation for digital pathology. J Pathol Inform 4:27.
"""

from __future__ import annotations

import ctypes
import threading

import numpy as np

from tilewright.errors import DamagedSlideError, UnsupportedSlideError
from tilewright.slide.colour import openslide_profile
from tilewright.slide.resolution import Resolution, mpp_from_openslide

__all__ = ["OpenSlideBackend"]

# Largest ARGB buffer a reader thread keeps from read to read.
_SCRATCH_BYTES = 64 << 20


class OpenSlideBackend:
    """Serve a slide through OpenSlide, with alpha composited onto white.

    Parameters
    ----------
    path : str

    Raises
    ------
    UnsupportedSlideError
        OpenSlide does not recognize the file.
    DamagedSlideError
        OpenSlide recognizes it but fails to open it.
    """

    name = "openslide"

    def __init__(self, path: str):
        import openslide

        self.path = path
        try:
            self._slide = openslide.OpenSlide(path)
        except openslide.OpenSlideUnsupportedFormatError as exc:
            raise UnsupportedSlideError("not a format OpenSlide recognizes", path) from exc
        except openslide.OpenSlideError as exc:
            raise DamagedSlideError(f"OpenSlide cannot open it ({exc})", path) from exc
        self._error_type = openslide.OpenSlideError
        self.level_shapes = [(int(h), int(w)) for (w, h) in self._slide.level_dimensions]
        self._downsamples = [float(d) for d in self._slide.level_downsamples]
        self.resolution: Resolution = mpp_from_openslide(self._slide.properties)
        self.flavour = self._slide.properties.get("openslide.vendor", "unknown")
        self.icc_profile = openslide_profile(self._slide)  # what OpenSlide found, or None
        self._scratch = threading.local()  # per reader thread: the ARGB buffer OpenSlide fills
        self._fill = _region_filler(self._slide)

    def tile_shape(self, level: int) -> tuple[int, int]:
        """Tile size OpenSlide reports for a level (falls back to 512)."""
        p = self._slide.properties
        th = p.get(f"openslide.level[{level}].tile-height")
        tw = p.get(f"openslide.level[{level}].tile-width")
        return (int(th) if th else 512, int(tw) if tw else 512)

    def read(self, level: int, y: int, x: int, h: int, w: int, out: np.ndarray) -> None:
        """Read the region ``[y, y+h) x [x, x+w)`` of a level into ``out`` (h, w, 3).

        Transparent pixels (outside the scanned area) become white.

        Raises
        ------
        DamagedSlideError
            OpenSlide fails to decode the region.
        """
        if self._slide is None:
            raise ValueError("the slide is closed")
        ds = self._downsamples[level]
        origin = (int(round(x * ds)), int(round(y * ds)))
        try:
            if self._fill is None:  # an openslide-python without the C entry point: its PIL route
                argb = _argb_of(np.asarray(self._slide.read_region(origin, level, (w, h))))
            else:
                argb = self._argb(h, w)
                self._fill(argb, origin, level, w, h)
        except self._error_type as exc:
            raise DamagedSlideError(
                f"OpenSlide failed reading level {level} region y={y}, x={x}, h={h}, w={w} "
                f"({exc}); the file is damaged", self.path) from exc
        _over_white(argb.view(np.uint8).reshape(h, w, 4), out)

    def _argb(self, h: int, w: int) -> np.ndarray:
        """This thread's (h, w) uint32 buffer (grown when a read needs more, never zeroed; a rare
        huge read gets its own, not kept)."""
        if h * w * 4 > _SCRATCH_BYTES:
            return np.empty((h, w), np.uint32)
        buf = getattr(self._scratch, "buf", None)
        if buf is None or buf.size < h * w:
            buf = self._scratch.buf = np.empty(h * w, np.uint32)
        return buf[: h * w].reshape(h, w)

    def close(self) -> None:
        """Close the OpenSlide handle (idempotent)."""
        s, self._slide = self._slide, None
        if s is not None:
            s.close()


def _region_filler(slide):
    """A function filling a caller's uint32 (h, w) buffer with OpenSlide's premultiplied ARGB for
    ``read_region`` (the C call openslide-python's own ``read_region`` makes, with its error check),
    or None when this openslide-python does not expose it (then reads take its PIL route)."""
    from openslide import lowlevel

    func, handle = getattr(lowlevel, "_read_region", None), getattr(slide, "_osr", None)
    if func is None or handle is None:  # pragma: no cover - older or newer openslide-python
        return None
    pointer = ctypes.POINTER(ctypes.c_uint32)

    def fill(buf: np.ndarray, origin, level: int, w: int, h: int) -> None:
        func(handle, buf.ctypes.data_as(pointer), origin[0], origin[1], level, w, h)

    return fill


def _argb_of(rgba: np.ndarray) -> np.ndarray:
    """Straight-alpha RGBA (openslide-python's PIL image) as premultiplied ARGB uint32 pixels."""
    a = rgba[..., 3:4].astype(np.uint16)
    pre = ((rgba[..., :3].astype(np.uint16) * a + 127) // 255).astype(np.uint8)
    bgra = np.concatenate([pre[..., ::-1], rgba[..., 3:4]], axis=-1)
    return np.ascontiguousarray(bgra).view(np.uint32)[..., 0]


def _over_white(bgra: np.ndarray, out: np.ndarray) -> None:
    """Composite OpenSlide's premultiplied pixels onto white into ``out`` (h, w, 3) RGB.

    OpenSlide returns ARGB in native-endian 32-bit words with premultiplied colour: bytes B, G,
    R, A on a little-endian machine, ``c' = c * a / 255``. Over white, ``c * a / 255 + 255 * (1 -
    a / 255) = c' + 255 - a``, exactly, in 8 bits (``c' <= a``). Opaque pixels (``a = 255``) are
    copied as they are.
    """
    order = (2, 1, 0) if np.little_endian else (1, 2, 3)
    alpha = bgra[..., 3 if np.little_endian else 0]
    if alpha.min() == 255:  # the usual case: a scanned region, no transparent pixels
        for c, src in enumerate(order):
            out[..., c] = bgra[..., src]
        return
    glass = np.subtract(255, alpha)
    for c, src in enumerate(order):
        np.add(bgra[..., src], glass, out=out[..., c])
