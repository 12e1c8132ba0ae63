"""What the source digests cost: the sampled digest (always), the full SHA-256 (``--source-digest
full``), alone and inside ``tile_slide``.

Rows: the sampled digest of the bench slide; the full SHA-256 as tilewright streams it (read-ahead
thread + hashing); a plain one-thread ``hashlib`` loop over the same file for comparison; and
``tile_slide`` with ``source_digest="sampled"`` and ``"full"``, interleaved over ``--rounds``
rounds. CPU seconds come from ``time.process_time`` (this process, all threads); wall seconds from
``time.perf_counter``. The file is in the page cache after the first round (a cold read from a
network file system adds its transfer time to the full digest only).

Usage: ``.venv/bin/python benchmarks/source_digest.py [--width 24576] [--height 20480] [--rounds 3]``
"""

from __future__ import annotations

import argparse
import hashlib
import shutil
import statistics
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

from fixtures import bench_slide  # noqa: E402


def timed(fn):
    c0, t0 = time.process_time(), time.perf_counter()
    value = fn()
    return value, time.process_time() - c0, time.perf_counter() - t0


def plain_sha256(path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(8 << 20), b""):
            h.update(block)
    return h.hexdigest()


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--width", type=int, default=24576)
    ap.add_argument("--height", type=int, default=20480)
    ap.add_argument("--rounds", type=int, default=3)
    args = ap.parse_args(argv)

    import tilewright as tw
    from tilewright.store.provenance import file_sha256, sampled_digest

    slide = bench_slide(args.width, args.height)
    mb = slide.stat().st_size / 1e6
    rows: dict[str, list] = {k: [] for k in ("sampled", "full", "plain", "tile sampled", "tile full")}
    tmp = Path(tempfile.mkdtemp(prefix="tilewright-digest-bench-"))
    try:
        for _ in range(args.rounds):
            rows["sampled"].append(timed(lambda: sampled_digest(slide))[1:])
            full = timed(lambda: file_sha256(slide))
            plain = timed(lambda: plain_sha256(slide))
            assert full[0] == plain[0]
            rows["full"].append(full[1:])
            rows["plain"].append(plain[1:])
            for kind in ("sampled", "full"):
                cfg = tw.TilingConfig(mpp=0.5, qc_overlay=True, source_digest=kind)
                out = tmp / kind
                shutil.rmtree(out, ignore_errors=True)
                rows[f"tile {kind}"].append(timed(lambda: tw.tile_slide(slide, out, cfg))[1:])
    finally:
        shutil.rmtree(tmp, ignore_errors=True)

    print(f"slide {slide.name}: {mb:.0f} MB, {args.rounds} rounds (median CPU s, median wall s)")
    for name, label in (("sampled", "sampled digest (16 x 1 MiB)"),
                        ("full", "full SHA-256, read-ahead thread + hashing"),
                        ("plain", "full SHA-256, plain hashlib loop"),
                        ("tile sampled", "tile_slide, source_digest = sampled"),
                        ("tile full", "tile_slide, source_digest = full")):
        cpu = statistics.median(r[0] for r in rows[name])
        wall = statistics.median(r[1] for r in rows[name])
        rate = f"{mb / cpu:7.0f} MB/CPU-s" if name in ("full", "plain") else ""
        print(f"  {label:45s} {cpu:7.3f} {wall:7.3f} {rate}")
    ratio_cpu = statistics.median(f[0] / s[0] for f, s in zip(rows["tile full"], rows["tile sampled"]))
    ratio_wall = statistics.median(f[1] / s[1] for f, s in zip(rows["tile full"], rows["tile sampled"]))
    print(f"  tile_slide full / sampled: CPU x{ratio_cpu:.2f}, wall x{ratio_wall:.2f} (median of per-round ratios)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
