"""Direct TIFF-family backend: tifffile for the structure, positional reads for the tiles.

tifffile parses the IFDs once (levels of an IFD chain, SubIFD or OME series pyramids,
Aperio-style SVS). A read then fetches only the tiles the region touches with ``os.pread``
on a private file descriptor (no shared file position, so concurrent reads from several
threads need no lock) and decodes them with the page's own decoder (imagecodecs:
libjpeg-turbo for JPEG), copying each decoded tile straight into the output array.

8-bit RGB JPEG tiles are decoded by imagecodecs directly into a scratch tile kept per thread,
with the colour-space arguments tifffile would pass (checked against tifffile's own decoder on
the first tile of each level when the slide is opened). This avoids a fresh array per tile:
allocating and freeing them costs page faults, many under allocators told to return memory
eagerly (dask.distributed workers set ``MALLOC_TRIM_THRESHOLD_``).
"""

from __future__ import annotations

import os
import threading

import numpy as np

from tilewright.errors import DamagedSlideError, SlideError, SlideTooLargeError, UnsupportedSlideError
from tilewright.slide import colour as _colour
from tilewright.slide import jpeg_strict as _strict
from tilewright.slide.sniff import MAX_PIXELS, MAX_SIDE
from tilewright.slide.tiff_pages import discover
from tilewright.slide.tiff_pixels import page_converter
from tilewright.slide.tiff_strips import read_rows, strip_problem

__all__ = ["TiffBackend"]

# JPEG headers remembered per level (sentinel plans, strict-decode verdicts); bounds memory when
# every tile carries its own tables.
_HEADER_CACHE = 1024

# Vendor flavours whose tile grids tifffile exposes but whose geometry needs a vendor
# reader (overlapping tiles, multiple images, JPEG restart-marker "tiles"): OpenSlide serves them.
_VENDOR_FLAGS = ("is_ndpi", "is_philips", "is_scn", "is_qpi", "is_bif", "is_mdgel", "is_lsm")


class _Level:
    """One pyramid level: a TIFF page and what is needed to decode its segments (tiles or strips)."""

    __slots__ = ("height", "width", "tile_h", "tile_w", "grid_w", "offsets", "counts", "decode",
                 "jpegtables", "page_index", "is_jpeg", "jpeg", "sentinels", "strict", "stripped",
                 "convert", "raw_rows", "samples")

    def __init__(self, page, index):
        self.height, self.width = int(page.imagelength), int(page.imagewidth)
        self.stripped = not page.is_tiled
        chunks = page.chunks
        self.tile_h, self.tile_w = int(chunks[-3]), int(chunks[-2])
        if self.stripped:  # RowsPerStrip may exceed the image (one strip)
            self.tile_h = max(1, min(self.tile_h, self.height))
        self.grid_w = -(-self.width // self.tile_w)
        self.offsets = np.asarray(page.dataoffsets, np.int64)
        self.counts = np.asarray(page.databytecounts, np.int64)
        self.decode = page.decode
        self.jpegtables = page.jpegtables
        self.page_index = index
        self.samples = int(page.samplesperpixel)
        self.is_jpeg = int(page.compression) == 7  # new-style JPEG (TIFF Technical Note 2)
        self.jpeg = _jpeg_args(page)  # (colorspace, outcolorspace) for the direct JPEG path, or None
        self.sentinels = {}  # JPEG header bytes -> SentinelPlan or None (see jpeg_sentinel)
        self.strict = {}  # colour signature or header bytes -> strict decode equals this page's (jpeg_strict)
        self.convert = page_converter(page)  # segment -> RGB (YCbCr, alpha), or None
        # uncompressed strips: read only the rows a region needs, whatever the strip length
        self.raw_rows = self.stripped and int(page.compression) == 1 and page.fillorder == 1

    def segment_shape(self, index: int) -> tuple[int, int]:
        """(height, width) of one stored segment: a full tile, or a strip (the last may be short)."""
        if not self.stripped:
            return self.tile_h, self.tile_w
        return min(self.tile_h, self.height - (index // self.grid_w) * self.tile_h), self.tile_w


def _jpeg_args(page):
    """Colour-space arguments of imagecodecs.jpeg_decode for an 8-bit RGB JPEG page, else None."""
    if page.compression != 7 or page.bitspersample != 8 or page.samplesperpixel != 3 or page.extrasamples:
        return None
    try:
        from tifffile.tifffile import jpeg_decode_colorspace

        return jpeg_decode_colorspace(page.photometric, page.planarconfig, page.extrasamples, page.is_jfif)
    except Exception:  # noqa: BLE001 - any surprise: use tifffile's decoder
        return None


class TiffBackend:
    """Serve a TIFF-family pyramid by decoding only the tiles a read touches.

    Parameters
    ----------
    path : str
        The slide file (already sniffed as TIFF).
    verify_jpeg : bool
        Check every decoded JPEG tile for a desynchronized entropy-coded stream (see
        :mod:`tilewright.slide.jpeg_check`); a damaged tile raises DamagedSlideError.

    Raises
    ------
    UnsupportedSlideError
        A TIFF this backend does not serve (vendor layout, non-RGB, no levels).
    DamagedSlideError
        The file is truncated (tile data past the end of the file) or its IFDs are unreadable.
    """

    name = "tiff"

    def __init__(self, path: str, *, verify_jpeg: bool = True):
        import tifffile

        self.path = path
        self.associated = {}
        self.verify_jpeg = bool(verify_jpeg)
        try:
            tf = tifffile.TiffFile(path)
        except Exception as exc:  # the header said TIFF: any parse failure means damage
            raise DamagedSlideError(f"the TIFF structure cannot be parsed ({exc})", path) from exc
        try:
            self._levels, self.resolution, self.flavour, found, self.icc_profile = self._inspect(tf, path)
            #: Associated images kept apart from the pyramid: name -> (height, width).
            self.associated = {k: (int(p.imagelength), int(p.imagewidth)) for k, p in found.items()}
        except SlideError:
            tf.close()
            raise
        except Exception as exc:  # tifffile raises many types on malformed IFDs
            tf.close()
            raise DamagedSlideError(f"the TIFF structure cannot be parsed ({exc})", path) from exc
        tf.close()
        h0, w0 = self._levels[0].height, self._levels[0].width
        if max(h0, w0) > MAX_SIDE or h0 * w0 > MAX_PIXELS:
            raise SlideTooLargeError(
                f"declares {w0} x {h0} px at level 0, beyond the supported {MAX_SIDE} px a "
                f"side / {MAX_PIXELS:.0e} px; the header is likely corrupt", path)
        size = os.path.getsize(path)
        for i, lv in enumerate(self._levels):
            expected = -(-lv.height // lv.tile_h) * lv.grid_w
            if len(lv.offsets) != expected:
                raise DamagedSlideError(
                    f"level {i} lists {len(lv.offsets)} tiles where its size needs {expected}; "
                    "the file is damaged", path)
        for lv in self._levels:
            ends = lv.offsets + lv.counts
            if len(ends) and int(ends.max()) > size:
                raise DamagedSlideError(
                    f"truncated: tile data of level {self._levels.index(lv)} extends past the "
                    f"end of the file ({size} bytes); copy the slide again", path)
        self._fd = os.open(path, os.O_RDONLY | getattr(os, "O_BINARY", 0))
        self._lock = threading.Lock()  # only used where os.pread is unavailable
        self._scratch = threading.local()  # one decoded-tile buffer per thread and tile shape
        for lv in self._levels:
            if lv.jpeg is not None and not self._direct_jpeg_agrees(lv):
                lv.jpeg = None

    # -- structure ---------------------------------------------------------------------
    @staticmethod
    def _inspect(tf, path):
        for flag in _VENDOR_FLAGS:
            if getattr(tf, flag, False):
                raise UnsupportedSlideError(
                    f"{flag[3:].upper()} layout needs the OpenSlide backend", path)
        pyramid = discover(tf, path)
        levels = []
        for i, page in enumerate(pyramid.levels):
            problem = strip_problem(page, i)
            if problem is not None and i == 0:
                raise UnsupportedSlideError(problem, path)
            if problem is None:  # a reduced level stored in huge strips: finer levels serve it
                levels.append(_Level(page, i))
        flavour = "ome" if tf.is_ome else "svs" if tf.is_svs else "tiff"
        icc = _colour.tiff_profile(pyramid.levels[0])  # InterColorProfile of level 0, or None
        return levels, pyramid.resolution, flavour, pyramid.associated, icc

    @property
    def level_shapes(self) -> list[tuple[int, int]]:
        """(height, width) of every level, finest first."""
        return [(lv.height, lv.width) for lv in self._levels]

    def tile_shape(self, level: int) -> tuple[int, int]:
        """(height, width) of the stored tiles (or strips) of a level."""
        lv = self._levels[level]
        return lv.tile_h, lv.tile_w

    # -- pixels ------------------------------------------------------------------------
    def _pread(self, n: int, offset: int) -> bytes:
        """``n`` bytes at ``offset`` (fewer only at the end of the file).

        One ``pread`` returns at most about 2 GiB on Linux (and may return less anywhere), so
        reads are repeated until all bytes arrived or the file ends.
        """
        if hasattr(os, "pread"):
            data = os.pread(self._fd, n, offset)
            if len(data) == n or not data:
                return data
            parts, got = [data], len(data)
            while got < n:
                more = os.pread(self._fd, n - got, offset + got)
                if not more:
                    break
                parts.append(more)
                got += len(more)
            return b"".join(parts)
        with self._lock:  # pragma: no cover - platforms without pread
            os.lseek(self._fd, offset, 0)
            return os.read(self._fd, n)

    def read(self, level: int, y: int, x: int, h: int, w: int, out: np.ndarray) -> None:
        """Decode the region ``[y, y+h) x [x, x+w)`` of a level into ``out`` (h, w, 3).

        The region must lie inside the level. Only the tiles it touches are read.

        Raises
        ------
        DamagedSlideError
            A tile cannot be read or decoded (names the file, level and region).
        """
        if self._fd is None:
            raise ValueError("the slide is closed")
        lv = self._levels[level]
        if lv.raw_rows:
            read_rows(self._pread, lv, level, (y, x, h, w), out, self.path)
            return
        th, tw = lv.tile_h, lv.tile_w
        r0, r1 = y // th, (y + h - 1) // th
        c0, c1 = x // tw, (x + w - 1) // tw
        for r in range(r0, r1 + 1):
            first, last = r * lv.grid_w + c0, r * lv.grid_w + c1
            offs = lv.offsets[first : last + 1]
            cnts = lv.counts[first : last + 1]
            chunks = self._fetch_row(offs, cnts)
            ty = r * th
            ya, yb = max(y, ty), min(y + h, ty + th)
            for k, data in enumerate(chunks):
                c = c0 + k
                tx = c * tw
                xa, xb = max(x, tx), min(x + w, tx + tw)
                dst = out[ya - y : yb - y, xa - x : xb - x]
                if not data:
                    dst[...] = 255  # sparse file: missing tile is background
                    continue
                try:
                    if self.verify_jpeg and lv.is_jpeg:
                        seg, intact = self._decode_verified(lv, data, first + k)
                    else:
                        seg, intact = self._decode(lv, data, first + k), True
                except Exception as exc:
                    raise DamagedSlideError(
                        f"tile ({r}, {c}) of level {level} cannot be decoded while reading "
                        f"region y={y}, x={x}, h={h}, w={w} ({type(exc).__name__}: {exc}); "
                        "the file is damaged", self.path) from exc
                if not intact:
                    ty0, tx0 = r * th, c * tw
                    raise DamagedSlideError(
                        f"tile ({r}, {c}) of level {level} (pixels y={ty0}-{ty0 + th}, "
                        f"x={tx0}-{tx0 + tw} of that level) holds corrupt JPEG data (the decoder "
                        f"lost sync) while reading region y={y}, x={x}, h={h}, w={w}; "
                        "the file is damaged, copy the slide again", self.path)
                if seg is None:
                    dst[...] = 255
                    continue
                dst[...] = seg[ya - ty : yb - ty, xa - tx : xb - tx, :3]

    def _decode(self, lv: _Level, data, index: int) -> np.ndarray:
        """One tile as (tile_h, tile_w, samples) pixels, decoded as tifffile would (imagecodecs; a
        per-thread buffer on the JPEG path)."""
        if lv.jpeg is not None:
            import imagecodecs

            key = lv.segment_shape(index)
            return imagecodecs.jpeg_decode(data, tables=lv.jpegtables, colorspace=lv.jpeg[0], outcolorspace=lv.jpeg[1],
                                           shape=key, bitspersample=8, out=self._scratch_tile(key))
        seg = lv.decode(data, index, jpegtables=lv.jpegtables)[0]
        if seg is None:
            return None
        seg = seg.reshape(seg.shape[-3:])
        return seg if lv.convert is None else lv.convert(seg)

    def _strict_agrees(self, lv: _Level, stream: bytes, data, index: int, header: bytes | None = None) -> bool:
        """Whether strict decodes of streams with this one's colour signature equal the page's
        decode (checked on the first such tile that decodes cleanly; see jpeg_strict). The answer
        is also kept under the tile's ``header`` bytes, so tiles sharing a header skip parsing."""
        ok = lv.strict.get(header) if header is not None else None
        if ok is not None:
            return ok
        sig = _strict.colour_signature(stream)
        if sig is None:
            return False
        ok = lv.strict.get(sig)
        if ok is None:
            got = _strict.decode_strict(stream, np.empty((lv.tile_h, lv.tile_w, 3), np.uint8))
            if got is None:
                return False  # undecided (this tile may be damaged): the next clean tile decides
            want = self._decode(lv, data, index)
            ok = lv.strict[sig] = want is not None and np.array_equal(want, got)
        if header is not None:
            if len(lv.strict) >= _HEADER_CACHE:
                lv.strict.clear()
            lv.strict[header] = ok
        return ok

    def _decode_verified(self, lv: _Level, data, index: int):
        """One JPEG tile and whether its entropy-coded stream is intact.

        Without vertical chroma subsampling, the pixels come from the one decode of the
        sentinel-extended stream (see jpeg_sentinel). Otherwise (a sentinel there would change
        the last pixel row, and streams with restart markers get none), from a strict decode
        (libjpeg's warnings as errors, see jpeg_strict): pixels and verdict in one decode. A tile
        the strict decoder refuses or cannot judge (another colour interpretation) gets a plain
        decode whose sentinel-extended stream is checked at 1/8 scale. Whatever fails is settled
        by the probe check (jpeg_check), so a refusal is never a false alarm.
        """
        from tilewright.slide import jpeg_sentinel as js

        if lv.segment_shape(index) != (lv.tile_h, lv.tile_w):  # a short last strip: probe check
            seg = self._decode(lv, data, index)
            return seg, seg is None or _jpeg_intact(lv, index, data, seg)
        data, plan = bytes(data), None  # a memoryview into a row read: the helpers search bytes
        start = js.header_length(data) if lv.jpeg is not None else None
        if start is not None:
            header = data[:start]
            plan = lv.sentinels.get(header, False)
            if plan is False:
                if len(lv.sentinels) >= _HEADER_CACHE:  # headers differ tile by tile (own tables)
                    lv.sentinels.clear()
                plan = lv.sentinels[header] = js.sentinel_plan(header, lv.jpegtables)
        fits = plan is not None and (plan.height, plan.width) == (lv.tile_h, lv.tile_w)
        if fits and not plan.vertical:
            ext = js.sentinel_stream(data, plan)
            seg = None if ext is None else js.decode_with_sentinel(
                ext, plan, self._scratch_tile((plan.ext_height, lv.tile_w)), tables=lv.jpegtables,
                colorspace=lv.jpeg[0], outcolorspace=lv.jpeg[1])
            if seg is not None:
                return seg, True
        elif lv.jpeg is not None and _strict.available():
            stream = _strict.complete_stream(data, lv.jpegtables)
            if self._strict_agrees(lv, stream, data, index, None if start is None else header):
                seg = _strict.decode_strict(stream, self._scratch_tile((lv.tile_h, lv.tile_w)))
                if seg is not None:
                    return seg, True
        ext = js.sentinel_stream(data, plan) if fits else None  # built only when needed
        seg = self._decode(lv, data, index)
        if ext is not None and plan.vertical and js.reduced_sentinel_intact(ext, lv.jpegtables, plan):
            return seg, True
        return seg, seg is None or _jpeg_intact(lv, index, data, seg)

    def _scratch_tile(self, key) -> np.ndarray:
        """This thread's (h, w, 3) decode buffer of that size (see :func:`_offset_tile_buffer`)."""
        tiles = getattr(self._scratch, "tiles", {})
        buf = tiles.get(key)
        if buf is None:
            buf = _offset_tile_buffer(key)
            self._scratch.tiles = {**tiles, key: buf}
        return buf

    def _direct_jpeg_agrees(self, lv: _Level) -> bool:
        """Whether the direct JPEG path decodes the level's first stored tile as tifffile does."""
        nonzero = np.flatnonzero(lv.counts)
        if not len(nonzero):
            return True
        i = int(nonzero[0])
        try:
            data = self._pread(int(lv.counts[i]), int(lv.offsets[i]))
            want = lv.decode(data, i, jpegtables=lv.jpegtables)[0]
            got = self._decode(lv, data, i)
            return want is not None and np.array_equal(want.reshape(want.shape[-3:])[..., :3], got)
        except Exception:  # noqa: BLE001 - damaged first tile: leave it to the general path
            return False

    def _fetch_row(self, offs: np.ndarray, cnts: np.ndarray) -> list[bytes]:
        """Read a run of tiles, in one positional read when they lie together in the file."""
        if len(offs) == 0:
            return []
        lo = int(offs.min())
        hi = int((offs + cnts).max())
        total = int(cnts.sum())
        if len(offs) > 1 and hi - lo <= total + 65536:
            buf = memoryview(self._pread(hi - lo, lo))
            if len(buf) < hi - lo:
                raise DamagedSlideError("truncated tile data", self.path)
            return [buf[o - lo : o - lo + n] if n else b""
                    for o, n in zip(offs.tolist(), cnts.tolist())]
        out = []
        for o, n in zip(offs.tolist(), cnts.tolist()):
            data = self._pread(n, o) if n else b""
            if len(data) < n:
                raise DamagedSlideError("truncated tile data", self.path)
            out.append(data)
        return out

    def close(self) -> None:
        """Release the file descriptor (idempotent)."""
        fd, self._fd = self._fd, None
        if fd is not None:
            os.close(fd)


def _offset_tile_buffer(shape) -> np.ndarray:
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


def _jpeg_intact(lv: _Level, index: int, data, seg) -> bool:
    """Whether a decoded JPEG tile came from an intact entropy-coded stream (see jpeg_check)."""
    from tilewright.slide.jpeg_check import jpeg_in_sync

    def decode(buf):
        out = lv.decode(buf, index, jpegtables=lv.jpegtables)[0]
        return None if out is None else out.reshape(out.shape[-3:])[..., :3]

    return jpeg_in_sync(bytes(data), seg[..., :3], decode)

