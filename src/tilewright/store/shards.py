"""Encoding whole shards of tiles straight to files, in the zarr v3 sharding layout.

zarr-python encodes and writes each chunk of a shard through its asynchronous codec pipeline,
which costs about half a millisecond per chunk on top of compression; for one-tile chunks that is
more than decoding the source JPEG tiles. A tile store always writes whole shards (and one last
partial shard) exactly once, so this module encodes them itself: each tile is compressed with the
codec the array's metadata declares, the chunks are concatenated, and the shard index (offset and
length of every chunk, ``2**64 - 1`` for an absent chunk, little-endian uint64, followed by its
CRC-32C) is appended, as the ``sharding_indexed`` codec specifies. The array metadata is still
written by zarr, and any zarr v3 reader reads the shards.

Only the codec chains the tile writer creates are handled (``bytes`` then one of blosc, zstd,
gzip or nothing, or one of tilewright's image codecs; index ``bytes`` + ``crc32c`` at the end, on
a local folder; see :class:`~tilewright.store.chunk_codec.ChunkCodec`); for anything else
:meth:`ShardEncoder.for_array` returns None and the caller lets zarr write. :class:`ShardLayout`
is the part of the array metadata this needs; the shard reader uses it too.

References
----------
.. [1] Zarr specification v3, "Sharding codec" (``sharding_indexed``), version 1.0.
   https://zarr-specs.readthedocs.io/en/latest/v3/codecs/sharding-indexed/v1.0.html
.. [2] Zarr specification v3, "CRC32C checksum codec" (Castagnoli CRC-32, RFC 3720).
"""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np

from tilewright.store.chunk_codec import ChunkCodec

__all__ = ["ABSENT", "ShardLayout", "ShardEncoder"]

#: Offset and length a shard index gives an absent chunk (the sharding codec's ``2**64 - 1``).
ABSENT = 2**64 - 1


class ShardLayout:
    """Where and how a tile array's shards lie: the parts of its zarr v3 metadata the direct
    shard writer and reader need.

    Attributes
    ----------
    folder : Path or ObjectPath
        The array's folder on the local file system, or its prefix in a bucket.
    key : callable
        ``key(shard_coords) -> str``, the shard file's key (zarr's chunk key encoding).
    shard : int
        Tiles (chunks) a shard holds.
    tile_shape : tuple
        (T, T, C) of one tile.
    n : int
        Tiles in the array.
    codec : ChunkCodec
        Encoder and decoder of one chunk.
    index_at_start : bool
        The shard index precedes the chunks (``index_location: start``), else it ends the file.
    index_crc : bool
        The index is followed by its CRC-32C.
    fill_value : int
        Value of tiles whose chunk is absent.
    """

    def __init__(self, folder, key, shard, tile_shape, n, codec, index_at_start, index_crc, fill_value):
        from tilewright.location.objpath import as_path

        self.folder = as_path(folder)
        self.key = key
        self.shard = int(shard)
        self.tile_shape = tuple(int(s) for s in tile_shape)
        self.n = int(n)
        self.codec = codec
        self.index_at_start = bool(index_at_start)
        self.index_crc = bool(index_crc)
        self.fill_value = int(fill_value)

    @property
    def index_size(self) -> int:
        """Bytes of a shard's index (16 a chunk, plus 4 for its CRC-32C)."""
        return 16 * self.shard + (4 if self.index_crc else 0)

    def path(self, shard_index: int):
        """The shard's file (a ``Path``) or object (an ``ObjectPath``)."""
        return self.folder / self.key((int(shard_index),) + (0,) * len(self.tile_shape))

    def index_table(self, raw, path=None) -> np.ndarray:
        """A shard's index bytes (:attr:`index_size` of them) as a ``(shard, 2)`` little-endian uint64
        table of (offset, length), :data:`ABSENT` for an absent chunk; the CRC-32C is checked
        when the layout has one.

        Raises
        ------
        StoreError
            When ``raw`` is shorter than the index or fails its checksum (naming ``path``).
        """
        from tilewright.errors import StoreError

        raw = memoryview(raw)
        if len(raw) != self.index_size:
            raise StoreError(f"shard file too short for its index ({len(raw)} of {self.index_size} bytes); "
                             "the store is damaged: re-run tile-out with --overwrite for this slide", path)
        body = raw[:16 * self.shard]
        if self.index_crc:
            import google_crc32c

            if google_crc32c.value(bytes(body)) != int.from_bytes(raw[16 * self.shard:], "little"):
                raise StoreError("shard index fails its CRC-32C check; the store is damaged: re-run tile-out "
                                 "with --overwrite for this slide", path)
        return np.frombuffer(body, "<u8").reshape(self.shard, 2)

    @classmethod
    def of(cls, arr) -> "ShardLayout | None":
        """The layout of a zarr v3 array of tiles, or None unless it is one tile a chunk, many a
        shard, a chunk chain :class:`ChunkCodec` knows, in a local folder or a bucket
        (:class:`~tilewright.store.backing.UrlObjectStore`)."""
        try:
            from zarr.storage import LocalStore

            meta = arr.metadata
            codecs = [c.to_dict() for c in meta.codecs]
            store = arr.store_path.store
            if isinstance(store, LocalStore):
                folder = Path(store.root) / arr.store_path.path
            elif isinstance(getattr(store, "url", None), str):  # a store in a bucket (store/backing.py)
                from tilewright.location.objpath import ObjectPath

                folder = ObjectPath(store.url) / arr.store_path.path
            else:
                return None
            if len(codecs) != 1 or codecs[0]["name"] != "sharding_indexed":
                return None
            cfg = codecs[0]["configuration"]
            index = [c["name"] for c in cfg["index_codecs"]]
            endian = (cfg["index_codecs"][0].get("configuration") or {}).get("endian", "little")
            chunk = tuple(cfg["chunk_shape"])
            where = cfg.get("index_location", "end")
            if (where not in ("start", "end") or index not in (["bytes"], ["bytes", "crc32c"]) or endian != "little"
                    or arr.dtype != np.uint8 or len(chunk) != 4 or chunk[0] != 1
                    or tuple(chunk[1:]) != tuple(arr.shape[1:]) or tuple(arr.shards[1:]) != tuple(arr.shape[1:])):
                return None
            codec = ChunkCodec.for_chain(list(cfg["codecs"]))
            if codec is None:
                return None
            fill = int(np.uint8(arr.fill_value if arr.fill_value is not None else 0))
            return cls(folder, meta.encode_chunk_key, arr.shards[0],
                       arr.shape[1:], arr.shape[0], codec, where == "start", len(index) == 2, fill)
        except (AttributeError, KeyError, TypeError, ValueError, ImportError):
            return None


class ShardEncoder:
    """Write whole shards of a ``(N, T, T, C)`` uint8 array with one chunk per tile.

    Create with :meth:`for_array`. :meth:`encode_chunks` compresses tiles (any thread; the codecs
    release the GIL) and :meth:`write_chunks` writes up to ``shard`` of them as the shard file of a
    given index (index entries past the chunks given are marked absent).
    """

    def __init__(self, layout: ShardLayout):
        self.layout = layout
        self.shard = layout.shard
        self.codec = layout.codec

    @classmethod
    def for_array(cls, arr) -> "ShardEncoder | None":
        """An encoder for a zarr v3 array created by the tile writer, or None if its layout differs."""
        layout = ShardLayout.of(arr)
        if layout is None or layout.index_at_start or not layout.index_crc:
            return None
        return cls(layout)

    def encode_chunks(self, tiles: np.ndarray) -> list:
        """Each tile compressed with the array's codec (bytes objects, one a chunk)."""
        tiles = np.ascontiguousarray(tiles, dtype=np.uint8)
        return [self.codec.encode(t) for t in tiles]

    def shard_parts(self, chunks: list) -> list:
        """One shard file as buffers: the chunks, then the index and its CRC-32C."""
        import google_crc32c

        if len(chunks) > self.shard:
            raise ValueError(f"{len(chunks)} chunks do not fit a shard of {self.shard}")
        index = np.full((self.shard, 2), ABSENT, dtype="<u8")
        sizes = np.fromiter((len(c) for c in chunks), dtype=np.int64, count=len(chunks))
        index[: len(chunks), 0] = np.cumsum(sizes) - sizes
        index[: len(chunks), 1] = sizes
        raw = index.tobytes()
        crc = np.uint32(google_crc32c.value(raw)).astype("<u4").tobytes()
        return [*chunks, raw, crc]

    def write_chunks(self, shard_index: int, chunks: list) -> None:
        """Write encoded chunks (at most ``shard``) as shard ``shard_index``, replacing any earlier file
        (in a bucket: one request, the object appears whole or not at all)."""
        parts = self.shard_parts(chunks)
        path = self.layout.path(shard_index)
        if not isinstance(path, Path):
            from tilewright.location.objects import put

            put(str(path), b"".join(bytes(p) if not isinstance(p, bytes) else p for p in parts))
            return
        path.parent.mkdir(parents=True, exist_ok=True)
        fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_TRUNC | getattr(os, "O_BINARY", 0), 0o666)
        try:
            if hasattr(os, "writev"):  # gather write: no joined copy of the shard in memory
                views = [memoryview(p) for p in parts]
                while views:
                    done = os.writev(fd, views[:1024])
                    while views and done >= len(views[0]):
                        done -= len(views[0])
                        views.pop(0)
                    if views and done:
                        views[0] = views[0][done:]
            else:  # pragma: no cover - platforms without writev
                view = memoryview(b"".join(parts))
                done = 0
                while done < len(view):
                    done += os.write(fd, view[done:])
        finally:
            os.close(fd)

    def write(self, shard_index: int, tiles: np.ndarray) -> None:
        """Encode ``tiles`` (at most ``shard``) and write them as shard ``shard_index``."""
        self.write_chunks(shard_index, self.encode_chunks(tiles))
