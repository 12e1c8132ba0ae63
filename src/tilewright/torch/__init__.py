"""PyTorch side of tilewright (optional extra: ``pip install tilewright[torch]``).

- :class:`TileStoreDataset`: every tile of a cohort, with slide-level labels from a metadata table;
- :class:`SlideTileSampler`: k tiles a slide each epoch, optionally balanced by label, reproducible
  from a seed and the epoch, split over distributed ranks;
- :class:`SlideBagDataset`: one slide's tiles (all, or up to k) an item, for multiple-instance
  learning.

Importing this package does not import torch; items become tensors when they are read.
"""

from tilewright.torch.bags import SlideBagDataset
from tilewright.torch.dataset import TileStoreDataset
from tilewright.torch.labels import read_labels
from tilewright.torch.sampler import SlideTileSampler

__all__ = ["TileStoreDataset", "SlideTileSampler", "SlideBagDataset", "read_labels"]
