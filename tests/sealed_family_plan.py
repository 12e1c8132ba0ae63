"""The drawn choices of a sealed-family slide (tests/sealed_family.py), made before anything is
rendered so that their spread over many seeds can be checked cheaply: scanner and thumbnail
resolution, slide size, stain vectors and strengths, layouts, blood, faint pieces, marker marks,
artefacts, glass, illumination, sensor noise and JPEG.
"""

from __future__ import annotations

import numpy as np

from sealed_family_blood import FAINT_KINDS
from sealed_family_marks import KINDS as MARK_KINDS
from sealed_family_optics import DYES, EOSIN, HAEMOGLOBIN, HEMATOXYLIN, angle_between, jittered, turned

LAYOUTS = ("skin ellipse", "cervical cone", "polyp on stalk", "lymph node", "liver core", "fatty breast",
           "placental villi")
FAINT_SHARE, BLOOD_SHARE, INK_SHARE = 0.38, 0.65, 0.8  # a few planned faint pieces find no room


def _log_uniform(rng, lo, hi):
    return float(np.exp(rng.uniform(np.log(lo), np.log(hi))))


def plan(seed: int) -> dict:
    """Every choice of draw ``seed`` that needs no rendering (JSON-friendly values)."""
    rng = np.random.default_rng([seed, 7001])
    scan = rng.uniform(0.24, 0.5)
    level = int(round(np.log2(8.0 / scan)))  # the pyramid level (power of two) nearest 8 um/px
    h, w = (int(v) for v in rng.integers(350, 901, 2))
    full_w = w * 2 ** level - int(rng.integers(0, 2 ** level))  # the level's size is rounded up
    mpp = scan * full_w / w
    h_angle, e_angle = rng.uniform(0, 8, 2)
    hv, ev = turned(HEMATOXYLIN, h_angle, rng), turned(EOSIN, e_angle, rng)
    hb = jittered(HAEMOGLOBIN, 0.04, rng)
    layouts = [str(k) for k in rng.choice(LAYOUTS, size=int(rng.choice([1, 1, 2, 2, 3])), replace=False)]
    p = {
        "seed": seed, "scan_mpp": round(scan, 4), "level_downsample": 2 ** level, "mpp": mpp, "shape": (h, w),
        "h_vector": hv.round(4).tolist(), "e_vector": ev.round(4).tolist(), "hb_vector": hb.round(4).tolist(),
        "h_turn_deg": round(angle_between(hv, HEMATOXYLIN), 2), "e_turn_deg": round(angle_between(ev, EOSIN), 2),
        "h_strength": round(_log_uniform(rng, 0.15, 1.6), 3), "e_strength": round(_log_uniform(rng, 0.15, 1.6), 3),
        "layouts": layouts,
        "cracks": [("narrow" if rng.random() < 0.6 else "tear") for _ in range(int(rng.choice([0, 0, 1, 2, 3])))],
        "mucin_lake": bool(rng.random() < 0.3),
        "blood_planned": [round(float(rng.uniform(0.03, 0.5)), 3) if rng.random() < 0.7 else 0.0
                          for _ in layouts] if rng.random() < BLOOD_SHARE else [0.0] * len(layouts),
        "gap_um": round(rng.uniform(120, 500)),
    }
    faint = rng.random() < FAINT_SHARE
    p["faint_planned"] = [{"kind": str(rng.choice(FAINT_KINDS)), "size_um": round(rng.uniform(400, 1500)),
                           "od": round(float(rng.uniform(0.03, 0.12)), 4)}
                          for _ in range(int(rng.integers(1, 3)) if faint else 0)]
    dyes = [str(d) for d in rng.choice(list(DYES), size=int(rng.integers(1, 3)), replace=False)]
    marks = []
    for _ in range(int(rng.integers(1, 6)) if rng.random() < INK_SHARE else 0):
        kind = str(rng.choice(MARK_KINDS))
        top = {"letters": 0.8, "tick": 0.8, "arrow": 0.8, "ring": 1.2}.get(kind, 2.0)  # dots: the diameter
        width = _log_uniform(rng, 0.3, top)
        marks.append({"kind": kind, "dye": str(rng.choice(dyes)), "width_mm": round(width, 3),
                      "strength": round(float(rng.uniform(0.4, 1.6)), 3), "over_tissue": bool(rng.random() < 0.6)})
    p["marks"] = marks
    p["dye_vectors"] = {d: jittered(DYES[d], 0.05, rng).round(4).tolist() for d in dyes}
    p["dust"] = int(rng.integers(0, 26))
    p["lint"] = int(rng.integers(0, 5))
    p["bubbles"] = int(rng.choice([0, 0, 1, 2, 3]))
    p["coverslip_edge"] = [int(rng.integers(0, 4)), round(float(rng.uniform(0.01, 0.035)), 4)] if rng.random() < 0.4 else None
    base = rng.uniform(215, 250)
    p["glass"] = np.clip(base + rng.uniform(-7, 7, 3), 215, 250).round(1).tolist()
    p["vignette"], p["tilt"] = round(float(rng.uniform(0, 0.09)), 4), rng.uniform(-0.05, 0.05, 2).round(4).tolist()
    p["light_centre"] = rng.uniform(0.3, 0.7, 2).round(3).tolist()
    p["read_noise"], p["shot_noise"] = round(float(rng.uniform(0.4, 2.5)), 3), round(float(rng.uniform(0, 0.04)), 4)
    p["jpeg"] = int(rng.integers(45, 96))
    p["jpeg_tile"] = int(rng.choice([0, 128, 256, 512]))
    p["chroma_subsampling"] = int(rng.choice([0, 2]))
    return p
