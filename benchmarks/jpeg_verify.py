"""Cost of checking JPEG tiles for a desynchronized entropy-coded stream.

Decodes every level-0 tile of a generated 4096 x 4096 JPEG q90 slide (the demo writer: YCbCr
4:2:0, as scanners commonly store) and of the same pixels stored as YCbCr 4:4:4, through the
tiff backend's tile decoder, three ways, in one process:

- ``plain``: decode only (no check);
- ``probes``: decode plus the two probe decodes of :func:`tilewright.slide.jpeg_check.jpeg_in_sync`
  (the reference check);
- ``sentinel``: the default check (one decode of the sentinel-extended stream for 4:4:4; a plain
  decode plus a 1/8-scale grey decode of the extended stream for 4:2:0).

Prints source MP/s and the cost of each check in % of the plain decode. Run:
``.venv/bin/python benchmarks/jpeg_verify.py``.
"""

from __future__ import annotations

import sys
import tempfile
import time
from pathlib import Path


def _slides(folder: Path):
    import tifffile

    from tilewright.demo.pyramid import write_pyramid
    from tilewright.demo.synth import random_layout

    side, mpp = 4096, 0.25
    sub420 = folder / "q90_420.tif"
    lay = random_layout(side * mpp, side * mpp, seed=3, n_islands=3)
    write_pyramid(sub420, lay.renderer(mpp), shape=(side, side), mpp=mpp, tile=256, quality=90)
    with tifffile.TiffFile(sub420) as tf:
        pixels = tf.series[0].levels[0].asarray()
    sub444 = folder / "q90_444.tif"
    tifffile.imwrite(sub444, pixels, tile=(256, 256), photometric="rgb", compression="jpeg",
                     compressionargs={"level": 90}, subsampling=(1, 1))
    return {"YCbCr 4:2:0": sub420, "YCbCr 4:4:4": sub444}


def _times(fns, tiles, rounds=9):
    """Per method: best time, and the median over interleaved rounds of its time / plain's time
    in the same round (robust to the load of a shared machine drifting between rounds)."""
    import statistics

    best = {name: float("inf") for name in fns}
    ratios = {name: [] for name in fns}
    for _ in range(rounds):
        this = {}
        for name, fn in fns.items():
            t0 = time.perf_counter()
            for i, data in tiles:
                fn(i, data)
            this[name] = time.perf_counter() - t0
            best[name] = min(best[name], this[name])
        for name in fns:
            ratios[name].append(this[name] / this["plain"])
    return {name: (best[name], statistics.median(ratios[name])) for name in fns}


def main() -> int:
    from tilewright.slide.tiff_backend import TiffBackend, _jpeg_intact

    with tempfile.TemporaryDirectory() as tmp:
        slides = _slides(Path(tmp))
        print(f"{'slide':<14}{'method':<10}{'MP/s':>8}{'cost vs plain':>15}")
        for label, path in slides.items():
            backend = TiffBackend(str(path), verify_jpeg=True)
            lv = backend._levels[0]
            tiles = [(i, backend._pread(int(n), int(o)))
                     for i, (o, n) in enumerate(zip(lv.offsets, lv.counts)) if n]
            mp = len(tiles) * lv.tile_h * lv.tile_w / 1e6

            def plain(i, data):
                backend._decode(lv, data, i)

            def probes(i, data):
                seg = backend._decode(lv, data, i)
                assert _jpeg_intact(lv, i, data, seg)

            def sentinel(i, data):
                assert backend._decode_verified(lv, data, i)[1]

            best = _times({"plain": plain, "probes": probes, "sentinel": sentinel}, tiles)
            for name, (t, ratio) in best.items():
                print(f"{label:<14}{name:<10}{mp / t:8.1f}{(ratio - 1) * 100:+14.1f}%")
            backend.close()
    return 0


if __name__ == "__main__":
    sys.exit(main())
