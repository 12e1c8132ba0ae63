"""Tiles and stores built at test time for the store tests."""

import numpy as np

from tilewright.store.writer import StoreWriter


def smooth_tiles(n, t=40, seed=0):
    """Tiles with smooth structure plus noise (an image codec must see an image, not white noise)."""
    rng = np.random.default_rng(seed)
    yy, xx = np.mgrid[0:t, 0:t]
    base = rng.integers(40, 215, (n, 1, 1, 3))
    wave = (25 * np.sin(xx / 5.0 + rng.uniform(0, 6, (n, 1, 1)))[..., None]
            * np.cos(yy / 7.0)[None, ..., None])
    return np.clip(base + wave + rng.normal(0, 4, (n, t, t, 3)), 0, 255).astype(np.uint8)


def write_store(path, tiles, shard=4, compression="lz4", yx=None, slide_id=None, **kw):
    """A complete store of ``tiles`` (appended in batches of 5, which straddle shards)."""
    n = len(tiles)
    yx = np.zeros((n, 2), np.int64) if yx is None else np.asarray(yx)
    with StoreWriter(path, n, tiles.shape[1], shard_tiles=shard, compression=compression, **kw) as w:
        for a in range(0, n, 5):
            k = len(tiles[a:a + 5])
            w.append(tiles[a:a + 5], yx[a:a + 5], yx[a:a + 5] * 2, np.ones(k), np.ones(k))
        w.commit({"slide_id": slide_id or path.stem}, np.zeros((2, 2, 3), np.uint8), np.ones((2, 2), bool))
    return path
