"""The THIRD tuning family of hard H&E slides (issue 28): written apart from the other two, held
back and run once to confirm the mask (round 3), then opened for tuning (its red cells were cut
out as marker); tests/tissue/test_third_family.py asserts the aims on it. The family itself was
never adjusted to the mask's results. The held-back family now is tests/confirm_family.py.

``draw(seed)`` gives a thumbnail as a scanner's pyramid level near 8 µm/px would: drawn on a fine
grid (a third of the thumbnail's pixel), each channel I = glass · light · mean(10^-OD) over the
3 x 3 fine pixels of a thumbnail pixel (Beer–Lambert, OD summed over layers: haematoxylin, eosin,
red cells, marker dyes, dust and bubble rims), sensor noise added, then JPEG-compressed.

Distributions (each draw, all independent unless said):

- resolution: half the draws 7.5-8.5 µm/px; half a scan at 0.24-0.5 µm/px and the pyramid level
  2^k nearest 8 µm/px in log scale (5.7-11.3 µm/px); thumbnail 520-860 px a side;
- stains: H and E from Ruifrok & Johnston (2001), each turned by 0-8° about a random axis, redrawn
  until at least 25° apart; strengths of H and of E, apart: 80 % log-normal about 1 (sd 0.3 in
  ln), 20 % log-uniform, all clipped to 0.15-1.6x;
- layout, red cells, faint tissue, folds: tests/third_family_tissue.py;
- marker in 70 % of draws, 1-4 marks, one dye for all (65 %) or a dye per mark:
  tests/third_family_marks.py;
- bubbles (20 %): 1-3 of 0.15-1.2 mm radius, grey rims 8-25 µm wide; dust (50 %): 3-40 specks of
  3-25 µm, grey or brown, and 0-2 fibres; uneven light: gradients up to ±2 % across and a
  vignette up to 3 % darker at the corners;
- glass: grey level 222-248, tint neutral, bluish, yellowish or pinkish by up to ~7 levels, each
  channel in 220-250; sensor noise sd 0.6-2.2 levels a channel; JPEG quality 55-95 (4:2:0).

Truth maps are area fractions of the fine drawing reduced to the thumbnail: a pixel is in a map
when it is at least half covered (``tissue``, which also holds every ``blood`` and ``faint``
pixel; ``ink``: the marker's footprint, however faded; ``blood``: red-cell regions; ``faint``).
Tissue is the pieces' footprint: lumens and empty adipocytes inside a piece count as tissue,
tears do not.
"""

from __future__ import annotations

import io
from dataclasses import dataclass

import numpy as np
from PIL import Image

from third_family_marks import DYES, draw_marks, stroke_cover
from third_family_tissue import LAYOUTS, Tissue, _place, finish, polar_piece

FINE = 3
RJ_H, RJ_E = (0.65, 0.70, 0.29), (0.07, 0.99, 0.11)  # Ruifrok & Johnston (2001), before normalizing
HB = (0.10, 0.74, 0.66)  # red cells: haemoglobin with some eosin, strong in green and blue (from memory)
TINTS = {"neutral": (0, 0, 0), "bluish": (-3, -1, 4), "yellowish": (2, 1, -5), "pinkish": (3, -3, 1)}


@dataclass
class Drawn:
    rgb: np.ndarray
    mpp: float
    truth: dict
    info: dict


def unit(v):
    v = np.asarray(v, float)
    return v / np.linalg.norm(v)


def turned(rng, v, max_deg):
    """``v`` turned by up to ``max_deg`` about a random axis; components kept positive."""
    v = unit(v)
    u = rng.normal(size=3)
    u = unit(u - (u @ v) * v)
    a = np.radians(rng.uniform(0, max_deg))
    return unit(np.maximum(v * np.cos(a) + u * np.sin(a), 0.01))


def strength(rng):
    s = np.exp(rng.normal(0, 0.3)) if rng.random() < 0.8 else np.exp(rng.uniform(np.log(0.15), np.log(1.6)))
    return float(np.clip(s, 0.15, 1.6))


def light(info, shape):
    """The uneven illumination of a draw (1 = even) at the thumbnail's pixels."""
    gy, gx, vig = info["light"]
    y = (np.arange(shape[0]) + 0.5)[:, None] / shape[0] - 0.5
    x = (np.arange(shape[1]) + 0.5)[None, :] / shape[1] - 0.5
    return 1 + 2 * gy * y + 2 * gx * x - vig * 2 * (x * x + y * y)


def shrink(a):
    """Mean over each FINE x FINE block (the thumbnail's pixels)."""
    h, w = a.shape[0] // FINE, a.shape[1] // FINE
    return a[: h * FINE, : w * FINE].reshape(h, FINE, w, FINE).mean((1, 3), dtype=np.float64)


def _artefacts(rng, shape, px, H, W):
    """Bubble rims, dust and fibres: OD (3, h, w) on the fine grid, and what was drawn."""
    art = np.zeros((3,) + shape, np.float32)
    told = {"bubbles": 0, "dust": 0, "fibres": 0}
    yy, xx = np.ogrid[: shape[0], : shape[1]]
    for _ in range(rng.integers(1, 4) if rng.random() < 0.2 else 0):
        c, r, w = rng.uniform(0, 1, 2) * (H, W) / px, rng.uniform(150, 1200) / px, rng.uniform(8, 25) / px
        d = np.hypot(yy - c[0], xx - c[1])
        rim = np.clip(w / 2 - np.abs(d - r) + 0.5, 0, 1) * rng.uniform(0.15, 0.45)
        rim += np.clip(1 - np.abs(d - r + 40 / px) / (20 / px), 0, 1) * 0.04
        art += rim.astype(np.float32)[None]
        told["bubbles"] += 1
    if rng.random() < 0.5:
        for _ in range(rng.integers(3, 41)):
            p = polar_piece(rng, shape, px, rng.uniform(0, 1, 2) * (H, W), rng.uniform(3, 25),
                            aspect=rng.uniform(1, 2), rough=0.25, jag=0.05)
            if p is not None:
                col = (1, 1, 1) if rng.random() < 0.6 else (0.7, 1.0, 1.3)
                for ch in range(3):
                    art[ch][p[0]] += p[1] * rng.uniform(0.2, 0.9) * col[ch]
                told["dust"] += 1
        for _ in range(rng.integers(0, 3)):
            n = 12
            a = np.cumsum(rng.normal(0, 0.4, n)) + rng.uniform(0, 2 * np.pi)
            pts = rng.uniform(0, 1, 2) * (H, W) + np.cumsum(np.c_[np.sin(a), np.cos(a)], 0) * rng.uniform(25, 170)
            cov, _ = stroke_cover(shape, pts / px, rng.uniform(5, 12) / px)
            art += (cov * rng.uniform(0.15, 0.4))[None]
            told["fibres"] += 1
    return art, told


def draw(seed: int) -> Drawn:
    """One slide of the family (same seed, same slide)."""
    rng = np.random.default_rng([int(seed), 20250828])
    scan = None
    if rng.random() < 0.5:
        mpp = float(rng.uniform(7.5, 8.5))
    else:
        scan = float(rng.uniform(0.24, 0.5))
        mpp = scan * 2 ** int(np.round(np.log2(8 / scan)))
    h, w = (int(v) for v in rng.integers(520, 861, 2))
    px, shape = mpp / FINE, (h * FINE, w * FINE)
    H, W = h * mpp, w * mpp
    while True:
        hv, ev = turned(rng, RJ_H, 8), turned(rng, RJ_E, 8)
        if np.degrees(np.arccos(np.clip(hv @ ev, -1, 1))) >= 25:
            break
    sh, se = strength(rng), strength(rng)
    hb = unit(HB)
    layout = str(rng.choice(list(LAYOUTS), p=list(LAYOUTS.values())))
    t = Tissue(shape, px)
    _place(rng, t, layout, H, W)
    ch, ce, cb, tinfo = finish(rng, t, green_he=(hv[1], ev[1]), strength=(sh, se))
    scene = {"labels": t.lab[FINE // 2:: FINE, FINE // 2:: FINE][:h, :w], "mpp": mpp}
    marks = draw_marks(rng, scene, shape, px) if rng.random() < 0.7 else []
    marks = [m for m in marks if (shrink(m["cov"]) >= 0.5).any()]  # marks that reach a pixel
    art, told = _artefacts(rng, shape, px, H, W)
    tint = str(rng.choice(list(TINTS)))
    glass = np.clip(rng.uniform(222, 248) + np.array(TINTS[tint]) * rng.uniform(0.5, 1.5)
                    + rng.normal(0, 1, 3), 220, 250)
    info = {"seed": int(seed), "mpp": mpp, "scan_mpp": scan, "layout": layout,
            "glass": tuple(round(float(g), 2) for g in glass), "tint": tint,
            "light": tuple(float(v) for v in (*rng.uniform(-0.02, 0.02, 2), rng.uniform(0, 0.03))),
            "noise_sd": float(rng.uniform(0.6, 2.2)), "jpeg_quality": int(rng.integers(55, 96)),
            "stains": {"h": hv.round(4).tolist(), "e": ev.round(4).tolist(), "h_strength": sh,
                       "e_strength": se}, **tinfo, **told}
    rgb = np.empty((h, w, 3), np.float64)
    lit = light(info, (h, w))
    for c in range(3):
        od = ch * hv[c] + ce * ev[c] + cb * hb[c] + art[c]
        for m in marks:
            od += m["den"] * DYES[m["dye"]][c]
        rgb[..., c] = glass[c] * lit * shrink(np.power(10.0, -od, dtype=np.float32))
    rgb += rng.normal(0, info["noise_sd"], rgb.shape)
    buf = io.BytesIO()
    Image.fromarray(np.clip(np.rint(rgb), 0, 255).astype(np.uint8)).save(
        buf, format="JPEG", quality=info["jpeg_quality"])
    rgb = np.asarray(Image.open(io.BytesIO(buf.getvalue())).convert("RGB"))
    blood = shrink(t.blood.astype(np.float32)) >= 0.5
    faint = np.zeros((h, w), bool)
    for r in t.faint:
        faint |= shrink(r.astype(np.float32)) >= 0.5
    tissue = (shrink(t.cov) >= 0.5) | blood | faint
    ink = np.zeros((h, w), bool)
    info["marks"] = []
    for m in marks:
        mine = shrink(m["cov"]) >= 0.5
        ink |= mine
        over = float((mine & tissue).sum() / max(1, mine.sum()))
        where = "glass" if over < 0.05 else "tissue" if over > 0.95 else "glass and tissue"
        info["marks"].append({"dye": m["dye"], "kind": m["kind"], "where": where,
                              "over_tissue": round(over, 3)})
    truth = {"tissue": tissue, "ink": ink, "blood": blood, "faint": faint}
    return Drawn(rgb=rgb, mpp=mpp, truth=truth, info=info)
