"""Artefacts of the sealed family (tests/sealed_family.py) that are neither tissue nor ink: dust
specks, lint fibres, rims of air bubbles under the coverslip and the coverslip's edge. Each adds
OD (Beer–Lambert) on the subpixel grid, in place, and stays out of ``keep_out`` (faint pieces).
"""

from __future__ import annotations

import cv2
import numpy as np

from sealed_family_optics import unit
from sealed_family_shapes import blob, wander

GREY = unit((0.9, 0.92, 1.0))


def _add(od, mask_u8, amount, vec, keep_out) -> bool:
    m = mask_u8.astype(bool)
    if keep_out is not None and (m & keep_out).any():
        return False
    od[m] += (amount[m, None] if np.ndim(amount) else amount) * np.asarray(vec, np.float32)
    return True


def dust(od, rng, u, n: int, keep_out) -> int:
    """Specks 5-40 um, grey to brown, OD 0.2-1.0."""
    h, w = od.shape[:2]
    got = 0
    for _ in range(n):
        m = np.zeros((h, w), np.uint8)
        r = rng.uniform(2.5, 20) * u
        c = rng.uniform([0, 0], [w, h])
        cv2.fillPoly(m, [np.round(c + blob(rng, r, r * rng.uniform(0.4, 1), 0.3, n=16)).astype(np.int32)], 1)
        vec = unit(GREY + rng.uniform(0, 0.4) * np.array([0.0, 0.3, 0.8]))
        got += _add(od, m, rng.uniform(0.2, 1.0), vec, keep_out)
    return got


def lint(od, rng, u, n: int, keep_out) -> int:
    """Fibres 6-20 um wide and 0.3-2 mm long, curling, faintly coloured, OD 0.08-0.4."""
    h, w = od.shape[:2]
    got = 0
    for _ in range(n):
        m = np.zeros((h, w), np.uint8)
        k = 25
        length = rng.uniform(300, 2000) * u
        a = rng.uniform(0, 2 * np.pi) + np.cumsum(rng.normal(0, 0.2, k))
        pts = rng.uniform([0, 0], [w, h]) + np.cumsum(np.stack([np.cos(a), np.sin(a)], 1) * length / k, axis=0)
        cv2.polylines(m, [np.round(pts).astype(np.int32)], False, 1, max(1, int(round(rng.uniform(6, 20) * u))))
        vec = unit(GREY + rng.uniform(-0.3, 0.3, 3))
        got += _add(od, m, rng.uniform(0.08, 0.4), vec, keep_out)
    return got


def bubbles(od, rng, u, n: int, keep_out) -> int:
    """Air bubbles 0.2-1.5 mm across: a dark refracting rim 8-25 um wide, a slightly brighter
    inside."""
    h, w = od.shape[:2]
    got = 0
    for _ in range(n):
        r = rng.uniform(100, 750) * u
        c = rng.uniform([0, 0], [w, h])
        poly = np.round(c + blob(rng, r, r * rng.uniform(0.8, 1), 0.05, n=90)).astype(np.int32)
        inside, rim = np.zeros((h, w), np.uint8), np.zeros((h, w), np.uint8)
        cv2.fillPoly(inside, [poly], 1)
        cv2.polylines(rim, [poly], True, 1, max(1, int(round(rng.uniform(8, 25) * u))))
        if keep_out is not None and ((inside | rim).astype(bool) & keep_out).any():
            continue
        od[inside.astype(bool)] -= 0.008
        got += _add(od, rim, rng.uniform(0.15, 0.5), GREY, None)
    return got


def coverslip_edge(od, rng, u, side: int, inset: float) -> None:
    """The coverslip's edge: a thin dark line ``inset`` (share of the slide) from ``side``
    (0 top, 1 right, 2 bottom, 3 left), glass without mountant beyond it."""
    h, w = od.shape[:2]
    m = np.zeros((h, w), np.uint8)
    n = 20
    along = np.linspace(-0.05, 1.05, n)
    off = inset + wander(rng, n, 0.003) + rng.uniform(-0.01, 0.01) * along
    x, y = {0: (along * w, off * h), 1: ((1 - off) * w, along * h),
            2: (along * w, (1 - off) * h), 3: (off * w, along * h)}[side]
    pts = np.stack([x, y], 1)
    beyond = np.zeros((h, w), np.uint8)
    corner = {0: [(-10 * w, -10 * h), (11 * w, -10 * h)], 1: [(11 * w, -10 * h), (11 * w, 11 * h)],
              2: [(11 * w, 11 * h), (-10 * w, 11 * h)], 3: [(-10 * w, 11 * h), (-10 * w, -10 * h)]}[side]
    far = np.array(corner[::-1] if side in (0, 1) else corner, float)  # round the far side of the line
    poly = np.concatenate([pts, far])
    cv2.fillPoly(beyond, [np.round(poly).astype(np.int32)], 1)
    od[beyond.astype(bool)] += rng.uniform(-0.015, 0.02) * GREY.astype(np.float32)
    cv2.polylines(m, [np.round(pts).astype(np.int32)], False, 1, max(1, int(round(rng.uniform(10, 30) * u))))
    _add(od, m, rng.uniform(0.3, 0.8), GREY, None)
