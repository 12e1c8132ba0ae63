"""Tissue layouts of the veiled family, each inside a region (x0, y0, x1, y1) of the subpixel canvas:
parallel needle cores (some broken), a tissue-microarray grid of round cores (some missing or cut),
scattered curettage fragments, a large ragged resection with a lumen, a frozen section pitted by
ice crystals, and a mucosal strip with villi and glands. Each returns pieces: a shape, a tissue-type
map and how many folds and tears it carries.
"""

from __future__ import annotations

import math

import cv2
import numpy as np

from veiled_family_canvas import band_outline, curve, poly_shape, ragged_outline, smooth_noise
from veiled_family_tissue import CELLULAR, EPITHELIUM, FAT, FIBROUS, FROZEN, LYMPHOID, MUSCLE, zone_mix


def _piece(kind, shape, zones):
    return {"kind": kind, "shape": shape, "zones": zones, "folds": 0, "tears": 0}


def _types(rng, pool, fat: bool):
    k = int(rng.integers(1, 3))
    chosen = [int(t) for t in rng.choice(pool, size=k, replace=False)]
    return chosen + ([FAT] if fat and rng.random() < 0.6 else [])


def _limit_fat(rng, canvas, zones, mask, share=0.25):
    """Fat at most ``share`` of a piece: the excess (patches of it) turns into another type."""
    fat = (zones == FAT) & mask
    excess = fat.sum() - share * mask.sum()
    if excess > 0:
        other = [t for t in np.unique(zones[mask]) if t != FAT]
        f = smooth_noise(rng, zones.shape, 150 * canvas.um)
        zones[fat & (f < np.quantile(f[fat], excess / fat.sum()))] = other[0] if other else FIBROUS
    return zones


def _mixed(rng, canvas, kind, shape, pool, fat, cell_um=250):
    if shape is None:
        return None
    types = _types(rng, pool, fat)
    zones = zone_mix(rng, shape.mask.shape, types, cell_um * canvas.um)
    if FAT in types and len(types) > 1:
        zones = _limit_fat(rng, canvas, zones, shape.mask)
    return _piece(kind, shape, zones)


def needle_cores(rng, canvas, region, p):
    x0, y0, x1, y1 = region
    horizontal = (x1 - x0) >= (y1 - y0)
    long_, short = (x1 - x0, y1 - y0) if horizontal else (y1 - y0, x1 - x0)
    n = int(rng.integers(2, 7))
    gap = short / n
    width = min(canvas.mm(rng.uniform(0.5, 1.2)), 0.7 * gap)
    tilt = rng.uniform(-0.12, 0.12)
    out = []
    for i in range(n):
        length = long_ * rng.uniform(0.55, 0.95)
        s0 = rng.uniform(0, long_ - length)
        c = gap * (i + 0.5) + rng.uniform(-0.1, 0.1) * gap
        a, b = np.array([s0, c + tilt * s0]), np.array([s0 + length, c + tilt * (s0 + length)])
        path = curve(rng, a, b, 0.04, 96)
        w = width * (1 + 0.12 * np.convolve(rng.normal(size=96), np.ones(9) / 3, "same"))
        w *= np.clip(np.minimum(np.arange(96), np.arange(96)[::-1]) / 6, 0.45, 1)
        cuts = sorted(rng.choice(np.arange(12, 84), size=int(rng.choice([0, 0, 1, 2, 3])), replace=False))
        bounds = [0] + list(cuts) + [96]
        for j in range(len(bounds) - 1):
            lo, hi = bounds[j] + (2 if j else 0), bounds[j + 1] - (2 if j + 1 < len(bounds) - 1 else 0)
            if hi - lo < 4:
                continue
            seg = path[lo:hi]
            seg = seg if horizontal else seg[:, ::-1]
            shape = poly_shape(canvas, [band_outline(seg + [x0, y0], w[lo:hi])])
            piece = _mixed(rng, canvas, "needle core", shape, [FIBROUS, CELLULAR, MUSCLE], p["fat"])
            if piece:
                out.append(piece)
    return out


def tma_grid(rng, canvas, region, p):
    x0, y0, x1, y1 = region
    spread = rng.uniform(1.3, 1.8)
    short, long_ = sorted((x1 - x0, y1 - y0))
    d = min(canvas.mm(rng.uniform(0.6, 1.5)), short / (2 * spread), long_ / (3 * spread))  # at least 2 x 3 cores
    step = d * spread
    cols, rows = max(1, int((x1 - x0) // step)), max(1, int((y1 - y0) // step))
    ox, oy = x0 + ((x1 - x0) - cols * step) / 2, y0 + ((y1 - y0) - rows * step) / 2
    out = []
    for r in range(rows):
        for c in range(cols):
            if rng.random() < 0.15:
                continue  # a missing core
            cx = ox + (c + 0.5) * step + rng.normal(0, 0.04) * step
            cy = oy + (r + 0.5) * step + rng.normal(0, 0.04) * step
            outline = ragged_outline(rng, cx, cy, d / 2, d / 2 * rng.uniform(0.85, 1.0), rng.uniform(0, 6.3),
                                     rng.uniform(0.04, 0.15), n=120, kmax=14)
            holes = []
            if rng.random() < 0.25:  # a fragmented core: a wedge lost in cutting
                a0, span = rng.uniform(0, 6.3), rng.uniform(0.5, 1.6)
                a = np.linspace(a0, a0 + span, 16)
                holes = [np.concatenate([[[cx, cy]], np.stack([cx + d * np.cos(a), cy + d * np.sin(a)], 1)])]
            shape = poly_shape(canvas, [outline], holes)
            piece = _mixed(rng, canvas, "array core", shape, [CELLULAR, FIBROUS, LYMPHOID, EPITHELIUM], p["fat"], 150)
            if piece:
                out.append(piece)
    return out


def curettage(rng, canvas, region, p):
    x0, y0, x1, y1 = region
    out, centres = [], []
    for _ in range(int(rng.integers(8, 31))):
        r = canvas.mm(math.exp(rng.uniform(math.log(0.12), math.log(1.0)))) / 2
        for _try in range(12):
            cx, cy = rng.uniform(x0 + r, x1 - r), rng.uniform(y0 + r, y1 - r)
            if all(math.hypot(cx - a, cy - b) > (r + q) * 0.9 for a, b, q in centres):
                break
        else:
            continue
        centres.append((cx, cy, r))
        outline = ragged_outline(rng, cx, cy, r, r * rng.uniform(0.4, 1.0), rng.uniform(0, 6.3),
                                 rng.uniform(0.2, 0.5), n=90, kmax=18)
        piece = _mixed(rng, canvas, "fragment", poly_shape(canvas, [outline]),
                       [CELLULAR, EPITHELIUM, FIBROUS, LYMPHOID], False, 120)
        if piece:
            out.append(piece)
    return out


def resection(rng, canvas, region, p, kind="resection", pool=(CELLULAR, FIBROUS, LYMPHOID, MUSCLE)):
    x0, y0, x1, y1 = region
    cx, cy = (x0 + x1) / 2, (y0 + y1) / 2
    rx, ry = (x1 - x0) * rng.uniform(0.33, 0.45), (y1 - y0) * rng.uniform(0.33, 0.45)
    outline = ragged_outline(rng, cx, cy, rx, ry, rng.uniform(-0.2, 0.2), rng.uniform(0.15, 0.35), n=400, kmax=45)
    lumen = None
    if kind == "resection" and rng.random() < 0.7:
        lumen = ragged_outline(rng, cx + rng.uniform(-0.2, 0.2) * rx, cy + rng.uniform(-0.2, 0.2) * ry,
                               rx * rng.uniform(0.1, 0.25), ry * rng.uniform(0.1, 0.25), rng.uniform(0, 3), 0.1, n=90, kmax=8)
    shape = poly_shape(canvas, [outline], [lumen] if lumen is not None else [])
    if shape is None:
        return []
    zones = zone_mix(rng, shape.mask.shape, [int(t) for t in rng.choice(pool, min(2, len(pool)), replace=False)], 300 * canvas.um)
    h, w = zones.shape
    yy, xx = np.mgrid[0:h, 0:w].astype(np.float32)
    a = rng.uniform(0, 2 * math.pi)
    ramp = (xx - w / 2) * math.cos(a) + (yy - h / 2) * math.sin(a)
    ramp /= np.abs(ramp).max() + 1e-6
    if p["fat"]:  # a fatty side of the piece
        zones[ramp + 0.15 * smooth_noise(rng, (h, w), 200 * canvas.um) > rng.uniform(0.45, 0.7)] = FAT
    if kind == "resection" and rng.random() < 0.4:  # a band of smooth muscle
        zones[np.abs(ramp + rng.uniform(-0.3, 0.1)) < rng.uniform(0.05, 0.15)] = MUSCLE
    if lumen is not None:  # epithelium lines the lumen
        ring = np.zeros((h, w), np.uint8)
        cv2.polylines(ring, [np.rint((lumen - [shape.x0, shape.y0]) * 8).astype(np.int32)], True, 1,
                      max(2, int(rng.uniform(40, 90) * canvas.um)), cv2.LINE_8, 3)
        zones[ring.astype(bool)] = EPITHELIUM
    zones = _limit_fat(rng, canvas, zones, shape.mask)
    out = [_piece(kind, shape, zones)]
    if kind == "frozen":
        _ice(rng, canvas, shape)
    return out


def _ice(rng, canvas, shape):
    """Ice-crystal holes of a frozen section: many small round gaps (10-40 um) pitting the tissue."""
    h, w = shape.mask.shape
    m = shape.mask.astype(np.uint8)
    n = int(shape.mask.sum() / (25 * canvas.um) ** 2 * rng.uniform(0.05, 0.2))
    ys, xs = rng.integers(0, h, n), rng.integers(0, w, n)
    for y, x, r in zip(ys, xs, rng.uniform(5, 20, n) * canvas.um):
        cv2.circle(m, (int(x), int(y)), max(1, int(r)), 0, -1)
    shape.mask = m.astype(bool)


def frozen(rng, canvas, region, p):
    out = resection(rng, canvas, region, p, "frozen", (FROZEN,))
    for piece in out:
        piece["folds"] += 1 if rng.random() < 0.5 else 0
    return out


def mucosal_strip(rng, canvas, region, p):
    x0, y0, x1, y1 = region
    horizontal = (x1 - x0) >= (y1 - y0)
    long_, short = (x1 - x0, y1 - y0) if horizontal else (y1 - y0, x1 - x0)
    out = []
    n = int(rng.integers(1, 3))
    for i in range(n):
        c = short * (i + 0.5) / n
        width = min(canvas.mm(rng.uniform(0.35, 0.9)), short / n * 0.5)
        path = curve(rng, (long_ * 0.05, c), (long_ * rng.uniform(0.7, 0.95), c), 0.08, 128)
        polys = [band_outline(path, width)]
        side, villus = rng.choice([-1, 1]), canvas.mm(rng.uniform(0.15, 0.5))
        d = np.gradient(path, axis=0)
        nrm = np.stack([-d[:, 1], d[:, 0]], 1) / np.linalg.norm(d, axis=1, keepdims=True)
        step = max(2, int(canvas.mm(rng.uniform(0.1, 0.2)) / (np.linalg.norm(d, axis=1).mean() + 1e-6)))
        for k in range(4, 124, step):
            base = path[k] + side * nrm[k] * width * 0.4
            tip = base + side * nrm[k] * villus * rng.uniform(0.6, 1.2) + rng.normal(0, 0.1, 2) * villus
            polys.append(band_outline(np.linspace(base, tip, 8), canvas.mm(rng.uniform(0.05, 0.11))))
        glands = []
        for k in range(8, 120, max(3, step)):
            if rng.random() < 0.6:
                g = path[k] - side * nrm[k] * width * rng.uniform(-0.1, 0.25)
                r = rng.uniform(20, 50) * canvas.um
                glands.append(ragged_outline(rng, g[0], g[1], r, r * rng.uniform(0.5, 1), rng.uniform(0, 3), 0.1, 24, 4))
        flip = (lambda q: q + [x0, y0]) if horizontal else (lambda q: q[:, ::-1] + [x0, y0])
        shape = poly_shape(canvas, [flip(q) for q in polys], [flip(g) for g in glands])
        if shape is None:
            continue
        zones = np.full(shape.mask.shape, CELLULAR, np.uint8)
        dist = cv2.distanceTransform(shape.mask.astype(np.uint8), cv2.DIST_L2, 3)
        zones[dist < rng.uniform(12, 30) * canvas.um] = EPITHELIUM  # surface and gland linings
        if rng.random() < 0.5:
            zones[(zone_mix(rng, zones.shape, [0, 1], 200 * canvas.um) == 1) & (dist >= 30 * canvas.um)] = LYMPHOID
        out.append(_piece("mucosal strip", shape, zones))
    return out


LAYOUT_FUNCS = {"needle_cores": needle_cores, "tma_grid": tma_grid, "curettage": curettage,
                "resection": resection, "frozen": frozen, "mucosal_strip": mucosal_strip}


def layout(rng, canvas, region, p):
    pieces = LAYOUT_FUNCS[p["layout"]](rng, canvas, region, p)
    big = sorted(pieces, key=lambda q: -q["shape"].mask.sum())
    for k in range(p["folds"]):
        if big:
            big[k % len(big)]["folds"] += 1
    for k in range(p["tears"]):
        if big:
            big[k % len(big)]["tears"] += 1
    return pieces
