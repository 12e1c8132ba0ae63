"""Random tile reads from a store against the chunk codec alone and zarr-python's own read, one core.

For a store (default: the bench slide tiled by ``tile_slide`` with each codec named on the
command line), on one thread, with the page cache warm and every shard index cached (one pass
over the store first, as after the first minutes of a training run):

codec alone     decode the same chunks' bytes, already in memory, into one preallocated tile;
store[i]        random single-tile reads (``TileStore.__getitem__``: one ``pread``, decode);
store[idx]      batches of 64 random indices;
zarr [i]        zarr-python's ``array[i]`` on the same store;
zarr oindex     zarr-python's ``array.oindex[idx]``, batches of 64 random indices.

Rates are tiles per second of wall-clock time and of this process's CPU time (on a machine shared
with other work the CPU figures are the stable ones), fastest of 5 interleaved rounds. Aims:
store[i] >= 0.25 and store[idx] >= 0.5 of the codec alone (medians over the rounds of CPU rates
measured in the same round).

Usage: ``.venv/bin/python benchmarks/store_reads.py [--codecs lz4,jpeg,webp] [--store PATH]``
"""

from __future__ import annotations

import argparse
import os
import sys
import tempfile
import time
from pathlib import Path

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")
sys.path.insert(0, str(Path(__file__).resolve().parent))

import numpy as np  # noqa: E402

AIMS = {"single": 0.25, "batch": 0.5}


def _timed(fn, count):
    w, c = time.perf_counter(), time.process_time()
    fn()
    return count / (time.perf_counter() - w), count / max(time.process_time() - c, 1e-9)


def measure(path, *, rounds=5, n_single=400, n_batches=8, batch=64, n_zarr=60, seed=0) -> dict:
    """Tiles/s (wall, cpu) of each read on the store at ``path``; see the module docstring.

    Every row runs once a round, in ``rounds`` interleaved rounds (load that drifts hits all rows
    alike). Each row keeps its fastest round; ``ratio_single`` / ``ratio_batch`` are the medians
    over the rounds of the read's CPU rate over the codec's CPU rate in the same round.
    """
    import statistics

    import numcodecs.blosc
    import zarr

    import tilewright as tw

    numcodecs.blosc.use_threads = False  # one core, as zarr itself sets it
    store = tw.open_store(path)
    reader = store._reader
    if reader is None:
        raise SystemExit(f"{path}: not a layout the direct reader knows")
    n = len(store)
    rng = np.random.default_rng(seed)
    store[np.arange(n)]  # warm: page cache and every shard index
    arr = zarr.open_group(str(path), mode="r")["tiles"]
    out = np.empty(reader.layout.tile_shape, np.uint8)
    decode = reader.layout.codec.decode_into
    runs: dict = {}
    for _ in range(rounds):
        single = rng.integers(0, n, n_single)
        batches = rng.integers(0, n, (n_batches, batch))
        chunks = []
        for i in single:  # the same chunks' bytes, read into memory beforehand
            fd = os.open(reader.layout.path(i // reader.layout.shard), os.O_RDONLY)
            chunks.append(os.pread(fd, int(reader._length[i]), int(reader._offset[i])))
            os.close(fd)
        timed = {
            "codec": _timed(lambda: [decode(c, out) for c in chunks], len(chunks)),
            "single": _timed(lambda: [store[int(i)] for i in single], n_single),
            "batch": _timed(lambda: [store[b] for b in batches], n_batches * batch),
            "zarr_single": _timed(lambda: [arr[int(i)] for i in single[:n_zarr]], n_zarr),
            "zarr_batch": _timed(lambda: [arr.oindex[np.unique(b)] for b in batches[:1]], batch),
        }
        for key, value in timed.items():
            runs.setdefault(key, []).append(value)
    rows = {key: (max(v[0] for v in vals), max(v[1] for v in vals)) for key, vals in runs.items()}
    for key in ("single", "batch"):
        rows["ratio_" + key] = statistics.median(a[1] / c[1] for a, c in zip(runs[key], runs["codec"]))
    rows["bytes"] = float(np.mean(reader._length[:n]))
    rows["codec_name"] = reader.layout.codec.name
    return rows


LABELS = [("codec", "chunk codec alone, bytes in memory"), ("single", "store[i], random single tiles"),
          ("batch", "store[idx], batches of 64 random"), ("zarr_single", "zarr-python array[i]"),
          ("zarr_batch", "zarr-python array.oindex[idx], 64")]


def print_table(results: dict, tile_bytes: int) -> list:
    """Print one block of rows per store; return (label, ratio, aim) of the aims."""
    print(f"{'store read (1 thread, warm cache)':<46}{'tiles/s':>9}{'cpu t/s':>9}{'x codec':>8}")
    aims = []
    for name, r in results.items():
        print(f"-- {name}: {r['codec_name']}, {r['bytes']:,.0f} bytes a tile ({100 * r['bytes'] / tile_bytes:.1f} % of raw)")
        for key, label in LABELS:
            wall, cpu = r[key]
            print(f"   {label:<43}{wall:>9.0f}{cpu:>9.0f}{cpu / r['codec'][1]:>8.2f}")
        for key in ("single", "batch"):
            aims.append((f"{name}: {key} read / codec (cpu)", r["ratio_" + key], AIMS[key]))
    return aims


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--codecs", default="lz4,jpeg,webp", help="codecs to tile the bench slide with")
    ap.add_argument("--store", help="measure this store instead")
    args = ap.parse_args(argv)
    import tilewright as tw

    if args.store:
        stores = {Path(args.store).name: Path(args.store)}
    else:
        from fixtures import bench_slide

        tmp = Path(tempfile.mkdtemp(prefix="tw-reads-"))
        stores = {}
        for codec in args.codecs.split(","):
            cfg = tw.TilingConfig(mpp=0.5, tile=256, compression=codec, qc_overlay=False)
            stores[codec] = Path(tw.tile_slide(bench_slide(), tmp / codec, cfg).store)
    results = {name: measure(p) for name, p in stores.items()}
    tile = tw.open_store(next(iter(stores.values()))).tile_size
    for label, value, aim in print_table(results, tile * tile * 3):
        print(f"{label:<42}{value:>7.2f}   aim >= {aim:<5} {'met' if value >= aim else 'MISSED'}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
