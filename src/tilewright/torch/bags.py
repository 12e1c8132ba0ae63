"""Slide-level bags of tiles for multiple-instance learning: one slide an item."""

from __future__ import annotations

import numpy as np

from tilewright.errors import ConfigError
from tilewright.torch.dataset import TileStoreDataset, to_tensor

__all__ = ["SlideBagDataset"]


class SlideBagDataset:
    """Each item is one slide's tiles: all of them, or up to ``max_tiles`` drawn at random.

    Multiple-instance learning trains on a slide's tiles together with the slide's label
    (Ilse, Tomczak & Welling 2018). Tiles of a bag are read in one batched read from the slide's
    store (in store order, which is also the order of their coordinates).

    Parameters
    ----------
    source, labels, label_column, missing, augment, settings, normalize, target
        As for :class:`TileStoreDataset`.
    max_tiles : int, optional
        Draw at most this many tiles of a slide an item, without replacement; the draw depends
        on ``seed``, the epoch (:meth:`set_epoch`) and the slide. None: every tile.
    seed : int
    transform : callable, optional
        Applied to each (T, T, 3) uint8 tile; the results are stacked with ``torch.stack``.
        Default: one (k, 3, T, T) uint8 tensor.

    Items are ``(tiles, label, info)``, or ``(tiles, info)`` without labels: ``tiles`` a (k, 3, T, T)
    tensor, ``info`` ``{"slide_id", "slide", "tiles": (k,) tile indices, "yx": (k, 2) corners in
    target pixels}``. Bags differ in size, so use ``batch_size=1`` (or a collate function of your
    own).

    References
    ----------
    .. [1] M. Ilse, J. M. Tomczak and M. Welling (2018), "Attention-based deep multiple instance
       learning", Proceedings of the 35th International Conference on Machine Learning (ICML),
       PMLR 80:2127-2136 (pages from memory).
    """

    def __init__(self, source, *, labels=None, label_column: str = "label", missing: str = "error",
                 max_tiles: int | None = None, seed: int = 0, transform=None, augment=None, settings="cohort",
                 normalize: str | None = None, target="cohort"):
        if max_tiles is not None and (isinstance(max_tiles, bool) or not isinstance(max_tiles, (int, np.integer))
                                      or max_tiles < 1):
            raise ConfigError(f"max_tiles must be a positive whole number or None, got {max_tiles!r}")
        self.tiles = TileStoreDataset(source, labels=labels, label_column=label_column, missing=missing,
                                      settings=settings, normalize=normalize, target=target)
        self.slide_ids = self.tiles.slide_ids
        self.classes = self.tiles.classes
        self.max_tiles = None if max_tiles is None else int(max_tiles)
        self.seed = int(seed)
        self.epoch = 0
        self.transform = transform
        self.augment = augment

    def set_epoch(self, epoch: int) -> None:
        """Choose the epoch of the tile draw (with ``max_tiles``); call before each epoch."""
        self.epoch = int(epoch)

    def __len__(self) -> int:
        return len(self.slide_ids)

    def tile_indices(self, s: int) -> np.ndarray:
        """Indices (in slide ``s``'s store, sorted) of the tiles of its bag this epoch."""
        n = self.tiles.tiles_per_slide[s]
        if self.max_tiles is None or n <= self.max_tiles:
            return np.arange(n)
        rng = np.random.default_rng([self.seed, self.epoch, s])
        return np.sort(rng.choice(n, size=self.max_tiles, replace=False))

    def __getitem__(self, s: int):
        import torch

        if not 0 <= s < len(self):
            raise IndexError(f"slide {s} out of range for {len(self)} slides")
        idx = self.tile_indices(s)
        store = self.tiles.store(s)
        tiles = store[idx]
        if self.augment is not None:
            tiles = np.stack([self.augment(t) for t in tiles]) if len(tiles) else tiles
        if self.transform is not None:
            images = torch.stack([self.transform(t) for t in tiles]) if len(tiles) else torch.zeros(0)
        else:
            images = to_tensor(tiles)
        info = {"slide_id": self.slide_ids[s], "slide": s, "tiles": torch.from_numpy(idx.astype(np.int64)),
                "yx": torch.from_numpy(np.asarray(store.yx[idx], np.int64).reshape(-1, 2))}
        if self.tiles.slide_labels is None:
            return images, info
        return images, self.tiles.slide_labels[s], info
