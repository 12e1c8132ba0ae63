"""Writing a tile store atomically: a temporary folder, renamed into place when complete.

Nothing that is not finished ever carries the final name, and the ``complete`` attribute is the
last thing written, so a reader (or a resumed run) can never mistake a partial store for a
finished one.

A store in a bucket (``s3://bucket/out/a.zarr``) cannot be renamed: it is written in place, and
its completion marker is what makes it complete. An earlier store there loses its marker first
(the group's ``zarr.json`` is deleted, then every object under the prefix); the new store's
group is written with ``complete: false``; the shards and small arrays follow, each object
written whole in one request; :func:`~tilewright.store.verify.check_store` then reads the
metadata back and checks every shard's index; only then is ``zarr.json`` rewritten with
``complete: true``, in one request, which the store replaces atomically. A reader, a resumed
run or ``is_complete`` sees a complete store or none, never part of one; a write stopped at any
point leaves a prefix without the marker, which the next run removes.

Whole shards of tiles are encoded here (see :mod:`tilewright.store.shards`) and written as one
file each, in the zarr v3 ``sharding_indexed`` layout the array's metadata declares; zarr itself
writes only the metadata and the small arrays. Any zarr v3 reader reads the result.
"""

from __future__ import annotations

import errno
import os
import shutil
import uuid
from datetime import datetime, timezone
from pathlib import Path

import numpy as np

from tilewright.errors import StoreError, TilewrightError
from tilewright.location.objpath import ObjectPath, as_path
from tilewright.store.compression import compressor, describe, tile_codecs  # noqa: F401 (compressor: public)
from tilewright.store.layout import FORMAT_NAME, FORMAT_VERSION
from tilewright.store.shards import ShardEncoder

__all__ = ["StoreWriter", "remove_partials", "compressor"]

_PARTIAL = ".partial-"
_MAP_CHUNK = 512  # chunk side of the slide-level pictures (thumbnail, masks)


def remove_partials(*finals: str | os.PathLike) -> None:
    """Delete temporary folders left by interrupted writes of each of ``finals`` (each folder is
    listed once, however many stores it holds)."""
    from tilewright.interrupts import signals_deferred

    remote = [f for f in map(as_path, finals) if isinstance(f, ObjectPath)]
    if remote:
        _remove_unfinished(remote)
    prefixes: dict[Path, list[str]] = {}
    for final in (f for f in map(as_path, finals) if not isinstance(f, ObjectPath)):
        # compared as text: a name is not a pattern (``a[1]`` vs ``a1``)
        prefixes.setdefault(final.parent, []).append(final.name + _PARTIAL)
    with signals_deferred():  # a Ctrl-C here would leave half a folder behind
        for folder, names in prefixes.items():
            if not folder.exists():
                continue
            starts = tuple(names)
            for name in os.listdir(folder):
                if name.startswith(starts):
                    shutil.rmtree(folder / name, ignore_errors=True)


def _remove_unfinished(finals: list) -> None:
    """Remove the stores in a bucket that lack their completion marker (one listing a parent
    prefix, then only the stores found there are looked at)."""
    from tilewright.location.objects import delete_prefix, list_children
    from tilewright.store.reader import is_complete

    by_parent: dict[str, list] = {}
    for final in finals:
        by_parent.setdefault(str(final.parent), []).append(final)
    for parent, stores in by_parent.items():
        present = set(list_children(parent)[1])
        for final in stores:
            if str(final) in present and not is_complete(final):
                delete_prefix(str(final))


class StoreWriter:
    """Create one slide's store under a temporary name; :meth:`commit` renames it into place.

    In a bucket the store is written in place and made complete by its marker, written last (see
    the module docstring).

    Parameters
    ----------
    final : path
        Where the complete store will live (``<out>/<slide_id>.zarr``).
    capacity : int
        Upper bound on the number of tiles (the plan's length); trimmed at commit.
    tile : int
        Tile side in pixels.
    shard_tiles : int
        Tiles a shard file holds.
    compression : str
        See :mod:`tilewright.store.compression`.
    quality : int, optional
        JPEG quality (1-100, default 90) when ``compression="jpeg"``.
    with_region : bool
        Whether to keep a per-tile ``region`` array.
    overwrite : bool
        In a bucket (where the old store must go before the new one is written): replace a
        complete store already there (else StoreError, before anything is removed). On disk
        :meth:`commit` decides.
    """

    def __init__(self, final, capacity: int, tile: int, *, shard_tiles: int = 64,
                 compression: str = "lz4", with_region: bool = False, quality: int | None = None,
                 overwrite: bool = True):
        import zarr

        from tilewright.store.guard import GuardedLocalStore, GuardedObjectStore, WriteGuard

        self.final = as_path(final)
        self.remote = isinstance(self.final, ObjectPath)
        # in a bucket the store is written in place (no rename); the marker makes it complete
        self.tmp = self.final if self.remote else \
            self.final.with_name(self.final.name + _PARTIAL + uuid.uuid4().hex[:8])
        self.guard = WriteGuard(self.tmp, self.final)  # abort waits for the writes in flight
        self.tile = int(tile)
        self.n = 0
        cap = max(int(capacity), 1)
        codecs = tile_codecs(compression, quality)  # bad names raise before anything is created
        self.codec = describe(compression, quality)
        if self.remote:  # before anything is written: a refusal here leaves the old store as it is
            self._clear_remote(overwrite)
        try:
            if self.remote:
                backing = GuardedObjectStore(str(self.tmp), guard=self.guard)
            else:
                self.final.parent.mkdir(parents=True, exist_ok=True)
                backing = GuardedLocalStore(self.tmp, guard=self.guard)
            self.group = zarr.open_group(backing, mode="w", zarr_format=3)
            shard = max(1, min(int(shard_tiles), cap))
            self.tiles = self.group.create_array(
                "tiles", shape=(cap, tile, tile, 3), chunks=(1, tile, tile, 3),
                shards=(shard, tile, tile, 3), dtype="uint8", **codecs,
                fill_value=255, dimension_names=("tile", "y", "x", "rgb"))
            self._arrays = ["tiles"]  # every array created: each is checked before the rename
            self._meta = {"yx": [], "yx_level0": [], "tissue": [], "sharpness": [], "region": []}
            self.with_region = with_region
            self.shard = int(self.tiles.shards[0])
            self._encoder = ShardEncoder.for_array(self.tiles)  # None: let zarr write the tiles
            self._pending: list = []  # encoded chunks of a shard not yet full
            self.guard.created = not self.remote  # from now on a vanished folder fails every write
        except OSError as exc:
            self.abort()
            if exc.errno == errno.ENAMETOOLONG:
                raise StoreError(f"the store's name is too long for this file system ({exc.strerror}); "
                                 "use a shorter output folder path or slide id", self.final) from exc
            raise StoreError(f"cannot create the store ({exc.strerror or exc}); check that the output "
                             "folder is writable and has free space", self.final) from exc
        except BaseException:  # e.g. Ctrl-C while the folder is being made: __exit__ will not run
            self.abort()
            raise

    def _clear_remote(self, overwrite: bool) -> None:
        """Before writing in a bucket: take the completion marker off any store there, then remove
        its objects (refused for a complete store unless ``overwrite``)."""
        from tilewright.location.objects import delete, delete_prefix
        from tilewright.store.reader import is_complete

        if not overwrite and is_complete(self.final):
            raise StoreError("a store already exists; pass overwrite to replace it", self.final)
        delete(str(self.final / "zarr.json"))  # from here on no reader takes it for complete
        delete_prefix(str(self.final))

    @property
    def encodes(self) -> bool:
        """Whether :meth:`encode` compresses tiles (then :meth:`append` needs only its result)."""
        return self._encoder is not None

    def encode(self, tiles: np.ndarray) -> list | None:
        """Compress tiles into the chunks :meth:`append` will store (None when zarr writes them).

        Thread-safe and free of the GIL while compressing, so callers can encode in reader threads
        and pass the result to :meth:`append` as ``encoded``.
        """
        if self._encoder is None:
            return None
        return self._encoder.encode_chunks(tiles)

    def append(self, tiles: np.ndarray, yx, yx_level0, tissue, sharpness, region=None, *,
               encoded: list | None = None) -> None:
        """Append a batch of tiles and their per-tile values.

        Parameters
        ----------
        tiles : ndarray (k, T, T, 3) uint8, or None
            The pixels; may be None when ``encoded`` is given (the caller need not keep them).
        yx, yx_level0 : array_like (k, 2)
        tissue, sharpness, region : array_like (k,)
        encoded : list, optional
            ``self.encode(tiles)``, when the caller compressed the tiles already.
        """
        if tiles is None and encoded is None:
            raise ValueError("append needs the tiles or their encoded chunks")
        k = len(tiles) if tiles is not None else len(encoded)
        if k == 0:
            return
        if self.n + k > self.tiles.shape[0]:
            raise StoreError(f"more tiles than planned ({self.n + k} > {self.tiles.shape[0]})", self.final)
        try:
            self._write_tiles(None if tiles is None else np.asarray(tiles, dtype=np.uint8), encoded)
        except OSError as exc:
            raise StoreError(f"writing tiles failed ({exc.strerror or exc}); check free space", self.final) from exc
        self._meta["yx"].append(np.asarray(yx, dtype=np.int64).reshape(k, 2))
        self._meta["yx_level0"].append(np.asarray(yx_level0, dtype=np.int64).reshape(k, 2))
        self._meta["tissue"].append(np.asarray(tissue, dtype=np.float32).reshape(k))
        self._meta["sharpness"].append(np.asarray(sharpness, dtype=np.float32).reshape(k))
        if self.with_region:
            self._meta["region"].append(np.asarray(region, dtype=np.float32).reshape(k))
        self.n += k

    def _write_tiles(self, tiles: np.ndarray, encoded: list | None) -> None:
        """Write tiles ``[n, n+k)``: whole shards straight to their files, a partial tail kept."""
        if self._encoder is None:
            self.tiles[self.n:self.n + len(tiles)] = tiles
            return
        if encoded is None or (tiles is not None and len(encoded) != len(tiles)):
            encoded = self._encoder.encode_chunks(tiles)
        start = self.n - len(self._pending)  # first tile not yet on disk (a shard boundary)
        chunks = self._pending + list(encoded)
        full = (len(chunks) // self.shard) * self.shard
        for i in range(0, full, self.shard):
            with self.guard.writing():
                self._encoder.write_chunks((start + i) // self.shard, chunks[i:i + self.shard])
        self._pending = chunks[full:]

    def _flush_pending(self) -> None:
        if self._encoder is not None and self._pending:
            with self.guard.writing():
                self._encoder.write_chunks((self.n - len(self._pending)) // self.shard, self._pending)
            self._pending = []

    def _small(self, name, data, *, band: int | None = None, **kw) -> None:
        """Write ``data`` as one chunk, or (``band``) in chunks of ``band`` x ``band`` pixels
        written one row of chunks at a time (bounds the copies zarr makes of a large picture)."""
        data = np.asarray(data)
        banded = band is not None and data.ndim >= 2
        if banded:
            chunks = (max(1, min(band, data.shape[0])), max(1, min(band, data.shape[1]))) + data.shape[2:]
        else:
            chunks = tuple(max(1, d) for d in data.shape)
        # every chunk is written, even one equal to the fill value, so check_store can count them
        arr = self.group.create_array(name, shape=data.shape, dtype=data.dtype, chunks=chunks,
                                      config={"write_empty_chunks": True}, **kw)
        self._arrays.append(name)
        if not data.size:
            return
        if not banded:
            arr[...] = data
            return
        for r in range(0, data.shape[0], chunks[0]):
            arr[r:r + chunks[0]] = data[r:r + chunks[0]]

    def write_maps(self, thumbnail: np.ndarray, mask: np.ndarray, extra: dict | None = None) -> None:
        """Write the slide-level pictures now (``thumbnail``, ``mask`` and ``extra`` small arrays).

        They go into the temporary store like everything else, so the caller can free them before
        the tiles are read (their size grows with the slide; the tile pipeline's does not).
        """
        try:
            self._small("thumbnail", np.asarray(thumbnail, dtype=np.uint8), band=_MAP_CHUNK)
            self._small("mask", np.asarray(mask, dtype=bool), band=_MAP_CHUNK)
            for name, data in (extra or {}).items():
                self._small(name, np.asarray(data), band=_MAP_CHUNK)
        except OSError as exc:
            raise StoreError(f"writing the slide pictures failed ({exc.strerror or exc}); check free space",
                             self.final) from exc

    @property
    def stored_yx(self) -> np.ndarray:
        """(n, 2) top-left corners of the tiles appended so far, in store order."""
        parts = self._meta["yx"]
        return np.concatenate(parts) if parts else np.zeros((0, 2), np.int64)

    def commit(self, attrs: dict, thumbnail: np.ndarray | None = None, mask: np.ndarray | None = None, *,
               overwrite: bool = True, extra: dict | None = None, expected: int | None = None,
               per_tile: dict | None = None, arrays: dict | None = None) -> Path:
        """Write coordinates (and the pictures, unless :meth:`write_maps` did), mark complete, check
        the store is whole (:func:`tilewright.store.verify.check_store`), rename into place.

        ``expected`` is the number of tiles the caller meant to store (the plan less the tiles it
        dropped on purpose); a store holding another number is refused, never committed with
        holes. Without it, the tiles appended count (the capacity is trimmed to them).
        ``per_tile`` adds arrays whose first axis is the tile (one row a stored tile, in store
        order), e.g. each tile's ink share; ``arrays`` other small arrays (one chunk each).
        """
        from tilewright.store.verify import check_store

        if expected is not None and int(expected) != self.n:
            self.abort()
            raise StoreError(f"{self.n} tiles were written where {int(expected)} were planned; nothing was "
                             "committed; run again", self.final)
        try:
            self._flush_pending()
            if self.n < self.tiles.shape[0]:
                self.tiles.resize((self.n, self.tile, self.tile, 3))
            for name, width in (("yx", 2), ("yx_level0", 2)):
                parts = self._meta[name]
                self._small(name, np.concatenate(parts) if parts else np.zeros((0, width), np.int64))
            for name in ("tissue", "sharpness") + (("region",) if self.with_region else ()):
                parts = self._meta[name]
                self._small(name, np.concatenate(parts) if parts else np.zeros((0,), np.float32))
            for name, data in (per_tile or {}).items():
                data = np.asarray(data)
                if data.shape[:1] != (self.n,):
                    raise StoreError(f"per-tile array {name!r} has {data.shape[:1]} rows for {self.n} tiles", self.final)
                self._small(name, data)
            for name, data in (arrays or {}).items():
                self._small(name, np.asarray(data))
            if thumbnail is not None:
                self.write_maps(thumbnail, mask, extra)
            full = dict(attrs)
            full.setdefault("compression", self.codec)
            full.update(format=FORMAT_NAME, format_version=FORMAT_VERSION, n_tiles=int(self.n),
                        created=datetime.now(timezone.utc).isoformat(timespec="seconds"))
            full["complete"] = False
            self.group.update_attributes(full)  # one metadata write (attrs.update writes per key)
            if self.remote:  # checked first, then the marker: the one write that makes it complete
                check_store(self.tmp, self.final, n_tiles=self.n, arrays=self._arrays,
                            shard_index=self._encoder is not None, marked=False)
                with self.guard.writing():
                    self.group.update_attributes({"complete": True})
                self.guard.close()
                return self.final
            self.group.update_attributes({"complete": True})  # the last thing written
            with self.guard.writing():  # fails here if the folder vanished meanwhile
                check_store(self.tmp, self.final, n_tiles=self.n, arrays=self._arrays,
                            shard_index=self._encoder is not None)
            self._rename_into_place(overwrite)
        except OSError as exc:
            self.abort()
            raise StoreError(f"finishing the store failed ({exc.strerror or exc}); check free space "
                             "and permissions", self.final) from exc
        return self.final

    def _rename_into_place(self, overwrite: bool) -> None:
        """Move the finished temporary folder to the final name (replacing an old store), with
        no write left in flight and no signal able to stop it between the two renames."""
        from tilewright.interrupts import signals_deferred

        with signals_deferred():
            self.guard.close()  # nothing more is written under the temporary name
            if self.final.exists():
                if not overwrite:
                    raise StoreError("a store already exists; pass overwrite to replace it", self.final)
                old = self.final.with_name(self.final.name + _PARTIAL + "old-" + uuid.uuid4().hex[:8])
                os.replace(self.final, old)
                os.replace(self.tmp, self.final)
                shutil.rmtree(old, ignore_errors=True)
            else:
                os.replace(self.tmp, self.final)

    def abort(self) -> None:
        """Remove the temporary folder (used on any failure).

        Writes still in flight (zarr finishes a write on its own thread even when the caller
        stopped waiting for it, e.g. on Ctrl-C) are waited for first and later ones refused, so
        nothing re-creates the folder once it is gone; a SIGINT/SIGTERM arriving meanwhile is
        delivered when the folder is removed.
        """
        from tilewright.interrupts import signals_deferred

        with signals_deferred():
            self.guard.close()
            if not self.remote:
                shutil.rmtree(self.tmp, ignore_errors=True)
                return
            from tilewright.location.objects import delete_prefix

            try:  # the marker was never written: what is left is removed by the next run if not now
                delete_prefix(str(self.tmp))
            except TilewrightError:
                pass

    def __enter__(self):
        return self

    def __exit__(self, exc_type, exc, tb):
        if exc_type is not None:
            self.abort()
        return False
