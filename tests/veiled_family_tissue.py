"""Tissue of the veiled family: the hematoxylin and eosin amounts of each piece, by tissue type,
on the subpixel canvas (Beer–Lambert: OD = h * H + e * E with the turned Ruifrok & Johnston vectors).

Types (amounts at stain strength 1; nuclei as hematoxylin blobs of about the stated size):
cellular, lymphoid (crowded small nuclei), fibrous (smooth, dense eosin, few long nuclei), muscle
(eosin in fibre bands, cigar nuclei), fat (thin eosin membranes around empty, glass-coloured cells
of 40-120 um, counted as tissue as a pathologist outlines it), epithelium, frozen (pale, blotchy).
A fold doubles the thickness (the amounts) in a band; a tear cuts a glass gap through a piece.
Every ordinary piece is built to at least 0.12 mean green OD above glass (its amounts are raised
when a weak stain and fat would leave it fainter), so ordinary tissue is plainly visible.
"""

from __future__ import annotations

import math

import cv2
import numpy as np

from veiled_family_canvas import band_outline, curve, dots, smooth_noise

CELLULAR, LYMPHOID, FIBROUS, MUSCLE, FAT, EPITHELIUM, FROZEN = range(1, 8)
TYPE_NAMES = {CELLULAR: "cellular", LYMPHOID: "lymphoid", FIBROUS: "fibrous", MUSCLE: "muscle",
              FAT: "fat", EPITHELIUM: "epithelium", FROZEN: "frozen"}
# eosin, eosin texture, diffuse hematoxylin, nuclei per 1000 um^2, nucleus size um, elongation
TYPES = {CELLULAR: (0.45, 0.25, 0.08, 6.0, 7.0, 1.0), LYMPHOID: (0.25, 0.20, 0.12, 14.0, 6.0, 1.0),
         FIBROUS: (0.80, 0.06, 0.03, 0.8, 8.0, 2.5), MUSCLE: (0.70, 0.20, 0.05, 2.0, 9.0, 3.0),
         FAT: (0.0, 0.0, 0.0, 0.15, 7.0, 1.0), EPITHELIUM: (0.40, 0.20, 0.10, 12.0, 8.0, 1.0),
         FROZEN: (0.38, 0.35, 0.12, 6.0, 9.0, 1.0)}
MIN_OD = 0.12


def zone_mix(rng, shape, types, cell: float) -> np.ndarray:
    """A type map of ``shape``: patches of the listed types (the first one the most common)."""
    if len(types) == 1:
        return np.full(shape, types[0], np.uint8)
    fields = [smooth_noise(rng, shape, cell) + (0.6 if i == 0 else 0.0) for i in range(len(types))]
    return np.asarray(types, np.uint8)[np.argmax(np.stack(fields), axis=0)]


def fat_membranes(rng, mask: np.ndarray, um: float) -> np.ndarray:
    """Eosin of fat: one-subpixel membranes between Voronoi cells 40-120 um across."""
    h, w = mask.shape
    d = rng.uniform(40, 120) * um
    n = int(h * w / (d * d)) + 1
    img = np.ones((h, w), np.uint8)
    img[rng.integers(0, h, n), rng.integers(0, w, n)] = 0
    _, lab = cv2.distanceTransformWithLabels(img, cv2.DIST_L2, 3, labelType=cv2.DIST_LABEL_PIXEL)
    edge = np.zeros((h, w), np.float32)
    edge[:, 1:] += lab[:, 1:] != lab[:, :-1]
    edge[1:, :] += lab[1:, :] != lab[:-1, :]
    return np.minimum(edge, 1.0) * np.float32(rng.uniform(1.2, 2.0)) + np.float32(0.02)


def cut_tear(rng, shape, um: float) -> None:
    """A tear: a thin curved glass gap (15-60 um) across the piece, cut out of its mask."""
    h, w = shape.mask.shape
    ys, xs = np.nonzero(shape.mask)
    i = rng.integers(len(ys))
    a, L = rng.uniform(0, math.pi), max(h, w) * rng.uniform(0.3, 0.8)
    c = np.array([xs[i], ys[i]], float)
    d = np.array([math.cos(a), math.sin(a)]) * L / 2
    path = curve(rng, c - d, c + d, 0.15)
    width = rng.uniform(15, 60) * um * (0.5 + np.abs(np.sin(np.linspace(0, math.pi, len(path)))))
    m = np.zeros((h, w), np.uint8)
    cv2.fillPoly(m, [np.rint(band_outline(path, width) * 8).astype(np.int32)], 1, cv2.LINE_8, 3)
    shape.mask &= ~m.astype(bool)


def fold_band(rng, mask: np.ndarray, um: float) -> np.ndarray:
    """A fold: a band 0.08-0.35 mm wide through the piece where it lies double."""
    h, w = mask.shape
    ys, xs = np.nonzero(mask)
    i = rng.integers(len(ys))
    a, half = rng.uniform(0, math.pi), rng.uniform(40, 175) * um
    yy, xx = np.mgrid[0:h, 0:w].astype(np.float32)
    dist = np.abs((xx - xs[i]) * math.sin(a) - (yy - ys[i]) * math.cos(a))
    return (dist < half) & mask


def amounts(rng, zones: np.ndarray, mask: np.ndarray, um: float):
    """Hematoxylin and eosin amounts (at strength 1) over a piece's box, from its type map."""
    h, w = mask.shape
    hem, eos = np.zeros((h, w), np.float32), np.zeros((h, w), np.float32)
    base_noise = smooth_noise(rng, (h, w), 60 * um)
    fine_noise = smooth_noise(rng, (h, w), 12 * um)
    for t in np.unique(zones[mask]):
        z = (zones == t) & mask
        e0, etex, h0, nuc, size, elong = TYPES[int(t)]
        angle = rng.uniform(0, math.pi)
        if t == FAT:
            e = fat_membranes(rng, z, um)
        elif t == MUSCLE:
            yy, xx = np.mgrid[0:h, 0:w].astype(np.float32)
            u = (-xx * math.sin(angle) + yy * math.cos(angle)) / (rng.uniform(12, 30) * um)
            e = e0 * (1 + etex * np.sin(2 * math.pi * u + 2 * base_noise) + 0.1 * fine_noise)
        else:
            e = e0 * (1 + etex * (0.6 * base_noise + 0.8 * fine_noise))
        area_um2 = z.sum() / um ** 2
        nuclei = dots(rng, z, int(nuc * area_um2 / 1000), max(0.7, size * um / 2.4), elong, angle)
        if t == FROZEN:
            nuclei = cv2.GaussianBlur(nuclei, (0, 0), 1.2) * 1.6
        eos[z] = np.clip(e, 0.0, None)[z]
        hem[z] = (h0 * (1 + 0.3 * fine_noise) + 0.9 * nuclei)[z]
    return np.clip(hem, 0, None), eos


def scale_to(od: np.ndarray, mask: np.ndarray, target: float, rng, at_least: bool = True) -> float:
    """The factor by which ``od`` must be multiplied so that the mean green transmission over
    ``mask`` is 10**-target (bisection on a sample of the subpixels); with ``at_least`` never below 1
    (only raising a piece that is fainter than ``target``)."""
    g = od[..., 1][mask].astype(np.float64)
    if g.size > 60000:
        g = g[rng.integers(0, g.size, 60000)]
    level = lambda k: -math.log10(float(np.mean(10.0 ** (-k * g))))
    if g.size == 0 or g.max() <= 0 or (at_least and level(1.0) >= target):
        return 1.0
    lo, hi = 0.0, 1.0
    while level(hi) < target and hi < 1e4:
        lo, hi = hi, hi * 2
    for _ in range(50):
        mid = (lo + hi) / 2
        lo, hi = (mid, hi) if level(mid) < target else (lo, mid)
    return (lo + hi) / 2


def render_piece(rng, canvas, piece: dict, p: dict, vh, ve) -> None:
    """Draw one ordinary piece (its ``shape`` and type map ``zones``) onto the canvas."""
    shape, um = piece["shape"], canvas.um
    for _ in range(piece.get("tears", 0)):
        if shape.mask.sum() > 400:
            cut_tear(rng, shape, um)
    mask = shape.mask
    if not mask.any():
        return
    hem, eos = amounts(rng, piece["zones"], mask, um)
    for _ in range(piece.get("folds", 0)):
        f = fold_band(rng, mask, um)
        hem[f] *= 2.0
        eos[f] *= 2.0
    od = (p["stain"]["h"] * hem)[..., None] * vh.astype(np.float32) + (p["stain"]["e"] * eos)[..., None] * ve.astype(np.float32)
    od[~mask] = 0
    od *= np.float32(scale_to(od, mask, MIN_OD, rng))
    canvas.add_od(shape, od)
    canvas.mark("tissue", shape)
    canvas.add_piece({"kind": piece["kind"], "types": sorted(TYPE_NAMES[int(t)] for t in np.unique(piece["zones"][mask]))}, shape)
