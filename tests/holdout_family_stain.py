"""Stain of the held-back family (tests/holdout_family.py): the label map of a layout turned into
haematoxylin and eosin amounts on the fine grid, then what the bench does to a section: uneven
thickness (knife chatter), stain pooled at edges as the section dried, folds (two layers, double
density), and red cells (haemoglobin, one disc of about 7.5 µm a cell, with central pallor).

Amounts are in OD units along each stain's unit vector. The base amounts a tissue kind takes are
from memory of routine H&E (stroma and muscle eosinophilic, epithelium and lymphoid tissue rich in
nuclei, cartilage matrix basophilic, mucin pale blue-grey, fat only thin membranes).
"""

from __future__ import annotations

import cv2
import numpy as np

from holdout_family_layouts import KINDS, Sheet
from holdout_family_optics import disc_kernel, line_kernel, smooth

#         kind: (H base, E base, nuclei per 1000 µm², nucleus µm, elongation, streaks)
TABLE = {"stroma": (0.04, 0.50, 0.6, 7, 2.5, 0.22), "muscle": (0.05, 0.62, 1.3, 8, 3.5, 0.15),
         "epithelium": (0.10, 0.30, 8.0, 8, 1.3, 0.0), "lymphoid": (0.06, 0.18, 13.0, 6, 1.0, 0.0),
         "lumen": (0, 0, 0, 7, 1, 0), "necrosis": (0.08, 0.52, 7.0, 3, 1.0, 0.0),
         "cartilage": (0.32, 0.10, 1.0, 8, 1.0, 0.0), "mucin": (0.09, 0.03, 0.15, 8, 1.0, 0.6),
         "fat": (0, 0, 0, 7, 1, 0), "tumour": (0.14, 0.28, 10.0, 11, 1.2, 0.0),
         "crush": (0.85, 0.15, 0, 7, 1, 0.7), "plasma": (0.01, 0.07, 0.2, 7, 1, 0.0)}
NUCLEUS_OD = 0.55  # haematoxylin amount at a nucleus's centre (from memory)
RED_CELL_UM, CELL_AREA_UM2 = 7.5, np.pi * 3.75 ** 2


def _poisson_points(rng, density_per_um2: np.ndarray, p: float) -> np.ndarray:
    return rng.poisson(np.clip(density_per_um2, 0, None) * p * p).astype(np.float32)


def paint(rng, sh: Sheet, s_h: float, s_e: float) -> tuple[np.ndarray, np.ndarray]:
    """Haematoxylin and eosin amounts (Hf, Wf) for the sheet's labels, before bench artefacts."""
    shape, p, lab = sh.shape, sh.p, sh.label
    hb, eb, dens, size, elong, streak = (np.zeros(len(KINDS) + 1, np.float32) for _ in range(6))
    for name, row in TABLE.items():
        k = KINDS[name]
        hb[k], eb[k], dens[k], size[k], elong[k], streak[k] = row
    grain = smooth(rng, shape, 3.0 / p * 4)
    H = hb[lab] * (1 + 0.25 * grain)
    E = eb[lab] * (1 + 0.2 * smooth(rng, shape, 60 / p))
    # fibre streaks along the local orientation, four angle classes
    noise = rng.standard_normal(shape).astype(np.float32)
    quant = (np.round(sh.theta / (np.pi / 4)).astype(int)) % 4
    streaky = streak[lab] > 0
    for q in range(4):
        sel = streaky & (quant == q)
        if sel.any():
            f = cv2.filter2D(noise, -1, line_kernel(18 / p, q * np.pi / 4, 1.2 / p + 1))
            f /= f[sel].std() + 1e-6
            E[sel] *= np.clip(1 + streak[lab][sel] * f[sel], 0.2, None)
            crush = sel & (lab == KINDS["crush"])
            H[crush] *= np.clip(1 + 0.7 * f[crush], 0.1, None)
    # nuclei: round ones in one pass, elongated ones by angle class
    counts = _poisson_points(rng, dens[lab] / 1000.0, p)
    round_ = counts * (elong[lab] < 2)
    for d in np.unique(size[lab][(dens[lab] > 0) & (elong[lab] < 2)]):
        sel = (size[lab] == d) & (elong[lab] < 2)
        H += NUCLEUS_OD * cv2.filter2D(round_ * sel, -1, disc_kernel(d / p))
    for q in range(4):
        sel = (elong[lab] >= 2) & (quant == q)
        if sel.any():
            k = line_kernel(11 / p, q * np.pi / 4, 2.5 / p + 1)
            H += NUCLEUS_OD * cv2.filter2D(counts * sel, -1, k / k.max())
    cart = lab == KINDS["cartilage"]
    if cart.any():  # lacunae: clear halos round the chondrocytes in the matrix
        halo = cv2.filter2D(counts * cart, -1, disc_kernel(18 / p))
        H[cart] *= np.clip(1 - 0.8 * halo[cart], 0, 1)
        E[cart] *= np.clip(1 - 0.8 * halo[cart], 0, 1)
        H[cart] += NUCLEUS_OD * cv2.filter2D(counts * cart, -1, disc_kernel(6 / p))[cart]
    fat = lab == KINDS["fat"]
    if fat.any():
        H, E = _fat(rng, sh, fat, H, E)
    empty = (lab == KINDS["lumen"]) | (lab == 0)
    H[empty], E[empty] = 0, 0
    piece_gain = np.concatenate([[0.0], rng.uniform(0.8, 1.2, sh.n)]).astype(np.float32)[sh.piece]
    return (H * s_h * piece_gain).astype(np.float32), (E * s_e * piece_gain).astype(np.float32)


def _fat(rng, sh, fat, H, E):
    """Adipocytes: cells of 50-110 µm, empty inside, membranes of about one fine pixel."""
    cell = rng.uniform(50, 110) / sh.p
    seeds = np.ones(sh.shape, np.uint8)
    ys, xs = np.nonzero(fat)
    n = max(1, int(fat.sum() / cell ** 2))
    i = rng.integers(0, ys.size, n)
    seeds[ys[i], xs[i]] = 0
    _, lab = cv2.distanceTransformWithLabels(seeds, cv2.DIST_L2, 5, labelType=cv2.DIST_LABEL_PIXEL)
    edge = np.zeros(sh.shape, bool)
    edge[:, 1:] |= lab[:, 1:] != lab[:, :-1]
    edge[1:, :] |= lab[1:, :] != lab[:-1, :]
    mem = edge & fat
    H[fat], E[fat] = 0, 0
    H[mem], E[mem] = 0.12, 0.45
    return H, E


def chatter(rng, H, E, tissue, p) -> dict:
    """Knife chatter: thickness bands across the section, parallel to the knife edge."""
    per, amp, ang = rng.uniform(60, 250) / p, rng.uniform(0.12, 0.45), rng.uniform(0, np.pi)
    y, x = np.ogrid[0:H.shape[0], 0:H.shape[1]]
    band = (1 + amp * np.sin(2 * np.pi * (x * np.cos(ang) + y * np.sin(ang)) / per)).astype(np.float32)
    band = np.where(tissue, band, 1)
    H *= band
    E *= band
    return {"period_um": round(per * p, 1), "amplitude": round(amp, 2)}


def edge_pooling(rng, H, E, tissue, p) -> dict:
    """Stain pooled at the edges as the section dried: darker rims fading inwards."""
    k, lam = rng.uniform(0.3, 0.9), rng.uniform(15, 50) / p
    d = cv2.distanceTransform(np.pad(tissue, 1).astype(np.uint8), cv2.DIST_L2, 5)[1:-1, 1:-1]
    f = np.where(tissue, 1 + k * np.exp(-d / lam), 1).astype(np.float32)
    E *= f
    H *= 1 + (f - 1) * 0.5
    return {"gain": round(k, 2), "depth_um": round(lam * p, 1)}


def fold(rng, sh: Sheet, H, E, piece: int) -> dict | None:
    """A fold across ``piece``: a band where the section lies on itself (twice the amounts)."""
    ys, xs = np.nonzero(sh.piece[::6, ::6] == piece)
    if not ys.size:
        return None
    i = rng.integers(ys.size)
    cy, cx, ang = ys[i] * 6, xs[i] * 6, rng.uniform(0, np.pi)
    w = rng.uniform(60, 350) / sh.p
    y, x = np.ogrid[0:sh.shape[0], 0:sh.shape[1]]
    dist = np.abs((x - cx) * -np.sin(ang) + (y - cy) * np.cos(ang))
    band = (dist < w / 2) & (sh.piece == piece)
    H[band] *= 2
    E[band] *= 2
    return {"piece": piece, "width_um": round(w * sh.p, 1)}


def red_cells(rng, region: np.ndarray, p: float, packing) -> np.ndarray:
    """Red cells in ``region``: Poisson centres at ``packing`` (share of area covered, a map or a
    number), each a 7.5 µm disc with central pallor; returns the cells' summed thickness (1 = one
    cell's rim), the haemoglobin amount before its strength."""
    counts = _poisson_points(rng, region * np.asarray(packing, np.float32) / CELL_AREA_UM2, p)
    return cv2.filter2D(counts, -1, disc_kernel(RED_CELL_UM / p, pallor=0.35))
