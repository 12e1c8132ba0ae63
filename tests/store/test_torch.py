"""The optional PyTorch dataset: every tile once per epoch with worker processes."""

import numpy as np
import pytest

from tilewright.store.writer import StoreWriter

torch = pytest.importorskip("torch", reason="optional extra 'torch' not installed")


def _store(path, n, seed):
    tiles = np.random.default_rng(seed).integers(0, 256, (n, 16, 16, 3), dtype=np.uint8)
    tiles[:, 0, 0, 0] = np.arange(n)  # mark each tile
    tiles[:, 0, 0, 1] = seed
    with StoreWriter(path, n, 16, shard_tiles=4) as w:
        w.append(tiles, np.zeros((n, 2)), np.zeros((n, 2)), np.ones(n), np.ones(n))
        w.commit({"slide_id": path.stem}, np.zeros((2, 2, 3), np.uint8), np.ones((2, 2), bool))
    return tiles


def test_dataloader_two_workers_every_tile_once(tmp_path):
    from torch.utils.data import DataLoader

    from tilewright.torch import TileStoreDataset

    a = _store(tmp_path / "a.zarr", 9, 1)
    b = _store(tmp_path / "b.zarr", 6, 2)
    ds = TileStoreDataset([tmp_path / "a.zarr", tmp_path / "b.zarr"])
    assert len(ds) == 15  # ground truth: 9 + 6 tiles written above
    seen = []
    loader = DataLoader(ds, batch_size=4, shuffle=True, num_workers=2,
                        generator=torch.Generator().manual_seed(0))
    for images, (slide, tile) in loader:
        assert images.shape[1:] == (3, 16, 16) and images.dtype == torch.uint8
        for img, s, t in zip(images, slide.tolist(), tile.tolist()):
            ref = (a, b)[s][t]  # ground truth: the arrays written above
            np.testing.assert_array_equal(img.permute(1, 2, 0).numpy(), ref)
            seen.append((s, t))
    assert sorted(seen) == [(0, i) for i in range(9)] + [(1, i) for i in range(6)]
