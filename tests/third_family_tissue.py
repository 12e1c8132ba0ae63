"""Tissue of the third hard-slide family (tests/third_family.py): layouts, texture, red cells,
faint regions and folds, drawn on a fine grid (a third of the thumbnail's pixel).

Written apart from the tissue mask and the other families (see third_family.py).

Layouts (odds): fragmented curettage pieces, 6-22 of 0.12-0.6 mm radius with torn edges (0.22);
TMA-like round cores of 0.6-1.2 mm in a slightly turned grid, some missing or broken (0.18);
one or two large resection pieces with lobules, gland lumens, vessels and tears (0.25); the same
with fat lobules of empty adipocytes (cells 45-110 µm, thin membranes) over 25-70 % of it (0.15);
2-5 thin strips 0.25-1.2 mm wide, torn in pieces, some with a dense epidermis-like edge (0.20).
Stroma carries wavy eosin fibres and sparse nuclei, epithelium dense nuclei; nuclei are ~6 µm
spots of haematoxylin. Haemorrhage (half the draws): packed red cells (one ~7-8 µm disc a cell,
with a paler centre) over 5-60 % of 1-3 pieces (a little more counting what protrudes), from
the edge (protruding up to 0.12 mm) or inside; vessels full of red cells in the large layouts. Faint tissue (a third of the draws):
1-2 regions, a whole small piece or a sector at a large piece's edge, whose mean optical density
above glass in green is 0.03-0.12. Folds (a quarter): a band of a large piece at twice the
density with a darker crease.
"""

from __future__ import annotations

import numpy as np
from scipy import ndimage

from third_family_marks import resample, stroke_cover

LAYOUTS = {"curettage": 0.22, "tma": 0.18, "resection": 0.25, "fatty": 0.15, "strips": 0.20}
E0, H0 = 0.26, 0.6  # stromal eosin and nuclear haematoxylin concentrations at strength 1


def smooth_noise(rng, shape, scale):
    """Zero-mean, unit-variance noise smooth over ``scale`` pixels."""
    small = rng.normal(size=(int(shape[0] / scale) + 3, int(shape[1] / scale) + 3)).astype(np.float32)
    if scale < 9:
        return ndimage.zoom(small, scale, order=1)[: shape[0], : shape[1]]
    coarse = ndimage.zoom(small, scale / 3, order=1)  # smooth at a third of the size, then blocks of 3
    return np.repeat(np.repeat(coarse, 3, 0), 3, 1)[: shape[0], : shape[1]]


def polar_piece(rng, shape, px, centre, radius, *, aspect=1.0, rough=0.1, jag=0.03):
    """A piece with a lobulated, torn outline: (slices, coverage) on its bounding box (fine px)."""
    k = np.arange(2, 7)
    lo = rng.normal(0, rough, 5) / (k - 1)
    hk = np.arange(8, 40)
    hi = rng.normal(0, jag, hk.size) * (8 / hk) ** 1.5
    ph_lo, ph_hi = rng.uniform(0, 2 * np.pi, 5), rng.uniform(0, 2 * np.pi, hk.size)
    a = np.linspace(-np.pi, np.pi, 4097)[:, None]
    table = radius * (1 + (lo * np.cos(k * a + ph_lo)).sum(1)) * (1 + (hi * np.cos(hk * a + ph_hi)).sum(1))
    ang = rng.uniform(0, np.pi)
    reach = radius * aspect * (1 + 2 * rough + 3 * jag) / px + 3
    cy, cx = np.asarray(centre) / px
    y0, y1 = max(int(cy - reach), 0), min(int(cy + reach) + 1, shape[0])
    x0, x1 = max(int(cx - reach), 0), min(int(cx + reach) + 1, shape[1])
    if y1 <= y0 or x1 <= x0:
        return None
    yy, xx = np.mgrid[y0:y1, x0:x1].astype(np.float32)
    u = ((xx - cx) * np.cos(ang) + (yy - cy) * np.sin(ang)) * px
    v = (-(xx - cx) * np.sin(ang) + (yy - cy) * np.cos(ang)) * px
    th = np.arctan2(v * aspect, u)
    rho = np.hypot(u, v * aspect) / aspect ** 0.5
    r = table.astype(np.float32)[np.rint((th + np.pi) * (4096 / (2 * np.pi))).astype(np.int32)]
    return (slice(y0, y1), slice(x0, x1)), np.clip((r - rho) / px + 0.5, 0, 1)


class Tissue:
    """The fine-grid layers of one draw's tissue (concentrations per unit stain vector)."""

    def __init__(self, shape, px):
        self.shape, self.px = shape, px
        self.cov = np.zeros(shape, np.float32)      # tissue coverage
        self.lab = np.zeros(shape, np.int16)        # piece id
        self.epi = np.zeros(shape, np.float32)      # epithelium (dense nuclei)
        self.hollow = np.zeros(shape, bool)         # lumens and adipocyte interiors
        self.mem = np.zeros(shape, np.float32)      # adipocyte membranes
        self.blood = np.zeros(shape, bool)          # red-cell regions
        self.faint = []                             # bool map a faint region
        self.kinds = {}                             # piece id -> kind

    def add(self, piece, kind):
        if piece is None:
            return 0
        sl, c = piece
        k = len(self.kinds) + 1
        self.cov[sl] = np.maximum(self.cov[sl], c)
        self.lab[sl][(c > 0.5) & (self.lab[sl] == 0)] = k
        self.kinds[k] = kind
        return k

    def area_mm2(self, k):
        return float((self.lab == k).sum()) * self.px ** 2 / 1e6


def _grid(shape, px):
    yy, xx = np.ogrid[: shape[0], : shape[1]]
    return (yy * px).astype(np.float32), (xx * px).astype(np.float32)


def _lobules(rng, t, k, n, r_um):
    """Epithelial lobules with gland lumens inside piece ``k``."""
    inside = np.argwhere(t.lab == k)
    for _ in range(n):
        c = inside[rng.integers(0, len(inside))] * t.px
        p = polar_piece(rng, t.shape, t.px, c, rng.uniform(*r_um), aspect=rng.uniform(1, 1.6), rough=0.15)
        if p is None:
            continue
        sl, cov = p
        t.epi[sl] = np.maximum(t.epi[sl], cov * (t.lab[sl] == k))
        for _ in range(rng.integers(0, 6)):
            g = polar_piece(rng, t.shape, t.px, c + rng.normal(0, 0.4 * r_um[0], 2), rng.uniform(15, 75),
                            aspect=rng.uniform(1, 2.2), rough=0.1, jag=0.0)
            if g is not None:
                t.hollow[g[0]] |= (g[1] > 0.5) & (t.lab[g[0]] == k)


def _fat(rng, t, k):
    """Fat lobules of empty adipocytes over part of piece ``k``."""
    inside = np.argwhere(t.lab == k)
    region = np.zeros(t.shape, bool)
    share = rng.uniform(0.25, 0.7)
    for _ in range(12):
        c = inside[rng.integers(0, len(inside))] * t.px
        p = polar_piece(rng, t.shape, t.px, c, rng.uniform(300, 1300), rough=0.2)
        if p is not None:
            region[p[0]] |= (p[1] > 0.5) & (t.lab[p[0]] == k)
        if region.sum() >= share * len(inside):
            break
    ys, xs = np.nonzero(region)
    if ys.size == 0:
        return
    y0, y1, x0, x1 = ys.min(), ys.max() + 1, xs.min(), xs.max() + 1
    size = rng.uniform(45, 110) / t.px
    gy, gx = np.mgrid[y0:y1, x0:x1].astype(np.float32)
    iy, ix = np.floor(gy / size).astype(int), np.floor(gx / size).astype(int)
    jit = rng.uniform(0.1, 0.9, (int(y1 / size) + 3, int(x1 / size) + 3, 2)).astype(np.float32)
    d1 = np.full(gy.shape, np.inf, np.float32)
    d2 = d1.copy()
    for dy in (-1, 0, 1):
        for dx in (-1, 0, 1):
            cy, cx = np.clip(iy + dy, 0, jit.shape[0] - 1), np.clip(ix + dx, 0, jit.shape[1] - 1)
            d = np.hypot(gy - (cy + jit[cy, cx, 0]) * size, gx - (cx + jit[cy, cx, 1]) * size)
            d2 = np.minimum(d2, np.maximum(d1, d))
            d1 = np.minimum(d1, d)
    wall = np.clip(rng.uniform(0.8, 1.4) - (d2 - d1) / 2 + 0.5, 0, 1)
    sl = (slice(y0, y1), slice(x0, x1))
    r = region[sl]
    t.mem[sl] = np.where(r, wall, t.mem[sl])
    t.hollow[sl] |= r & (wall < 0.5)


def _strip(rng, t, theta, y, x, length, width, skin):
    """A thin strip, torn into 1-3 segments."""
    steps = int(length / 80) + 2
    ang = theta + np.cumsum(rng.normal(0, 0.04, steps))
    pts = np.c_[y + np.cumsum(np.sin(ang)) * 80, x + np.cumsum(np.cos(ang)) * 80]
    cuts = np.sort(rng.choice(np.arange(3, steps - 3), rng.integers(0, 3), replace=False)) if steps > 8 else []
    for seg in np.split(np.arange(steps), cuts):
        seg = seg[int(rng.integers(0, 3)):] if len(seg) > 6 else seg
        if len(seg) < 3:
            continue
        p = pts[seg]
        w = width * (1 + 0.06 * smooth_noise(rng, (len(p), 1), 6)[:, 0])
        w[[0, -1]] *= rng.uniform(0.3, 0.8, 2)
        cov, _ = stroke_cover(t.shape, p / t.px, w / t.px)
        k = t.add(((slice(None), slice(None)), cov), "strip")
        if skin:
            n = np.c_[np.diff(p[:, 0], append=p[-1, 0] + p[-1, 0] - p[-2, 0]),
                      np.diff(p[:, 1], append=p[-1, 1] + p[-1, 1] - p[-2, 1])]
            n = np.c_[-n[:, 1], n[:, 0]] / np.maximum(np.hypot(*n.T), 1e-9)[:, None]
            e = rng.uniform(50, 120)
            band, _ = stroke_cover(t.shape, (p + n * (w / 2 - e / 2)[:, None]) / t.px, e / t.px)
            t.epi = np.maximum(t.epi, band * (t.lab == k))


def _place(rng, t, layout, H, W):
    if layout == "curettage":
        for _ in range(rng.integers(6, 23)):
            r = np.exp(rng.uniform(np.log(120), np.log(600)))
            for _ in range(5):
                c = rng.uniform([r, r], [H - r, W - r])
                p = polar_piece(rng, t.shape, t.px, c, r, aspect=rng.uniform(1, 2.5),
                                rough=rng.uniform(0.1, 0.25), jag=rng.uniform(0.02, 0.06))
                if p is not None and (t.cov[p[0]] * p[1]).sum() < 0.2 * p[1].sum():
                    t.add(p, "fragment")
                    t.epi[p[0]] = np.maximum(t.epi[p[0]], p[1] * rng.uniform(0.2, 0.8))
                    break
    elif layout == "tma":
        d = rng.uniform(600, 1200)
        step = d * rng.uniform(1.15, 1.6)
        rows, cols = max(1, int(0.92 * H / step)), max(1, int(0.92 * W / step))
        turn = np.radians(rng.uniform(-3, 3))
        for i in range(rows):
            for j in range(cols):
                if rng.random() < 0.12:
                    continue
                oy, ox = (i - (rows - 1) / 2) * step, (j - (cols - 1) / 2) * step
                c = np.array([H / 2 + oy * np.cos(turn) + ox * np.sin(turn),
                              W / 2 + ox * np.cos(turn) - oy * np.sin(turn)]) + rng.normal(0, 0.05 * d, 2)
                p = polar_piece(rng, t.shape, t.px, c, d / 2, aspect=rng.uniform(1, 1.15),
                                rough=rng.uniform(0.02, 0.06), jag=rng.uniform(0.005, 0.03))
                if p is not None and rng.random() < 0.15:  # a broken core
                    yy, xx = np.mgrid[p[0][0], p[0][1]] * t.px
                    a = rng.uniform(0, 2 * np.pi)
                    p = p[0], p[1] * ((yy - c[0]) * np.sin(a) + (xx - c[1]) * np.cos(a) < rng.uniform(0, d / 3))
                k = t.add(p, "core")
                if k and rng.random() < 0.5:
                    _lobules(rng, t, k, rng.integers(1, 4), (100, 300))
    elif layout in ("resection", "fatty"):
        for _ in range(20):
            t.cov[:], t.lab[:], t.kinds = 0, 0, {}
            for _ in range(rng.integers(1, 3)):
                r = rng.uniform(0.3, 0.55) * min(H, W)
                p = polar_piece(rng, t.shape, t.px, rng.uniform(0.2, 0.8, 2) * (H, W), r,
                                aspect=rng.uniform(1, 1.8), rough=rng.uniform(0.08, 0.2),
                                jag=rng.uniform(0.01, 0.03))
                t.add(p, "resection")
            if 0.15 < t.cov.mean() < 0.85:
                break
        for k in list(t.kinds):
            _lobules(rng, t, k, rng.integers(3, 13), (150, 600))
            if layout == "fatty":
                _fat(rng, t, k)
        for _ in range(rng.integers(0, 4) if rng.random() < 0.5 else 0):  # tears
            edge = np.argwhere(t.lab > 0)
            p0 = edge[rng.integers(0, len(edge))] * t.px
            a = np.cumsum(rng.normal(0, 0.3, 12)) + rng.uniform(0, 2 * np.pi)
            pts = p0 + np.cumsum(np.c_[np.sin(a), np.cos(a)], 0) * rng.uniform(40, 250)
            c, _ = stroke_cover(t.shape, resample(pts, 30) / t.px, rng.uniform(15, 60) / t.px)
            t.cov *= 1 - c
            t.lab[c > 0.5] = 0
    else:
        theta = rng.uniform(0, np.pi)
        for _ in range(rng.integers(2, 6)):
            length = rng.uniform(0.4, 0.9) * max(H, W)
            a = theta + rng.normal(0, 0.17)
            y, x = rng.uniform(0.15, 0.85, 2) * (H, W) - 0.5 * length * np.array([np.sin(a), np.cos(a)])
            _strip(rng, t, a, y, x, length, rng.uniform(250, 1200), rng.random() < 0.4)


def _red_cells(rng, t, cell_od):
    """Packed red cells (~7-8 µm discs, paler centre) filling ``t.blood``: their concentration."""
    s = rng.uniform(6.8, 7.8) / t.px
    ys, xs = np.nonzero(t.blood)
    if ys.size == 0:
        return np.zeros(t.shape, np.float32)
    row = 0.866 * s  # rows of a triangular lattice
    gy, gx = np.mgrid[ys.min() // row:ys.max() // row + 2, xs.min() // s - 1:xs.max() // s + 2].astype(np.float32)
    py = gy * row + rng.normal(0, 0.22 * s, gy.shape)
    px_ = gx * s + 0.5 * s * (np.rint(gy) % 2) + rng.normal(0, 0.22 * s, gx.shape)
    keep = (py >= 0) & (py < t.shape[0] - 1) & (px_ >= 0) & (px_ < t.shape[1] - 1)
    py, px_ = py[keep], px_[keep]
    iy, ix = py.astype(int), px_.astype(int)
    pack = np.clip(rng.uniform(0.7, 1.0) + 0.2 * smooth_noise(rng, t.shape, 60 / t.px)[iy, ix], 0.3, 1)
    on = t.blood[iy, ix] & (rng.random(iy.size) < pack)
    iy, ix, fy, fx = iy[on], ix[on], (py - iy)[on], (px_ - ix)[on]
    val = cell_od * rng.uniform(0.8, 1.2, iy.size)
    imp = np.zeros(t.shape, np.float32)
    for dy, dx, w in ((0, 0, (1 - fy) * (1 - fx)), (1, 0, fy * (1 - fx)), (0, 1, (1 - fy) * fx), (1, 1, fy * fx)):
        np.add.at(imp, (iy + dy, ix + dx), val * w)
    r = 3.7 / t.px
    sub = (np.mgrid[-12:13, -12:13] + 0.5) / 4.0  # 4x supersampled disc
    d = np.hypot(*sub)
    disc = np.where(d < r, np.where(d < 0.45 * r, 0.6, 1.0), 0.0)
    n = int(np.ceil(r)) + 1
    kern = np.zeros((2 * n + 1, 2 * n + 1))
    for (a, b), v in np.ndenumerate(disc):
        yy, xx = int(np.floor(sub[0][a, b] + n + 0.5)), int(np.floor(sub[1][a, b] + n + 0.5))
        if 0 <= yy <= 2 * n and 0 <= xx <= 2 * n:
            kern[yy, xx] += v / 16
    ys, xs = slice(max(ys.min() - n, 0), ys.max() + n + 1), slice(max(xs.min() - n, 0), xs.max() + n + 1)
    out = np.zeros(t.shape, np.float32)
    out[ys, xs] = ndimage.convolve(imp[ys, xs], kern.astype(np.float32), mode="constant")
    return out


def _quantile_region(rng, t, k, frac, edge):
    """Part of piece ``k`` (``frac`` of it) around a point on its edge or inside: distances."""
    mask = t.lab == k
    ys, xs = np.nonzero(mask)
    sl = (slice(max(ys.min() - 60, 0), ys.max() + 61), slice(max(xs.min() - 60, 0), xs.max() + 61))
    m = mask[sl]
    inner = ndimage.distance_transform_edt(m)
    pool = np.argwhere((inner > 0) & (inner < 2)) if edge else np.argwhere(inner > 0.4 * inner.max())
    p = pool[rng.integers(0, len(pool))]
    yy, xx = np.ogrid[: m.shape[0], : m.shape[1]]
    d = np.hypot(yy - p[0], xx - p[1]) * t.px
    d = d * (1 + 0.15 * smooth_noise(rng, m.shape, 40 / t.px))
    return sl, m, d, float(np.quantile(d[m], frac))


def finish(rng, t, *, green_he, strength):
    """Texture, haemorrhage, faint regions and folds: (cH, cE, cB) concentration maps."""
    sh, se = strength
    yy, xx = _grid(t.shape, t.px)
    phi = rng.uniform(0, np.pi) + 0.8 * smooth_noise(rng, t.shape, 300 / t.px)
    lam = rng.uniform(15, 40)
    fib = (0.5 + 0.5 * np.sin(2 * np.pi * (xx * np.cos(phi) + yy * np.sin(phi)) / lam
                              + 2 * smooth_noise(rng, t.shape, 80 / t.px))) ** 2
    tone = 1 + 0.15 * smooth_noise(rng, t.shape, 150 / t.px)
    ce = E0 * tone * ((1 - t.epi) * (0.7 + 0.3 * fib) + t.epi * 0.6)
    ch = H0 * 0.12 * tone * (1 + 1.5 * t.epi)
    per_um2 = 1 / 600 + t.epi * (1 / 90 - 1 / 600)
    fat = t.mem > 0
    per_um2[fat] = 1 / 3000
    ce[fat] = E0 * 0.9 * t.mem[fat]
    ch[fat] *= t.mem[fat]
    ce[t.hollow] = ch[t.hollow] = 0
    sigma = 3.0 / t.px
    nuc = rng.random(t.shape, np.float32) < per_um2 * t.px ** 2 * (~t.hollow)
    imp = nuc * rng.uniform(0.5, 1.0, t.shape).astype(np.float32) * H0 * 2 * np.pi * sigma ** 2
    ch += ndimage.gaussian_filter(imp, sigma)
    info = {"blood_share": [], "fold": 0, "fat": bool(fat.any())}
    ids = [k for k in t.kinds if t.area_mm2(k) > 0.05]
    big = ids if len(t.kinds) < 3 else [k for k in ids if t.area_mm2(k) > 0.25]
    lean = {k for k in t.kinds if (fat & (t.lab == k)).any()}
    spared = np.zeros(t.shape, bool)  # faint tissue and its soft rim: no red cells there
    for k in rng.permutation([k for k in ids if k not in lean])[: rng.integers(1, 3)] if rng.random() < 0.35 else []:
        target = rng.uniform(0.03, 0.12)
        if t.area_mm2(k) < 0.35 * t.cov.sum() * t.px ** 2 / 1e6:
            sl, m, w = np.s_[:, :], t.lab == k, (t.lab == k).astype(np.float32)
        else:
            sl, m, d, r = _quantile_region(rng, t, k, rng.uniform(0.15, 0.5), True)
            w = np.clip((r - d) / 30 + 0.5, 0, 1) * m
        od = green_he[0] * sh * ch[sl] + green_he[1] * se * ce[sl]
        reg = (w >= 0.5) & m & (t.cov[sl] > 0.5)
        kk = max((target - (od * (1 - w))[reg].mean()) / max((od * w)[reg].mean(), 1e-6), 0.01)
        ch[sl] *= 1 - w + w * kk
        ce[sl] *= 1 - w + w * kk
        region = np.zeros(t.shape, bool)
        region[sl] = reg
        t.faint.append(region)
        spared[sl] |= w > 0
    faint_ids = set(np.unique(t.lab[spared]))
    for k in rng.permutation(ids)[: rng.integers(1, 4)] if rng.random() < 0.5 and ids else []:
        edge = rng.random() < 0.6
        sl, m, d, r = _quantile_region(rng, t, k, rng.uniform(0.05, 0.6), edge)
        reach = min(120.0, rng.uniform(0.02, 0.12) * np.sqrt(t.area_mm2(k)) * 1000) if edge else 0.0
        inner = (d < r) & m & ~spared[sl]
        near = ndimage.distance_transform_edt(~inner) * t.px < reach  # protruding from the red part only
        reg = inner | ((d < r) & near & (ndimage.distance_transform_edt(~m) * t.px < reach) & ~spared[sl])
        t.blood[sl] |= reg
        t.cov[sl][reg] = 1.0
        t.lab[sl][reg] = k
        info["blood_share"].append(round(float(reg.sum() / max(1, (t.lab[sl] == k).sum())), 3))
    if t.kinds and len(big) and rng.random() < 0.6:  # vessels full of red cells
        inside = np.argwhere(np.isin(t.lab, big) & ~t.hollow & ~t.blood & ~spared)
        for _ in range(rng.integers(2, 11) if len(inside) else 0):
            p = polar_piece(rng, t.shape, t.px, inside[rng.integers(0, len(inside))] * t.px,
                            rng.uniform(15, 80), aspect=rng.uniform(1, 2), rough=0.05, jag=0.0)
            if p is not None:
                t.blood[p[0]] |= (p[1] > 0.5) & (t.lab[p[0]] > 0) & ~spared[p[0]]
    ce[t.blood] *= 0.25
    ch[t.blood] = H0 * 0.05 + 0.2 * ch[t.blood]
    cb = _red_cells(rng, t, rng.uniform(0.45, 0.9))
    for k in [k for k in big if k not in faint_ids and t.area_mm2(k) > 0.3][:1] if rng.random() < 0.25 else []:
        ys, xs = np.nonzero(t.lab == k)
        i = rng.integers(0, ys.size)
        a, half = rng.uniform(0, np.pi), rng.uniform(40, 175)
        dist = np.abs((yy - ys[i] * t.px) * np.cos(a) - (xx - xs[i] * t.px) * np.sin(a))
        band = np.clip((half - dist) / t.px + 0.5, 0, 1) * (t.lab == k)
        crease = np.clip(1 - np.abs(dist - half) / 10, 0, 1) * (t.lab == k)
        gain = 1 + band + 0.4 * crease
        ch, ce, cb = ch * gain, ce * gain, cb * gain
        info["fold"] += 1
    ch, ce, cb = ch * t.cov * sh, ce * t.cov * se, cb * t.cov
    info["faint_od"] = [round(float((green_he[0] * ch[r] + green_he[1] * ce[r]).mean()), 4) for r in t.faint]
    return ch, ce, cb, info
