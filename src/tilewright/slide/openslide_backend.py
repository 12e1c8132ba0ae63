"""OpenSlide backend: every format OpenSlide reads (SVS, NDPI, MRXS, SCN, BIF, DICOM, ...).

openslide-python is imported when the backend is first used, never at package import.
OpenSlide handles are safe to share between threads (the C library locks internally), and the
library call releases the GIL (ctypes). So that two reader threads read twice as fast as one, a
read holds the GIL as little as possible: OpenSlide fills a per-thread buffer (no fresh 4 bytes a
pixel allocated and zeroed a read) and its premultiplied ARGB pixels are composited onto white
with numpy ufuncs (which release the GIL too), instead of openslide-python's PIL image, whose
conversion and copy to numpy hold the GIL for most of a read's non-decoding time.

Whole-pixel reads. ``read_region`` takes a level-0 origin and divides it by the level's
downsample as OpenSlide computes it (the mean of the two axes' size ratios, 3.992 for a
1001-px level 0 over a 251-px level): when the quotient is not a whole number, OpenSlide paints
the level shifted by the fraction and interpolates, so the same level pixel comes out
differently from read to read (seams between tiles; up to 33 grey levels on noise). This
backend therefore reads a level only at whole-pixel positions of that level:

- a level whose OpenSlide downsample is a whole number ``k`` (and whose size is level 0's over
  ``k``, the pyramid's own geometry): origin ``(x*k, y*k)`` divides exactly;
- any other level from the origin ``(0, 0)``, which divides exactly too: the whole level is read
  once and kept while it is used (up to :data:`WHOLE_LEVEL_PIXELS`; thumbnails and masks
  come from such coarse levels);
- a larger level of the second kind cannot be read exactly: it is left out of
  :attr:`OpenSlideBackend.exact_levels`, and views resample from the nearest finer level that is.

The area resampling to a target µm/px is the same code for both backends
(:class:`~tilewright.slide.view.ResampledView`), so both give the same view pixels for the same
file (within JPEG decoder rounding) wherever they use the same level.

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
from tilewright.slide.resolution import Resolution, level_downsample, mpp_from_openslide

__all__ = ["OpenSlideBackend", "WHOLE_LEVEL_PIXELS"]

#: Largest level (pixels) read whole to serve a level OpenSlide cannot address at whole-pixel
#: positions (ARGB from OpenSlide, then RGB kept: about 7 bytes a pixel while read).
WHOLE_LEVEL_PIXELS = 1 << 25

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
        self._step = [self._integer_step(i) for i in range(len(self.level_shapes))]
        self.exact_levels = tuple(k is not None or h * w <= WHOLE_LEVEL_PIXELS
                                  for k, (h, w) in zip(self._step, self.level_shapes))
        self._whole = None  # (level, RGB array) of the level read whole, while it is used
        self._whole_lock = threading.Lock()
        self._scratch = threading.local()  # per reader thread: the ARGB buffer OpenSlide fills
        self._fill = _region_filler(self._slide)
        self.resolution: Resolution = mpp_from_openslide(self._slide.properties)
        self.flavour = self._slide.properties.get("openslide.vendor", "unknown")
        self.icc_profile = openslide_profile(self._slide)  # what OpenSlide found, or None

    def tile_shape(self, level: int) -> tuple[int, int]:
        """Tile size OpenSlide reports for a level (falls back to 512)."""
        p = self._slide.properties
        th = p.get(f"openslide.level[{level}].tile-height")
        tw = p.get(f"openslide.level[{level}].tile-width")
        return (int(th) if th else 512, int(tw) if tw else 512)

    def _integer_step(self, level: int) -> int | None:
        """``k`` when OpenSlide's downsample of ``level`` is the whole number ``k`` and the
        level's size is level 0's over ``k``; else None."""
        ds = self._downsamples[level]
        h0, w0 = self.level_shapes[0]
        h, w = self.level_shapes[level]
        k = int(ds)
        return k if k >= 1 and ds == k and level_downsample(h0, w0, h, w) == k else None

    def read(self, level: int, y: int, x: int, h: int, w: int, out: np.ndarray) -> None:
        """Read the region ``[y, y+h) x [x, x+w)`` of a level into ``out`` (h, w, 3).

        Transparent pixels (outside the scanned area) become white. The region lies inside
        the level (:meth:`WholeSlide.read_level` clips).

        Raises
        ------
        DamagedSlideError
            OpenSlide fails to decode the region.
        ValueError
            The level is not in :attr:`exact_levels` (too large to read whole, and OpenSlide
            would interpolate it).
        """
        if self._slide is None:
            raise ValueError("the slide is closed")
        k = self._step[level]
        if k is not None:
            self._region((x * k, y * k), level, w, h, (y, x), out)
            return
        if not self.exact_levels[level]:
            raise ValueError(f"{self.path}: OpenSlide cannot read level {level} at whole-pixel "
                             "positions (its downsample is not a whole number) and it is too large "
                             "to read whole; read a finer level")
        with self._whole_lock:
            if self._whole is None or self._whole[0] != level:
                self._whole = None  # free the previous level before reading the next
                lh, lw = self.level_shapes[level]
                whole = np.empty((lh, lw, 3), np.uint8)
                self._region((0, 0), level, lw, lh, (0, 0), whole)
                self._whole = (level, whole)
            whole = self._whole[1]
        out[...] = whole[y : y + h, x : x + w]

    def _region(self, origin, level, w, h, at, out):
        """OpenSlide's region at level-0 ``origin``, composited onto white into ``out``."""
        try:
            if self._fill is None:  # an openslide-python without the C entry point: its PIL route
                argb = _argb_of(np.asarray(self._slide.read_region(origin, level, (w, h))))
            else:
                argb = self._argb(h, w)
                self._fill(argb, origin, level, w, h)
        except self._error_type as exc:
            raise DamagedSlideError(
                f"OpenSlide failed reading level {level} region y={at[0]}, x={at[1]}, h={h}, w={w} "
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

    def release(self) -> None:
        """Drop the whole-level copy kept for reads (the next read of that level reads it again)."""
        with self._whole_lock:
            self._whole = None

    def close(self) -> None:
        """Close the OpenSlide handle (idempotent)."""
        self.release()
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
