"""Reading a tile store: random access to tiles, coordinates and provenance, lazily."""

from __future__ import annotations

import os

import numpy as np

from tilewright.errors import IncompleteStoreError, StoreError, TilewrightError
from tilewright.location.objpath import as_path
from tilewright.store.backing import zarr_store
from tilewright.store.layout import FORMAT_NAME
from tilewright.store.metadata import array_meta, read_json, read_small_array, store_attrs
from tilewright.store.shard_reader import ShardReader
from tilewright.store.shards import ShardLayout

__all__ = ["TileStore", "open_store", "is_complete", "read_complete_attrs"]


def is_complete(path: str | os.PathLike) -> bool:
    """True when ``path`` is a tile store whose ``complete`` attribute is set (one metadata read)."""
    return store_attrs(path) is not None


class TileStore:
    """One slide's tiles, read lazily from a zarr v3 group.

    ``len(store)`` tiles; ``store[i]`` is a (T, T, 3) uint8 tile; ``store[a:b]``,
    ``store[int_array]`` (any order, repeats allowed) and ``store[bool_mask]`` give (k, T, T, 3)
    in the order asked. Tiles are read straight from the shard files
    (:class:`~tilewright.store.shard_reader.ShardReader`: the shard index read once and kept, one
    positioned read a tile, decoded into the output), or by zarr for a layout that reader does
    not know. ``.tiles`` is the zarr array; ``.yx``, ``.yx_level0``, ``.tissue``,
    ``.sharpness`` are small ndarrays; ``.attrs`` the provenance dictionary. Picklable (re-opens
    from its path), so it can be handed to dask or DataLoader workers.

    ``normalize`` ("macenko" or "reinhard") with ``target`` normalizes every tile read, for a
    store tiled with ``estimate_stains`` (see :mod:`tilewright.store.read_normalize`);
    ``.normalization`` then says how (None: tiles as stored).
    """

    def __init__(self, path: str | os.PathLike, attrs: dict | None = None, *, normalize: str | None = None,
                 target=None):
        self.path = as_path(path)
        if attrs is None:
            attrs = read_complete_attrs(self.path)
        self.attrs = attrs
        self._cache: dict[str, np.ndarray] = {}
        self._zarr = self._tiles = None  # the zarr group and tiles array, opened on first use
        self._meta = None  # the tiles array's shape, read on first use
        self._shards = False  # the direct shard reader (None: zarr reads), made on first use
        self.normalization = None
        if normalize is not None:
            if target is None:
                raise StoreError("normalize= needs target= (a fitted normalizer, its dict or JSON file; "
                                 "open_cohort defaults to the cohort's median of its stores' estimates)", self.path)
            from tilewright.store.read_normalize import bind_to_store

            self.normalization = bind_to_store(self, normalize, target)

    def normalized(self, method: str, target) -> "TileStore":
        """This store read with its tiles normalized to ``target`` by ``method`` (a new reader)."""
        return TileStore(self.path, self.attrs, normalize=method, target=target)

    @property
    def _group(self):
        if self._zarr is None:
            import zarr

            try:
                self._zarr = zarr.open_group(zarr_store(self.path), mode="r")
            except TilewrightError:
                raise  # an object-store failure says why
            except Exception as exc:
                raise StoreError(f"not a readable zarr v3 tile store ({exc})", self.path) from exc
        return self._zarr

    @property
    def tiles(self):
        """The zarr array of the tiles (N, T, T, 3), opened on first use."""
        if self._tiles is None:
            self._tiles = self._group["tiles"]
        return self._tiles

    @property
    def _reader(self):
        """The direct shard reader, or None when zarr must read this layout."""
        if self._shards is False:
            layout = ShardLayout.of(self.tiles)
            self._shards = ShardReader(layout) if layout is not None else None
        return self._shards

    def _small(self, name: str) -> np.ndarray:
        if name not in self._cache:
            data = read_small_array(self.path / name)
            self._cache[name] = data if data is not None else self._group[name][...]
        return self._cache[name]

    @property
    def slide_id(self) -> str:
        return self.attrs["slide_id"]

    @property
    def yx(self) -> np.ndarray:
        return self._small("yx")

    @property
    def yx_level0(self) -> np.ndarray:
        return self._small("yx_level0")

    @property
    def tissue(self) -> np.ndarray:
        return self._small("tissue")

    @property
    def sharpness(self) -> np.ndarray:
        return self._small("sharpness")

    @property
    def region(self) -> np.ndarray | None:
        return self._small("region") if self._has("region") else None

    def _has(self, name: str) -> bool:
        """Whether the store holds the small array ``name`` (a metadata file's existence)."""
        return (self.path / name / "zarr.json").exists()

    @property
    def ink_share(self) -> np.ndarray | None:
        """(N,) share of each tile's footprint that is marker ink (None in stores of older versions)."""
        return self._small("ink_share") if self._has("ink_share") else None

    @property
    def region_fractions(self):
        """Each tile's fraction inside each kept region class: a DataFrame, one column a class
        (``attrs["regions"]["classes_stored"]``), one row a tile; None without regions."""
        if not self._has("region_fractions"):
            return None
        import pandas as pd

        names = (self.attrs.get("regions") or {}).get("classes_stored") or []
        return pd.DataFrame(self._small("region_fractions"), columns=names)

    @property
    def thumbnail(self) -> np.ndarray:
        return self._small("thumbnail")

    @property
    def mask(self) -> np.ndarray:
        return self._small("mask")

    @property
    def tile_size(self) -> int:
        return self.shape[1]

    def __len__(self) -> int:
        return self.shape[0]

    def __getitem__(self, index):
        tiles = self._get(index)
        if isinstance(index, tuple) or index is Ellipsis:
            return tiles  # whole tiles were read (and normalized) through this method first
        if self.normalization is not None and tiles.size:
            tiles = self.normalization(tiles)
        return tiles

    def _get(self, index):
        """Tiles by position: ``store[i]`` (T, T, 3); ``store[a:b]``, ``store[int_array]`` (any order,
        repeats allowed) or ``store[bool_mask]`` (k, T, T, 3), in the order asked; a tuple indexes
        further into the tiles (``store[i, :16]``)."""
        if index is Ellipsis or (isinstance(index, tuple) and not index):
            return self[:]
        if isinstance(index, tuple):
            if any(part is Ellipsis for part in index):
                return self[:][index]
            head, rest = index[0], index[1:]
            tiles = self[head]
            return tiles[rest] if _is_int(head) else tiles[(slice(None),) + rest]
        n = len(self)
        if _is_int(index):
            if not -n <= index < n:
                raise IndexError(f"tile {index} out of range for a store of {n} tiles")
            i = int(index) % n
            return self._reader.read_one(i) if self._reader is not None else self.tiles[i]
        if isinstance(index, slice):
            if self._reader is None and index.step in (None, 1):
                return self.tiles[index]
            idx = np.arange(n)[index]
        else:
            idx = np.asarray(index)
        if idx.dtype == bool:
            if idx.shape != (n,):
                raise IndexError(f"a boolean index needs {n} values, got shape {idx.shape}")
            idx = np.flatnonzero(idx)
        elif idx.size == 0:
            idx = idx.astype(np.int64)
        elif not np.issubdtype(idx.dtype, np.integer):
            raise IndexError(f"tiles are indexed by ints, slices, int arrays or a boolean mask, not {idx.dtype}")
        if idx.size and (idx.min() < -n or idx.max() >= n):
            raise IndexError(f"tile indices out of range for a store of {n} tiles")
        flat = np.where(idx < 0, idx + n, idx).reshape(-1).astype(np.int64)
        if self._reader is not None:
            tiles = self._reader.read(flat)
        else:
            tiles = self.tiles.get_orthogonal_selection((flat,)) if flat.size else \
                np.empty((0,) + tuple(self.tiles.shape[1:]), np.uint8)
        return tiles.reshape(idx.shape + tiles.shape[1:])

    @property
    def shape(self) -> tuple:
        """(N, T, T, 3), from the tiles array's metadata (one small read, kept)."""
        if self._meta is None:
            try:
                self._meta = tuple(int(d) for d in array_meta(self.path / "tiles")["shape"])
            except (OSError, ValueError, KeyError, TypeError):
                self._meta = tuple(int(d) for d in self.tiles.shape)
        return self._meta

    @property
    def dtype(self):
        return np.dtype(np.uint8)

    @property
    def ndim(self) -> int:
        return 4

    def to_dask(self, chunk: int | None = None):
        """The tiles as a lazy dask array, one chunk a shard file by default (or ``chunk`` tiles).

        Each block is read by this store's own reader: a block that is a whole shard is one read
        of its file. The graph carries only the store's path.
        """
        import dask.array as da
        from dask.base import tokenize

        shards = self.tiles.shards or self.tiles.chunks
        k = max(1, int(chunk or shards[0]))
        chunks = (k,) + tuple(self.tiles.shape[1:])
        if self._reader is None and self.normalization is None:
            return da.from_zarr(self.tiles, chunks=chunks)
        name = "tilewright-tiles-" + tokenize(str(self.path.resolve()), self.attrs.get("created"), len(self), k,
                                              None if self.normalization is None else self.normalization.to_dict())
        return da.from_array(self, chunks=chunks, name=name, lock=False, fancy=False,
                             meta=np.empty((0, 0, 0, 0), np.uint8))

    def __getstate__(self):
        n = self.normalization
        return {"path": str(self.path), "normalize": None if n is None else n.method,
                "target": None if n is None else n.target}

    def __setstate__(self, state):
        self.__init__(state["path"], normalize=state.get("normalize"), target=state.get("target"))

    def __repr__(self) -> str:
        return (f"TileStore({str(self.path)!r}, tiles={len(self)}, tile={self.tile_size}, "
                f"mpp={self.attrs.get('mpp')})")


def read_complete_attrs(path) -> dict:
    """A complete store's group attributes (one read), or the error that says what is wrong."""
    if not path.exists():
        raise StoreError("no such tile store; run tile-out first", path)
    try:
        meta = read_json(path / "zarr.json")
        if meta.get("zarr_format") != 3 or meta.get("node_type") != "group":
            raise ValueError(f"zarr.json describes a {meta.get('node_type')!r} of zarr format "
                             f"{meta.get('zarr_format')!r}, not a zarr v3 group")
        attrs = dict(meta.get("attributes") or {})
    except (OSError, ValueError, TypeError, AttributeError) as exc:
        raise StoreError(f"not a readable zarr v3 tile store ({exc})", path) from exc
    if attrs.get("format") != FORMAT_NAME:
        raise StoreError(f"not a tilewright tile store (format {attrs.get('format')!r})", path)
    if not attrs.get("complete"):
        raise IncompleteStoreError("the store was never completed (an interrupted write); "
                                   "re-run tile-out to rebuild it", path)
    return attrs


def _is_int(x) -> bool:
    return isinstance(x, (int, np.integer)) and not isinstance(x, (bool, np.bool_))


def open_store(path: str | os.PathLike, *, normalize: str | None = None, target=None) -> TileStore:
    """Open a complete tile store.

    Parameters
    ----------
    path : path
    normalize : {"macenko", "reinhard"}, optional
        Normalize every tile read to ``target`` (a store tiled with ``estimate_stains``: un-normalized
        tiles plus the slide's stain estimate). Tiles as stored when None.
    target : normalizer, dict or path, optional
        A fitted normalizer, its ``to_dict()``, or a JSON file of one (for example a cohort's
        ``stain_target.macenko.json``). Needed with ``normalize``.

    Raises
    ------
    StoreError
        The path is not a tilewright store.
    IncompleteStoreError
        The store was never completed.
    """
    return TileStore(path, normalize=normalize, target=target)
