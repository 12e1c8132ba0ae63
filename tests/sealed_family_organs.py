"""Solid and fatty pieces of the sealed family (tests/sealed_family.py): lymph nodes (capsule,
follicles with germinal centres, medulla, perinodal fat), curved liver needle cores in fragments,
fatty breast tissue (fat cells, fibrous bands, lobules) and placental villi (many small islands).
Same conventions as tests/sealed_family_surfaces.py; a function may return several pieces.
"""

from __future__ import annotations

import cv2
import numpy as np

from sealed_family_shapes import Frame, Piece, blob, depth, fill, line, membranes, noise, speckle, wander


def _walls(rng, shape, u, spacing_um=(50, 100)):
    return membranes(shape, rng.uniform(*spacing_um) * u, rng, thickness=max(1, int(round(2.5 * u))))


def node(rng, u: float, span_um: float) -> list[Piece]:
    """A lymph node: a thin eosinophilic capsule, dense lymphoid cortex with follicles (dark
    mantle, paler germinal centre), paler medulla, sometimes a rim of perinodal fat."""
    rx = rng.uniform(0.15, 0.3) * span_um * u
    core = blob(rng, rx, rx * rng.uniform(0.6, 0.95), 0.1)
    fat_rim = rng.random() < 0.5
    outline = blob(rng, rx * 1.35, rx * 1.1, 0.15) if fat_rim else core
    f = Frame(np.concatenate([outline, core]), rng.uniform(0, np.pi))
    inner = fill(f.shape, [f(core)])
    mask = inner | fill(f.shape, [f(outline)])
    h, e = f.blank(), f.blank()
    if fat_rim:
        walls = _walls(rng, f.shape, u)
        h[mask], e[mask] = 0.02 * walls[mask], rng.uniform(0.2, 0.4) * walls[mask]
    d = depth(inner)
    dense = 0.55 + 0.45 * speckle(f.shape, rng, 0.6, 6 * u)
    hv = rng.uniform(0.55, 0.9)
    h[inner], e[inner] = (hv * dense)[inner], 0.12
    med = inner & (d > rng.uniform(0.35, 0.6) * d.max())
    sinus = np.clip(0.65 + 0.35 * noise(f.shape, 20 * u, rng), 0.2, 1)
    h[med], e[med] = (0.65 * hv * dense * sinus)[med], 0.2
    cap_w = rng.uniform(15, 40) * u
    cap = inner & (d < cap_w)
    h[cap], e[cap] = 0.08, rng.uniform(0.45, 0.7)
    ys, xs = np.nonzero(inner & (d > cap_w + 90 * u) & (d < cap_w + 250 * u))
    n = int(rng.integers(3, 12))
    rims, centres = [], []
    for i in (rng.choice(ys.size, size=min(n, ys.size), replace=False) if ys.size else []):
        r = rng.uniform(70, 180) * u
        c = np.array([xs[i], ys[i]], float)
        rims.append(c + blob(rng, r, r * rng.uniform(0.75, 1), 0.1, n=40))
        centres.append(c + blob(rng, 0.6 * r, 0.55 * r, 0.1, n=40))
    fol, gc = fill(f.shape, rims) & inner & ~cap, fill(f.shape, centres) & inner & ~cap
    h[fol] = (1.1 * hv * dense)[fol]
    h[gc], e[gc] = (0.45 * hv * dense)[gc], 0.18
    return [Piece("lymph node", mask, h, e, {"follicles": len(rims), "perinodal_fat": fat_rim})]


def liver_core(rng, u: float, span_um: float) -> list[Piece]:
    """A curved liver needle core, often broken into fragments: hepatocyte plates (eosin with
    sinusoid texture and round nuclei), portal tracts, sometimes fatty vacuoles."""
    length = rng.uniform(0.6, 1.0) * span_um * u
    width = rng.uniform(500, 1100) * u * min(1.0, span_um / 5000)
    n = 80
    t = np.linspace(-0.5, 0.5, n) * length
    bend = rng.uniform(-0.25, 0.25) * length * (1 - (2 * t / length) ** 2) + wander(rng, n, 0.05 * length)
    centre = np.stack([t, bend], axis=1)
    tang = np.gradient(centre, axis=0)
    normal = np.stack([-tang[:, 1], tang[:, 0]], 1) / np.linalg.norm(tang, axis=1)[:, None]
    half = 0.5 * width * (1 + wander(rng, n, 0.1))[:, None]
    outline = np.concatenate([centre + normal * half, (centre - normal * half)[::-1]])
    f = Frame(outline, rng.uniform(0, np.pi), margin=10)
    mask = fill(f.shape, [f(outline)])
    cuts = sorted(rng.choice(np.arange(10, n - 10), size=int(rng.integers(0, 3)), replace=False))
    for c in cuts:  # breaks between fragments: 150-400 um of glass
        gap = line(f.shape, f([centre[c] + normal[c] * width, centre[c] - normal[c] * width]), rng.uniform(150, 400) * u)
        mask &= ~gap
    sinus = _walls(rng, f.shape, u, (18, 30))
    h = (rng.uniform(0.05, 0.12) + 0.45 * speckle(f.shape, rng, 0.1, 6 * u)).astype(np.float32)
    e = (rng.uniform(0.35, 0.6) * np.where(sinus, 0.45, 1.0) * (1 + 0.1 * noise(f.shape, 40 * u, rng))).astype(np.float32)
    for _ in range(int(rng.integers(1, 5))):  # portal tracts
        p = f([centre[rng.integers(5, n - 5)] + normal[0] * rng.uniform(-0.25, 0.25) * width])[0]
        r = rng.uniform(50, 140) * u
        tract = fill(f.shape, [p + blob(rng, r, r * 0.7, 0.25)]) & mask
        h[tract] = (0.2 + 0.5 * speckle(f.shape, rng, 0.3, 6 * u))[tract]
        e[tract] = 0.5
    steatosis = rng.random() < 0.35
    if steatosis:
        vac = speckle(f.shape, rng, rng.uniform(0.1, 0.35), rng.uniform(12, 35) * u) > 0.5
        h[vac & mask], e[vac & mask] = 0.0, 0.02
    h[~mask], e[~mask] = 0, 0
    labels_n, labels = cv2.connectedComponents(mask.astype(np.uint8))
    out = []
    for k in range(1, labels_n):
        m = labels == k
        if m.sum() < (60 * u) ** 2:
            continue
        out.append(Piece("liver core", m, np.where(m, h, 0).astype(np.float32), np.where(m, e, 0).astype(np.float32),
                         {"fragments": labels_n - 1, "steatosis": steatosis}))
    return out


def breast(rng, u: float, span_um: float) -> list[Piece]:
    """Fatty breast tissue: mostly fat cells (thin walls round empty cells, tissue in truth),
    wandering fibrous bands and a few lobules of small acini."""
    rx = rng.uniform(0.25, 0.42) * span_um * u
    outline = blob(rng, rx, rx * rng.uniform(0.5, 0.85), 0.3, harmonics=8)
    f = Frame(outline, rng.uniform(0, np.pi))
    mask = fill(f.shape, [f(outline)])
    walls = _walls(rng, f.shape, u)
    h = np.where(walls, 0.025, 0.0).astype(np.float32)
    e = np.where(walls, rng.uniform(0.18, 0.4), 0.0).astype(np.float32)
    fib = np.zeros(f.shape, bool)
    for _ in range(int(rng.integers(1, 5))):
        m = 30
        a = rng.uniform(0, np.pi)
        tt = np.linspace(-rx, rx, m)
        pts = np.stack([tt * np.cos(a), tt * np.sin(a)], 1) + wander(rng, m, 0.2 * rx)[:, None] * [-np.sin(a), np.cos(a)]
        fib |= line(f.shape, f(pts), rng.uniform(60, 250) * u)
    fib &= mask
    h[fib] = (0.06 + 0.2 * speckle(f.shape, rng, 0.05, 6 * u))[fib]
    e[fib] = (rng.uniform(0.4, 0.65) * (1 + 0.2 * noise(f.shape, 15 * u, rng)))[fib]
    rings, lumens = [], []
    ys, xs = np.nonzero(fib) if fib.any() else np.nonzero(mask)
    for _ in range(int(rng.integers(1, 4))):
        i = rng.integers(ys.size)
        for _ in range(int(rng.integers(6, 25))):
            c = np.array([xs[i], ys[i]]) + rng.normal(0, 110 * u, 2)
            r = rng.uniform(15, 30) * u
            rings.append(c + blob(rng, r, r, 0.1, n=20))
            lumens.append(c + blob(rng, 0.45 * r, 0.45 * r, 0.1, n=20))
    ac, lu = fill(f.shape, rings) & mask, fill(f.shape, lumens) & mask
    h[ac], e[ac] = rng.uniform(0.4, 0.7), 0.25
    h[lu], e[lu] = 0.0, 0.02
    fat_share = float((mask & ~fib & ~ac).sum()) / max(1, mask.sum())
    return [Piece("fatty breast", mask, h * mask, e * mask, {"fat_share": round(fat_share, 2)})]


def placenta(rng, u: float, span_um: float) -> list[Piece]:
    """Placental villi: many small islands of loose stroma with a hematoxylin-rich trophoblast
    rim and fetal vessels, scattered over a cluster; each island is a piece."""
    rx = rng.uniform(0.22, 0.38) * span_um * u
    env = blob(rng, rx, rx * rng.uniform(0.6, 0.95), 0.2)
    f = Frame(env, rng.uniform(0, np.pi))
    area = fill(f.shape, [f(env)])
    ys, xs = np.nonzero(area)
    polys = []
    for _ in range(int(area.sum() / (160 * u) ** 2 * rng.uniform(0.8, 1.6))):
        i = rng.integers(ys.size)
        r = float(np.exp(rng.uniform(np.log(35), np.log(150)))) * u
        shape = blob(rng, r * rng.uniform(1, 2.2), r, 0.3, n=36, harmonics=4)
        a = rng.uniform(0, np.pi)
        polys.append(np.array([xs[i], ys[i]]) + shape @ np.array([[np.cos(a), -np.sin(a)], [np.sin(a), np.cos(a)]]).T)
    villi = fill(f.shape, polys) & area
    d = depth(villi)
    h = np.where(villi, 0.06 + 0.2 * speckle(f.shape, rng, 0.08, 6 * u), 0).astype(np.float32)
    e = np.where(villi, rng.uniform(0.2, 0.45) * (1 + 0.2 * noise(f.shape, 12 * u, rng)), 0).astype(np.float32)
    rim = villi & (d < rng.uniform(6, 14) * u)
    h[rim], e[rim] = rng.uniform(0.45, 0.75), 0.2
    labels_n, labels = cv2.connectedComponents(villi.astype(np.uint8))
    sizes = np.bincount(labels.ravel(), minlength=labels_n)
    big = np.nonzero(sizes >= (25 * u) ** 2)[0]
    keep = np.isin(labels, big[big > 0])
    return [Piece("placental villi", keep, h * keep, e * keep, {"islands": int((big > 0).sum())})]
