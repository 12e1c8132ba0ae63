"""Generated benchmark slides (cached in bench-out/): synthetic 40x JPEG tiled TIFFs.

Slides are Aperio-style pyramids with levels at downsample 1, 4, 16, ... (as scanners write
them), so a 0.5 µm/px read of a 0.25 µm/px ("40x", common practice) slide must be computed from
level 0: every method in the benchmark decodes the same level-0 JPEG tiles.
"""

from __future__ import annotations

import os
import time
from pathlib import Path

ROOT = Path(os.environ.get("TILEWRIGHT_BENCH_DIR", Path(__file__).resolve().parent.parent / "bench-out"))


def _layout(width, height, mpp, seed, islands, island_um):
    from tilewright.demo.synth import Island, SlideLayout, random_layout

    if island_um is None:
        return random_layout(height * mpp, width * mpp, seed=seed, n_islands=islands)
    # mostly glass: a few islands of about island_um radius spread over a large slide
    import numpy as np

    rng = np.random.default_rng(seed)
    h_um, w_um = height * mpp, width * mpp
    isl = []
    for i in range(islands):
        r = island_um * rng.uniform(0.8, 1.2)
        cy = (i + 0.5) / islands * h_um
        cx = rng.uniform(r * 1.3, w_um - r * 1.3)
        isl.append(Island(float(cy), float(cx), float(r * 0.8), float(r), float(rng.uniform(0, np.pi))))
    return SlideLayout(h_um, w_um, tuple(isl), seed=seed)


def _fast_renderer(lay, mpp):
    """``lay.renderer(mpp)`` made quick on glass: islands rendered in their boxes only.

    Blank glass is the layout's background plus its periodic sensor noise, the same expression
    :meth:`SlideLayout.render` evaluates, so the pixels equal a full render (checked below on a
    box with tissue and glass); a 60k-wide, mostly-glass slide is then generated in a minute or two.
    """
    import numpy as np

    from tilewright.demo.synth import _banks, _noise_bank

    size = _banks(lay.seed, round(mpp, 6))[0].shape[0]  # texture period; the noise repeats with it
    cols = (np.arange(size) % size) % 509
    bank = _noise_bank(lay.seed)[:, cols] * np.float32(lay.noise)  # (509, size, 3)
    background = np.asarray(lay.background, np.float32)
    boxes = []
    for isl in lay.islands:
        reach = max(isl.ry, isl.rx) * (1.0 + isl.wobble) / mpp + 2
        boxes.append((isl.cy / mpp - reach, isl.cy / mpp + reach, isl.cx / mpp - reach, isl.cx / mpp + reach))

    def render(y, x, h, w):
        rows = bank[(np.arange(y, y + h) % size) % 509]
        glass = np.clip(rows + background + np.float32(0.5), 0, 255).astype(np.uint8)  # (h, size, 3)
        off = x % size
        reps = -(-(off + w) // size)
        tiled = np.empty((h, reps * size, 3), np.uint8)
        tiled.reshape(h, reps, size, 3)[:] = glass[:, None]
        out = tiled[:, off:off + w]
        for y0, y1, x0, x1 in boxes:
            if y1 <= y or y0 >= y + h:
                continue
            a, b = max(x, int(x0)), min(x + w, int(x1) + 1)
            if a < b:
                out[:, a - x:b - x] = lay.render(mpp, y, a, h, b - a)
        return out

    return render


def bench_slide(width: int = 24576, height: int = 20480, *, mpp: float = 0.25, seed: int = 7,
                tile: int = 256, quality: int = 90, islands: int = 4,
                island_um: float | None = None, jpeg_colours: str = "ycbcr420", root: Path | None = None) -> Path:
    """A synthetic H&E slide of ``width x height`` level-0 px, JPEG tiles, SVS pyramid (cached in
    ``root``, default :data:`ROOT`).

    ``island_um`` (radius of tissue islands in µm) makes a mostly-glass slide with small islands;
    by default the islands scale with the slide (about 40 % tissue). ``jpeg_colours="rgb"`` or
    ``"ycbcr444"`` stores the same pixels as RGB or YCbCr JPEG tiles without chroma subsampling
    (see ``write_pyramid``).
    """
    from tilewright.demo.pyramid import write_pyramid

    root = Path(root) if root is not None else ROOT
    root.mkdir(parents=True, exist_ok=True)
    tag = ("" if island_um is None else f"_i{int(island_um)}") + \
        {"ycbcr420": "", "rgb": "_rgb", "ycbcr444": "_444"}[jpeg_colours]
    path = root / f"synthetic_{width}x{height}_{mpp}_{seed}_q{quality}_f4{tag}.svs"
    if path.exists():
        return path
    lay = _layout(width, height, mpp, seed, islands, island_um)
    t0 = time.perf_counter()
    tmp = path.with_suffix(".tmp")
    render = lay.renderer(mpp) if island_um is None else _fast_renderer(lay, mpp)
    write_pyramid(tmp, render, shape=(height, width), mpp=mpp, tile=tile, compression="jpeg",
                  quality=quality, jpeg_colours=jpeg_colours, factor=4, layout="svs",
                  objective=40.0 if mpp < 0.4 else 20.0,
                  strip_rows=1024)
    os.replace(tmp, path)
    print(f"# generated {path.name} ({width}x{height}, {path.stat().st_size / 1e6:.0f} MB) "
          f"in {time.perf_counter() - t0:.0f} s", flush=True)
    return path


def slide_copies(path: Path, n: int) -> list[Path]:
    """``n`` names for one slide (hard links, or copies where links fail) in their own folder."""
    folder = ROOT / f"copies_{path.stem}"
    folder.mkdir(parents=True, exist_ok=True)
    out = []
    for i in range(n):
        p = folder / f"slide{i}{path.suffix}"
        if not p.exists():
            try:
                os.link(path, p)
            except OSError:
                import shutil

                shutil.copyfile(path, p)
        out.append(p)
    return out


def peak_rss_mib_of(module: str, *args: str) -> tuple[float, str]:
    """Run ``python -m module args`` in a fresh process that prints ``<anything> <peak RSS KiB>``."""
    import subprocess
    import sys

    out = subprocess.run([sys.executable, "-m", module, *args], check=True, capture_output=True, text=True,
                         cwd=Path(__file__).resolve().parent).stdout
    return float(out.split()[-1]) / 1024.0, out


def profiled_copy(path: Path, profile: bytes, name: str) -> Path:
    """A copy of a TIFF slide whose first IFD (level 0) also carries ``profile`` in tag 34675.

    The pixels are the same bytes: the profile is appended, then a copy of the first IFD with the
    InterColorProfile entry added (entries kept in tag order, TIFF 6.0 section 2), and the header
    is pointed at it. Classic TIFF and BigTIFF.
    """
    import shutil
    import struct

    out = ROOT / f"{path.stem}_{name}{path.suffix}"
    if out.exists():
        return out
    tmp = out.with_suffix(".tmp")
    shutil.copyfile(path, tmp)
    with open(tmp, "r+b") as fh:
        head = fh.read(16)
        bo = "<" if head[:2] == b"II" else ">"
        big = struct.unpack(bo + "H", head[2:4])[0] == 43
        cnt_f, ent_f, off_f, ent_n, off_pos = ("Q", "HHQQ", "Q", 20, 8) if big else ("H", "HHII", "I", 12, 4)
        first = struct.unpack(bo + off_f, head[off_pos:off_pos + struct.calcsize(off_f)])[0]
        fh.seek(first)
        n = struct.unpack(bo + cnt_f, fh.read(struct.calcsize(cnt_f)))[0]
        entries = [fh.read(ent_n) for _ in range(n)]
        next_ifd = fh.read(struct.calcsize(off_f))
        fh.seek(0, 2)
        end = fh.tell()
        fh.write(bytes(-end % 8))
        where = fh.tell()
        fh.write(profile)
        fh.write(bytes(-fh.tell() % 8))
        entries.append(struct.pack(bo + ent_f, 34675, 7, len(profile), where))
        entries.sort(key=lambda e: struct.unpack(bo + "H", e[:2])[0])
        ifd = fh.tell()
        fh.write(struct.pack(bo + cnt_f, len(entries)) + b"".join(entries) + next_ifd)
        fh.seek(off_pos)
        fh.write(struct.pack(bo + off_f, ifd))
    os.replace(tmp, out)
    return out


def demo_tiles(n_per_site: int = 3, limit: int = 512):
    """The demo cohort's tiles, as ``make demo`` makes them (0.5 µm/px, 256 px, Macenko; cached).

    Returns a (k, 256, 256, 3) uint8 array of at most ``limit`` tiles, taken from every slide in
    turn so that both invented sites are represented.
    """
    import numpy as np

    import tilewright as tw
    from tilewright.demo.cohort import write_demo_cohort

    folder = ROOT / f"demo{n_per_site}"
    slides, _ = write_demo_cohort(folder, n_per_site=n_per_site, log=lambda *a: None)
    out = folder / "tiles"
    if not (out / "manifest.csv").exists():
        paths = sorted(str(p) for p in slides.rglob("*") if p.is_file())
        tw.tile_cohort(paths, out, tw.TilingConfig(mpp=0.5, tile=256, normalizer="macenko"), progress=False)
    stores = [s for s in tw.open_cohort(out).stores.values() if len(s)]
    per = max(1, limit // len(stores))
    return np.concatenate([s[: min(len(s), per)] for s in stores])[:limit]
