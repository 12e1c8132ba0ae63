"""Which tiles an epoch sees: k a slide, optionally balanced by label, split over ranks."""

from __future__ import annotations

import numpy as np

from tilewright.errors import ConfigError

__all__ = ["SlideTileSampler"]


class SlideTileSampler:
    """Draw up to ``tiles_per_slide`` tiles of every slide each epoch, in a shuffled order.

    Use it as the ``sampler`` of a ``DataLoader`` over a :class:`TileStoreDataset` (or anything
    with its ``offsets`` and ``slide_labels``), and call :meth:`set_epoch` before each epoch. The
    epoch's tiles depend only on ``seed`` and the epoch number, so every rank of a distributed run
    computes the same draw and takes its own share; DataLoader workers only fetch the indices
    the sampler yields, so any ``num_workers`` sees the same epoch.

    Parameters
    ----------
    dataset : TileStoreDataset
    tiles_per_slide : int
        k: tiles drawn from each slide an epoch, without replacement (all of a slide's tiles when
        it has fewer).
    balance : bool
        Give every label the same number of tiles an epoch: each label's draw is cut at random to
        the smallest label's total (needs a dataset with labels). No tile is repeated.
    seed : int
    rank, world_size : int
        This process's share of a distributed run: the epoch's list is cut to a multiple of
        ``world_size`` (at most ``world_size - 1`` tiles left out), then rank ``r`` takes every
        ``world_size``-th tile from position ``r``. Ranks get equal, disjoint shares.

    Examples
    --------
    >>> sampler = SlideTileSampler(ds, tiles_per_slide=64, balance=True, seed=1)  # doctest: +SKIP
    >>> loader = DataLoader(ds, batch_size=128, sampler=sampler, num_workers=4)  # doctest: +SKIP
    >>> for epoch in range(10):  # doctest: +SKIP
    ...     sampler.set_epoch(epoch)
    ...     for images, labels in loader: ...
    """

    def __init__(self, dataset, tiles_per_slide: int, *, balance: bool = False, seed: int = 0,
                 rank: int = 0, world_size: int = 1):
        k = tiles_per_slide
        if isinstance(k, bool) or not isinstance(k, (int, np.integer)) or k < 1:
            raise ConfigError(f"tiles_per_slide must be a positive whole number, got {k!r}")
        if not (isinstance(world_size, (int, np.integer)) and world_size >= 1 and 0 <= rank < world_size):
            raise ConfigError(f"need 0 <= rank < world_size, got rank {rank!r}, world_size {world_size!r}")
        self.offsets = np.asarray(dataset.offsets, dtype=np.int64)
        self.labels = getattr(dataset, "slide_labels", None)
        if balance and self.labels is None:
            raise ConfigError("balance=True needs slide labels: build the dataset with labels=")
        self.k = int(k)
        self.balance = bool(balance)
        self.seed = int(seed)
        self.rank = int(rank)
        self.world_size = int(world_size)
        self.epoch = 0

    def set_epoch(self, epoch: int) -> None:
        """Choose the epoch whose draw :meth:`__iter__` yields."""
        self.epoch = int(epoch)

    def epoch_indices(self, epoch: int | None = None) -> np.ndarray:
        """The whole epoch's dataset indices for all ranks, in order (before the rank split)."""
        epoch = self.epoch if epoch is None else int(epoch)
        rng = np.random.default_rng([self.seed, epoch])
        sizes = np.diff(self.offsets)
        draws = [self.offsets[s] + np.sort(rng.choice(n, size=min(self.k, n), replace=False)) if n else
                 np.zeros(0, np.int64) for s, n in enumerate(sizes)]
        if self.balance:
            by_label: dict = {}
            for s, d in enumerate(draws):
                by_label.setdefault(self.labels[s], []).append(d)
            pools = [np.concatenate(v) for _, v in sorted(by_label.items(), key=lambda kv: str(kv[0]))]
            m = min(len(p) for p in pools)
            draws = [rng.permutation(p)[:m] for p in pools]
        everything = np.concatenate(draws) if draws else np.zeros(0, np.int64)
        return rng.permutation(everything)

    def _share(self, indices: np.ndarray) -> np.ndarray:
        usable = len(indices) // self.world_size * self.world_size
        return indices[self.rank:usable:self.world_size]

    def __iter__(self):
        return iter(self._share(self.epoch_indices()).tolist())

    def __len__(self) -> int:
        sizes = np.minimum(np.diff(self.offsets), self.k)
        if self.balance:
            totals: dict = {}
            for s, n in enumerate(sizes):
                totals[self.labels[s]] = totals.get(self.labels[s], 0) + int(n)
            total = min(totals.values()) * len(totals) if totals else 0
        else:
            total = int(sizes.sum())
        return total // self.world_size
