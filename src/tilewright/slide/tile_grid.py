"""Reading a pyramid stored as grids of separately compressed tiles: only the tiles a read touches.

Both direct backends keep their levels this way: TIFF pages (tiles, or strips, which are tiles as
wide as the page) and DICOM whole-slide instances (frames). A level lists where each tile's bytes
lie (offset, byte count; a count of 0 is a tile never stored, read as glass). A read fetches the
tiles the region touches, a row of adjacent tiles in one positional read (``os.pread`` on a private
descriptor, so concurrent reads from several threads need no lock; or one range request when the
file is a URL, see :mod:`tilewright.location.byte_source`), decodes each once and copies it
straight into the output array.

8-bit RGB JPEG tiles are decoded by imagecodecs directly into a scratch tile kept per thread, with
the colour-space arguments of the level (checked against the level's reference decoder on its
first stored tile when the slide is opened). This avoids a fresh array per tile: allocating and
freeing them costs page faults, many under allocators told to return memory eagerly
(dask.distributed workers set ``MALLOC_TRIM_THRESHOLD_``). Every JPEG tile is checked for a
desynchronized entropy-coded stream in the decode that reads it (see :meth:`GridReader._decode_verified`).
"""

from __future__ import annotations

import threading

import numpy as np

from tilewright.errors import DamagedSlideError
from tilewright.slide import jpeg_sentinel as js
from tilewright.slide import jpeg_strict as _strict
from tilewright.slide.grid_fetch import RowFetch
from tilewright.slide.tile_pixels import offset_tile_buffer, reduce_into

__all__ = ["GridLevel", "GridReader"]

# JPEG headers remembered per level (sentinel plans, strict-decode verdicts); bounds memory when
# every tile carries its own tables.
_HEADER_CACHE = 1024


class GridLevel:
    """One pyramid level stored as a grid of separately decoded segments (tiles, strips, frames).

    Attributes
    ----------
    height, width : int
        Level size in pixels.
    tile_h, tile_w : int
        Stored segment size; ``grid_w`` segments a row, row-major.
    offsets, counts : ndarray of int64
        File offset and byte count of each segment in grid order (count 0: never stored, glass).
    jpegtables : bytes or None
        Tables shared by abbreviated JPEG segments (TIFF JPEGTables).
    is_jpeg : bool
        Segments are JPEG streams (checked for damage when verifying).
    jpeg : (colorspace, outcolorspace) or None
        Arguments of imagecodecs.jpeg_decode for the direct 8-bit RGB JPEG path; None: the
        reference decoder serves.
    convert : callable or None
        Turns a reference-decoded segment (h, w, samples) into RGB.
    unwrap : callable or None
        Turns the bytes stored at a segment's offset into the coded stream (DICOM frames split
        into several fragments), or None when they are the stream.
    file : str or None
        The file (path or URL) holding the level when it is not the reader's ``path`` (DICOM: one
        file a level).
    fd : ByteSource
        Set when the reader opens its files: where the level's segments are read from.
    """

    __slots__ = ("height", "width", "tile_h", "tile_w", "grid_w", "offsets", "counts", "jpegtables", "is_jpeg",
                 "jpeg", "sentinels", "strict", "stripped", "convert", "unwrap", "file", "fd", "header")

    def __init__(self, height, width, tile_h, tile_w, offsets, counts, *, jpegtables=None, is_jpeg=False,
                 jpeg=None, convert=None, stripped=False, unwrap=None, file=None):
        self.height, self.width, self.tile_h, self.tile_w = int(height), int(width), int(tile_h), int(tile_w)
        self.grid_w = -(-self.width // self.tile_w)
        self.offsets = np.asarray(offsets, np.int64)
        self.counts = np.asarray(counts, np.int64)
        self.jpegtables, self.is_jpeg, self.jpeg, self.convert = jpegtables, bool(is_jpeg), jpeg, convert
        self.stripped, self.unwrap = bool(stripped), unwrap
        self.file, self.fd = file, None  # fd: set when the reader opens its files
        self.sentinels = {}  # JPEG header bytes -> SentinelPlan or None (see jpeg_sentinel)
        self.strict = {}  # colour signature or header bytes -> strict decode equals this level's (jpeg_strict)
        self.header = None  # the last tile's JPEG header (tiles of a level mostly share one)

    @property
    def grid_h(self) -> int:
        """Rows of segments."""
        return -(-self.height // self.tile_h)

    def segment_shape(self, index: int) -> tuple[int, int]:
        """(height, width) of one stored segment: a full tile, or a strip (the last may be short)."""
        if not self.stripped:
            return self.tile_h, self.tile_w
        return min(self.tile_h, self.height - (index // self.grid_w) * self.tile_h), self.tile_w

    def reference(self, data, index: int) -> np.ndarray | None:
        """One segment as the format's own decoder returns it, (h, w, samples), or None (no data)."""
        raise NotImplementedError


class GridReader(RowFetch):
    """What the direct backends share: positional reads of the tiles a region touches, decoded once.

    Subclasses set ``path``, ``verify_jpeg`` and ``_levels`` (a list of :class:`GridLevel`,
    finest first), then call :meth:`_open_files`.
    """

    name = "grid"
    _levels: list
    _fd = None

    def _open_files(self, unit: str = "tile", sources: dict | None = None) -> None:
        """Open a byte source on each level's file (a local path: a private descriptor read with
        ``os.pread``; a URL: range requests, see :mod:`tilewright.location.byte_source`), refuse
        levels whose segment table points past their file's end (see :meth:`_check_extent`) and
        settle each level's direct JPEG path (see :meth:`_direct_jpeg_agrees`). ``sources`` maps
        names to sources already open (the reader then owns them)."""
        from tilewright.location.byte_source import open_source

        self._scratch = threading.local()  # one decoded-tile buffer per thread and tile shape
        opened: dict = dict(sources or {})
        try:
            for lv in self._levels:
                name = lv.file or self.path
                if name not in opened:
                    opened[name] = open_source(name)
                lv.fd = opened[name]  # the level's ByteSource
            self._fds = list(opened.values())
            self._fd = self._levels[0].fd
            self._check_extent(unit)
        except BaseException:
            for src in opened.values():
                src.close()
            self._fds, self._fd = [], None
            raise
        for lv in self._levels:
            if lv.jpeg is not None and not self._direct_jpeg_agrees(lv):
                lv.jpeg = None

    def _check_extent(self, unit: str = "tile") -> None:
        """Refuse levels whose segment table does not fit their size or points past the file's end.

        Raises
        ------
        DamagedSlideError
        """
        for i, lv in enumerate(self._levels):
            size = lv.fd.size
            expected = lv.grid_h * lv.grid_w
            if len(lv.offsets) != expected:
                raise DamagedSlideError(
                    f"level {i} lists {len(lv.offsets)} {unit}s where its size needs {expected}; "
                    "the file is damaged", self.path)
            ends = lv.offsets + lv.counts
            if len(ends) and int(ends.max()) > size:
                raise DamagedSlideError(
                    f"truncated: {unit} data of level {i} extends past the end of the file ({size} bytes); "
                    "copy the slide again", self.path)

    @property
    def level_shapes(self) -> list[tuple[int, int]]:
        """(height, width) of every level, finest first."""
        return [(lv.height, lv.width) for lv in self._levels]

    def tile_shape(self, level: int) -> tuple[int, int]:
        """(height, width) of the stored tiles (or strips, or frames) of a level."""
        lv = self._levels[level]
        return lv.tile_h, lv.tile_w

    def _tile_name(self, lv: GridLevel, r: int, c: int) -> str:
        """How errors name a stored segment."""
        return f"tile ({r}, {c})"

    # -- pixels ------------------------------------------------------------------------
    def _pread(self, n: int, offset: int, fd=None) -> bytes:
        """``n`` bytes at ``offset`` of the level-0 file or of the byte source ``fd`` (fewer only
        at the end of the file): one positional read, or one range request for a URL."""
        return (self._fd if fd is None else fd).pread(n, offset)

    def reduces(self, level: int, factor: int) -> bool:
        """Whether :meth:`read` can area-average this level ``factor``-fold tile by tile: the
        stored segments are whole multiples of ``factor`` in both axes, so no target pixel
        straddles two of them."""
        lv = self._levels[level]
        return factor > 1 and lv.tile_h % factor == 0 and lv.tile_w % factor == 0

    def read(self, level: int, y: int, x: int, h: int, w: int, out: np.ndarray, factor: int = 1) -> None:
        """Decode the region ``[y, y+h) x [x, x+w)`` of a level into ``out`` (h, w, 3).

        The region must lie inside the level. Only the tiles it touches are read; tiles never
        stored are glass (white).

        With ``factor`` k > 1 (where :meth:`reduces`; ``y, x, h, w`` multiples of k) ``out`` is
        (h / k, w / k, 3) and receives the k x k block means of the region (OpenCV ``INTER_AREA``
        at a whole factor: each target pixel the rounded mean of its block), each tile reduced
        straight after its decode, while it is still in cache, into its place in ``out``: no
        level-resolution copy of the region is made. The pixels equal those of reducing a
        full-resolution read, since every block lies inside one tile.

        Raises
        ------
        DamagedSlideError
            A tile cannot be read or decoded (names the file, level and region).
        """
        if self._fd is None:
            raise ValueError("the slide is closed")
        lv = self._levels[level]
        th, tw = lv.tile_h, lv.tile_w
        f = int(factor)
        if f > 1 and not (self.reduces(level, f) and y % f == x % f == h % f == w % f == 0):
            raise ValueError(f"cannot reduce {(y, x, h, w)} of level {level} {f}-fold tile by tile")
        r0, r1 = y // th, (y + h - 1) // th
        c0, c1 = x // tw, (x + w - 1) // tw
        fetched = self._fetch_rows(lv, r0, r1, c0, c1)
        for r in range(r0, r1 + 1):
            first, last = r * lv.grid_w + c0, r * lv.grid_w + c1
            chunks = fetched[r - r0]
            ty = r * th
            ya, yb = max(y, ty), min(y + h, ty + th)
            for k, data in enumerate(chunks):
                c = c0 + k
                tx = c * tw
                xa, xb = max(x, tx), min(x + w, tx + tw)
                dst = out[(ya - y) // f : (yb - y) // f, (xa - x) // f : (xb - x) // f]
                if not data:
                    dst[...] = 255  # a tile never stored: background
                    continue
                try:
                    if lv.unwrap is not None:
                        data = lv.unwrap(data)
                    if self.verify_jpeg and lv.is_jpeg:
                        seg, intact = self._decode_verified(lv, data, first + k)
                    else:
                        seg, intact = self._decode(lv, data, first + k), True
                except Exception as exc:
                    raise DamagedSlideError(
                        f"{self._tile_name(lv, r, c)} of level {level} cannot be decoded while reading "
                        f"region y={y}, x={x}, h={h}, w={w} ({type(exc).__name__}: {exc}); "
                        "the file is damaged", self.path) from exc
                if not intact:
                    ty0, tx0 = r * th, c * tw
                    raise DamagedSlideError(
                        f"{self._tile_name(lv, r, c)} of level {level} (pixels y={ty0}-{ty0 + th}, "
                        f"x={tx0}-{tx0 + tw} of that level) holds corrupt JPEG data (the decoder "
                        f"lost sync) while reading region y={y}, x={x}, h={h}, w={w}; "
                        "the file is damaged, copy the slide again", self.path)
                if seg is None:
                    dst[...] = 255
                elif f == 1:
                    dst[...] = seg[ya - ty : yb - ty, xa - tx : xb - tx, :3]
                else:
                    reduce_into(seg[ya - ty : yb - ty, xa - tx : xb - tx, :3], dst)

    def _decode(self, lv: GridLevel, data, index: int) -> np.ndarray | None:
        """One tile as RGB(+) pixels (a per-thread buffer on the direct JPEG path)."""
        if lv.jpeg is not None:
            import imagecodecs

            key = lv.segment_shape(index)
            return imagecodecs.jpeg_decode(data, tables=lv.jpegtables, colorspace=lv.jpeg[0], outcolorspace=lv.jpeg[1],
                                           shape=key, bitspersample=8, out=self._scratch_tile(key))
        seg = lv.reference(data, index)
        if seg is None:
            return None
        return seg if lv.convert is None else lv.convert(seg)

    def _decode_verified(self, lv: GridLevel, data, index: int):
        """One JPEG tile and whether its entropy-coded stream is intact.

        Without vertical chroma subsampling, the pixels come from the one decode of the
        sentinel-extended stream (see jpeg_sentinel). Otherwise (a sentinel there would change
        the last pixel row, and streams with restart markers get none), from a strict decode
        (libjpeg's warnings as errors, see jpeg_strict): pixels and verdict in one decode. A tile
        the strict decoder refuses or cannot judge (another colour interpretation) gets a plain
        decode whose sentinel-extended stream is checked at 1/8 scale. Whatever fails is settled
        by the probe check (jpeg_check), so a refusal is never a false alarm.
        """
        if lv.segment_shape(index) != (lv.tile_h, lv.tile_w):  # a short last strip: probe check
            seg = self._decode(lv, data, index)
            return seg, seg is None or _jpeg_intact(lv, index, data, seg)
        plan = start = None  # data: bytes, or a memoryview into a row read (the helpers take both)
        if lv.jpeg is not None:
            header = lv.header
            # a stream that starts with a whole header parses as that header (same segments up to
            # its SOS), so one comparison replaces parsing the markers of most tiles
            if header is not None and data[:len(header)] == header:
                start = len(header)
            else:
                start = js.header_length(data)
                header = lv.header = None if start is None else bytes(data[:start])
        if start is not None:
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
            if _strict.agrees(lv.strict, stream, None if start is None else header, (lv.tile_h, lv.tile_w),
                              lambda: self._decode(lv, data, index), _HEADER_CACHE):
                seg = _strict.decode_strict(stream, self._scratch_tile((lv.tile_h, lv.tile_w)))
                if seg is not None:
                    return seg, True
        ext = js.sentinel_stream(data, plan) if fits else None  # built only when needed
        seg = self._decode(lv, data, index)
        if ext is not None and plan.vertical and js.reduced_sentinel_intact(ext, lv.jpegtables, plan):
            return seg, True
        return seg, seg is None or _jpeg_intact(lv, index, data, seg)

    def _scratch_tile(self, key) -> np.ndarray:
        """This thread's (h, w, 3) decode buffer of that size (see :func:`offset_tile_buffer`)."""
        tiles = getattr(self._scratch, "tiles", {})
        buf = tiles.get(key)
        if buf is None:
            buf = offset_tile_buffer(key)
            self._scratch.tiles = {**tiles, key: buf}
        return buf

    def _direct_jpeg_agrees(self, lv: GridLevel) -> bool:
        """Whether the direct JPEG path decodes the level's first stored tile as its reference
        decoder does."""
        nonzero = np.flatnonzero(lv.counts)
        if not len(nonzero):
            return True
        i = int(nonzero[0])
        try:
            data = self._pread(int(lv.counts[i]), int(lv.offsets[i]), lv.fd)
            if lv.unwrap is not None:
                data = lv.unwrap(data)
            want = lv.reference(data, i)
            got = self._decode(lv, data, i)
            return want is not None and np.array_equal(want[..., :3], got)
        except Exception:  # noqa: BLE001 - damaged first tile: leave it to the general path
            return False

    def _fetch_row(self, offs: np.ndarray, cnts: np.ndarray, fd=None) -> list[bytes]:
        """Read a run of tiles (of the level-0 file, or of ``fd``), in one positional read when
        they lie together in the file."""
        if len(offs) == 0:
            return []
        stored = cnts > 0
        if not stored.any():
            return [b""] * len(offs)
        lo = int(offs[stored].min())
        hi = int((offs + cnts)[stored].max())
        total = int(cnts.sum())
        if len(offs) > 1 and hi - lo <= total + 65536:
            buf = memoryview(self._pread(hi - lo, lo, fd))
            if len(buf) < hi - lo:
                raise DamagedSlideError("truncated tile data", self.path)
            return [buf[o - lo : o - lo + n] if n else b""
                    for o, n in zip(offs.tolist(), cnts.tolist())]
        out = []
        for o, n in zip(offs.tolist(), cnts.tolist()):
            data = self._pread(n, o, fd) if n else b""
            if len(data) < n:
                raise DamagedSlideError("truncated tile data", self.path)
            out.append(data)
        return out

    def close(self) -> None:
        """Release the byte sources (idempotent)."""
        fds, self._fds, self._fd = getattr(self, "_fds", []), [], None
        for src in fds:
            src.close()


def _jpeg_intact(lv: GridLevel, index: int, data, seg) -> bool:
    """Whether a decoded JPEG tile came from an intact entropy-coded stream (see jpeg_check)."""
    from tilewright.slide.jpeg_check import jpeg_in_sync

    def decode(buf):
        out = lv.reference(buf, index)
        return None if out is None else out[..., :3]

    return jpeg_in_sync(bytes(data), seg[..., :3], decode)
