"""Lossless codecs for stored tiles: bytes per tile against encode/decode CPU time, one thread.

Tiles are 256 px at 0.5 µm/px cut by tilewright from the cached benchmark slide (see
``fixtures.py``): the 256 planned tissue tiles nearest the middle of the plan. Every codec is a
Blosc or zstd configuration that zarr v3 declares in its metadata (any zarr reader decodes it).

Usage: ``.venv/bin/python benchmarks/compression.py``
"""

from __future__ import annotations

import os
import sys
import time
from pathlib import Path

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")
sys.path.insert(0, str(Path(__file__).resolve().parent))

import numpy as np  # noqa: E402

from fixtures import bench_slide  # noqa: E402


def sample_tiles(n=256):
    import tilewright as tw
    from tilewright.run.blocks import iter_tile_blocks

    path = bench_slide()
    with tw.open(path) as slide:
        view = slide.at_mpp(0.5)
        plan = tw.plan_tiles(view, tw.tissue_mask(slide), tile=256)
        mid = len(plan) // 2
        yx = plan.yx[max(0, mid - n // 2): mid + n // 2]
        return np.concatenate([t for _, t in iter_tile_blocks(view, yx, 256, threads=1)])


def main():
    import numcodecs

    numcodecs.blosc.use_threads = False  # one thread, as inside a reader thread
    tiles = sample_tiles()
    raw = tiles[0].nbytes
    print(f"{len(tiles)} tiles of {tiles.shape[1]} px, {raw:,} bytes each; one thread")
    print(f"{'codec':<34}{'bytes/tile':>11}{'% raw':>7}{'encode ms':>11}{'decode ms':>11}")
    configs = [("blosc zstd 1 bitshuffle (default)", dict(cname="zstd", clevel=1, shuffle=2))]
    for cname, level in (("zstd", 1), ("zstd", 3), ("zstd", 5), ("lz4", 5)):
        for shuffle, sname in ((0, "noshuffle"), (2, "bitshuffle")):
            label = f"blosc {cname} {level} {sname}"
            if (cname, level, shuffle) != ("zstd", 1, 2):
                configs.append((label, dict(cname=cname, clevel=level, shuffle=shuffle)))
    codecs = [(label, numcodecs.Blosc(**kw)) for label, kw in configs]
    codecs.append(("zstd 1 (no blosc)", numcodecs.Zstd(level=1)))
    codecs.append(("zstd 3 (no blosc)", numcodecs.Zstd(level=3)))
    for label, codec in codecs:
        t0 = time.process_time()
        enc = [codec.encode(t) for t in tiles]
        te = time.process_time() - t0
        t0 = time.process_time()
        for e in enc:
            codec.decode(e)
        td = time.process_time() - t0
        size = np.mean([len(e) for e in enc])
        print(f"{label:<34}{size:>11,.0f}{100 * size / raw:>7.1f}{1e3 * te / len(tiles):>11.3f}"
              f"{1e3 * td / len(tiles):>11.3f}")


if __name__ == "__main__":
    main()
