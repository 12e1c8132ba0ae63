"""Ways to convert 8-bit device RGB blocks to sRGB, measured side by side in one run.

Every method converts the same blocks of synthetic H&E (rendered at 0.5 µm/px, then encoded as
scanner-B's wide-gamut device RGB, the demo's profile) from the profile to sRGB, relative
colorimetric:

table       tilewright's full 8-bit table (``slide/colour_lut.py``): one gather a pixel;
lcms        LittleCMS itself through Pillow, ``ImageCms.applyTransform`` on the block (array to
            image and back);
trilinear   a 52**3 grid of LittleCMS results (nodes on whole code values), trilinear in numpy;
tetrahedral the same grid, tetrahedral interpolation in numpy.

Rows: one-thread CPU time (MP/s), two threads on two blocks at once (wall MP/s), and agreement
with LittleCMS's unoptimized pipeline (CIEDE2000 mean and 99th percentile on the blocks' pixels,
scikit-image). The table's build time and size are printed once. Best of ``--rounds``
interleaved rounds.

Usage: ``.venv/bin/python benchmarks/colour_transform.py [--rounds 5] [--side 1024]``
"""

from __future__ import annotations

import argparse
import io
import os
import sys
import threading
import time

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import numpy as np  # noqa: E402

GRID = 52  # 255 = 51 x 5: every node lies on a whole code value, so LittleCMS computes it exactly


def he_blocks(side: int, n: int):
    """``n`` (side, side, 3) blocks of demo H&E at 0.5 µm/px, as scanner-B's device RGB."""
    from tilewright.demo.cohort import device_renderer
    from tilewright.demo.icc import SCANNER_B, matrix_trc_profile
    from tilewright.demo.synth import random_layout

    profile = matrix_trc_profile(**SCANNER_B)
    lay = random_layout(side * 0.5 * 1.2, side * 0.5 * n * 1.1, seed=11, n_islands=n + 1)
    render = device_renderer(lay.renderer(0.5), profile)
    return profile, [np.ascontiguousarray(render(0, k * side, side, side)) for k in range(n)]


def lcms_transform(profile, *, exact=False):
    from PIL import ImageCms

    flags = ImageCms.Flags.NOOPTIMIZE if exact else ImageCms.Flags.NONE
    return ImageCms.buildTransform(ImageCms.ImageCmsProfile(io.BytesIO(profile)), ImageCms.createProfile("sRGB"),
                                   "RGB", "RGB", renderingIntent=ImageCms.Intent.RELATIVE_COLORIMETRIC, flags=flags)


def via_lcms(xf):
    from PIL import Image, ImageCms

    def run(block):
        block[...] = np.asarray(ImageCms.applyTransform(Image.fromarray(block), xf))
        return block
    return run


def grid_of(xf):
    from PIL import Image, ImageCms

    axis = np.arange(GRID) * (255 // (GRID - 1))
    r, g, b = np.meshgrid(axis, axis, axis, indexing="ij")
    nodes = np.stack([r, g, b], -1).astype(np.uint8).reshape(GRID * GRID, GRID, 3)
    return np.asarray(ImageCms.applyTransform(Image.fromarray(nodes), xf)).reshape(-1, 3).astype(np.float32)


def _cell(block):
    x = block.reshape(-1, 3).astype(np.float32) * np.float32((GRID - 1) / 255.0)
    i = np.minimum(x.astype(np.int32), GRID - 2)
    return i, x - i, (i[:, 0] * GRID + i[:, 1]) * GRID + i[:, 2]


def trilinear(lut):
    steps = (GRID * GRID, GRID, 1)

    def run(block):
        _, f, base = _cell(block)
        out = np.zeros((len(base), 3), np.float32)
        for dr in (0, 1):
            wr = f[:, 0:1] if dr else 1 - f[:, 0:1]
            for dg in (0, 1):
                wg = wr * (f[:, 1:2] if dg else 1 - f[:, 1:2])
                for db in (0, 1):
                    w = wg * (f[:, 2:3] if db else 1 - f[:, 2:3])
                    out += w * lut[base + dr * steps[0] + dg * steps[1] + db * steps[2]]
        block[...] = np.clip(out + 0.5, 0, 255).astype(np.uint8).reshape(block.shape)
        return block
    return run


def tetrahedral(lut):
    steps = np.array([GRID * GRID, GRID, 1])

    def run(block):
        _, f, base = _cell(block)
        order = np.argsort(-f, axis=1, kind="stable")  # axes by falling fraction: the tetrahedron
        fs = np.take_along_axis(f, order, axis=1)
        v1 = base + steps[order[:, 0]]
        v2 = v1 + steps[order[:, 1]]
        c0, c1, c2, c3 = lut[base], lut[v1], lut[v2], lut[base + steps.sum()]
        out = c0 + fs[:, 0:1] * (c1 - c0) + fs[:, 1:2] * (c2 - c1) + fs[:, 2:3] * (c3 - c2)
        block[...] = np.clip(out + 0.5, 0, 255).astype(np.uint8).reshape(block.shape)
        return block
    return run


def main(argv=None):
    from skimage.color import deltaE_ciede2000, rgb2lab

    from tilewright.slide.colour import colour_transform

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rounds", type=int, default=5)
    ap.add_argument("--side", type=int, default=1024)
    args = ap.parse_args(argv)
    profile, blocks = he_blocks(args.side, 2)
    mp = args.side * args.side / 1e6
    t0 = time.perf_counter()
    ours = colour_transform(profile)
    ours.apply(blocks[0].copy())  # builds the table
    build = time.perf_counter() - t0
    xf = lcms_transform(profile)
    lut = grid_of(xf)
    methods = {"table": ours.apply, "lcms": via_lcms(xf), "trilinear": trilinear(lut),
               "tetrahedral": tetrahedral(lut)}
    exact = via_lcms(lcms_transform(profile, exact=True))
    want = [exact(b.copy()) for b in blocks]
    cpu, wall = {}, {}
    for _ in range(args.rounds):
        for name, fn in methods.items():
            work = [b.copy() for b in blocks]
            c0 = time.process_time()
            fn(work[0])
            cpu[name] = min(cpu.get(name, 1e9), time.process_time() - c0)
            work = [b.copy() for b in blocks]
            threads = [threading.Thread(target=fn, args=(w,)) for w in work]
            w0 = time.perf_counter()
            for t in threads:
                t.start()
            for t in threads:
                t.join()
            wall[name] = min(wall.get(name, 1e9), time.perf_counter() - w0)
    print(f"\n{args.side}x{args.side} H&E blocks, scanner-B wide-gamut profile -> sRGB | {os.cpu_count()} CPUs | "
          f"best of {args.rounds} rounds | table built in {build:.2f} s, 64 MiB")
    print(f"{'method':<13}{'1 thread MP/s (CPU)':>21}{'2 threads MP/s':>16}{'dE00 mean':>11}{'dE00 p99':>10}")
    for name, fn in methods.items():
        got = [fn(b.copy()) for b in blocks]
        d = np.concatenate([deltaE_ciede2000(rgb2lab(g), rgb2lab(w)).ravel() for g, w in zip(got, want)])
        print(f"{name:<13}{mp / cpu[name]:>21.1f}{2 * mp / wall[name]:>16.1f}{d.mean():>11.3f}"
              f"{np.percentile(d, 99):>10.3f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
