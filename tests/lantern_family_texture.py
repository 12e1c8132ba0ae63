"""The lantern family's tissue textures at cell scale: nuclei, stroma fibres, glands with an
epithelial rim, fat vacuoles, covering epithelium along an edge. Each adds to a Piece in place
(amounts before the draw's stain strengths; ``um``: µm per subpixel)."""

from __future__ import annotations

import cv2
import numpy as np

from lantern_family_shapes import blob, edge_distance, fibres, smooth, speckle


def base(rng, p, um, *, nuclei=3000.0, h=0.5, e=0.7, fibre=0.3, clump=0.4, mask=None):
    """Nucleated stroma over ``mask`` (the whole piece by default): haematoxylin from Poisson
    nuclei (~4 µm) clumped by a smooth field, eosin streaked by fibres."""
    m = p.cover if mask is None else mask
    shape = m.shape
    mod = np.clip(1 + clump * smooth(rng, shape, 250 / um), 0.15, None)
    nuc = speckle(rng, shape, nuclei, 4.0, um) * mod
    fib = fibres(rng, shape, max(3, 40 / um), rng.uniform(0, np.pi))
    low = smooth(rng, shape, 600 / um)
    p.h += m * h * (0.25 + 0.75 * np.clip(nuc, 0, 4))
    p.e += m * e * np.clip(1 + 0.5 * fibre * fib + 0.15 * low, 0.25, None)


def clusters(rng, p, um, *, share=0.25, nuclei=9000.0, h=0.9, e=0.4):
    """Dense cell clusters (a cell block's cells, marrow particles) where a smooth field is high."""
    f = smooth(rng, p.cover.shape, 120 / um)
    m = p.cover & (f > np.quantile(f[p.cover], 1 - share)) if p.cover.any() else p.cover
    base(rng, p, um, nuclei=nuclei, h=h, e=e, fibre=0.1, clump=0.2, mask=m)
    return m


def holes(rng, p, um, count, r_um, rim_um=0.0, rim_h=0.0):
    """Round-ish lumens (glands, fat): inside is glass (no material); ``rim_um`` of epithelium
    with ``rim_h`` haematoxylin around each."""
    ys, xs = np.nonzero(edge_distance(p.cover) > (r_um + rim_um) / um + 2)
    if not len(ys):
        return
    out = np.zeros(p.cover.shape, np.uint8)
    rim = np.zeros(p.cover.shape, np.uint8)
    for i in rng.integers(0, len(ys), count):
        r = rng.uniform(0.6, 1.4) * r_um / um
        ol = blob(rng, xs[i], ys[i], r, r * rng.uniform(0.6, 1.0), rng.uniform(0, np.pi), 0.12, 40)
        cv2.fillPoly(out, [np.round(ol * 16).astype(np.int32)], 1, shift=4)
        if rim_um:
            c = np.array([xs[i], ys[i]])
            big = c + (ol - c) * (1 + rim_um / um / max(r, 1))
            cv2.fillPoly(rim, [np.round(big * 16).astype(np.int32)], 1, shift=4)
    gone = out.astype(bool)
    if rim_um:
        band = rim.astype(bool) & ~gone & p.cover
        p.h += band * rim_h * np.clip(speckle(rng, band.shape, 14000, 3.5, um), 0, 3)
    for a in (p.h, p.e, p.hb):
        a[gone] = 0
    p.cover &= ~gone
    p.blood &= ~gone


def covering(rng, p, um, side, depth_um, *, h=1.0, keratin_um=0.0):
    """Covering epithelium (skin, cervix) along the piece's edge where ``side`` (bool, window
    shape) is true: dark basal layers deepest, paler towards the surface, optional keratin."""
    d = edge_distance(p.cover) * um
    band = p.cover & side & (d < depth_um)
    depth = np.clip(d / depth_um, 0, 1)
    nuc = np.clip(speckle(rng, band.shape, 16000, 3.5, um), 0, 3)
    p.h += band * h * (0.3 + 0.7 * depth) * nuc
    p.e += band * 0.45
    if keratin_um:
        k = band & (d < keratin_um)
        p.h[k] *= 0.1
        p.e[k] += 0.5
    return band
