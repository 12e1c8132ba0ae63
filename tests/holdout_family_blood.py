"""Blood of the held-back family (tests/holdout_family.py): where red cells lie in a draw.

Three kinds, as routine specimens show them (common practice): a haemorrhage at a piece's edge (it
borders glass and widens the piece), a haemorrhage inside a piece, and vessels (a muscular wall
round a lumen that red cells fill wholly or in part; the empty rest of the lumen is tissue). The
blood region replaces the tissue it covers (plasma and fibrin between the cells, a little eosin).
"""

from __future__ import annotations

import cv2
import numpy as np

from holdout_family_layouts import KINDS, Sheet, blob


def _edge_point(rng, m: np.ndarray):
    er = cv2.erode(m.astype(np.uint8), np.ones((3, 3), np.uint8)).astype(bool)
    ys, xs = np.nonzero(m & ~er)
    if not ys.size:
        return None
    i = rng.integers(ys.size)
    return ys[i], xs[i]


def haemorrhage(rng, sh: Sheet, piece: int, share: float, where: str) -> np.ndarray:
    """A haemorrhage of about ``share`` of ``piece``'s area (after it is added), at the piece's
    edge (``where="edge"``: centred on its outline, reaching out over glass) or inside it."""
    m = sh.piece == piece
    area = float(m.sum())
    want = share / (1 - share) * area if where == "edge" else share * area
    if where == "edge":
        c = _edge_point(rng, m)
    else:
        d = cv2.distanceTransform(np.pad(m, 1).astype(np.uint8), cv2.DIST_L2, 5)[1:-1, 1:-1]
        ys, xs = np.nonzero(d[::4, ::4] > 0.5 * d.max())
        c = None if not ys.size else (ys[(i := rng.integers(ys.size))] * 4, xs[i] * 4)
    if c is None:
        return np.zeros(sh.shape, bool)
    ratio, ang = rng.uniform(0.5, 1.0), rng.uniform(0, np.pi)
    r = np.sqrt(want / (np.pi * ratio)) * (1.25 if where == "edge" else 1.1)
    region = np.zeros(sh.shape, bool)
    for _ in range(8):  # grow or shrink towards the wanted share
        region = blob(rng, sh.shape, c[0], c[1], r * ratio, r, ang, rough=0.3)
        if where == "edge":
            region &= cv2.dilate(m.astype(np.uint8), np.ones((int(r * 0.6) | 1,) * 2, np.uint8)).astype(bool)
            got = float(region.sum()) / float((region | m).sum())
        else:
            region &= m
            got = float(region.sum()) / area
        if got == 0:
            r *= 1.3
            continue
        if abs(got / share - 1) < 0.12:
            break
        r *= np.sqrt(share / got) if got < share else (share / got) ** 0.7
    region[sh.piece > 0] &= m[sh.piece > 0]  # never over another piece
    sh.piece[region] = piece
    sh.label[region] = KINDS["plasma"]
    return region


def vessels(rng, sh: Sheet, zone: np.ndarray, piece_of: np.ndarray, count: int) -> tuple[np.ndarray, list]:
    """``count`` vessels in ``zone``: walls of smooth muscle round lumens, red cells filling each
    lumen wholly or settled on one side. Returns the red-cell region and each vessel's facts."""
    region, facts = np.zeros(sh.shape, bool), []
    y, x = np.ogrid[0:sh.shape[0], 0:sh.shape[1]]
    for _ in range(count):
        ys, xs = np.nonzero(zone[::5, ::5])
        if not ys.size:
            break
        i = rng.integers(ys.size)
        cy, cx = ys[i] * 5, xs[i] * 5
        r = sh.px(rng.uniform(40, 260))
        wall = r * rng.uniform(0.2, 0.45)
        ratio, ang = rng.uniform(0.45, 1.0), rng.uniform(0, np.pi)
        y0, y1 = int(max(0, cy - 2 * (r + wall))), int(min(sh.shape[0], cy + 2 * (r + wall)))
        x0, x1 = int(max(0, cx - 2 * (r + wall))), int(min(sh.shape[1], cx + 2 * (r + wall)))
        yy, xx = y[y0:y1] - cy, x[:, x0:x1] - cx
        u = xx * np.cos(ang) + yy * np.sin(ang)
        v = (-xx * np.sin(ang) + yy * np.cos(ang)) / ratio
        rr = np.hypot(u, v)
        inside = piece_of[y0:y1, x0:x1] > 0
        lumen = (rr < r) & inside
        wall_m = (rr >= r) & (rr < r + wall) & inside
        fill = float(rng.choice([1.0, rng.uniform(0.3, 0.9)]))
        level = np.sort(v[lumen])[int((1 - fill) * (lumen.sum() - 1))] if lumen.any() else 0
        cells = lumen & (v >= level)
        sub_l, sub_t = sh.label[y0:y1, x0:x1], sh.theta[y0:y1, x0:x1]
        sub_l[wall_m] = KINDS["muscle"]
        sub_t[wall_m] = (np.arctan2(v, u) + np.pi / 2 + ang)[wall_m]
        sub_l[lumen] = KINDS["lumen"]
        sub_l[cells] = KINDS["plasma"]
        region[y0:y1, x0:x1] |= cells
        facts.append({"radius_um": round(r * sh.p, 1), "filled": round(fill, 2)})
    return region, facts
