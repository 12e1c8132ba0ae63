"""Tile one slide in this fresh process and print ``<n_tiles> <peak RSS KiB>`` (for the caller).

Usage: ``python -m memory_probe SLIDE [THREADS] [QC_OVERLAY 1|0]`` (run from ``benchmarks/``).
"""

import resource
import sys
import tempfile

import tilewright as tw

if __name__ == "__main__":
    threads = int(sys.argv[2]) if len(sys.argv) > 2 else 2
    overlay = sys.argv[3] != "0" if len(sys.argv) > 3 else True
    with tempfile.TemporaryDirectory() as d:
        cfg = tw.TilingConfig(mpp=0.5, tile=256, threads=threads, qc_overlay=overlay)
        r = tw.tile_slide(sys.argv[1], d, cfg)
        print(r.n_tiles, resource.getrusage(resource.RUSAGE_SELF).ru_maxrss)
