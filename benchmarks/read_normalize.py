"""What normalizing when reading costs: CPU per tile of reading a store alone, and reading it with
Macenko or Reinhard applied (``open_store(..., normalize=...)``).

The bench slide is tiled once with ``estimate_stains`` (un-normalized tiles, the slide's stain
estimates); the cohort target is fitted on the same slide. Rows are interleaved over ``--rounds``
rounds; each reads every tile in batches of 64 (what a DataLoader batch of one slide reads) and
256 random single tiles, in this process on one thread. CPU seconds from ``time.process_time``.

Usage: ``.venv/bin/python benchmarks/read_normalize.py [--rounds 5]``
"""

from __future__ import annotations

import argparse
import shutil
import statistics
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))

from fixtures import bench_slide  # noqa: E402


def cpu_per_tile(store, batch: int = 64, singles: int = 256, seed: int = 0) -> tuple[float, float]:
    """(µs of CPU a tile read in batches, µs a random single tile)."""
    n = len(store)
    c0 = time.process_time()
    for a in range(0, n, batch):
        store[a:a + batch]
    batched = (time.process_time() - c0) / n * 1e6
    idx = np.random.default_rng(seed).integers(0, n, singles)
    c0 = time.process_time()
    for i in idx:
        store[int(i)]
    single = (time.process_time() - c0) / singles * 1e6
    return batched, single


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rounds", type=int, default=5)
    args = ap.parse_args(argv)

    import cv2

    import tilewright as tw
    from tilewright.stain.registry import make_transfer

    cv2.setNumThreads(1)
    slide = bench_slide()
    tmp = Path(tempfile.mkdtemp(prefix="tilewright-read-normalize-"))
    try:
        res = tw.tile_slide(slide, tmp / "s.zarr", tw.TilingConfig(mpp=0.5, estimate_stains=True, threads=1))
        plain = tw.open_store(res.store)
        sample = plain[np.linspace(0, len(plain) - 1, 64).astype(int)]
        readers = {"read alone": plain}
        for method in ("macenko", "reinhard"):
            target = make_transfer(method).fit(sample).to_dict()
            readers[f"read + {method}"] = tw.open_store(res.store, normalize=method, target=target)
        for r in readers.values():
            r[:64]  # shard index and colour tables loaded once
        rows = {k: [] for k in readers}
        for _ in range(args.rounds):
            for name, r in readers.items():
                rows[name].append(cpu_per_tile(r))
    finally:
        shutil.rmtree(tmp, ignore_errors=True)

    base = statistics.median(b for b, _ in rows["read alone"])
    base1 = statistics.median(s for _, s in rows["read alone"])
    print(f"{len(plain)} tiles of {plain.tile_size} px ({plain.attrs['compression']['codec']}), {args.rounds} rounds, "
          "median CPU µs a tile (one thread)")
    print(f"  {'':22s} {'batches of 64':>14s} {'x read':>7s} {'random single':>14s} {'x read':>7s}")
    for name, vals in rows.items():
        b = statistics.median(v[0] for v in vals)
        s = statistics.median(v[1] for v in vals)
        print(f"  {name:22s} {b:14.0f} {b / base:7.2f} {s:14.0f} {s / base1:7.2f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
