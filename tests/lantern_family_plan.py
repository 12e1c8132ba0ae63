"""The lantern held-back family: the seeded plan of one draw (every choice the drawing makes, kept
JSON-friendly so ``info`` can carry it). Geometry is drawn later from sub-seeds of the same seed."""

from __future__ import annotations

import numpy as np

# Specimen layouts (lantern_family_specimens.py) and marker dyes (lantern_family_ink.py).
LAYOUTS = ("cell_block", "skin_curl", "ribbon", "membrane", "marrow_clot", "cervix_row", "lung_lace")
DYES = ("blue", "green", "black", "red", "violet", "brown", "pink")
TINTS = ("white", "yellow", "blue", "grey")
LIGHTS = ("plane", "plane+band", "plane+shadow", "plane+band+shadow")


def _cycled(seed: int, names: tuple, salt: int) -> str:
    """One name per seed, each block of len(names) consecutive seeds holding every name once in a
    seeded order (so every layout and dye turns up over a handful of draws)."""
    order = np.random.default_rng([salt, seed // len(names)]).permutation(len(names))
    return names[int(order[seed % len(names)])]


def plan(seed: int) -> dict:
    rng = np.random.default_rng([7411, seed])
    level = int(rng.choice([16, 32]))
    base = round(float(rng.uniform(5.5 / level, 11.5 / level)), 4)  # µm/px of the full-resolution scan
    width, height = int(rng.integers(560, 1160)), int(rng.integers(500, 1000))
    sub = 3 if width * height < 450_000 else 2  # subpixels a side per thumbnail pixel
    strengths = rng.uniform(0.15, 1.6, 2)
    if strengths.max() < 0.45:  # at least one stain takes
        strengths[int(rng.integers(2))] = rng.uniform(0.45, 1.6)
    lead = _cycled(seed, DYES, 51)
    others = [d for d in DYES if d != lead]
    dyes = [lead] + [str(d) for d in rng.choice(others, int(rng.integers(0, 3)), replace=False)]
    layout = _cycled(seed, LAYOUTS, 29)
    return {
        "seed": int(seed),
        "layout": layout,
        "width": width, "height": height, "sub": sub,
        "scan_mpp": base, "level": level, "mpp": round(base * level, 4),
        "stain_turn_deg": [float(rng.uniform(-8, 8)), float(rng.uniform(-8, 8))],
        "stain_strength": [float(strengths[0]), float(strengths[1])],
        "glass_level": float(rng.uniform(0.90, 0.985)),
        "tint": str(rng.choice(TINTS)), "tint_depth": float(rng.uniform(0.02, 0.09)),
        "light": str(rng.choice(LIGHTS)), "light_tilt": float(rng.uniform(0.0, 0.08)),
        "noise_gain": float(rng.uniform(0.02, 0.12)), "noise_floor": float(rng.uniform(0.4, 1.6)),
        "jpeg_quality": int(rng.integers(50, 96)) if rng.random() < 0.7 else None,
        "blood_share": float(rng.uniform(0.4, 0.6)) if layout == "marrow_clot"
        else (float(rng.uniform(0.05, 0.6)) if rng.random() < 0.6 else 0.0),
        "faint_targets": [float(t) for t in rng.uniform(0.02, 0.08, int(rng.choice([1, 2])))]
        if rng.random() < 0.45 else [],
        "dyes": dyes,
        "marks": int(rng.integers(max(2, len(dyes)), 7)),
        "fold": bool(rng.random() < 0.35),
        "bubbles": int(rng.choice([0, 0, 1, 2, 3])),
        "dust": int(rng.choice([0, 8, 25, 60])),
        "lint": int(rng.choice([0, 0, 1, 2])),
        "coverslip_edge": bool(rng.random() < 0.35),
    }
