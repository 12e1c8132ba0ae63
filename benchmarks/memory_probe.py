"""Tile one slide in this fresh process (as tile-out does) and print ``<n_tiles> <peak RSS KiB>`` (for the caller).

The peak is ``VmHWM`` of ``/proc/self/status`` (this process image only). ``ru_maxrss`` is not used:
on Linux it keeps the high-water mark of the parent at ``fork`` across ``exec``, so a child of a
large benchmark process would report the parent's size.

Usage: ``python -m memory_probe SLIDE [THREADS] [QC_OVERLAY 1|0]`` (run from ``benchmarks/``).
"""

import resource
import sys


def peak_rss_kib() -> int:
    try:
        with open("/proc/self/status") as fh:
            for line in fh:
                if line.startswith("VmHWM:"):
                    return int(line.split()[1])
    except OSError:
        pass
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss  # other systems: KiB on Linux/BSD

import tempfile

import tilewright as tw

if __name__ == "__main__":
    threads = int(sys.argv[2]) if len(sys.argv) > 2 else 2
    overlay = sys.argv[3] != "0" if len(sys.argv) > 3 else True
    with tempfile.TemporaryDirectory() as d:
        cfg = tw.TilingConfig(mpp=0.5, tile=256, threads=threads, qc_overlay=overlay)
        (r,) = tw.tile_cohort([sys.argv[1]], d, cfg, workers=1, progress=False)  # what tile-out runs
        print(r.n_tiles, peak_rss_kib())
