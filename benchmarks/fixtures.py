"""Generated benchmark slides (cached in bench-out/): synthetic 40x JPEG tiled TIFFs."""

from __future__ import annotations

import os
import time
from pathlib import Path

ROOT = Path(os.environ.get("TILEWRIGHT_BENCH_DIR", Path(__file__).resolve().parent.parent / "bench-out"))


def bench_slide(width: int = 24576, height: int = 20480, *, mpp: float = 0.25, seed: int = 7,
                tile: int = 256, quality: int = 90, islands: int = 4) -> Path:
    """A synthetic H&E slide of ``width x height`` level-0 px, JPEG tiles, IFD pyramid (cached)."""
    from tilewright.demo.pyramid import write_pyramid
    from tilewright.demo.synth import random_layout

    ROOT.mkdir(parents=True, exist_ok=True)
    path = ROOT / f"synthetic_{width}x{height}_{mpp}_{seed}_q{quality}.tif"
    if path.exists():
        return path
    lay = random_layout(height * mpp, width * mpp, seed=seed, n_islands=islands)
    t0 = time.perf_counter()
    tmp = path.with_suffix(".tmp")
    write_pyramid(tmp, lay.renderer(mpp), shape=(height, width), mpp=mpp, tile=tile, compression="jpeg",
                  quality=quality, layout="svs", objective=40.0 if mpp < 0.4 else 20.0)
    os.replace(tmp, path)
    print(f"# generated {path.name} ({width}x{height}) in {time.perf_counter() - t0:.0f} s")
    return path


def peak_rss_mib_of(module: str, *args: str) -> tuple[float, str]:
    """Run ``python -m module args`` in a fresh process that prints ``<anything> <peak RSS KiB>``."""
    import subprocess
    import sys

    out = subprocess.run([sys.executable, "-m", module, *args], check=True, capture_output=True, text=True,
                         cwd=Path(__file__).resolve().parent).stdout
    return float(out.split()[-1]) / 1024.0, out
