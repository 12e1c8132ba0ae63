"""Tissue of the confirmation family (tests/confirm_family.py): the layouts (pieces and their
kinds) and the stained texture inside them, as haematoxylin and eosin amounts on the fine grid.

A layout fills a :class:`Canvas`: ``H`` and ``E`` (stain amounts; optical density = amount times
the unit stain vector), ``outline`` (where there is section material), ``holes`` (empty spaces
inside the material: lumens, tears, cracks, fat-cell interiors) and a list of pieces (bool maps
with their kind) that later steps (blood, faint tissue, folds) draw on. Texture is resolved
structure, never a flat colour: nuclei as individual supersampled blobs 5-10 µm across with
granular chromatin, wavy collagen fibres, mottled cytoplasm.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy import ndimage as ndi

from confirm_family_paint import resample, scatter, smooth_noise, splat, star_piece, tube, wander

LAYOUTS = ("skin", "node", "loose", "biopsies", "sheet", "fatty")
LAYOUT_P = (0.2, 0.15, 0.15, 0.2, 0.15, 0.15)


@dataclass
class Canvas:
    shape: tuple
    px: float  # µm per fine pixel
    H: np.ndarray = None
    E: np.ndarray = None
    outline: np.ndarray = None
    holes: np.ndarray = None
    hb: np.ndarray = None  # red-cell thickness (haemoglobin amount)
    blood: np.ndarray = None
    pieces: list = field(default_factory=list)  # (bool map, kind)

    def __post_init__(self):
        self.H = np.zeros(self.shape, np.float32)
        self.E = np.zeros(self.shape, np.float32)
        self.outline = np.zeros(self.shape, bool)
        self.holes = np.zeros(self.shape, bool)
        self.hb = np.zeros(self.shape, np.float32)
        self.blood = np.zeros(self.shape, bool)

    def um(self, v):
        """µm to fine pixels."""
        return v / self.px

    def free(self, region, margin_um=60):
        """True when ``region`` stays clear of the pieces already placed."""
        grown = ndi.binary_dilation(self.outline, iterations=max(1, int(self.um(margin_um))))
        return not (region & grown).any()


def nuclei(cv, rng, region, per_um2, d_um=(5, 9), elong=(1.0, 1.4), amount=(0.5, 0.9), angle=None):
    """Individual nuclei inside ``region``: ellipses ``d_um`` across (minor axis), ``elong`` long
    to short, each with its own haematoxylin ``amount`` and granular chromatin and a darker rim."""
    pts = scatter(rng, region.astype(np.float32), per_um2 * cv.px ** 2)
    n = len(pts)
    if n == 0:
        return
    b = cv.um(rng.uniform(*d_um, n)) / 2
    a = b * rng.uniform(*elong, n)
    th = rng.uniform(0, np.pi, n) if angle is None else angle + rng.normal(0, 0.25, n)
    amt = rng.uniform(*amount, n)
    f1, f2 = rng.uniform(1.5, 3.0, (2, n)) / np.maximum(b, 0.5)
    p1, p2 = rng.uniform(0, 6.3, (2, n))
    size = int(np.ceil(2 * a.max())) + 3

    def stamp(y, x, i):
        c, s = np.cos(th[i])[:, None, None], np.sin(th[i])[:, None, None]
        u, v = (x * c + y * s) / a[i, None, None], (-x * s + y * c) / b[i, None, None]
        r = np.hypot(u, v)
        body = np.clip((1.08 - r) / 0.16, 0, 1)  # soft edge over a fraction of a µm
        grain = 0.5 + 0.5 * np.sin(x * f1[i, None, None] + p1[i, None, None]) * np.sin(y * f2[i, None, None] + p2[i, None, None])
        rim = np.exp(-((r - 0.9) / 0.12) ** 2)
        return body * (0.7 + 0.45 * grain + 0.3 * rim)

    splat(cv.H, pts, stamp, size, weights=amt, ss=2)


def fibres(cv, rng, period_um=(8, 18), width=0.25, wave_um=120):
    """Wavy collagen bundles: thin ridges of a sine along a direction that is warped by smooth
    noise (0..1, mostly 0 with thin bright fibres)."""
    yy, xx = np.mgrid[0 : cv.shape[0], 0 : cv.shape[1]].astype(np.float32)
    th = rng.uniform(0, np.pi)
    k = 2 * np.pi / cv.um(rng.uniform(*period_um))
    warp = smooth_noise(rng, cv.shape, cv.um(wave_um), -1, 1) * cv.um(rng.uniform(20, 60)) * k
    phase = k * (xx * np.cos(th) + yy * np.sin(th)) + warp
    ridge = np.clip((np.cos(phase) - (1 - 2 * width)) / (2 * width), 0, 1)
    return ridge * smooth_noise(rng, cv.shape, cv.um(40), 0.3, 1.0)


def stroma(cv, rng, region, e=(0.22, 0.4), fibre=0.35, cells=0.0012, spindle=True):
    """Fibrous stroma: mottled eosin, collagen fibres, sparse (spindle) nuclei."""
    e0 = rng.uniform(*e)
    body = e0 * smooth_noise(rng, cv.shape, cv.um(30), 0.7, 1.15) * smooth_noise(rng, cv.shape, cv.um(250), 0.7, 1.2)
    body += fibre * e0 * fibres(cv, rng)
    cv.E += np.where(region, body, 0).astype(np.float32)
    cv.H += np.where(region, 0.04 * smooth_noise(rng, cv.shape, cv.um(50)), 0).astype(np.float32)
    if spindle:
        nuclei(cv, rng, region, cells, d_um=(3, 5), elong=(2.0, 3.5), amount=(0.5, 0.9))
    else:
        nuclei(cv, rng, region, cells, d_um=(6, 9), elong=(1, 1.3))


def cellular(cv, rng, region, per_um2, d_um, e=(0.2, 0.35), amount=(0.55, 1.0), elong=(1.0, 1.35)):
    """Densely cellular tissue (epithelium, lymphoid tissue): cytoplasm eosin plus many nuclei."""
    cv.E += np.where(region, rng.uniform(*e) * smooth_noise(rng, cv.shape, cv.um(15), 0.75, 1.15), 0).astype(np.float32)
    nuclei(cv, rng, region, per_um2, d_um=d_um, amount=amount, elong=elong)


def lumens(cv, rng, region, n, d_um=(30, 260)):
    """Round or oval empty spaces (vessels, glands, ducts) inside ``region``, lined by a thin
    eosin wall with flat nuclei. Returns the lumens' map (empty, marked in ``holes``)."""
    out = np.zeros(cv.shape, bool)
    pts = scatter(rng, region.astype(np.float32), 1.0)[: n * 5]
    for p in pts[:n]:
        r = cv.um(rng.uniform(*d_um)) / 2
        lum = star_piece(cv.shape, p, r, rng, lobes=3, rough=0.1, aspect=rng.uniform(1, 2.2), angle=rng.uniform(0, 3.2))
        lum &= ndi.binary_erosion(region, iterations=3)
        wall = ndi.binary_dilation(lum, iterations=max(1, int(cv.um(6)))) & ~lum & region
        cv.E += np.where(wall, 0.25, 0).astype(np.float32)
        nuclei(cv, rng, wall, 0.01, d_um=(2.5, 4), elong=(2.5, 3.5), amount=(0.5, 0.8))
        out |= lum
    cv.H[out] = 0
    cv.E[out] = 0
    cv.holes |= out
    return out


def _place(cv, rng, make, tries=30):
    """Place a piece made by ``make(centre)`` where it does not touch earlier pieces."""
    for _ in range(tries):
        c = (rng.uniform(0.15, 0.85) * cv.shape[0], rng.uniform(0.15, 0.85) * cv.shape[1])
        piece = make(c)
        if piece.sum() > cv.um(150) ** 2 and cv.free(piece):
            return piece
    return None


def _add(cv, piece, kind):
    cv.outline |= piece
    cv.pieces.append((piece, kind))


def skin(cv, rng):
    """1-2 strips (skin or mucosa) with a dense epithelial edge (rete ridges or crypts) on one side
    over fibrous dermis or lamina propria with vessels."""
    for _ in range(rng.integers(1, 3)):
        L = max(cv.shape) * rng.uniform(0.6, 1.1)
        start = (rng.uniform(0.2, 0.8) * cv.shape[0], rng.uniform(0.05, 0.2) * cv.shape[1])
        path, _ = resample(wander(rng, start, rng.normal(np.pi / 2, 0.3), L, 2.0, 0.02), 1.0)
        hw = cv.um(rng.uniform(250, 700)) * (1 + 0.25 * np.sin(np.linspace(0, rng.uniform(2, 7), len(path))))
        t = tube(cv.shape, path, hw)
        if t is None:
            continue
        box, dist, near, inside = t
        piece = np.zeros(cv.shape, bool)
        piece[box] = inside
        if not cv.free(piece, 30):
            continue
        tang = np.gradient(path, axis=0)
        rel = np.stack(np.mgrid[box], 0) - path[near].transpose(2, 0, 1)
        side = np.sign(tang[near, 1] * rel[0] - tang[near, 0] * rel[1]) * rng.choice([-1, 1])
        s = np.arange(len(path))[near]
        depth = cv.um(rng.uniform(50, 140)) * (1 + 0.6 * np.maximum(0, np.sin(s / cv.um(rng.uniform(40, 120)))))
        epi = np.zeros(cv.shape, bool)
        epi[box] = inside & (side > 0) & (dist >= hw[near] - depth)
        mucosa = rng.random() < 0.4
        stroma(cv, rng, piece & ~epi, cells=0.004 if mucosa else 0.0012, spindle=not mucosa)
        cellular(cv, rng, epi, 0.011, (6, 9), amount=(0.6, 1.1), elong=(1.1, 1.8))
        lumens(cv, rng, piece & ~epi, rng.integers(2, 8), (20, 140))
        _add(cv, piece, "mucosa" if mucosa else "skin")


def node(cv, rng):
    """1-3 dense round pieces (lymph-node-like): packed small dark nuclei, paler follicle centres,
    a thin fibrous capsule."""
    for _ in range(rng.integers(1, 4)):
        r = cv.um(rng.uniform(400, 1100))
        piece = _place(cv, rng, lambda c: star_piece(cv.shape, c, r, rng, 4, 0.08, rng.uniform(1, 1.5), rng.uniform(0, 3.2)))
        if piece is None:
            continue
        cap = piece & ~ndi.binary_erosion(piece, iterations=max(1, int(cv.um(rng.uniform(10, 30)))))
        stroma(cv, rng, cap, e=(0.3, 0.45), cells=0.002)
        inner = piece & ~cap
        foll = inner & (smooth_noise(rng, cv.shape, cv.um(250)) > 0.72)
        cellular(cv, rng, inner & ~foll, rng.uniform(0.008, 0.014), (5, 7), e=(0.08, 0.16), amount=(0.8, 1.3))
        cellular(cv, rng, foll, 0.005, (7, 10), e=(0.12, 0.2), amount=(0.45, 0.7))
        _add(cv, piece, "node")


def loose(cv, rng):
    """1-2 large oedematous or mucinous pieces: low density, wispy fibres, ragged edges, sparse
    stellate cells, pale bluish mucin pools."""
    for _ in range(rng.integers(1, 3)):
        r = cv.um(rng.uniform(700, 1500))
        piece = _place(cv, rng, lambda c: star_piece(cv.shape, c, r, rng, 7, 0.28, rng.uniform(1, 1.8), rng.uniform(0, 3.2)))
        if piece is None:
            continue
        piece &= ~(smooth_noise(rng, cv.shape, cv.um(25)) * ~ndi.binary_erosion(piece, iterations=int(cv.um(60))) > 0.6)
        stroma(cv, rng, piece, e=(0.09, 0.18), fibre=1.0, cells=0.0005, spindle=False)
        mucin = piece & (smooth_noise(rng, cv.shape, cv.um(200)) > 0.6)
        cv.H += np.where(mucin, rng.uniform(0.06, 0.14) * smooth_noise(rng, cv.shape, cv.um(20), 0.5, 1.2), 0).astype(np.float32)
        _add(cv, piece, "loose")


def biopsies(cv, rng):
    """3-8 small pieces in a row: needle cores (narrow long cylinders) or small fragments."""
    cores = rng.random() < 0.5
    n = rng.integers(3, 9)
    horiz = cv.shape[1] >= cv.shape[0]
    span = cv.shape[1 if horiz else 0]
    for i in range(n):
        t = (i + 0.5 + rng.normal(0, 0.1)) / n * span
        pos = cv.shape[0 if horiz else 1] * rng.uniform(0.35, 0.65)
        c = (pos, t) if horiz else (t, pos)
        if cores:
            L = cv.um(rng.uniform(800, 2500))
            ang = (0 if horiz else np.pi / 2) + rng.normal(np.pi / 2, 0.15)
            start = (c[0] - np.sin(ang) * L / 2, c[1] - np.cos(ang) * L / 2)
            path, _ = resample(wander(rng, start, ang, L, 2.0, 0.01), 1.0)
            tb = tube(cv.shape, path, cv.um(rng.uniform(250, 500)) / 2)
            if tb is None:
                continue
            piece = np.zeros(cv.shape, bool)
            piece[tb[0]] = tb[3]
        else:
            piece = star_piece(cv.shape, c, cv.um(rng.uniform(150, 500)), rng, 6, 0.3, rng.uniform(1, 2), rng.uniform(0, 3.2))
        if piece.sum() < 30 or not cv.free(piece, 20):
            continue
        glands = piece & (smooth_noise(rng, cv.shape, cv.um(90)) > 0.62)
        stroma(cv, rng, piece & ~glands, cells=0.003)
        cellular(cv, rng, glands, 0.01, (6, 9), amount=(0.6, 1.0), elong=(1.2, 1.8))
        _add(cv, piece, "core" if cores else "fragment")


def sheet(cv, rng):
    """One large piece, often reaching the field's edge, with hairline cracks and wider tears."""
    piece = star_piece(cv.shape, (cv.shape[0] * rng.uniform(0.4, 0.6), cv.shape[1] * rng.uniform(0.4, 0.6)),
                       min(cv.shape) * rng.uniform(0.4, 0.65), rng, 6, 0.2, rng.uniform(1, 1.6), rng.uniform(0, 3.2))
    mix = smooth_noise(rng, cv.shape, cv.um(400))
    stroma(cv, rng, piece & (mix < 0.5), cells=0.002)
    cellular(cv, rng, piece & (mix >= 0.5), rng.uniform(0.004, 0.01), (6, 10), amount=(0.5, 1.0))
    gaps = np.zeros(cv.shape, bool)
    for width in [rng.uniform(4, 25) for _ in range(rng.integers(1, 5))] + [rng.uniform(100, 400) for _ in range(rng.integers(0, 3))]:
        start = (rng.uniform(0, cv.shape[0]), rng.uniform(0, cv.shape[1]))
        path, _ = resample(wander(rng, start, rng.uniform(0, 6.3), max(cv.shape) * rng.uniform(0.2, 0.7), 2.0, 0.05), 1.0)
        tb = tube(cv.shape, path, cv.um(width) / 2 * np.linspace(rng.uniform(0.2, 1), rng.uniform(0.2, 1), len(path)))
        if tb is not None:
            gaps[tb[0]] |= tb[3]
    lumens(cv, rng, piece & ~gaps, rng.integers(0, 6))
    gaps &= piece
    cv.H[gaps] = 0
    cv.E[gaps] = 0
    cv.holes |= gaps
    _add(cv, piece, "sheet")


def fatty(cv, rng):
    """1-2 fat-rich pieces: adipocytes 40-150 µm (empty, thin eosin walls with flat nuclei) with
    fibrous septa and some denser tissue."""
    for _ in range(rng.integers(1, 3)):
        r = cv.um(rng.uniform(700, 1400))
        piece = _place(cv, rng, lambda c: star_piece(cv.shape, c, r, rng, 6, 0.2, rng.uniform(1, 1.7), rng.uniform(0, 3.2)))
        if piece is None:
            continue
        dense = piece & (smooth_noise(rng, cv.shape, cv.um(300)) > rng.uniform(0.55, 0.8))
        fat = piece & ~dense
        seeds = scatter(rng, fat.astype(np.float32), 1 / cv.um(rng.uniform(55, 95)) ** 2)
        lab = np.zeros(cv.shape, np.int32)
        lab[np.clip(seeds[:, 0].astype(int), 0, cv.shape[0] - 1), np.clip(seeds[:, 1].astype(int), 0, cv.shape[1] - 1)] = np.arange(1, len(seeds) + 1)
        _, (ir, ic) = ndi.distance_transform_edt(lab == 0, return_indices=True)
        cells = lab[ir, ic]
        wall = (ndi.maximum_filter(cells, 3) != ndi.minimum_filter(cells, 3)) & fat
        if cv.um(4) >= 2:  # walls about 3-4 µm thick
            wall = ndi.binary_dilation(wall, iterations=int(cv.um(4)) - 1) & fat
        cv.E += np.where(wall, rng.uniform(0.25, 0.45), 0).astype(np.float32)
        nuclei(cv, rng, wall, 0.0015, d_um=(2.5, 4), elong=(2, 3), amount=(0.5, 0.8))
        stroma(cv, rng, dense, cells=0.002)
        cv.holes |= fat & ~wall
        _add(cv, piece, "fatty")


def lay_out(cv, rng, layout):
    """Fill ``cv`` with the pieces of ``layout`` (one of LAYOUTS)."""
    {"skin": skin, "node": node, "loose": loose, "biopsies": biopsies, "sheet": sheet, "fatty": fatty}[layout](cv, rng)
    if not cv.pieces:  # nothing fitted: one plain piece of stroma
        piece = star_piece(cv.shape, (cv.shape[0] / 2, cv.shape[1] / 2), min(cv.shape) / 3, rng)
        stroma(cv, rng, piece)
        _add(cv, piece, "stroma")
    cv.H[~cv.outline] = 0
    cv.E[~cv.outline] = 0

