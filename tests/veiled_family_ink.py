"""Marker ink of the veiled family: strokes (straight or curved), rings drawn around a piece, dots,
crosses and hand-written numbers, over glass or over tissue, in blue, green, black, red or violet
dye. Each dye is a broad-band absorber (an RGB OD vector scaled so its strongest channel carries the
planned strength, 0.25-1.8 OD); the ink is streaky along the nib and darker at the rims, as felt-tip
ink dries. Ink keeps out of the clear zone around faint pieces.
"""

from __future__ import annotations

import math

import cv2
import numpy as np

from veiled_family_canvas import Shape, box_of, curve, smooth_noise
from veiled_family_optics import DYES

# a small hand-made stroke font: each digit one polyline in a 0.6 x 1 box (y down)
DIGITS = {
    "0": [(0.3, 0), (0.08, 0.2), (0.05, 0.6), (0.2, 0.95), (0.42, 0.95), (0.56, 0.6), (0.52, 0.2), (0.3, 0)],
    "1": [(0.12, 0.2), (0.35, 0), (0.35, 1)],
    "2": [(0.05, 0.2), (0.2, 0.02), (0.45, 0.05), (0.55, 0.25), (0.45, 0.5), (0.05, 1), (0.6, 1)],
    "3": [(0.05, 0.1), (0.3, 0), (0.55, 0.15), (0.5, 0.4), (0.25, 0.5), (0.55, 0.65), (0.55, 0.9), (0.3, 1), (0.05, 0.9)],
    "4": [(0.45, 1), (0.45, 0), (0.0, 0.7), (0.6, 0.7)],
    "5": [(0.55, 0), (0.1, 0), (0.05, 0.45), (0.35, 0.4), (0.55, 0.6), (0.5, 0.9), (0.25, 1), (0.0, 0.9)],
    "6": [(0.5, 0.05), (0.25, 0.1), (0.05, 0.5), (0.1, 0.9), (0.3, 1), (0.5, 0.9), (0.55, 0.7), (0.4, 0.55), (0.1, 0.65)],
    "7": [(0, 0), (0.6, 0), (0.2, 1)],
    "8": [(0.3, 0.5), (0.1, 0.35), (0.1, 0.1), (0.3, 0), (0.5, 0.1), (0.5, 0.35), (0.3, 0.5), (0.05, 0.7),
          (0.1, 0.95), (0.3, 1), (0.5, 0.95), (0.55, 0.7), (0.3, 0.5)],
    "9": [(0.5, 0.45), (0.25, 0.5), (0.05, 0.3), (0.15, 0.05), (0.4, 0), (0.55, 0.2), (0.5, 0.6), (0.35, 1)],
}


def lines_shape(canvas, paths, width: float) -> Shape | None:
    """Open polylines (subpixel (x, y)) drawn ``width`` subpixels thick with round ends."""
    pad = width / 2 + 3
    b = box_of(canvas, paths, pad)
    if b is None:
        return None
    y0, x0, y1, x1 = b
    m = np.zeros((y1 - y0, x1 - x0), np.uint8)
    pts = [np.rint((np.asarray(q, float) - [x0, y0]) * 8).astype(np.int32) for q in paths]
    cv2.polylines(m, pts, False, 1, max(1, int(round(width))), cv2.LINE_8, 3)
    return Shape(y0, x0, m.astype(bool)) if m.any() else None


def _wobble(rng, path, amp):
    n = len(path)
    w = np.cumsum(rng.normal(0, 1, (n, 2)), axis=0)
    w -= np.linspace(0, 1, n)[:, None] * w[-1]
    return path + w / (np.abs(w).max() + 1e-9) * amp


def _anchor(rng, canvas, over_tissue: bool):
    pool = canvas.tissue & ~canvas.clear if over_tissue else ~canvas.tissue & ~canvas.clear
    ys, xs = np.nonzero(pool[::7, ::7])
    if not len(ys):
        return None
    i = rng.integers(len(ys))
    return np.array([xs[i] * 7.0, ys[i] * 7.0])


def mark_paths(rng, canvas, item: dict):
    """The polylines and pen width (subpixels) of one mark."""
    a = _anchor(rng, canvas, item["over_tissue"])
    if a is None:
        return None, 0
    short = min(canvas.hs, canvas.ws)
    kind, w = item["kind"], min(canvas.mm(item["width_mm"]), 0.12 * short)
    t = rng.uniform(0, 2 * math.pi)
    if kind == "stroke":
        d = canvas.mm(rng.uniform(1.0, 5.0)) * np.array([math.cos(t), math.sin(t)])
        path = curve(rng, a - d / 2, a + d / 2, rng.choice([0.0, 0.15, 0.35]), 48)
        return [_wobble(rng, path, w * 0.1)], w
    if kind == "circle" and canvas.shapes:
        s = canvas.shapes[int(rng.integers(len(canvas.shapes)))]
        ys, xs = np.nonzero(s.mask)
        c = np.array([xs.mean() + s.x0, ys.mean() + s.y0])
        r = np.array([np.ptp(xs), np.ptp(ys)]) / 2 + canvas.mm(rng.uniform(0.2, 0.6))
        ang = np.linspace(t, t + rng.uniform(5.3, 6.6), 96)
        w = min(w, canvas.mm(1.0), 0.06 * short)
        return [_wobble(rng, c + np.stack([r[0] * np.cos(ang), r[1] * np.sin(ang)], 1), w * 0.4)], w
    if kind == "dot":
        return [a[None, :] + [[0, 0], [0.5, 0]]], min(canvas.mm(rng.uniform(0.5, 1.5)), 0.2 * short)
    if kind == "cross":
        L, w = min(canvas.mm(rng.uniform(0.8, 2.0)), 0.4 * short), min(w, canvas.mm(0.8), 0.08 * short)
        d1, d2 = np.array([math.cos(t), math.sin(t)]) * L / 2, np.array([-math.sin(t), math.cos(t)]) * L / 2
        return [np.stack([a - d1, a + d1]), np.stack([a - d2, a + d2])], w
    # a hand-written number of 1-3 digits
    hgt = min(canvas.mm(rng.uniform(0.8, 2.0)), 0.3 * short)
    w = min(w, canvas.mm(rng.uniform(0.3, 0.6)), 0.12 * hgt)
    slant, paths = rng.uniform(-0.25, 0.1), []
    for k, ch in enumerate(str(int(rng.integers(1, 1000)))):
        q = np.asarray(DIGITS[ch], float) * hgt
        q[:, 0] += (0.8 * k) * hgt + slant * (hgt - q[:, 1])
        q = np.concatenate([np.linspace(q[j], q[j + 1], 4, endpoint=False) for j in range(len(q) - 1)] + [q[-1:]])
        paths.append(_wobble(rng, q + a, w * 0.3))
    return paths, w


def _within_budget(canvas, shape) -> bool:
    """Marks leave most of the slide readable: ink on at most 30 % of the tissue and 25 % of the image."""
    box, m = shape.box, shape.mask
    on_tissue = (canvas.tissue[box] & (m | canvas.ink[box])).sum() + (canvas.tissue & canvas.ink).sum() \
        - (canvas.tissue[box] & canvas.ink[box]).sum()
    total = canvas.ink.sum() + (m & ~canvas.ink[box]).sum()
    return on_tissue <= 0.3 * max(1, canvas.tissue.sum()) and total <= 0.25 * canvas.ink.size


def add_ink(rng, canvas, p: dict) -> list[dict]:
    """Draw the planned marks; returns what was drawn."""
    drawn = []
    for item in p["ink"]:
        for _try in range(8):
            paths, w = mark_paths(rng, canvas, item)
            shape = lines_shape(canvas, paths, w) if paths else None
            if shape is not None and not canvas.hits_clear(shape) and _within_budget(canvas, shape):
                break
        else:
            continue
        m = shape.mask
        vec = DYES[item["dye"]] / DYES[item["dye"]].max()
        dist = cv2.distanceTransform(np.pad(m, 1).astype(np.uint8), cv2.DIST_L2, 3)[1:-1, 1:-1]
        rim = 1 + rng.uniform(0.1, 0.4) * np.exp(-dist / max(1.0, w * 0.08))
        streak = 1 + rng.uniform(0.05, 0.2) * smooth_noise(rng, m.shape, max(2.0, w * 0.3))
        amount = (item["strength"] * rim * np.clip(streak, 0.6, None) * m).astype(np.float32)
        canvas.add_od(shape, amount[..., None] * vec.astype(np.float32))
        canvas.mark("ink", shape)
        canvas.ink_count[shape.box] += m
        canvas.ink_label[shape.box][m] = len(drawn) + 1
        drawn.append({"kind": item["kind"], "dye": item["dye"], "strength": round(item["strength"], 3),
                      "over_tissue": bool((canvas.tissue[shape.box] & m).any())})
    return drawn
