"""tile_slide throughput against the hand-written per-tile loop, in one run, one worker.

Prints tiles/s and source MP/s (level-0 pixels covered by the stored tiles) for:
  loop     OpenSlide read_region 512 px at level 0 per tile, cv2 INTER_AREA to 256, one zarr write a tile
  tw       tilewright.tile_slide, no normalization
  tw+mac   tilewright.tile_slide with Macenko (cohort-style target fitted on the slide's own sample)
and the ratios tw/loop and tw+mac/tw. Peak resident memory of tile_slide is measured in fresh
processes for a 20k- and a 40k-pixel-wide slide (``--memory``).

Usage: python benchmarks/tile_slide.py [--width 24576 --height 20480] [--memory]
"""

from __future__ import annotations

import argparse
import os
import shutil
import sys
import tempfile
import time
from pathlib import Path

os.environ.setdefault("OMP_NUM_THREADS", "1")
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
sys.path.insert(0, str(Path(__file__).resolve().parent))

import numpy as np  # noqa: E402

from fixtures import bench_slide, peak_rss_mib_of  # noqa: E402


def plan_for(path, cfg):
    import tilewright as tw

    with tw.open(path) as slide:
        view = slide.at_mpp(cfg.mpp)
        mask = tw.tissue_mask(slide, mpp=cfg.mask_mpp)
        plan = tw.plan_tiles(view, mask, tile=cfg.tile, min_tissue=cfg.min_tissue)
        return plan.yx, view.scale


def hand_loop(path, yx, scale, tile, out):
    """What people write by hand: one level-0 read a tile, resize, one zarr write a tile."""
    import cv2
    import openslide
    import zarr

    src = int(round(tile * scale))
    arr = zarr.open_array(str(out), mode="w", shape=(len(yx), tile, tile, 3), chunks=(1, tile, tile, 3),
                          dtype="uint8")
    s = openslide.OpenSlide(str(path))
    for i, (y, x) in enumerate(yx):
        region = np.asarray(s.read_region((int(round(x * scale)), int(round(y * scale))), 0, (src, src)))[..., :3]
        arr[i] = cv2.resize(region, (tile, tile), interpolation=cv2.INTER_AREA)
    s.close()


def timed(fn, *a, **k):
    t0 = time.perf_counter()
    r = fn(*a, **k)
    return time.perf_counter() - t0, r


def main(argv=None):
    import cv2

    import tilewright as tw

    cv2.setNumThreads(1)
    ap = argparse.ArgumentParser()
    ap.add_argument("--width", type=int, default=24576)
    ap.add_argument("--height", type=int, default=20480)
    ap.add_argument("--memory", action="store_true", help="also measure peak RSS on 20k and 40k wide slides")
    ap.add_argument("--loop-tiles", type=int, default=600, help="tiles timed for the slow hand-written loop")
    args = ap.parse_args(argv)
    path = bench_slide(args.width, args.height)
    cfg = tw.TilingConfig(mpp=0.5, tile=256, threads=1)
    yx, scale = plan_for(path, cfg)
    src_mp_per_tile = (256 * scale) ** 2 / 1e6
    tmp = Path(tempfile.mkdtemp(prefix="tw-bench-"))
    try:
        sub = yx[np.linspace(0, len(yx) - 1, min(args.loop_tiles, len(yx))).astype(int)]
        t_loop, _ = timed(hand_loop, path, sub, scale, 256, tmp / "loop.zarr")
        loop_tps = len(sub) / t_loop
        t_tw, res = timed(tw.tile_slide, path, tmp / "tw", cfg)
        tw_tps = res.n_tiles / t_tw
        t_mac, res_m = timed(tw.tile_slide, path, tmp / "mac", cfg.replace(normalizer="macenko"))
        mac_tps = res_m.n_tiles / t_mac
        store = tw.open_store(res.store)
        nbytes = sum(f.stat().st_size for f in Path(res.store).rglob("*") if f.is_file())
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
    print(f"slide {path.name}: {args.width}x{args.height} px at 0.25 µm/px -> {len(yx)} tiles of 256 px at 0.5 µm/px")
    print(f"{'method':<26}{'tiles/s':>10}{'source MP/s':>14}")
    for name, tps in (("hand-written loop", loop_tps), ("tile_slide", tw_tps), ("tile_slide + Macenko", mac_tps)):
        print(f"{name:<26}{tps:>10.1f}{tps * src_mp_per_tile:>14.1f}")
    print(f"ratio tile_slide / loop        {tw_tps / loop_tps:6.2f}  (aim >= 3.5)")
    print(f"Macenko cost                   {100 * (t_mac / res_m.n_tiles) / (t_tw / res.n_tiles) - 100:5.0f} %  (aim <= 35 %)")
    print(f"stored bytes per tile          {nbytes / max(len(store), 1):8.0f}  (raw {256 * 256 * 3})")
    if args.memory:
        for w, h in ((20480, 16384), (40960, 16384)):
            p = bench_slide(w, h)
            rss, _ = peak_rss_mib_of("memory_probe", str(p))
            print(f"peak RSS tile_slide {w}x{h}   {rss:8.0f} MiB")


if __name__ == "__main__":
    main()
