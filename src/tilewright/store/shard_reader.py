"""Reading tiles straight from a tile array's shard files, near the chunk codec's own speed.

zarr-python reads a chunk of a sharded array through its asynchronous pipeline: it fetches and
decodes the shard index on every read and walks an indexer per selection, which for one-tile
chunks costs far more than decoding the tile. A tile store's layout is fixed (one tile a chunk,
many a shard; :class:`~tilewright.store.shards.ShardLayout`), so this reader does the minimum:

- a shard's index (offset and length of each chunk) is read once, its CRC-32C checked, and kept
  (8 bytes a tile);
- each chunk is one positioned read (``os.preadv``; in a bucket, one range request) of exactly its
  bytes into a buffer the thread
  reuses (a fresh buffer per chunk would cost more than the read: allocations this large are
  fresh pages from the kernel), decoded straight into the output array, allocated once per
  call; chunks of one shard share one open file;
- when a request covers most of a shard (a slice, a dask block), the shard file, index included,
  is read whole in one read and the chunks are decoded from memory.

No file stays open between calls, so a reader is safe to use after ``fork`` and to pickle (its
index cache is dropped and rebuilt on use). The on-disk format is zarr's own ``sharding_indexed``
codec, which any zarr v3 reader reads.

References
----------
.. [1] Zarr specification v3, "Sharding codec" (``sharding_indexed``), version 1.0.
.. [2] Zarr specification v3, "CRC32C checksum codec" (Castagnoli CRC-32, RFC 3720).
"""

from __future__ import annotations

import os
import threading
from pathlib import Path

import numpy as np

from tilewright.errors import StoreError
from tilewright.store.shards import ABSENT, ShardLayout

__all__ = ["ShardReader"]

_WHOLE = 0.5  # read a shard file whole when a request needs at least this share of its chunks


class ShardReader:
    """Random access to the tiles of a :class:`ShardLayout`.

    ``read(indices)`` returns a new ``(k, T, T, C)`` uint8 array with the tiles in the order asked
    (any order, repeats allowed); ``read_one(i)`` a ``(T, T, C)`` array. Indices must lie in
    ``[0, n)`` (the caller handles negative indices).
    """

    def __init__(self, layout: ShardLayout):
        self.layout = layout
        self._reset()

    def _reset(self) -> None:
        self._local = threading.local()  # per-thread read buffer
        n, shard = self.layout.n, self.layout.shard
        n_shards = -(-n // shard) if n else 0
        self._loaded = np.zeros(n_shards, bool)
        self._offset = np.zeros(n_shards * shard, np.uint32)
        self._length = np.zeros(n_shards * shard, np.uint32)  # 0: absent chunk (fill value)

    def __getstate__(self):
        return {"layout": self.layout}

    def __setstate__(self, state):
        self.layout = state["layout"]
        self._reset()

    # -- the shard index ---------------------------------------------------------------------

    def _keep_index(self, s: int, raw, path) -> None:
        """Parse a shard's index bytes (with their CRC-32C, when the layout has one) into the cache."""
        lay = self.layout
        table = lay.index_table(raw, path)
        absent = table[:, 0] == ABSENT
        offsets = np.where(absent, 0, table[:, 0])
        lengths = np.where(absent, 0, table[:, 1])
        if offsets.max(initial=0) + lengths.max(initial=0) >= 2**32 and self._offset.dtype == np.uint32:
            self._offset = self._offset.astype(np.uint64)  # shard files past 4 GiB: keep 64-bit offsets
        base = s * lay.shard
        self._offset[base:base + lay.shard] = offsets
        self._length[base:base + lay.shard] = lengths
        self._loaded[s] = True

    def _load_index(self, fd, s: int, path) -> None:
        lay = self.layout
        if lay.index_at_start:
            raw = fd.pread(lay.index_size, 0)
        else:
            raw = fd.tail(lay.index_size)
        self._keep_index(s, raw, path)

    def _open(self, s: int):
        """(shard file handle or None when the shard file does not exist, path)."""
        path = self.layout.path(s)
        if not isinstance(path, Path):
            return _ObjectShard(str(path)), path  # no request yet: a missing object shows on the first read
        try:
            return _FileShard(os.open(path, os.O_RDONLY | getattr(os, "O_BINARY", 0))), path
        except FileNotFoundError:
            return None, path
        except OSError as exc:
            raise StoreError(f"cannot read a shard file ({exc.strerror or exc})", path) from exc

    # -- reads -------------------------------------------------------------------------------

    def read_one(self, i: int) -> np.ndarray:
        """Tile ``i`` (0 <= i < n) as a new (T, T, C) uint8 array."""
        lay = self.layout
        out = np.empty(lay.tile_shape, np.uint8)
        s = i // lay.shard
        fd, path = self._open(s)
        if fd is None:
            out.fill(lay.fill_value)
            return out
        try:
            if not self._loaded[s] and not self._index_or_absent(fd, s, path):
                out.fill(lay.fill_value)
                return out
            self._chunk(fd, i, out, path)
        finally:
            fd.close()
        return out

    def _index_or_absent(self, fd, s: int, path) -> bool:
        """Load shard ``s``'s index; False when its object does not exist (a shard never written)."""
        try:
            self._load_index(fd, s, path)
        except FileNotFoundError:
            return False
        return True

    def read(self, indices) -> np.ndarray:
        """Tiles at ``indices`` (ints in [0, n), any order, repeats allowed) as a (k, T, T, C) array."""
        lay = self.layout
        idx = np.asarray(indices, dtype=np.int64).reshape(-1)
        out = np.empty((len(idx),) + lay.tile_shape, np.uint8)
        if not len(idx):
            return out
        order = np.argsort(idx, kind="stable")  # by shard, then by chunk (file order as written)
        sorted_idx = idx[order]
        shards = sorted_idx // lay.shard
        bounds = np.flatnonzero(np.diff(shards)) + 1
        for group in np.split(np.arange(len(idx)), bounds):
            self._read_group(int(shards[group[0]]), sorted_idx[group], order[group], out)
        return out

    def _read_group(self, s: int, tiles: np.ndarray, places: np.ndarray, out: np.ndarray) -> None:
        """Tiles ``tiles`` (sorted, all in shard ``s``) into ``out[places]``."""
        lay = self.layout
        fd, path = self._open(s)
        if fd is None:
            out[places] = lay.fill_value
            return
        try:
            unique = len(np.unique(tiles)) if len(tiles) > 1 else 1
            in_shard = min(lay.shard, lay.n - s * lay.shard)
            whole = None
            try:
                if unique >= _WHOLE * in_shard or (self._loaded[s] and unique > 1 and self._span_is_dense(tiles)):
                    whole = self._read_span(fd, s, tiles, path)
                elif not self._loaded[s]:
                    self._load_index(fd, s, path)
            except FileNotFoundError:  # a shard object never written
                out[places] = lay.fill_value
                return
            prev = -1
            for t, p in zip(tiles.tolist(), places.tolist()):
                if t == prev:  # a repeated index: decoded once
                    out[p] = out[last]
                    continue
                if whole is None:
                    self._chunk(fd, t, out[p], path)
                else:
                    self._chunk_from(whole, t, out[p], path)
                prev, last = t, p
        finally:
            fd.close()

    def _span_is_dense(self, tiles: np.ndarray) -> bool:
        """Whether the bytes between the first and last needed chunk are mostly needed ones."""
        off = self._offset[tiles].astype(np.int64)
        length = self._length[tiles].astype(np.int64)
        present = length > 0
        if not present.any():
            return False
        span = int((off + length)[present].max() - off[present].min())
        need = int(np.unique(np.stack([off, length], 1)[present], axis=0)[:, 1].sum())
        return span <= 2 * need

    def _read_span(self, fd, s: int, tiles: np.ndarray, path):
        """One read covering the chunks of ``tiles``: the whole file when the index is not cached
        yet (index parsed from it), else the byte span from the first to the last chunk needed.
        Returns (buffer, its file offset)."""
        lay = self.layout
        if not self._loaded[s]:
            data = fd.whole()
            if len(data) < lay.index_size:
                self._keep_index(s, data, path)  # raises: too short
            raw = data[:lay.index_size] if lay.index_at_start else memoryview(data)[len(data) - lay.index_size:]
            self._keep_index(s, raw, path)
            return data, 0
        off = self._offset[tiles].astype(np.int64)
        length = self._length[tiles].astype(np.int64)
        present = length > 0
        if not present.any():
            return b"", 0
        start = int(off[present].min())
        stop = int((off + length)[present].max())
        return fd.pread(stop - start, start), start

    def _chunk(self, fd, t: int, out: np.ndarray, path) -> None:
        """Tile ``t`` from the open shard file ``fd`` into ``out`` (one positioned read)."""
        length = int(self._length[t])
        if length == 0:
            out.fill(self.layout.fill_value)
            return
        offset = int(self._offset[t])
        if self.layout.codec.raw and length == out.nbytes:  # uncompressed: read into the tile itself
            got = fd.readinto(out.reshape(-1), offset)
            if got != length:
                raise StoreError(f"shard file ends inside tile {t}; the store is damaged: re-run tile-out "
                                 "with --overwrite for this slide", path)
            return
        scratch = getattr(self._local, "buffer", None)
        if scratch is None or len(scratch) < length:
            scratch = self._local.buffer = bytearray(max(length, 2 * out.nbytes))
        data = memoryview(scratch)[:length]
        got = fd.readinto(data, offset)
        self._decode(data[:got], t, out, path, length)

    def _chunk_from(self, whole, t: int, out: np.ndarray, path) -> None:
        data, start = whole
        length = int(self._length[t])
        if length == 0:
            out.fill(self.layout.fill_value)
            return
        a = int(self._offset[t]) - start
        self._decode(memoryview(data)[a:a + length], t, out, path, length)

    def _decode(self, data, t: int, out: np.ndarray, path, length: int) -> None:
        if len(data) != length:
            raise StoreError(f"shard file ends inside tile {t}; the store is damaged: re-run tile-out with "
                             "--overwrite for this slide", path)
        try:
            self.layout.codec.decode_into(data, out)
        except Exception as exc:  # each codec library has its own error types
            raise StoreError(f"tile {t} does not decode ({self.layout.codec.name}: {exc}); the store is "
                             "damaged: re-run tile-out with --overwrite for this slide", path) from exc


class _FileShard:
    """A shard file opened for positioned reads."""

    __slots__ = ("fd",)

    def __init__(self, fd: int):
        self.fd = fd

    def pread(self, n: int, offset: int) -> bytes:
        return os.pread(self.fd, n, offset)

    def tail(self, n: int) -> bytes:
        size = os.fstat(self.fd).st_size
        return os.pread(self.fd, n, max(0, size - n)) if size >= n else b""

    def whole(self) -> bytes:
        return os.pread(self.fd, os.fstat(self.fd).st_size, 0)

    def readinto(self, buffer, offset: int) -> int:
        return os.preadv(self.fd, [buffer], offset)

    def close(self) -> None:
        os.close(self.fd)


class _ObjectShard:
    """A shard object in a bucket: each read one range request (the index: one suffix request)."""

    __slots__ = ("url",)

    def __init__(self, url: str):
        self.url = url

    def pread(self, n: int, offset: int) -> bytes:
        from tilewright.location.objects import get_range

        return get_range(self.url, offset, n)

    def tail(self, n: int) -> bytes:
        from tilewright.location.objects import get_tail

        return get_tail(self.url, n)[0]

    def whole(self) -> bytes:
        from tilewright.location.objects import get_bytes

        return get_bytes(self.url)

    def readinto(self, buffer, offset: int) -> int:
        view = memoryview(buffer).cast("B")
        data = self.pread(len(view), offset)
        view[:len(data)] = data
        return len(data)

    def close(self) -> None:
        """Nothing is held open."""
