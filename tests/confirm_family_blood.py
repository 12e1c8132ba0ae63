"""Red blood cells and faint tissue of the confirmation family (tests/confirm_family.py).

Red cells are individual biconcave discs 7-8 µm across, supersampled and area-averaged onto the
fine grid: packed in sheets (a jittered hexagonal packing, one or two cells deep), in clumps, or
loosely scattered in pale fibrin. Their absorber is a haemoglobin-like optical density (strong in
green and blue, weak in red), some cells also taking up eosin. Faint tissue is pale eosin tissue
with sparse pale nuclei, scaled so that its mean transmitted green light lies a drawn optical
density (0.03-0.12) below the glass.
"""

from __future__ import annotations

import numpy as np
from scipy import ndimage as ndi

from confirm_family_paint import scatter, smooth_noise, splat, star_piece
from confirm_family_tissue import fibres, nuclei

# Optical density (R, G, B) of one red cell at its thickest, for a section stained the usual way;
# haemoglobin-like: strong in green and blue, weak in red (from memory, not a measurement).
HB = np.array([0.07, 0.62, 0.50])


def cell_profile(x):
    """Thickness of a biconcave disc against the relative radius ``x`` (0 at the centre, 1 at the
    rim), peak near 1: the Evans-Fung shape, coefficients from memory."""
    x2 = np.clip(x * x, 0, 1)
    return np.sqrt(1 - x2) * (0.81 + 7.83 * x2 - 4.39 * x2 * x2) / 2.6


def red_cells(cv, rng, region, packing, eosin_share):
    """Red cells inside ``region`` (bool map) packed as ``packing`` ("sheet", "clumps" or
    "fibrin"); adds to ``cv.hb`` (cell thickness) and ``cv.E`` (eosin taken up by some cells).
    Returns the blood map (the region the cells fill)."""
    d = cv.um(rng.uniform(7.0, 8.0))
    if packing == "fibrin":
        cv.E += np.where(region, 0.06 + 0.12 * fibres(cv, rng, (5, 10), 0.2, 40), 0).astype(np.float32)
        pts = scatter(rng, region.astype(np.float32), rng.uniform(0.1, 0.35) / (np.pi * d * d / 4))
        where = region
    else:
        if packing == "clumps":
            blobs = smooth_noise(rng, cv.shape, cv.um(rng.uniform(40, 120))) > rng.uniform(0.55, 0.7)
            where = region & blobs
        else:
            where = region
        step = d * rng.uniform(0.8, 0.95)
        rows = np.arange(0, cv.shape[0], step * np.sqrt(3) / 2)
        pts = []
        for layer in range(1 if rng.random() < 0.5 else 2):
            off = rng.uniform(0, step, 2)
            for i, r in enumerate(rows):
                c = np.arange((i % 2) * step / 2, cv.shape[1], step) + off[1]
                pts.append(np.stack([np.full(c.size, r + off[0]), c], 1))
        pts = np.concatenate(pts) + rng.normal(0, 0.12 * d, (sum(len(p) for p in pts), 2))
        ok = (pts[:, 0] >= 0) & (pts[:, 0] < cv.shape[0] - 1) & (pts[:, 1] >= 0) & (pts[:, 1] < cv.shape[1] - 1)
        pts = pts[ok]
        pts = pts[where[pts[:, 0].astype(int), pts[:, 1].astype(int)]]
        cv.E += np.where(where, 0.04, 0).astype(np.float32)  # plasma between cells
    n = len(pts)
    if n == 0:
        return where
    R = d / 2 * rng.uniform(0.92, 1.08, n)
    squash = rng.uniform(1.0, 1.25, n)  # cells seen a little obliquely or deformed
    th = rng.uniform(0, np.pi, n)
    size = int(np.ceil(2 * R.max() * 1.25)) + 3

    def stamp(y, x, i):
        c, s = np.cos(th[i])[:, None, None], np.sin(th[i])[:, None, None]
        u, v = (x * c + y * s) / R[i, None, None], squash[i, None, None] * (-x * s + y * c) / R[i, None, None]
        return cell_profile(np.hypot(u, v)) * (np.hypot(u, v) < 1)

    dose = rng.uniform(0.85, 1.15, n)
    splat(cv.hb, pts, stamp, size, weights=dose, ss=3)
    stained = rng.random(n) < eosin_share
    if stained.any():
        splat(cv.E, pts[stained], lambda y, x, i: stamp(y, x, np.flatnonzero(stained)[i]), size,
              weights=rng.uniform(0.1, 0.4, stained.sum()), ss=3)
    return where


def bleed(cv, rng, piece, share):
    """A blood region of about ``share`` of ``piece``: at its edge (spilling up to 150 µm onto the
    glass), inside it, or as vessels full of cells. Returns (region, where-kind)."""
    area = share * piece.sum()
    kind = rng.choice(["edge", "inside", "vessels"], p=[0.4, 0.3, 0.3])
    region = np.zeros(cv.shape, bool)
    if kind == "edge":
        rim = np.argwhere(piece & ~ndi.binary_erosion(piece))
        c = rim[rng.integers(len(rim))]
        near = ndi.binary_dilation(piece, iterations=int(cv.um(rng.uniform(20, 150))))
        r = np.sqrt(area / np.pi)
        for _ in range(8):  # grow until the part in or against the piece has the share asked
            region = star_piece(cv.shape, c, r, rng, 5, 0.25, rng.uniform(1, 1.6), rng.uniform(0, 3.2)) & near
            got = (region & piece).sum()
            if got >= 0.85 * area or r > max(cv.shape):
                break
            r *= np.sqrt(area / max(got, 1)) * 1.05
    else:
        inner = ndi.binary_erosion(piece, iterations=int(cv.um(60)))
        if not inner.any():
            inner = piece
        k = rng.integers(1, 4) if kind == "inside" else rng.integers(1, 6)
        for p in scatter(rng, inner.astype(np.float32), 1.0)[:k]:
            blob = star_piece(cv.shape, p, np.sqrt(area / k / np.pi), rng, 4, 0.15 if kind == "vessels" else 0.3,
                              rng.uniform(1, 2.5), rng.uniform(0, 3.2))
            if kind == "vessels":
                wall = ndi.binary_dilation(blob, iterations=max(1, int(cv.um(8)))) & ~blob & piece
                cv.E += np.where(wall, 0.3, 0).astype(np.float32)
                nuclei(cv, rng, wall, 0.008, d_um=(2.5, 4), elong=(2.5, 3.5))
            region |= blob & piece
    cv.H[region] *= 0.1
    cv.E[region] *= 0.2
    cv.holes &= ~region
    return region, str(kind)


def faint(cv, rng, stains, target):
    """A faint region: a pale piece on free glass or a pale fringe against a stained piece, whose
    mean transmitted green light is 10**-target of the glass's. Returns (map, kind) or None."""
    kind = "fringe" if rng.random() < 0.4 else "piece"
    grown = ndi.binary_dilation(cv.outline, iterations=int(cv.um(40)))
    region = None
    for _ in range(40):
        if kind == "fringe":
            rim = np.argwhere(cv.outline & ~ndi.binary_erosion(cv.outline) & ~cv.blood)
            if not len(rim):
                kind = "piece"
                continue
            c = rim[rng.integers(len(rim))]
            blob = star_piece(cv.shape, c, cv.um(rng.uniform(200, 500)), rng, 5, 0.25, rng.uniform(1, 1.8), rng.uniform(0, 3.2))
            cand = blob & ~cv.outline & ~ndi.binary_dilation(cv.blood, iterations=int(cv.um(40)))
            ok = cand.sum() > cv.um(150) ** 2
        else:
            c = (rng.uniform(0.15, 0.85) * cv.shape[0], rng.uniform(0.15, 0.85) * cv.shape[1])
            cand = star_piece(cv.shape, c, cv.um(rng.uniform(250, 700)), rng, 6, 0.25, rng.uniform(1, 2), rng.uniform(0, 3.2))
            ok = not (cand & grown).any()
        edge_ok = not (cand[:3].any() or cand[-3:].any() or cand[:, :3].any() or cand[:, -3:].any())
        if ok and edge_ok:
            region = cand
            break
    if region is None:
        return None
    e = smooth_noise(rng, cv.shape, cv.um(40), 0.6, 1.2) + 0.5 * fibres(cv, rng, (10, 20), 0.2, 150)
    E = np.where(region, e, 0).astype(np.float32)
    H = np.zeros(cv.shape, np.float32)
    tmp_H, cv.H = cv.H, H
    nuclei(cv, rng, region, 0.0006, d_um=(5, 8), amount=(0.3, 0.6))
    cv.H = tmp_H
    h_g, e_g = stains["h"][1], stains["e"][1]  # green parts of the drawn (turned, scaled) vectors
    od = (H * h_g + E * e_g)[region]
    lo, hi = 0.0, 5.0
    for _ in range(40):  # bisection: mean transmission equals 10**-target
        k = (lo + hi) / 2
        if np.mean(10.0 ** (-k * od)) > 10.0 ** -target:
            lo = k
        else:
            hi = k
    k = (lo + hi) / 2
    cv.H[region] += k * H[region]
    cv.E[region] += k * E[region]
    cv.outline |= region
    return region, kind
