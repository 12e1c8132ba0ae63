"""Pieces lined by a surface (tests/sealed_family.py): skin ellipse excisions with an epidermis band,
cervical cone sections with a squamous surface and a canal cleft, and polypectomy specimens (a
crypt-filled head on a fibrous stalk). Each function takes the draw's random generator and ``u``,
subpixels per micrometre, and returns a ``Piece`` on its own patch; amounts are OD before the
draw's stain strengths.
"""

from __future__ import annotations

import numpy as np

from sealed_family_shapes import Frame, Piece, blob, depth, fill, line, membranes, noise, speckle, wander


def _stroma(rng, shape, u, e=(0.3, 0.55), h=(0.03, 0.08), nuclei=0.35):
    """Collagenous stroma: eosin with fibre-scale texture, scattered nuclei."""
    ev = rng.uniform(*e) * np.clip(1 + 0.22 * noise(shape, 25 * u, rng) + 0.12 * noise(shape, 5 * u, rng), 0.3, 2)
    hv = rng.uniform(*h) + nuclei * speckle(shape, rng, rng.uniform(0.04, 0.12), 6 * u)
    return hv.astype(np.float32), ev.astype(np.float32)


def _fat(rng, shape, u, region, h, e):
    """Fat inside ``region``: empty cells 50-100 um across with thin eosinophilic walls."""
    walls = membranes(shape, rng.uniform(50, 100) * u, rng, thickness=max(1, int(round(2.5 * u))))
    h[region] = 0.02 * walls[region]
    e[region] = rng.uniform(0.2, 0.4) * walls[region]


def skin(rng, u: float, span_um: float) -> Piece:
    """An ellipse excision of skin: a lens-shaped piece with an epidermis band (keratin on top)
    along one long edge, dermis with adnexa, sometimes subcutaneous fat along the other edge."""
    length = rng.uniform(0.45, 0.95) * span_um * u
    width = length * rng.uniform(0.22, 0.4)
    n = 90
    t = np.linspace(0, 1, n)
    x = (t - 0.5) * length
    half = 0.5 * width * np.sin(np.pi * t) ** rng.uniform(0.6, 0.9)
    top = np.stack([x, -half * (1 + wander(rng, n, 0.08))], axis=1)
    bottom = np.stack([x, half * (1 + wander(rng, n, 0.12))], axis=1)
    outline = np.concatenate([top, bottom[::-1]])
    f = Frame(outline, rng.uniform(0, np.pi))
    mask = fill(f.shape, [f(outline)])
    h, e = _stroma(rng, f.shape, u)
    thick = rng.uniform(60, 160) * u
    epi = line(f.shape, f(top), 2 * thick) & mask
    h[epi] = rng.uniform(0.5, 0.85) * (0.45 + 0.7 * speckle(f.shape, rng, 0.5, 7 * u))[epi]
    e[epi] = rng.uniform(0.25, 0.4)
    kera = line(f.shape, f(top), 2 * rng.uniform(8, 25) * u) & mask
    h[kera], e[kera] = 0.02, rng.uniform(0.45, 0.7)
    for _ in range(int(rng.integers(2, 7))):  # adnexa: hair follicles, glands
        p = f([[rng.uniform(-0.35, 0.35) * length, rng.uniform(-0.1, 0.3) * width]])[0]
        gl = fill(f.shape, [p + blob(rng, rng.uniform(25, 70) * u, rng.uniform(25, 60) * u, 0.2)]) & mask
        h[gl] = rng.uniform(0.5, 0.8)
    fat = rng.random() < 0.6
    if fat:
        cut = np.stack([x, half * rng.uniform(0.1, 0.55) + wander(rng, n, 0.1 * width)], axis=1)
        sub = fill(f.shape, [f(np.concatenate([cut, bottom[::-1]]))]) & mask & ~epi
        _fat(rng, f.shape, u, sub, h, e)
    return Piece("skin ellipse", mask, h, e, {"epidermis_um": round(thick / u), "fat": fat})


def cone(rng, u: float, span_um: float) -> Piece:
    """A cervical cone section: a wedge with stratified squamous epithelium along its wide top,
    an endocervical canal cleft from the top, glands near the canal and fibromuscular stroma."""
    wide = rng.uniform(0.45, 0.85) * span_um * u
    tall = wide * rng.uniform(0.5, 0.9)
    tip = wide * rng.uniform(0.05, 0.3)
    n = 60
    xs = np.linspace(-wide / 2, wide / 2, n)
    top = np.stack([xs, -tall / 2 + wander(rng, n, 0.04 * tall) + 0.06 * tall * (2 * xs / wide) ** 2], axis=1)
    side_r = np.stack([np.linspace(wide / 2, tip / 2, n), np.linspace(-tall / 2, tall / 2, n) + 0], axis=1)
    side_r[:, 0] += wander(rng, n, 0.05 * wide)
    side_l = side_r[::-1].copy()
    side_l[:, 0] = -side_l[:, 0] + wander(rng, n, 0.05 * wide)
    outline = np.concatenate([top, side_r[1:], side_l[1:-1]])
    f = Frame(outline, rng.uniform(0, 2 * np.pi))
    mask = fill(f.shape, [f(outline)])
    h, e = _stroma(rng, f.shape, u, e=(0.35, 0.6), h=(0.05, 0.12))
    thick = rng.uniform(100, 300) * u
    epi = line(f.shape, f(top), 2 * thick) & mask
    layered = 0.35 + 0.5 * speckle(f.shape, rng, 0.45, 7 * u)
    h[epi] = rng.uniform(0.35, 0.7) * layered[epi]
    e[epi] = rng.uniform(0.2, 0.45)
    cleft_w = rng.choice([rng.uniform(15, 80), rng.uniform(160, 320)]) * u
    m = 24
    cy = np.linspace(-tall / 2 - 5 * u, tall * rng.uniform(0.0, 0.35), m)
    canal = np.stack([wander(rng, m, 0.03 * wide) + rng.uniform(-0.1, 0.1) * wide, cy], axis=1)
    gap = line(f.shape, f(canal), cleft_w) & mask
    for _ in range(int(rng.integers(5, 16))):  # endocervical glands by the canal
        q = canal[rng.integers(m)] + rng.normal(0, 0.1 * wide, 2)
        p = f([q])[0]
        r = rng.uniform(20, 55) * u
        ring = fill(f.shape, [p + blob(rng, r, r * rng.uniform(0.5, 1), 0.2)]) & mask & ~epi
        lumen = fill(f.shape, [p + blob(rng, 0.6 * r, 0.4 * r, 0.15)])
        h[ring], e[ring] = rng.uniform(0.35, 0.6), 0.2
        h[ring & lumen], e[ring & lumen] = 0.0, 0.03
    h[gap], e[gap] = 0.0, 0.0
    wide_cleft = cleft_w > 100 * u
    if wide_cleft:  # a canal wider than ~100 um is glass, not tissue
        mask &= ~gap
    return Piece("cervical cone", mask, h, e, {"canal_um": round(cleft_w / u), "canal_open": bool(wide_cleft)})


def polyp(rng, u: float, span_um: float) -> Piece:
    """A polypectomy specimen: a rounded head packed with crypts (lumens ringed by epithelium,
    lumens count as tissue) on a narrower fibrous stalk with vessels."""
    r = rng.uniform(0.18, 0.3) * span_um * u
    head = blob(rng, r, r * rng.uniform(0.75, 1.0), 0.12)
    sw, sl = r * rng.uniform(0.3, 0.6), r * rng.uniform(0.7, 1.6)
    m = 20
    bend = wander(rng, m, 0.15 * sl)
    ys = np.linspace(0.6 * r, 0.6 * r + sl, m)
    stalk = np.concatenate([np.stack([-sw / 2 + bend, ys], 1), np.stack([sw / 2 + bend, ys], 1)[::-1]])
    f = Frame(np.concatenate([head, stalk]), rng.uniform(0, 2 * np.pi))
    head_m, stalk_m = fill(f.shape, [f(head)]), fill(f.shape, [f(stalk)])
    mask = head_m | stalk_m
    h, e = _stroma(rng, f.shape, u, e=(0.4, 0.65), h=(0.04, 0.1), nuclei=0.2)
    lp = head_m
    h[lp] = (0.15 + 0.35 * speckle(f.shape, rng, 0.25, 6 * u))[lp]
    e[lp] = rng.uniform(0.2, 0.35)
    d = depth(head_m)
    spacing = rng.uniform(80, 140) * u
    ys_, xs_ = np.nonzero(head_m & (d > 0.5 * spacing))
    k = min(ys_.size, int(head_m.sum() / spacing ** 2 * 0.9))
    pick = rng.choice(ys_.size, size=k, replace=False) if k else []
    ring_amt = rng.uniform(0.45, 0.8)
    outers, inners = [], []
    for i in pick:
        c = np.array([xs_[i], ys_[i]], float)
        rr = rng.uniform(22, 40) * u
        shape = blob(rng, rr, rr * rng.uniform(0.5, 0.9), 0.15, n=24, harmonics=3)
        rot = rng.uniform(0, np.pi)
        shape = shape @ np.array([[np.cos(rot), -np.sin(rot)], [np.sin(rot), np.cos(rot)]]).T
        outers.append(c + shape * 1.7)
        inners.append(c + shape)
    inner = fill(f.shape, inners) & head_m
    ring = fill(f.shape, outers) & ~inner & head_m
    h[ring], e[ring] = ring_amt, 0.22
    h[inner], e[inner] = 0.0, 0.02
    for _ in range(int(rng.integers(2, 6))):  # stalk vessels: empty lumen, thin wall
        yy, xx = np.nonzero(stalk_m & ~head_m)
        if yy.size == 0:
            break
        i = rng.integers(yy.size)
        rr = rng.uniform(10, 35) * u
        wall = fill(f.shape, [np.array([xx[i], yy[i]]) + blob(rng, rr * 1.4, rr * 1.4, 0.1, n=24)]) & stalk_m
        lum = fill(f.shape, [np.array([xx[i], yy[i]]) + blob(rng, rr, rr, 0.1, n=24)]) & stalk_m
        e[wall], h[wall] = 0.6, 0.12
        e[lum], h[lum] = 0.0, 0.0
    return Piece("polyp on stalk", mask, h, e, {"crypts": int(k)})
