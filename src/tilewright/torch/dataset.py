"""A map-style PyTorch dataset over the tiles of one or many tile stores."""

from __future__ import annotations

import os
from bisect import bisect_right

import numpy as np

__all__ = ["TileStoreDataset", "store_paths", "to_tensor"]


def store_paths(source, settings="cohort") -> list[str]:
    """Store paths of a ``*.zarr`` path, a ``tile-out`` output folder, a TileStore, a Cohort or a list.

    A folder serves the stores :func:`tilewright.open_cohort` serves with ``settings`` (by default
    those made with its ``config.toml``; the others are logged with the reason); stores of a list
    must agree with each other (or with ``settings``; None: unchecked).
    """
    return [str(s.path) for s in _stores(source, settings)]


def _stores(source, settings="cohort") -> list:
    """The TileStores of ``source`` (see :func:`store_paths`), each opened once."""
    from tilewright.store.cohort import Cohort, open_cohort
    from tilewright.store.reader import TileStore
    from tilewright.store.selection import check_stores

    if isinstance(source, Cohort):
        return list(source.stores.values())
    if isinstance(source, TileStore):
        return [source]
    if isinstance(source, (str, os.PathLike)):
        if str(source).rstrip("/\\").endswith(".zarr"):
            return [TileStore(source)]
        return list(open_cohort(source, settings=settings).stores.values())  # one metadata read a store
    stores = [p if isinstance(p, TileStore) else TileStore(getattr(p, "path", p)) for p in source]
    check_stores(stores, settings)
    return stores


def to_tensor(tiles: np.ndarray):
    """uint8 tiles (..., T, T, 3) as a channels-first uint8 ``torch.Tensor`` (..., 3, T, T)."""
    import torch

    return torch.from_numpy(np.ascontiguousarray(np.moveaxis(tiles, -1, -3)))


class TileStoreDataset:
    """Every tile of one store, several stores, or a ``tile-out`` output folder.

    Works with ``DataLoader(num_workers>0)``: the dataset holds only paths and small arrays; each
    worker process opens the stores itself on first use, and reads tiles straight from the
    shard files (see :class:`tilewright.store.reader.TileStore`).

    Parameters
    ----------
    source : path, TileStore, Cohort, or list of store paths
        A ``*.zarr`` store, an output folder (its complete stores), or several stores.
    labels : path, DataFrame, Series or dict, optional
        Slide-level labels: a metadata table (CSV/TSV/Parquet or DataFrame) with a ``slide_id``
        column, joined on the slide ids as text, or a dict slide_id → label (see
        :class:`tilewright.torch.labels.SlideLabels` for how labels are encoded).
    label_column : str
        The table's label column (default ``"label"``).
    missing : {"error", "drop"}
        What to do with slides that have no label (default: raise ``ConfigError`` naming them).
    transform : callable, optional
        Applied to the (T, T, 3) uint8 tile; default: a (3, T, T) uint8 ``torch.Tensor``.
    augment : callable, optional
        Applied to the uint8 tile before ``transform`` (e.g. :class:`tilewright.StainJitter`).
    with_info : bool
        Add a third item part: ``{"slide_id", "slide", "tile", "y", "x"}`` (tile corner in target
        pixels).
    settings : "cohort", None, TilingConfig, dict or path
        Which stores to serve: an output folder's stores made with its ``config.toml`` (default;
        see :func:`tilewright.open_cohort`), and a list's stores only when they agree on µm/px,
        tile, normalization and codec (a ``StoreError`` names the one that differs); given
        settings: stores made with them; None: unchecked.
    normalize : {"macenko", "reinhard"}, optional
        Normalize tiles when read (stores tiled with ``estimate_stains``; see
        :func:`tilewright.open_cohort`), before ``augment`` and ``transform``.
    target : "cohort", normalizer, dict or path
        The target of ``normalize``: ``"cohort"`` (default) the median of the served stores' own
        estimates, or a fitted normalizer, its dict or a JSON file of one.

    Items are ``(image, label)`` with labels, else ``(image, (slide_index, tile_index))``; with
    ``with_info`` the info dict follows. Attributes: ``slide_ids``, ``offsets`` (first dataset
    index of each slide), ``slide_labels`` (encoded label of each slide, or None), ``classes``.
    """

    def __init__(self, source, *, labels=None, label_column: str = "label", missing: str = "error",
                 transform=None, augment=None, with_info: bool = False, settings="cohort",
                 normalize: str | None = None, target="cohort"):
        stores = _stores(source, settings)
        self._normalize = self._target = None
        if normalize is not None:
            from tilewright.store.read_normalize import median_target, resolve_target

            self._normalize = str(normalize).lower()
            self._target = (median_target(stores, self._normalize) if target == "cohort"
                            else resolve_target(target, self._normalize))
            stores = [s.normalized(self._normalize, self._target) for s in stores]  # refuses stores it cannot
        self.classes = None
        self.slide_labels = None
        if labels is not None:
            from tilewright.torch.labels import SlideLabels

            table = SlideLabels(labels, [s.slide_id for s in stores], label_column=label_column, missing=missing)
            stores = [s for s, k in zip(stores, table.keep) if k]
            self.slide_labels = table.encoded()
            self.classes = table.classes
        self.paths = [str(s.path) for s in stores]
        self.slide_ids = [s.slide_id for s in stores]
        self.offsets = np.cumsum([0] + [len(s) for s in stores]).tolist()
        self._yx = [s.yx for s in stores] if with_info else None
        self.transform = transform
        self.augment = augment
        self.with_info = with_info
        self._stores = None

    def __len__(self) -> int:
        return self.offsets[-1]

    @property
    def tiles_per_slide(self) -> list[int]:
        return [b - a for a, b in zip(self.offsets[:-1], self.offsets[1:])]

    def locate(self, index: int) -> tuple[int, int]:
        """(slide index, tile index inside that store) of a dataset index."""
        if not 0 <= index < len(self):
            raise IndexError(f"index {index} out of range for {len(self)} tiles")
        s = bisect_right(self.offsets, index) - 1
        return s, index - self.offsets[s]

    def store(self, s: int):
        """The :class:`TileStore` of slide ``s``, opened once per process."""
        from tilewright.store.reader import TileStore

        if self._stores is None:
            self._stores = [None] * len(self.paths)
        if self._stores[s] is None:
            self._stores[s] = TileStore(self.paths[s], normalize=self._normalize, target=self._target)
        return self._stores[s]

    def __getitem__(self, index: int):
        s, t = self.locate(int(index))
        return self._item(s, t, self.store(s)[t])

    def __getitems__(self, indices) -> list:
        """Items of a whole batch (PyTorch's DataLoader calls this when present): the tiles of
        each slide are read with one batched read of its store, then returned in the order asked."""
        where = [self.locate(int(i)) for i in indices]
        tiles: list = [None] * len(where)
        by_slide: dict = {}
        for k, (s, t) in enumerate(where):
            by_slide.setdefault(s, []).append(k)
        for s, ks in by_slide.items():
            for k, tile in zip(ks, self.store(s)[[where[k][1] for k in ks]]):
                tiles[k] = tile
        return [self._item(s, t, tile) for (s, t), tile in zip(where, tiles)]

    def _item(self, s: int, t: int, tile: np.ndarray):
        if self.augment is not None:
            tile = self.augment(tile)
        image = self.transform(tile) if self.transform is not None else to_tensor(tile)
        item = (image, self.slide_labels[s] if self.slide_labels is not None else (s, t))
        if self.with_info:
            y, x = (int(v) for v in self._yx[s][t])
            item += ({"slide_id": self.slide_ids[s], "slide": s, "tile": t, "y": y, "x": x},)
        return item

    def __getstate__(self):
        state = dict(self.__dict__)
        state["_stores"] = None  # each worker opens its own
        return state
