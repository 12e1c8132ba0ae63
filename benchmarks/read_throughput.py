"""Read throughput: tilewright views against raw decode and the hand-written OpenSlide loop.

Writes a synthetic 0.25 µm/px ("40x", common practice) JPEG pyramid (default 16384 x 16384,
256 px tiles, levels at downsample 1, 4, 16, ... as Aperio-style files have, so that a
0.5 µm/px read must be computed from level 0), then prints, in MP/s of level-0 pixels, on
one thread:

(a) tifffile decoding every level-0 tile (the decode limit);
(b) the loop people write by hand: OpenSlide ``read_region`` of 512 x 512 at level 0 per
    tile, resized to 256 x 256 with OpenCV ``INTER_AREA``;
(c) ``tw.open(...).at_mpp(0.5)`` read in large blocks (``view.iter_blocks(2048)``);
(d) as (c) but with the slide declared 0.2527 µm/px, so the factor is non-integer (1.9786);

and the ratios c/b and c/a. Each figure is given twice: per wall-clock second and per
CPU second of this process. On a machine shared with other work the CPU-second figures are
the stable ones (wall clock includes time the process waited for a core). Usage::

    python benchmarks/read_throughput.py [--size 16384] [--keep PATH]
"""

from __future__ import annotations

import argparse
import os
import sys
import tempfile
import time

import numpy as np


def _set_one_thread():
    for var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
        os.environ.setdefault(var, "1")
    import cv2

    cv2.setNumThreads(1)


def tissue_renderer(seed: int = 0):
    """A fast H&E-like texture: smooth blobs of pink/purple over white, plus grain."""
    import cv2

    rng = np.random.default_rng(seed)
    n = 2048
    field = cv2.GaussianBlur(rng.random((n, n), np.float32), (0, 0), 24)
    field = (field - field.min()) / (field.max() - field.min())
    nuclei = cv2.GaussianBlur((rng.random((n, n)) > 0.995).astype(np.float32), (0, 0), 3)
    nuclei = np.clip(nuclei * 12, 0, 1)
    tissue = field > 0.35
    base = np.array([236, 234, 238], np.float32)
    eosin = np.array([222, 150, 190], np.float32)
    hema = np.array([90, 60, 140], np.float32)
    img = np.where(tissue[..., None], eosin, base) * (1 - nuclei[..., None]) \
        + hema * nuclei[..., None] * tissue[..., None] + base * nuclei[..., None] * ~tissue[..., None]
    img += rng.normal(0, 6, img.shape).astype(np.float32)
    texture = np.clip(img, 0, 255).astype(np.uint8)

    def render(y, x, h, w):
        ys = (np.arange(y, y + h) * 7 // 5) % n
        xs = (np.arange(x, x + w) + (y // n) * 613) % n
        return texture[ys][:, xs]

    return render


class _Clock:
    """Wall-clock and process CPU time of a block."""

    def __enter__(self):
        self.w, self.c = time.perf_counter(), time.process_time()
        return self

    def __exit__(self, *exc):
        self.wall = time.perf_counter() - self.w
        self.cpu = time.process_time() - self.c


def bench_tifffile_decode(path):
    import tifffile

    with tifffile.TiffFile(path) as tf:
        page = tf.pages[0]
        with _Clock() as clk:
            for _seg, _idx, _shape in page.segments(maxworkers=1):
                pass
        return page.imagelength * page.imagewidth, clk


def bench_openslide_loop(path):
    import cv2
    import openslide

    slide = openslide.OpenSlide(path)
    W, H = slide.dimensions
    n = 0
    with _Clock() as clk:
        for y in range(0, H - 511, 512):
            for x in range(0, W - 511, 512):
                rgba = np.asarray(slide.read_region((x, y), 0, (512, 512)))
                tile = cv2.resize(rgba[..., :3], (256, 256), interpolation=cv2.INTER_AREA)
                n += 1
    slide.close()
    assert tile.shape == (256, 256, 3)
    return n * 512 * 512, clk


def bench_view(path, mpp=None, block=2048):
    import tilewright as tw

    with tw.open(path, mpp=mpp) as slide:
        view = slide.at_mpp(0.5, tolerance=0.0)
        H, W = slide.dimensions
        with _Clock() as clk:
            for _y, _x, arr in view.iter_blocks(block):
                pass
        assert view.source_level == 0 and arr.dtype == np.uint8
        return H * W, clk, view


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--size", type=int, default=16384, help="level-0 side in px (>= 16384)")
    ap.add_argument("--keep", help="write the slide here and keep it")
    args = ap.parse_args(argv)
    _set_one_thread()
    from tilewright.demo.pyramid import write_pyramid

    tmp = None
    path = args.keep
    if path is None:
        tmp = tempfile.TemporaryDirectory()
        path = os.path.join(tmp.name, "bench.svs")
    S = args.size
    if not os.path.exists(path):
        t = time.perf_counter()
        write_pyramid(path, tissue_renderer(), shape=(S, S), mpp=0.25, tile=256,
                      compression="jpeg", quality=90, factor=4, layout="svs", objective=40,
                      strip_rows=1024)
        print(f"wrote {S} x {S} JPEG pyramid ({os.path.getsize(path) / 1e6:.0f} MB) "
              f"in {time.perf_counter() - t:.1f} s")
    rows = {}

    def show(key, label, px, clk):
        rows[key] = (px / clk.wall / 1e6, px / clk.cpu / 1e6)
        w, c = rows[key]
        print(f"{label:<52} {w:7.1f} MP/s wall {c:7.1f} MP/s cpu  ({clk.wall:.2f} s)")

    show("a", "(a) tifffile decode of every level-0 tile", *bench_tifffile_decode(path))
    show("b", "(b) OpenSlide 512 px read + resize to 256, per tile", *bench_openslide_loop(path))
    px, clk, view = bench_view(path)
    show("c", f"(c) at_mpp(0.5) iter_blocks ({view.block_size(2048)} px blocks)", px, clk)
    px, clk, view_d = bench_view(path, mpp=0.2527)
    show("d", f"(d) as (c), 0.2527 µm/px slide (factor {view_d.level_scale:.4f})", px, clk)
    tiles = lambda key: rows[key][0] / 4 * 1e6 / 65536  # 256 px tiles at 0.5 µm/px per s
    print(f"tiles/s at 0.5 µm/px (wall): hand loop {tiles('b'):.0f}, at_mpp {tiles('c'):.0f}")
    for i, name in enumerate(("wall", "cpu")):
        cb = rows["c"][i] / rows["b"][i]
        ca = rows["c"][i] / rows["a"][i]
        print(f"{name:>4}: c/b = {cb:.2f} (aim >= 3.5)   c/a = {ca:.2f} (aim >= 0.75)")
    if tmp is not None:
        tmp.cleanup()
    return 0


if __name__ == "__main__":
    sys.exit(main())
