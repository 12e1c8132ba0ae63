"""Layouts of the held-back family (tests/holdout_family.py): where the tissue lies and of what kind,
as a label map on the fine grid. Five layouts, each a specimen type from routine histology
(common practice): a colon wall cut across (mucosa with crypts, muscularis mucosae, submucosa,
two muscle coats), a carcinoma (tumour nests in desmoplastic stroma, comedo necrosis, cribriform
lumens, mucin lakes), a bronchial wall (hyaline cartilage plates, seromucous acini, respiratory
epithelium), endoscopic biopsies (small fragments with pits, some crushed) and a leiomyoma (whorled
smooth-muscle fascicles). Outlines are level sets of smooth random fields, not polygons.

Labels (``KINDS``); every label but 0 is tissue. Orientation ``theta`` (radians) steers the fibre
streaks and the elongated nuclei of stroma, muscle and crush.
"""

from __future__ import annotations

import cv2
import numpy as np

from holdout_family_optics import smooth

KINDS = {"glass": 0, "stroma": 1, "muscle": 2, "epithelium": 3, "lymphoid": 4, "lumen": 5,
         "necrosis": 6, "cartilage": 7, "mucin": 8, "fat": 9, "tumour": 10, "crush": 11, "plasma": 12}
K = KINDS


class Sheet:
    """The fine grid: ``label`` (uint8), ``theta`` (float32), ``piece`` (int16: 0 glass, i the i-th
    piece), ``p`` µm a fine pixel."""

    def __init__(self, shape, p: float):
        self.shape, self.p = shape, p
        self.label = np.zeros(shape, np.uint8)
        self.theta = np.zeros(shape, np.float32)
        self.piece = np.zeros(shape, np.int16)
        self.n = 0

    def px(self, um: float) -> float:
        return um / self.p

    def add_piece(self, mask: np.ndarray, kind: int, theta=0.0) -> int:
        """A new piece over ``mask`` (full-size bool), filled with ``kind``; returns its number."""
        self.n += 1
        self.piece[mask] = self.n
        self.label[mask] = kind
        self.theta[mask] = theta if np.isscalar(theta) else theta[mask]
        return self.n


def blob(rng, shape, cy, cx, ry, rx, angle, rough=0.35) -> np.ndarray:
    """A smooth irregular piece: an ellipse's level set disturbed by smooth noise at two scales."""
    h, w = shape
    r = max(rx, ry)
    y0, y1 = int(max(0, cy - 1.7 * r)), int(min(h, cy + 1.7 * r))
    x0, x1 = int(max(0, cx - 1.7 * r)), int(min(w, cx + 1.7 * r))
    out = np.zeros(shape, bool)
    if y1 - y0 < 2 or x1 - x0 < 2:
        return out
    q = 4  # the field is smooth: evaluate it on a grid 4x coarser, then interpolate
    y = np.arange(y0, y1 + q, q, dtype=np.float32)[:, None]
    x = np.arange(x0, x1 + q, q, dtype=np.float32)[None, :]
    ca, sa = np.cos(angle), np.sin(angle)
    u = ((x - cx) * ca + (y - cy) * sa) / rx
    v = (-(x - cx) * sa + (y - cy) * ca) / ry
    sub = u ** 2 + v ** 2
    f = 1.0 - sub + rough * smooth(rng, sub.shape, min(rx, ry) / 1.5 / q) + 0.08 * smooth(rng, sub.shape, min(rx, ry) / 6 / q)
    big = cv2.resize(f.astype(np.float32), (f.shape[1] * q, f.shape[0] * q), interpolation=cv2.INTER_LINEAR)
    out[y0:y1, x0:x1] = big[q // 2:q // 2 + y1 - y0, q // 2:q // 2 + x1 - x0] > 0
    return out


def _largest(mask: np.ndarray) -> np.ndarray:
    n, lab, stats, _ = cv2.connectedComponentsWithStats(mask.astype(np.uint8), connectivity=8)
    if n <= 1:
        return mask
    return lab == 1 + int(np.argmax(stats[1:, cv2.CC_STAT_AREA]))


def free_spot(rng, taken: np.ndarray, r: float, tries: int = 60):
    """A centre (y, x) whose disc of radius ``r`` px misses ``taken`` (checked on a coarse grid)."""
    h, w = taken.shape
    if 2 * r >= min(h, w):
        return None
    s = max(1, int(r // 6))
    coarse = cv2.dilate(taken[::s, ::s].astype(np.uint8), cv2.getStructuringElement(
        cv2.MORPH_ELLIPSE, (2 * int(r / s) + 1, 2 * int(r / s) + 1))).astype(bool)
    for _ in range(tries):
        cy, cx = rng.uniform(r, h - r), rng.uniform(r, w - r)
        if not coarse[min(int(cy / s), coarse.shape[0] - 1), min(int(cx / s), coarse.shape[1] - 1)]:
            return cy, cx
    return None


def colon(rng, sh: Sheet) -> dict:
    """A strip of colon wall across the sheet, luminal surface up (in the strip's own frame)."""
    h, w = sh.shape
    ang = rng.uniform(-0.5, 0.5) + (np.pi / 2 if h > w * 1.15 else 0)
    y, x = np.mgrid[0:h, 0:w].astype(np.float32)
    ca, sa = np.cos(ang), np.sin(ang)
    u = (x - w / 2) * ca + (y - h / 2) * sa
    v = -(x - w / 2) * sa + (y - h / 2) * ca
    span = abs(w * ca) + abs(h * sa)
    half = min(sh.px(rng.uniform(700, 1300)), 0.22 * min(h, w))
    bend = rng.uniform(0.05, 0.2) * min(h, w)
    phase, per = rng.uniform(0, 2 * np.pi), rng.uniform(0.8, 1.6) * span
    c = bend * np.sin(2 * np.pi * u / per + phase)
    wid = half * (1 + 0.15 * np.sin(2 * np.pi * u / (0.6 * per) + 2 * phase))
    t = (v - c + wid) / (2 * wid)  # 0 at the luminal surface, 1 at the serosa
    ends = rng.uniform(0.28, 0.4) * span
    rough = smooth(rng, sh.shape, sh.px(250)) * 0.03
    strip = (t > 0 + rough) & (t < 1 + rough) & (np.abs(u) < ends + sh.px(200) * smooth(rng, sh.shape, sh.px(400)))
    strip = _largest(strip)
    slope = np.arctan(np.gradient(c, axis=1) * ca + np.gradient(c, axis=0) * sa)
    along = (ang + slope).astype(np.float32)
    n = sh.add_piece(strip, K["stroma"], along)
    mm = rng.uniform(0.28, 0.36)
    spacing = sh.px(rng.uniform(60, 85))
    ph = (u / spacing + 0.15 * smooth(rng, sh.shape, sh.px(300))) % 1.0
    dist = np.abs(ph - 0.5) * spacing
    crypt_bottom = mm - 0.03 + 0.02 * smooth(rng, sh.shape, sh.px(150))
    muc = strip & (t < mm)
    sh.label[muc] = K["lymphoid"]
    crypt = muc & (dist < sh.px(23)) & (t < crypt_bottom)
    sh.label[crypt] = K["epithelium"]
    sh.label[muc & (dist < sh.px(6)) & (t < crypt_bottom - 0.01)] = K["lumen"]
    sh.label[strip & (t < 0.012)] = K["epithelium"]  # surface epithelium
    sh.label[strip & (t >= mm) & (t < mm + 0.03)] = K["muscle"]
    inner = strip & (t >= 0.6) & (t < 0.8)
    sh.label[inner] = K["muscle"]
    sh.theta[inner] = along[inner] + np.pi / 2
    sh.label[strip & (t >= 0.8) & (t < 0.82)] = K["stroma"]
    sh.label[strip & (t >= 0.82)] = K["muscle"]
    sub = strip & (t > mm + 0.05) & (t < 0.57)
    fat = False
    if rng.random() < 0.5:  # a fat lobule in the submucosa
        ys, xs = np.nonzero(sub[::8, ::8])
        if ys.size:
            i = rng.integers(ys.size)
            lob = blob(rng, sh.shape, ys[i] * 8, xs[i] * 8, 0.35 * half, 0.6 * half, ang) & sub
            sh.label[lob] = K["fat"]
            fat = True
    return {"pieces": [n], "kinds": ["colon wall"], "fat": fat, "vessel_zone": sub}


def carcinoma(rng, sh: Sheet) -> dict:
    """One or two pieces of carcinoma: nests in stroma, comedo necrosis, cribriform lumens, mucin."""
    h, w = sh.shape
    pieces, taken = [], np.zeros(sh.shape, bool)
    for i in range(1 if rng.random() < 0.6 else 2):
        r = rng.uniform(0.22, 0.36) * min(h, w) / (1 if i == 0 else 1.6)
        spot = free_spot(rng, taken, r * 1.2) if i else (h / 2 + rng.uniform(-0.1, 0.1) * h, w / 2 + rng.uniform(-0.1, 0.1) * w)
        if spot is None:
            continue
        m = _largest(blob(rng, sh.shape, *spot, r * rng.uniform(0.7, 1.0), r * rng.uniform(1.0, 1.4),
                          rng.uniform(0, np.pi), rough=0.45) & ~taken)
        taken |= cv2.dilate(m.astype(np.uint8), np.ones((int(sh.px(300)) | 1,) * 2, np.uint8)).astype(bool)
        pieces.append(sh.add_piece(m, K["stroma"], np.pi * smooth(rng, sh.shape, sh.px(500))))
    tissue = sh.piece > 0
    nests = tissue & (smooth(rng, sh.shape, sh.px(rng.uniform(150, 300))) > rng.uniform(-0.2, 0.4))
    sh.label[nests] = K["tumour"]
    necrosis = False
    if rng.random() < 0.6:
        d = cv2.distanceTransform(nests.astype(np.uint8), cv2.DIST_L2, 5)
        core = d > sh.px(rng.uniform(60, 140))
        sh.label[core] = K["necrosis"]
        necrosis = bool(core.any())
    if rng.random() < 0.5:  # cribriform lumens in the nests
        pts = (rng.random(sh.shape) < 1.2e-4 * (sh.p / 2) ** 2) & (sh.label == K["tumour"])
        holes = cv2.dilate(pts.astype(np.uint8), cv2.getStructuringElement(
            cv2.MORPH_ELLIPSE, (int(sh.px(30)) | 1,) * 2)).astype(bool) & (sh.label == K["tumour"])
        sh.label[holes] = K["lumen"]
    mucin = False
    if rng.random() < 0.35:
        lake = tissue & (smooth(rng, sh.shape, sh.px(250)) > 1.6)
        sh.label[lake] = K["mucin"]
        mucin = bool(lake.any())
    fat = False
    if rng.random() < 0.3:  # fat the tumour has grown into, enclosed by tissue
        deep = cv2.distanceTransform(np.pad(tissue, 1).astype(np.uint8), cv2.DIST_L2, 5)[1:-1, 1:-1] > sh.px(150)
        ys, xs = np.nonzero((deep & (sh.label == K["stroma"]))[::8, ::8])
        if ys.size:
            i = rng.integers(ys.size)
            lob = blob(rng, sh.shape, ys[i] * 8, xs[i] * 8, sh.px(rng.uniform(150, 400)), sh.px(rng.uniform(250, 600)),
                       rng.uniform(0, np.pi), rough=0.3) & (sh.label == K["stroma"]) & deep
            sh.label[lob] = K["fat"]
            fat = bool(lob.any())
    return {"pieces": pieces, "kinds": ["carcinoma"] * len(pieces), "necrosis": necrosis, "mucin": mucin, "fat": fat,
            "vessel_zone": tissue & (sh.label == K["stroma"])}


def bronchus(rng, sh: Sheet) -> dict:
    """A bronchial wall: cartilage plates with lacunae in fibrous tissue, acini, epithelium, muscle."""
    h, w = sh.shape
    r = rng.uniform(0.25, 0.38) * min(h, w)
    ang = rng.uniform(0, np.pi)
    m = _largest(blob(rng, sh.shape, h / 2, w / 2, r * 0.7, r * 1.25, ang, rough=0.3))
    n = sh.add_piece(m, K["stroma"], np.pi * smooth(rng, sh.shape, sh.px(600)))
    d = cv2.distanceTransform(np.pad(m, 1).astype(np.uint8), cv2.DIST_L2, 5)[1:-1, 1:-1]
    side = smooth(rng, sh.shape, 0.8 * r) > 0.2
    sh.label[m & (d < sh.px(35)) & side] = K["epithelium"]
    for _ in range(rng.integers(2, 5)):
        ys, xs = np.nonzero((d > sh.px(150))[::8, ::8])
        if not ys.size:
            break
        i = rng.integers(ys.size)
        plate = blob(rng, sh.shape, ys[i] * 8, xs[i] * 8, sh.px(rng.uniform(120, 250)), sh.px(rng.uniform(350, 900)),
                     rng.uniform(0, np.pi), rough=0.2) & m & (d > sh.px(60))
        sh.label[plate] = K["cartilage"]
    pts = (rng.random(sh.shape) < 4e-5 * (sh.p / 2) ** 2) & (sh.label == K["stroma"]) & (d > sh.px(80))
    acini = cv2.dilate(pts.astype(np.uint8), cv2.getStructuringElement(
        cv2.MORPH_ELLIPSE, (int(sh.px(55)) | 1,) * 2)).astype(bool) & (sh.label == K["stroma"])
    sh.label[acini] = K["epithelium"]
    sh.label[cv2.dilate(pts.astype(np.uint8), np.ones((max(1, int(sh.px(8))),) * 2, np.uint8)).astype(bool) & acini] = K["lumen"]
    band = m & (np.abs(d - sh.px(120)) < sh.px(35)) & side
    sh.label[band & (sh.label == K["stroma"])] = K["muscle"]
    return {"pieces": [n], "kinds": ["bronchial wall"], "vessel_zone": m & (sh.label == K["stroma"])}


def biopsies(rng, sh: Sheet) -> dict:
    """Three to eight endoscopic biopsy fragments (lamina propria with pits), some crushed."""
    h, w = sh.shape
    pieces, taken, crushed = [], np.zeros(sh.shape, bool), 0
    for _ in range(rng.integers(3, 9)):
        ln = sh.px(rng.uniform(350, 1500))
        ln = min(ln, 0.3 * min(h, w))
        spot = free_spot(rng, taken, ln * 0.7)
        if spot is None:
            continue
        ang = rng.uniform(0, np.pi)
        m = _largest(blob(rng, sh.shape, *spot, ln * rng.uniform(0.25, 0.45), ln * 0.6, ang, rough=0.4) & ~taken)
        if m.sum() < sh.px(100) ** 2:
            continue
        taken |= cv2.dilate(m.astype(np.uint8), np.ones((int(sh.px(150)) | 1,) * 2, np.uint8)).astype(bool)
        k = sh.add_piece(m, K["lymphoid"], ang)
        pieces.append(k)
        ys, xs = np.nonzero(m)
        y0, y1, x0, x1 = ys.min(), ys.max() + 1, xs.min(), xs.max() + 1
        y, x = np.mgrid[y0:y1, x0:x1].astype(np.float32)
        sp = sh.px(rng.uniform(70, 110))
        y += sp * 0.6 * smooth(rng, y.shape, 2 * sp)  # pits wander: no lattice
        x += sp * 0.6 * smooth(rng, y.shape, 2 * sp)
        g = np.sin(2 * np.pi * (x * np.cos(ang) + y * np.sin(ang)) / sp) * np.sin(
            2 * np.pi * (-x * np.sin(ang) + y * np.cos(ang)) / (1.7 * sp))
        sub, mm = sh.label[y0:y1, x0:x1], m[y0:y1, x0:x1]
        sub[mm & (g > 0.35)] = K["epithelium"]
        sub[mm & (g > 0.85)] = K["lumen"]
        if rng.random() < 0.4:
            crush = blob(rng, sh.shape, *spot, ln * 0.2, ln * 0.35, ang, rough=0.5) & m
            sh.label[crush] = K["crush"]
            crushed += 1
    return {"pieces": pieces, "kinds": ["biopsy"] * len(pieces), "crushed": crushed,
            "vessel_zone": (sh.piece > 0) & (sh.label == K["lymphoid"])}


def leiomyoma(rng, sh: Sheet) -> dict:
    """A leiomyoma: whorled smooth-muscle fascicles with hyalinized stroma patches."""
    h, w = sh.shape
    r = rng.uniform(0.3, 0.42) * min(h, w)
    m = _largest(blob(rng, sh.shape, h / 2, w / 2, r, r * rng.uniform(1.0, 1.3), rng.uniform(0, np.pi), rough=0.25))
    theta = np.pi * smooth(rng, sh.shape, sh.px(rng.uniform(250, 500)))
    n = sh.add_piece(m, K["muscle"], theta)
    hy = m & (smooth(rng, sh.shape, sh.px(300)) > 1.0)
    sh.label[hy] = K["stroma"]
    return {"pieces": [n], "kinds": ["leiomyoma"], "vessel_zone": m}


LAYOUTS = {"colon": (colon, 0.22), "carcinoma": (carcinoma, 0.24), "bronchus": (bronchus, 0.18),
           "biopsies": (biopsies, 0.18), "leiomyoma": (leiomyoma, 0.18)}
