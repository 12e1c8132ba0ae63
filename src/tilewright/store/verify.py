"""A cheap structural check of a finished store, before it is renamed into place.

A store that carries its final name must be whole: every array's metadata present and readable,
every planned tile present in its shard file. Reading every pixel back would cost as much as
writing them; this reads only metadata and the shard indexes (16 bytes a tile), so a store whose
folder was emptied or partly removed while it was written (by another process, by hand) is
refused instead of committed with holes that read as white tiles.
"""

from __future__ import annotations

from pathlib import Path

from tilewright.errors import StoreError
from tilewright.store.shards import ABSENT, ShardLayout

__all__ = ["check_store"]


def check_store(folder, final, *, n_tiles: int, arrays, shard_index: bool = True, marked: bool = True) -> None:
    """Raise :class:`StoreError` unless ``folder`` holds a whole store of ``n_tiles`` tiles.

    Parameters
    ----------
    folder : path
        The temporary store folder.
    final : path
        The store's final name (named in the error).
    n_tiles : int
        Tiles the store must hold.
    arrays : iterable of str
        Names of every array written (``tiles`` and the small arrays).
    shard_index : bool
        Whether the tile shards have the layout :mod:`tilewright.store.shards` writes (index with
        CRC-32C at the end; then each shard's index is checked), else their files are counted.
    marked : bool
        Whether the completion marker is already written (on disk, before the rename); a store in
        a bucket is checked before its marker, which is written only if the check passes.
    """
    import zarr

    from tilewright.location.objpath import as_path
    from tilewright.store.backing import zarr_store

    folder = as_path(folder)

    def fail(what):
        raise StoreError(f"the finished store is not whole ({what}); nothing was committed; run again", final)

    try:
        group = zarr.open_group(zarr_store(folder), mode="r")
        attrs = dict(group.attrs)
    except Exception as exc:  # noqa: BLE001 - any unreadable metadata means "not whole"
        fail(f"group metadata unreadable: {type(exc).__name__}")
    if int(attrs.get("n_tiles", -1)) != n_tiles or bool(attrs.get("complete")) != marked:
        fail("group attributes do not record the tiles written")
    for name in arrays:
        try:
            arr = group[name]
        except Exception:  # noqa: BLE001
            fail(f"array {name!r} missing")
        if name != "tiles" and arr.ndim and arr.shape[0] != n_tiles and name in _PER_TILE:
            fail(f"array {name!r} has {arr.shape[0]} rows for {n_tiles} tiles")
        if name != "tiles" and arr.size:
            try:
                chunks = arr.nchunks_initialized
            except Exception:  # noqa: BLE001
                fail(f"array {name!r} unreadable")
            if chunks != arr.nchunks:
                fail(f"array {name!r} has {chunks} of {arr.nchunks} chunks")
    tiles = group["tiles"]
    if tiles.shape[0] != n_tiles:
        fail(f"tiles array holds {tiles.shape[0]} tiles, {n_tiles} were written")
    if shard_index:
        _check_shards(tiles, n_tiles, fail)
    elif tiles.nchunks_initialized != -(-n_tiles // int(tiles.shards[0] if tiles.shards else 1)):
        fail("tile shard files missing")


_PER_TILE = ("yx", "yx_level0", "tissue", "sharpness", "region")


def _check_shards(tiles, n: int, fail) -> None:
    """Every shard file of ``tiles`` exists and its index (checksum verified) lists its tiles; the
    layout (folder, shard keys, index size) is the one the writer and the reader use."""
    layout = ShardLayout.of(tiles)
    if layout is None or layout.index_at_start or not layout.index_crc:
        fail("tile shards are not in the layout the tile writer uses")
    shard, index_bytes = layout.shard, layout.index_size
    for s in range(-(-n // shard)):
        path = layout.path(s)
        try:
            raw, size = _tail(path, index_bytes)
        except FileNotFoundError:
            fail(f"shard file of tiles {s * shard}-{min(n, (s + 1) * shard) - 1} missing")
        if size < index_bytes:
            fail(f"shard file {path.name} of shard {s} is truncated")
        try:
            index = layout.index_table(raw, path)
        except StoreError:
            fail(f"shard {s} index checksum does not match")
        present = min(n - s * shard, shard)
        if (index[:present, 0] == ABSENT).any() or (index[:present, 0] + index[:present, 1] > size - index_bytes).any():
            fail(f"shard {s} lacks some of its tiles")


def _tail(path, n: int) -> tuple[bytes, int]:
    """The last ``n`` bytes of a shard file (or object: one request) and its size."""
    if not isinstance(path, Path):
        from tilewright.location.objects import get_tail

        return get_tail(str(path), n)
    with open(path, "rb") as fh:
        size = fh.seek(0, 2)
        fh.seek(max(0, size - n))
        return fh.read(n), size
