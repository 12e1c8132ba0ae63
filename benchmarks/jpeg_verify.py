"""Cost of checking JPEG tiles for a desynchronized entropy-coded stream.

Decodes every level-0 tile of a generated 4096 x 4096 JPEG q90 slide (the demo writer: YCbCr
4:2:0, as scanners commonly store) and of the same pixels stored as YCbCr 4:4:4, through the
tiff backend's tile decoder, three ways, in one process:

- ``plain``: decode only (no check);
- ``probes``: decode plus the two probe decodes of :func:`tilewright.slide.jpeg_check.jpeg_in_sync`
  (the reference check);
- ``sentinel``: the sentinel check alone (one decode of the sentinel-extended stream for 4:4:4; a
  plain decode plus a 1/8-scale grey decode of the extended stream for 4:2:0);
- ``default``: what the backend does by default: the sentinel for 4:4:4, a strict decode
  (libjpeg warnings as errors, :mod:`tilewright.slide.jpeg_strict`) for 4:2:0.

Prints source MP/s and the cost of each check in % of the plain decode, then (``--agreement``)
the verdicts on seeded single-byte damage: the probe check, the sentinel, the strict decode and
the default path on 1000 damaged tiles a slide, and OpenSlide's verdict (libjpeg warnings are
errors there) on the first 300.
Run: ``.venv/bin/python benchmarks/jpeg_verify.py [--agreement]``.
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


def _agreement(path: Path, trials: int = 1000, with_openslide: int = 300) -> None:
    """Count the verdicts of the probes, the sentinel and OpenSlide on seeded damaged tiles."""
    from collections import Counter

    import numpy as np
    import openslide

    from tilewright.slide.jpeg_check import entropy_bounds, jpeg_in_sync
    from tilewright.slide.jpeg_strict import complete_stream, decode_strict
    from tilewright.slide.tiff_backend import TiffBackend

    backend = TiffBackend(str(path))
    lv = backend._levels[0]
    original = path.read_bytes()
    rng = np.random.default_rng(7)
    counts = Counter()
    probe = lv.decode if lv.jpeg is None else (lambda d: backend._decode(lv, d, 0).copy())
    for trial in range(trials):
        i = int(rng.integers(len(lv.offsets)))
        o, n = int(lv.offsets[i]), int(lv.counts[i])
        tile = bytearray(original[o:o + n])
        start, end = entropy_bounds(bytes(tile))
        tile[start + int(rng.integers(end - start))] ^= [0xFF, 1 << int(rng.integers(8)),
                                                         int(rng.integers(1, 255))][trial % 3]
        tile = bytes(tile)
        try:
            plain = probe(tile)
        except Exception:  # noqa: BLE001 - the decoder itself refuses
            counts["decoder error"] += 1
            continue
        probes_ok = jpeg_in_sync(tile, plain, probe)
        sentinel_ok = _sentinel_only(backend, lv, tile)
        strict_ok = decode_strict(complete_stream(tile, lv.jpegtables), np.empty((lv.tile_h, lv.tile_w, 3),
                                                                                np.uint8)) is not None
        try:
            default_ok = backend._decode_verified(lv, tile, i)[1]
        except Exception:  # noqa: BLE001 - refused by the decoder: counts as refused
            default_ok = False
        key = (f"probes {'pass' if probes_ok else 'REFUSE'}, sentinel {'pass' if sentinel_ok else 'fail'}, "
               f"strict {'pass' if strict_ok else 'fail'}, default {'pass' if default_ok else 'REFUSE'}")
        if trial < with_openslide:
            bad = path.with_name("damaged.tif")
            bad.write_bytes(original[:o] + tile + original[o + n:])
            s = openslide.OpenSlide(str(bad))
            r, c = divmod(i, lv.grid_w)
            try:
                s.read_region((c * lv.tile_w, r * lv.tile_h), 0, (lv.tile_w, lv.tile_h))
                key += ", OpenSlide pass"
            except openslide.OpenSlideError:
                key += ", OpenSlide REFUSE"
            s.close()
        counts[key] += 1
    backend.close()
    for key, v in sorted(counts.items()):
        print(f"  {v:5d}  {key}")


def _sentinel_only(backend, lv, tile) -> bool:
    """The sentinel's own verdict (without the probe check that settles its failures)."""
    import imagecodecs

    from tilewright.slide.jpeg_sentinel import (
        header_length,
        reduced_sentinel_intact,
        sentinel_intact,
        sentinel_plan,
        sentinel_stream,
    )

    plan = sentinel_plan(tile[:header_length(tile)], lv.jpegtables)
    ext = None if plan is None else sentinel_stream(tile, plan)
    if ext is None:
        return False
    if plan.vertical:
        return reduced_sentinel_intact(ext, lv.jpegtables, plan)
    try:
        out = imagecodecs.jpeg_decode(ext, tables=lv.jpegtables, colorspace=lv.jpeg[0], outcolorspace=lv.jpeg[1])
    except Exception:  # noqa: BLE001
        return False
    return sentinel_intact(out[plan.real_rows:], 8, plan.grey_step)


def main() -> int:
    import tilewright.slide.jpeg_strict as strict
    from tilewright.slide.tiff_backend import TiffBackend
    from tilewright.slide.tile_grid import _jpeg_intact

    available = strict.available

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
                strict.available = lambda: False
                try:
                    assert backend._decode_verified(lv, data, i)[1]
                finally:
                    strict.available = available

            def default(i, data):
                assert backend._decode_verified(lv, data, i)[1]

            best = _times({"plain": plain, "probes": probes, "sentinel": sentinel, "default": default}, tiles)
            for name, (t, ratio) in best.items():
                print(f"{label:<14}{name:<10}{mp / t:8.1f}{(ratio - 1) * 100:+14.1f}%")
            backend.close()
        if "--agreement" in sys.argv:
            for label, path in slides.items():
                print(f"{label}: verdicts on 1000 tiles with one damaged byte (OpenSlide on the first 300)")
                _agreement(path)
    return 0


if __name__ == "__main__":
    sys.exit(main())
