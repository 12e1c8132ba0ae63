"""A map-style PyTorch dataset over tile stores (optional extra: ``pip install tilewright[torch]``).

Works with ``DataLoader(num_workers>0)``: the dataset holds only paths and small index arrays;
each worker opens the zarr stores itself on first use.
"""

from __future__ import annotations

import os
from bisect import bisect_right

import numpy as np

__all__ = ["TileStoreDataset"]


class TileStoreDataset:
    """Every tile of one store, several stores, or a ``tile-out`` output folder.

    Parameters
    ----------
    source : path, TileStore, Cohort, or list of store paths
        A ``*.zarr`` store, an output folder (its complete stores), or several stores.
    labels : dict, optional
        slide_id → label (int, or anything ``transform_target`` handles); returned beside the tile.
    transform : callable, optional
        Applied to the (T, T, 3) uint8 tile; default: a (3, T, T) uint8 ``torch.Tensor``.
    augment : callable, optional
        Applied to the uint8 tile before ``transform`` (e.g. :class:`tilewright.StainJitter`).

    Items are ``(image, label)`` when ``labels`` is given, else ``(image, (slide_index, tile_index))``.
    """

    def __init__(self, source, *, labels=None, transform=None, augment=None):
        from tilewright.store.cohort import Cohort, open_cohort
        from tilewright.store.reader import TileStore

        if isinstance(source, Cohort):
            paths = [str(s.path) for s in source.stores.values()]
        elif isinstance(source, TileStore):
            paths = [str(source.path)]
        elif isinstance(source, (str, os.PathLike)) and not str(source).rstrip("/").endswith(".zarr"):
            paths = [str(s.path) for s in open_cohort(source).stores.values()]
        elif isinstance(source, (str, os.PathLike)):
            paths = [str(source)]
        else:
            paths = [str(getattr(p, "path", p)) for p in source]
        self.paths = paths
        stores = [TileStore(p) for p in paths]
        self.slide_ids = [s.slide_id for s in stores]
        self.offsets = np.cumsum([0] + [len(s) for s in stores]).tolist()
        self.labels = labels
        self.transform = transform
        self.augment = augment
        self._stores = None

    def __len__(self) -> int:
        return self.offsets[-1]

    def locate(self, index: int) -> tuple[int, int]:
        """(slide index, tile index inside that store) of a dataset index."""
        if not 0 <= index < len(self):
            raise IndexError(f"index {index} out of range for {len(self)} tiles")
        s = bisect_right(self.offsets, index) - 1
        return s, index - self.offsets[s]

    def __getitem__(self, index: int):
        from tilewright.store.reader import TileStore

        if self._stores is None:  # opened lazily, once per worker process
            self._stores = [TileStore(p) for p in self.paths]
        s, t = self.locate(int(index))
        tile = np.asarray(self._stores[s][t])
        if self.augment is not None:
            tile = self.augment(tile)
        image = self.transform(tile) if self.transform is not None else _to_tensor(tile)
        if self.labels is not None:
            return image, self.labels[self.slide_ids[s]]
        return image, (s, t)

    def __getstate__(self):
        state = dict(self.__dict__)
        state["_stores"] = None
        return state


def _to_tensor(tile: np.ndarray):
    import torch

    return torch.from_numpy(np.ascontiguousarray(tile.transpose(2, 0, 1)))
