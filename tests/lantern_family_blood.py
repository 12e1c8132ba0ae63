"""The lantern family's packed red cells and folds, applied to a Piece in place.

Red cells: patches at the piece's edge (half hanging off it, a clot on the section's rim) and
inside, granular at cell scale (~7 µm discs packed with plasma between), haemoglobin whose RGB
optical density lies mostly in blue and green (oxy-haemoglobin absorption after the Prahl 1999
tabulation, taken to the direction (0.02, 0.57, 0.82)). A fold: the part of the piece beyond a
line is turned over onto the rest, two layers where it lands (amounts add: OD doubled)."""

from __future__ import annotations

import cv2
import numpy as np

from lantern_family_shapes import blob, fill, smooth, speckle

HB = np.array([0.02, 0.57, 0.82]) / np.linalg.norm([0.02, 0.57, 0.82])


def add_blood(rng, p, um, share: float) -> None:
    """Packed red cells over about ``share`` of the piece's area (0: none)."""
    if share <= 0 or not p.cover.any():
        return
    area = p.cover.sum()
    edge = p.cover & ~cv2.erode(p.cover.astype(np.uint8), np.ones((3, 3), np.uint8)).astype(bool)
    ey, ex = np.nonzero(edge)
    iy, ix = np.nonzero(p.cover)
    patches = np.zeros(p.cover.shape, bool)
    n = int(rng.integers(1, 6))
    for _ in range(40):
        if patches.sum() >= share * area:
            break
        at_edge = rng.random() < 0.5
        ys, xs = (ey, ex) if at_edge else (iy, ix)
        j = int(rng.integers(len(ys)))
        r = np.sqrt(share * area / n / np.pi) * rng.uniform(0.6, 1.3)
        pat = fill(p.cover.shape, [blob(rng, xs[j], ys[j], r, r * rng.uniform(0.5, 1), rng.uniform(0, 3), 0.3)]).astype(bool)
        # a clot on the rim hangs off the edge; inside, red cells fill the tissue's own footprint
        patches |= pat if at_edge else pat & p.cover
    packed = np.clip(speckle(rng, patches.shape, 21000, 3.5, um), 0, 2.5)  # ~7 µm cells, packed
    level = rng.uniform(0.6, 1.5) * np.clip(1 + 0.2 * smooth(rng, patches.shape, 60 / um), 0.5, None)
    p.hb[patches] = (level * (0.55 + 0.45 * packed / 2.5))[patches]
    p.h[patches] *= 0.15  # few nucleated cells among the red cells
    p.e[patches] = (0.25 * p.e + 0.15)[patches]
    p.cover |= patches
    p.blood |= patches


def fold(rng, p) -> bool:
    """Turn the part of the piece beyond a random line (10-30 % of its area) over onto the rest.
    False when the piece is too small to fold."""
    ys, xs = np.nonzero(p.cover)
    if len(ys) < 400:
        return False
    a = rng.uniform(0, 2 * np.pi)
    nx, ny = np.cos(a), np.sin(a)
    d = np.quantile(xs * nx + ys * ny, 1 - rng.uniform(0.1, 0.3))
    yy, xx = np.mgrid[0:p.cover.shape[0], 0:p.cover.shape[1]].astype(np.float32)
    dist = xx * nx + yy * ny - d
    mx, my = (xx - 2 * dist * nx).astype(np.float32), (yy - 2 * dist * ny).astype(np.float32)
    beyond = dist > 0

    def turn(a):
        src = np.where(beyond, a, 0).astype(np.float32)
        return cv2.remap(src, mx, my, cv2.INTER_NEAREST, borderMode=cv2.BORDER_CONSTANT, borderValue=0)

    flap = turn(p.cover.astype(np.float32)) > 0.5
    p.h[:] = np.where(beyond, 0, p.h + turn(p.h))
    p.e[:] = np.where(beyond, 0, p.e + turn(p.e))
    p.hb[:] = np.where(beyond, 0, p.hb + turn(p.hb))
    p.blood[:] = ~beyond & (p.blood | (turn(p.blood.astype(np.float32)) > 0.5))
    p.cover[:] = ~beyond & (p.cover | flap)
    return True
