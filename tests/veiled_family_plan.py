"""The plan of one veiled-family draw: every top-level quantity drawn from the seed (scan and
thumbnail geometry, glass, stains, layout, blood, faint pieces, marker ink, artefacts, noise and
JPEG coding), JSON-friendly. The shapes themselves are drawn later from a second stream of the seed.

Thumbnail geometry: a scan at 0.24-0.5 um/px; the pyramid level is the power-of-two downsample
nearest (in log scale) to 8 um/px; the thumbnail's um/px is scan um/px x full width / thumbnail
width, so it is an odd value near (not at) the level's nominal one.
"""

from __future__ import annotations

import math

import numpy as np

LAYOUTS = ("needle_cores", "tma_grid", "curettage", "resection", "frozen", "mucosal_strip")
DYES = ("blue", "green", "black", "red", "violet")
INK_KINDS = ("stroke", "circle", "dot", "cross", "number")
SUB = 3  # subpixels per thumbnail pixel along each axis


def log_uniform(rng, lo: float, hi: float) -> float:
    return float(math.exp(rng.uniform(math.log(lo), math.log(hi))))


def scan_geometry(rng) -> dict:
    r = rng.random()
    scan = rng.uniform(0.24, 0.2635) if r < 0.35 else rng.uniform(0.46, 0.5) if r < 0.65 else rng.uniform(0.24, 0.5)
    down = 2 ** round(math.log2(8.0 / scan))
    w = int(rng.integers(450, 901))
    h = int(rng.integers(350, min(900, 560_000 // w) + 1))
    full_w = w * down - int(rng.integers(1, down))  # the last thumbnail column is a partial one
    full_h = h * down - int(rng.integers(1, down))
    return {"scan_mpp": float(scan), "downsample": int(down), "full_size": [full_h, full_w],
            "size": [h, w], "mpp": float(scan * full_w / w)}


def plan(seed: int) -> dict:
    rng = np.random.default_rng([int(seed), 0x5EA1ED])
    p = {"seed": int(seed), "sub": SUB}
    p.update(scan_geometry(rng))
    base = rng.uniform(224, 247)
    p["glass"] = [float(np.clip(base + rng.normal(0, 4), 215, 250)) for _ in range(3)]
    p["illumination"] = {"ramp": float(rng.uniform(0, 0.035)) if rng.random() < 0.6 else 0.0,
                         "ramp_angle": float(rng.uniform(0, 2 * math.pi)),
                         "vignette": float(rng.uniform(0, 0.04)) if rng.random() < 0.4 else 0.0}
    p["stain"] = {"h": log_uniform(rng, 0.15, 1.6), "e": log_uniform(rng, 0.15, 1.6),
                  "h_turn": float(rng.uniform(-8, 8)), "e_turn": float(rng.uniform(-8, 8)),
                  "h_axis": float(rng.uniform(0, 2 * math.pi)), "e_axis": float(rng.uniform(0, 2 * math.pi))}
    p["layout"] = LAYOUTS[int(rng.integers(len(LAYOUTS)))]
    p["fat"] = bool(rng.random() < 0.45)
    p["folds"] = int(rng.choice([0, 0, 1, 1, 2]))
    p["tears"] = int(rng.choice([0, 0, 0, 1, 2]))
    p["blood"] = None if rng.random() < 0.35 else {
        "share": float(rng.uniform(0.0, 0.6)), "hb": float(rng.uniform(0.5, 1.6)),
        "eosin": float(rng.uniform(0.0, 0.3)), "smear": bool(rng.random() < 0.4),
        "to_glass": bool(rng.random() < 0.5)}
    n_faint = int(rng.choice([0, 0, 0, 0, 1, 1, 1, 2, 2, 3]))
    p["faint"] = {"targets": [float(rng.uniform(0.038, 0.12)) for _ in range(n_faint)],
                  "side": int(rng.integers(4)), "margin_mm": float(rng.uniform(0.3, 0.6))}
    n_ink = int(rng.choice([0, 1, 2, 2, 3, 3, 4, 5, 6]))
    p["ink"] = [{"kind": INK_KINDS[int(rng.integers(len(INK_KINDS)))],
                 "dye": DYES[int(rng.integers(len(DYES)))],
                 "strength": log_uniform(rng, 0.25, 1.8),
                 "width_mm": float(rng.uniform(0.3, 2.0)),
                 "over_tissue": bool(rng.random() < 0.5)} for _ in range(n_ink)]
    p["debris"] = {"bubbles": int(rng.integers(0, 4)), "dust": int(rng.integers(0, 40)),
                   "fibres": int(rng.integers(0, 5)), "coverslip_edge": bool(rng.random() < 0.25),
                   "label_corner": int(rng.integers(4)) if rng.random() < 0.2 else None,
                   "blur_patches": int(rng.choice([0, 0, 0, 1, 2]))}
    p["noise"] = float(rng.uniform(0.5, 3.0))
    p["jpeg"] = {"quality": int(rng.integers(45, 96)), "subsample": bool(rng.random() < 0.6)}
    return p
