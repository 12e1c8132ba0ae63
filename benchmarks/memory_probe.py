"""Tile one slide in this fresh process (for peak-RSS measurement by the caller)."""

import resource
import sys
import tempfile

import tilewright as tw

if __name__ == "__main__":
    with tempfile.TemporaryDirectory() as d:
        r = tw.tile_slide(sys.argv[1], d, tw.TilingConfig(mpp=0.5, tile=256, threads=int(sys.argv[2]) if len(sys.argv) > 2 else 2))
        print(r.n_tiles, resource.getrusage(resource.RUSAGE_SELF).ru_maxrss)
