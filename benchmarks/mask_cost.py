"""CPU seconds of ``tissue_mask`` on a large slide's thumbnail (20 x 50 mm at 8 µm/px: 2500 x 6250
pixels), for three kinds of slide: plain tissue with pens (the demo's synthetic layout), tissue
with haemorrhages, red and black marker and faint areas (the hard slides of the tests), and
faint tissue over most of the slide.

Measured as process CPU time (``time.process_time``; the mask runs on one thread), the median of
``--repeat`` runs after one warm-up, so a busy machine changes the figures little. To compare two
versions of the library, run it once under each (``PYTHONPATH=<other checkout>/src``).

    .venv/bin/python benchmarks/mask_cost.py [--repeat 5]
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time
from pathlib import Path

import numpy as np

MPP = 8.0
H_UM, W_UM = 20_000.0, 50_000.0


def slides():
    """(name, RGB thumbnail) of each kind of slide."""
    sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))
    from hard_slides import Area, HardSlide, Piece, Ring, Stroke

    from tilewright.demo.synth import random_layout

    layout = random_layout(H_UM, W_UM, seed=4, n_islands=8, pens=4)
    yield "plain tissue and pens", layout.render(MPP, 0, 0, *layout.shape_at(MPP))
    pieces = tuple(Piece(H_UM / 2, (k + 0.5) * W_UM / 6, 6500.0, 3500.0, 0.3 * k) for k in range(6))
    blood = tuple(Area("blood", H_UM / 2 + 5000.0, (k + 0.5) * W_UM / 6 + 2000.0, 2500.0, 2000.0) for k in range(0, 6, 2))
    faint = tuple(Area("faint", H_UM / 2 - 3000.0, (k + 0.5) * W_UM / 6, 2500.0, 2000.0) for k in range(1, 6, 2))
    inks = (Stroke(((2000.0, 1000.0), (18000.0, 49000.0)), 500.0, "red"),
            Stroke(((18000.0, 2000.0), (1500.0, 30000.0)), 450.0, "black"),
            Ring(H_UM / 2, W_UM / 2, 5000.0, 400.0, "red"))
    hard = HardSlide("hard", H_UM, W_UM, pieces, areas=blood + faint, inks=inks, seed=7)
    yield "haemorrhage, red and black marker, faint areas", hard.render(MPP)
    pale = HardSlide("pale", H_UM, W_UM, (Piece(H_UM / 2, W_UM / 2, 0.55 * H_UM, 0.55 * W_UM),),
                     glass=(232.0, 230.0, 235.0), hema=0.055, eosin=0.08, noise=2.0, seed=8)
    yield "faint tissue over most of the slide", pale.render(MPP)
    from marker_marks import Mark, dot_paths, glyph_paths

    rng = np.random.default_rng(9)
    marks = tuple(Mark(glyph_paths(rng, list("2A7"), H_UM / 2 - 2000.0, (k + 0.3) * W_UM / 6, 1800.0), 380.0,
                       (0.85, 0.22, 0.31), (1.0, 0.8), 0.1, k, "label", "red") for k in range(6))
    marks += (Mark(dot_paths(rng, H_UM / 2 + 3000.0, W_UM / 2, 6000.0, 30), 400.0, (0.88, 0.38, 0.68), seed=7),)
    labelled = HardSlide("labelled", H_UM, W_UM, pieces, areas=blood, inks=marks, seed=9)
    yield "red labels and pen taps over tissue, haemorrhage", labelled.render(MPP)


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--repeat", type=int, default=5)
    args = p.parse_args(argv)
    from tilewright.tissue.mask import tissue_mask

    print(f"tissue_mask CPU seconds, {H_UM / 1000:g} x {W_UM / 1000:g} mm at {MPP:g} µm/px (median of {args.repeat})")
    for name, rgb in slides():
        rgb = np.ascontiguousarray(rgb)
        tissue_mask(rgb, mpp=MPP)  # warm-up: imports, OpenCV's first calls
        times = []
        for _ in range(args.repeat):
            t0 = time.process_time()
            tissue_mask(rgb, mpp=MPP)
            times.append(time.process_time() - t0)
        print(f"  {name:<48} {rgb.shape[0]} x {rgb.shape[1]} px  {statistics.median(times):6.2f} s")
    return 0


if __name__ == "__main__":
    sys.exit(main())
