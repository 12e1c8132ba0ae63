"""The lantern family's specimen layouts, each a list of textured Pieces on the subpixel canvas
(Hs x Ws, ``um`` µm per subpixel): cell blocks, shaved skin curls, serial-section ribbons,
placental membrane strips, bone-marrow clots, cervical biopsies in a row, lung with alveolar lace.
Also the faint pieces (pale mucus strands and understained fragments)."""

from __future__ import annotations

import cv2
import numpy as np

import lantern_family_texture as tx
from lantern_family_shapes import Piece, blob, fill, piece_from, smooth, strip, wander


def cell_block(rng, hs, ws, um):
    m, out = min(hs, ws), []
    k = int(rng.integers(1, 4))
    for i in range(k):
        cx = ws * (0.5 + (i - (k - 1) / 2) * 0.3) + rng.uniform(-0.03, 0.03) * ws
        r = m * rng.uniform(0.11, 0.19)
        p = piece_from("cell block", [blob(rng, cx, hs * rng.uniform(0.35, 0.65), r, r * rng.uniform(0.7, 1), rng.uniform(0, 3), 0.08)])
        tx.base(rng, p, um, nuclei=600, h=0.08, e=0.3, fibre=0.05)  # the plasma-thrombin matrix
        tx.clusters(rng, p, um, share=rng.uniform(0.1, 0.35), nuclei=11000, h=1.0, e=0.45)
        out.append(p)
    return out


def skin_curl(rng, hs, ws, um):
    m, out = min(hs, ws), []
    for i in range(int(rng.integers(1, 3))):
        cx, cy = ws * (0.32 + 0.36 * i + rng.uniform(-0.05, 0.05)), hs * rng.uniform(0.4, 0.6)
        rad = m * rng.uniform(0.14, 0.24)
        a0 = rng.uniform(0, 2 * np.pi)
        t = a0 + np.linspace(0, np.radians(rng.uniform(110, 230)), 70)
        centre = np.stack([cx + rad * np.cos(t), cy + rad * np.sin(t)], 1)
        half = m * rng.uniform(0.04, 0.08) * (0.45 + 0.55 * np.sin(np.linspace(0.15, np.pi - 0.15, 70)))
        p = piece_from("skin curl", [strip(centre, half)])
        yy, xx = np.mgrid[0:p.cover.shape[0], 0:p.cover.shape[1]]
        outer = np.hypot(xx + p.x0 - cx, yy + p.y0 - cy) > rad  # the convex side carries the epidermis
        tx.base(rng, p, um, nuclei=1500, h=0.35, e=0.85, fibre=0.6)
        tx.covering(rng, p, um, outer, rng.uniform(60, 130), h=1.1, keratin_um=rng.uniform(0, 25))
        tx.holes(rng, p, um, int(rng.integers(0, 5)), 35, rim_um=20, rim_h=0.9)  # hair follicles
        out.append(p)
    return out


def ribbon(rng, hs, ws, um):
    k = int(rng.integers(3, 7))
    pw = ws * 0.8 / k
    ph = min(hs * 0.45, pw * rng.uniform(0.8, 1.5))
    shape_rng = np.random.default_rng(int(rng.integers(1 << 31)))
    outline = blob(shape_rng, 0, 0, pw * 0.5, ph * 0.5, 0, 0.2)
    gap, tilt = rng.uniform(-0.03, 0.05) * pw, rng.uniform(-0.08, 0.08)
    out = []
    for i in range(k):
        x = ws * 0.1 + pw * (i + 0.5) + gap * (i - k / 2)
        y = hs * 0.5 + tilt * (x - ws / 2)
        s = rng.uniform(0.93, 1.05)
        p = piece_from("ribbon section", [outline * s + [x, y]])
        tx.base(rng, p, um, nuclei=4000, h=0.55, e=0.65, fibre=0.3)
        tx.holes(rng, p, um, int(rng.integers(3, 15)), 45, rim_um=18, rim_h=1.0)  # glands
        out.append(p)
    return out


def _band(centre, a, b):
    """Outline between offsets a and b along the normals of ``centre``."""
    inner, outer = strip(centre, a), strip(centre, b)
    n = len(centre)
    return np.concatenate([outer[:n], inner[:n][::-1]])


def membrane(rng, hs, ws, um):
    m, out = min(hs, ws), []
    for j in range(int(rng.integers(1, 3))):
        y = hs * (0.35 + 0.3 * j + rng.uniform(-0.05, 0.05))
        centre = wander(rng, ws * rng.uniform(0.08, 0.2), y, ws * rng.uniform(0.8, 0.92), y + rng.uniform(-0.1, 0.1) * hs, sway=0.05)
        half = m * rng.uniform(0.03, 0.06) * (1 + 0.35 * np.sin(np.linspace(0, rng.uniform(4, 12), len(centre))))
        p = piece_from("placental membrane", [strip(centre, half)])
        off = np.array([p.x0, p.y0])
        amnion = fill(p.cover.shape, [_band(centre - off, 0.55 * half, half * 1.05)]).astype(bool) & p.cover
        decidua = fill(p.cover.shape, [_band(centre - off, -0.3 * half, -half * 1.05)]).astype(bool) & p.cover
        chorion = p.cover & ~amnion & ~decidua
        tx.base(rng, p, um, nuclei=600, h=0.1, e=0.35, fibre=0.5, mask=amnion)
        tx.base(rng, p, um, nuclei=2500, h=0.35, e=0.7, fibre=0.4, mask=chorion)
        tx.base(rng, p, um, nuclei=7000, h=0.75, e=0.6, fibre=0.2, mask=decidua)
        out.append(p)
    return out


def marrow_clot(rng, hs, ws, um):
    m, out = min(hs, ws), []
    for i in range(int(rng.integers(1, 3))):
        r = m * rng.uniform(0.16, 0.27)
        p = piece_from("marrow clot", [blob(rng, ws * (0.3 + 0.4 * i + rng.uniform(-0.04, 0.04)), hs * rng.uniform(0.4, 0.6), r, r * rng.uniform(0.6, 0.95), rng.uniform(0, 3), 0.3)])
        tx.base(rng, p, um, nuclei=800, h=0.12, e=0.45, fibre=0.7)  # fibrin and plasma
        spots = np.zeros(p.cover.shape, bool)
        ys, xs = np.nonzero(p.cover)
        for j in rng.integers(0, len(ys), int(rng.integers(4, 13))):
            rr = rng.uniform(60, 250) / um
            spots |= fill(p.cover.shape, [blob(rng, xs[j], ys[j], rr, rr * 0.7, rng.uniform(0, 3), 0.3)]).astype(bool)
        tx.base(rng, p, um, nuclei=12000, h=1.0, e=0.5, fibre=0.1, mask=spots & p.cover)  # marrow particles
        tx.holes(rng, p, um, int(rng.integers(5, 30)), 35)  # fat cells
        out.append(p)
    return out


def cervix_row(rng, hs, ws, um):
    k = int(rng.integers(3, 7))
    pitch = ws * 0.8 / k
    out = []
    for i in range(k):
        lx = pitch * rng.uniform(0.3, 0.45)
        ly = lx * rng.uniform(0.35, 0.7)
        x, y = ws * 0.1 + pitch * (i + 0.5), hs * 0.5 + rng.uniform(-0.08, 0.08) * hs
        p = piece_from("cervical biopsy", [blob(rng, x, y, lx, ly, rng.uniform(-0.3, 0.3), 0.22)])
        yy = np.arange(p.cover.shape[0])[:, None] + p.y0
        tx.base(rng, p, um, nuclei=2500, h=0.4, e=0.65, fibre=0.4)
        tx.covering(rng, p, um, np.broadcast_to(yy < y, p.cover.shape), rng.uniform(150, 350), h=0.9)
        out.append(p)
    return out


def lung_lace(rng, hs, ws, um):
    m = min(hs, ws)
    r = m * rng.uniform(0.28, 0.4)
    outline = blob(rng, ws / 2, hs / 2, r * rng.uniform(1.0, 1.4), r, rng.uniform(-0.4, 0.4), 0.2)
    p = piece_from("lung", [outline])
    cell = rng.uniform(90, 260) / um  # alveolus pitch
    wall = rng.uniform(12, 30) / um  # septum thickness
    sh = p.cover.shape
    air = np.zeros(sh, np.uint8)
    for y in np.arange(0, sh[0], cell):
        for x in np.arange(0, sh[1], cell):
            jx, jy = rng.uniform(-0.25, 0.25, 2) * cell
            ax = max(1.0, (cell - wall) * rng.uniform(0.5, 0.75))
            cv2.ellipse(air, ((x + jx, y + jy), (2 * ax, 2 * ax * rng.uniform(0.7, 1)), rng.uniform(0, 180)), 1, -1)
    core = tx.edge_distance(p.cover) > wall * 2  # a pleural rim stays solid
    p.cover &= ~(air.astype(bool) & core)
    tx.base(rng, p, um, nuclei=3500, h=0.45, e=0.75, fibre=0.2)
    tx.holes(rng, p, um, 1, rng.uniform(150, 300), rim_um=45, rim_h=1.1)  # a bronchiole
    tx.holes(rng, p, um, int(rng.integers(1, 4)), 80, rim_um=35, rim_h=0.2)  # vessels
    return [p]


LAYOUT_DRAWERS = {"cell_block": cell_block, "skin_curl": skin_curl, "ribbon": ribbon, "membrane": membrane,
                  "marrow_clot": marrow_clot, "cervix_row": cervix_row, "lung_lace": lung_lace}


def faint_piece(rng, cx, cy, size) -> Piece:
    """A pale mucus strand or an understained fragment around (cx, cy): mostly eosin, barely any
    nuclei, nearly even (its amounts are rescaled later to the planned OD)."""
    if rng.random() < 0.5:
        c = wander(rng, cx - size, cy + rng.uniform(-0.3, 0.3) * size, cx + size, cy + rng.uniform(-0.3, 0.3) * size, sway=0.1)
        p = piece_from("faint mucus strand", [strip(c, size * rng.uniform(0.12, 0.3) * np.ones(len(c)))])
    else:
        p = piece_from("faint fragment", [blob(rng, cx, cy, size, size * rng.uniform(0.5, 0.9), rng.uniform(0, 3), 0.25)])
    f = smooth(rng, p.cover.shape, 30)
    p.e += p.cover * np.clip(1 + 0.15 * f, 0.5, 1.5)
    p.h += p.cover * np.clip(0.12 + 0.05 * smooth(rng, p.cover.shape, 6), 0.02, None)
    return p
