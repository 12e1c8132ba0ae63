"""Tile one slide in this fresh process and print ``<n_tiles> <peak RSS KiB>`` (for the caller).

Usage: ``python -m memory_probe SLIDE [THREADS]`` (run from ``benchmarks/``).
"""

import resource
import sys
import tempfile

import tilewright as tw

if __name__ == "__main__":
    threads = int(sys.argv[2]) if len(sys.argv) > 2 else 2
    with tempfile.TemporaryDirectory() as d:
        r = tw.tile_slide(sys.argv[1], d, tw.TilingConfig(mpp=0.5, tile=256, threads=threads))
        print(r.n_tiles, resource.getrusage(resource.RUSAGE_SELF).ru_maxrss)
