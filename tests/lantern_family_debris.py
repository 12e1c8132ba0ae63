"""The lantern family's artefacts that are neither tissue nor ink, on the subpixel canvas:
air bubbles under the coverslip (a dark refracting rim, a slightly brighter inside), dust specks,
lint fibres, the coverslip's edge (a dark line, and past it glass with no mountant)."""

from __future__ import annotations

import cv2
import numpy as np

from lantern_family_shapes import smooth, wander


def draw_debris(rng, hs, ws, um, plan):
    """OD (Hs x Ws x 3, float32), light factor (Hs x Ws) and footprint of the artefacts, and
    what was drawn."""
    od = np.zeros((hs, ws, 3), np.float32)
    light = np.ones((hs, ws), np.float32)
    cover = np.zeros((hs, ws), np.uint8)
    drawn = []
    for _ in range(plan["bubbles"]):
        c = (float(rng.uniform(0.05, 0.95) * ws), float(rng.uniform(0.05, 0.95) * hs))
        r = rng.uniform(100, 700) / um
        rim_w = max(1.5, rng.uniform(12, 40) / um)
        inside = np.zeros((hs, ws), np.uint8)
        cv2.ellipse(inside, (c, (2 * r, 2 * r * rng.uniform(0.85, 1)), rng.uniform(0, 180)), 1, -1)
        rim = inside - cv2.erode(inside, cv2.getStructuringElement(cv2.MORPH_ELLIPSE, (int(2 * rim_w) | 1,) * 2))
        depth = rng.uniform(0.35, 1.1)
        od += (rim.astype(np.float32) * depth)[..., None] * np.array([1.0, 0.97, 0.9], np.float32)
        light[inside.astype(bool) & ~rim.astype(bool)] *= rng.uniform(1.0, 1.04)
        cover |= inside
        drawn.append("bubble")
    if plan["dust"]:
        sp = np.zeros((hs, ws), np.float32)
        n = plan["dust"]
        centres = rng.uniform([0, 0], [ws, hs], (max(1, n // 8), 2))
        for i in range(n):
            c = centres[i % len(centres)] + rng.normal(0, 0.06 * min(hs, ws), 2) if rng.random() < 0.6 \
                else rng.uniform([0, 0], [ws, hs])
            r = max(1, int(round(rng.uniform(4, 30) / um)))
            cv2.circle(sp, (int(c[0]), int(c[1])), r, float(rng.uniform(0.3, 1.3)), -1)
        od += sp[..., None] * np.array([0.9, 0.95, 1.0], np.float32)
        cover |= (sp > 0).astype(np.uint8)
        drawn.append(f"{n} dust specks")
    for _ in range(plan["lint"]):
        x0, y0 = rng.uniform(0, ws), rng.uniform(0, hs)
        ang, length = rng.uniform(0, 2 * np.pi), rng.uniform(1000, 4000) / um
        line = wander(rng, x0, y0, x0 + np.cos(ang) * length, y0 + np.sin(ang) * length, 80, sway=0.12)
        m = np.zeros((hs, ws), np.uint8)
        cv2.polylines(m, [np.round(line * 16).astype(np.int32)], False, 1, max(1, int(rng.uniform(8, 25) / um)), cv2.LINE_8, 4)
        twist = np.clip(0.6 + 0.3 * smooth(rng, (hs, ws), max(4, 60 / um)), 0.15, 1.2)
        od += (m * twist * rng.uniform(0.2, 0.6))[..., None] * np.array([0.85, 0.9, 0.8], np.float32)
        cover |= m
        drawn.append("lint fibre")
    if plan["coverslip_edge"]:
        side = int(rng.integers(4))
        frac = rng.uniform(0.02, 0.1)
        coord = np.arange(ws if side < 2 else hs, dtype=np.float32)
        span = ws if side < 2 else hs
        at = frac * span if side % 2 == 0 else (1 - frac) * span
        past = (coord < at) if side % 2 == 0 else (coord > at)
        line = np.abs(coord - at) < max(1.0, rng.uniform(10, 30) / um)
        f = np.where(past, rng.uniform(0.97, 1.03), 1.0).astype(np.float32)
        lo = np.where(line, rng.uniform(0.25, 0.7), 0.0).astype(np.float32)
        if side < 2:
            light *= f[None, :]
            od += np.broadcast_to(lo[None, :, None], od.shape) * np.float32(1)
            cover |= line[None, :].astype(np.uint8)
        else:
            light *= f[:, None]
            od += np.broadcast_to(lo[:, None, None], od.shape) * np.float32(1)
            cover |= line[:, None].astype(np.uint8)
        drawn.append("coverslip edge")
    return od, light, cover.astype(bool), drawn
