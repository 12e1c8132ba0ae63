"""Constructed slides whose tissue is known exactly, and an independent resampler.

Used by the geometry property test: the tissue layout is a set of rectangles in µm; a slide is
rendered from it at a level-0 µm/px drawn from the real ranges, with a pyramid that mixes x2,
x4, x16 and x32 levels. The expected tissue fraction of a tile is the area of its footprint
inside the rectangles (exact geometry), and the expected pixels are an exact area average of
the source level written here from cumulative sums (not the library's weight matrices).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

GLASS = np.array([243, 241, 245], np.uint8)  # blank glass, near white (common practice)
TISSUE = np.array([212, 184, 204], np.uint8)  # a pale H&E pink-purple (mean OD ~0.08, see render)

#: Pyramids as scanners write them: x2, x4, x16 and x32 levels mixed (level-0 px per level px).
PYRAMIDS = ((1, 4, 32), (1, 2, 16), (1, 4, 16), (1, 2, 4, 32), (1, 32), (1, 2, 32), (1, 16))


@dataclass
class Case:
    """One random draw: slide geometry, tiling settings and the tissue rectangles (µm)."""

    mpp0: float
    downsamples: tuple
    target: float
    tile: int
    mask_mpp: float
    height_um: float
    width_um: float
    rects: np.ndarray  # (K, 4) y0, x0, y1, x1 in µm

    @property
    def shape0(self) -> tuple[int, int]:
        return (int(self.height_um / self.mpp0), int(self.width_um / self.mpp0))

    def level_mpps(self) -> list[float]:
        """µm/px of each level as the slide declares them: level-0 µm/px times the downsample."""
        return [self.mpp0 * d for d in self.downsamples]


def draw_case(rng: np.random.Generator) -> Case:
    """A random case: level-0 µm/px from the 40x (0.22-0.27) or 20x (0.44-0.52) range (common
    practice), a mixed pyramid, a target that is sometimes within 0.5 % of a level, sometimes
    0.5-5 % off one (the cases a loose tolerance gets wrong), else anywhere coarser; a mask
    µm/px that is sometimes within 5 % of a level (reused as is, so not the value asked)."""
    mpp0 = float(rng.uniform(0.22, 0.27) if rng.random() < 0.6 else rng.uniform(0.44, 0.52))
    pyramid = PYRAMIDS[rng.integers(len(PYRAMIDS))]
    mpps = [mpp0 * d for d in pyramid]
    kind = rng.integers(3)
    if kind == 0 and len(mpps) > 1 and mpps[1] < 1.6:  # within 0.5 %: used as is
        target = mpps[1] * (1 + rng.uniform(-0.0045, 0.0045))
    elif kind == 1:  # 0.5-5 % off a level: must be resampled
        base = mpps[1] if len(mpps) > 1 and mpps[1] < 1.5 else mpps[0] * 2
        target = base * (1 + rng.choice([-1, 1]) * rng.uniform(0.006, 0.05))
    else:
        target = float(rng.uniform(1.05 * mpp0, 1.6))
    target = float(max(target, mpp0 * 1.001))
    # tile sides in common use (common practice: 224-512 px; smaller ones keep slides small)
    sizes = [t for t in (160, 192, 224, 256, 320) if t * target >= 110] or [320]
    tile = int(rng.choice(sizes[:4]))
    # The mask decides a tile's tissue fraction to about half a mask pixel along each edge the
    # tile cuts, two edges at a corner: a 0.03 agreement needs mask pixels <= 1/35 of the tile's
    # footprint (a property of any raster mask, not of the geometry under test).
    finest = tile * target / 35
    levels = [m for m in mpps if 0.9 <= m and m * 1.045 <= finest]
    if rng.random() < 0.6 and levels:
        mask_mpp = levels[-1] * (1 + rng.uniform(-0.045, 0.045))  # a level 0-4.5 % off: reused
        mask_mpp = min(mask_mpp, finest)
    else:
        mask_mpp = float(rng.uniform(min(2.0, finest), finest))
    # slide of ~1.0-1.5 mm; tissue rectangles of 0.2-0.5 mm, 0.1 mm apart at least
    height_um, width_um = float(rng.uniform(900, 1300)), float(rng.uniform(1100, 1500))
    rects = _rectangles(rng, height_um, width_um)
    return Case(mpp0, tuple(pyramid), float(target), tile, float(mask_mpp), height_um, width_um, rects)


def _rectangles(rng, height_um, width_um, n=6, gap=110.0):
    rects = []
    for _ in range(200):
        if len(rects) == n:
            break
        h, w = rng.uniform(220, 500, 2)
        y0, x0 = rng.uniform(30, height_um - h - 30), rng.uniform(30, width_um - w - 30)
        r = np.array([y0, x0, y0 + h, x0 + w])
        if all(r[0] >= o[2] + gap or o[0] >= r[2] + gap or r[1] >= o[3] + gap or o[1] >= r[3] + gap
               for o in rects):
            rects.append(r)
    # one piece far from the origin, touching the bottom-right corner region
    far = np.array([height_um - 260, width_um - 330, height_um - 8, width_um - 8])
    rects = [r for r in rects if far[0] >= r[2] + gap or r[0] >= far[2] + gap or far[1] >= r[3] + gap
             or r[1] >= far[3] + gap] + [far]
    return np.array(rects)


def render(case: Case, seed: int) -> np.ndarray:
    """Level-0 pixels: glass, and tissue where a pixel's centre lies in a rectangle; seeded
    noise (±12 grey levels on tissue, ±3 on glass) makes every pixel differ from its neighbours."""
    H, W = case.shape0
    rng = np.random.default_rng(seed)
    noise = rng.integers(-12, 13, size=(H, W, 3), dtype=np.int8)
    added = noise >> 2  # glass: a quarter of the noise
    img = np.empty((H, W, 3), np.uint8)
    img[...] = GLASS
    for sy, sx in _pixel_ranges(case):
        img[sy, sx] = TISSUE
        added[sy, sx] = noise[sy, sx]
    img += added.view(np.uint8)  # two's complement: adding -n wraps back to the right value
    return img


def _pixel_ranges(case: Case):
    """Level-0 row and column slices of the pixels whose centres lie in each rectangle."""
    for y0, x0, y1, x1 in case.rects:
        # centre (i + 0.5) * mpp0 in [a, b)  <=>  i in [ceil(a/mpp0 - 0.5), ceil(b/mpp0 - 0.5))
        ry = slice(math.ceil(y0 / case.mpp0 - 0.5), math.ceil(y1 / case.mpp0 - 0.5))
        rx = slice(math.ceil(x0 / case.mpp0 - 0.5), math.ceil(x1 / case.mpp0 - 0.5))
        yield ry, rx


def tissue_truth(case: Case, yx: np.ndarray, tile: int, mpp: float) -> np.ndarray:
    """Exact fraction of each tile footprint (pixels at ``mpp``) inside the rectangles."""
    y0 = yx[:, 0] * mpp
    x0 = yx[:, 1] * mpp
    y1, x1 = y0 + tile * mpp, x0 + tile * mpp
    area = np.zeros(len(yx))
    for ry0, rx0, ry1, rx1 in case.rects:  # the rectangles do not overlap
        dy = np.clip(np.minimum(y1, ry1) - np.maximum(y0, ry0), 0, None)
        dx = np.clip(np.minimum(x1, rx1) - np.maximum(x0, rx0), 0, None)
        area += dy * dx
    return area / (tile * mpp) ** 2


def tissue_at(case: Case, y_um, x_um) -> np.ndarray:
    """True where the point (broadcast ``y_um``, ``x_um``, in µm) lies in a rectangle."""
    y_um, x_um = np.broadcast_arrays(np.asarray(y_um, float), np.asarray(x_um, float))
    out = np.zeros(y_um.shape, bool)
    for y0, x0, y1, x1 in case.rects:
        out |= (y_um >= y0) & (y_um < y1) & (x_um >= x0) & (x_um < x1)
    return out


def expected_level(level_mpps, target: float, tolerance: float) -> tuple[int, float, float]:
    """(source level, true µm/px, source-level px per target px) by the documented rule: a level
    within ``tolerance`` of the target is used as is (the closest), else the coarsest finer one."""
    near = [(abs(m / target - 1), i) for i, m in enumerate(level_mpps) if abs(m / target - 1) <= tolerance]
    if near:
        i = min(near)[1]
        return i, level_mpps[i], 1.0
    i = max((i for i, m in enumerate(level_mpps) if m <= target), key=lambda i: level_mpps[i])
    return i, target, target / level_mpps[i]


def area_resample(level: np.ndarray, y: int, x: int, h: int, w: int, s: float) -> np.ndarray:
    """Target pixels ``[y, y+h) x [x, x+w)`` as exact area averages of ``level`` (source-level px
    per target px ``s``), rounded to the nearest integer."""
    if s == 1.0:
        return level[y : y + h, x : x + w]
    r0, r1 = math.floor(y * s), min(math.ceil((y + h) * s), level.shape[0])
    c0, c1 = math.floor(x * s), min(math.ceil((x + w) * s), level.shape[1])
    block = level[r0:r1, c0:c1]
    rows = _axis_mean(block, y, h, s, r0, 0)
    cols = _axis_mean(rows, x, w, s, c0, 1)
    return np.clip(np.rint(cols), 0, 255).astype(np.uint8)


def _axis_mean(a, start, n, s, offset, axis):
    """Mean of the piecewise-constant signal ``a`` (first sample at global index ``offset``)
    over ``[j*s, (j+1)*s)`` for j in ``start..start+n-1`` along ``axis``: differences of its
    cumulative integral F(t), exact in float64."""
    a = np.moveaxis(np.asarray(a, np.float64), axis, 0)
    c = np.concatenate([np.zeros((1,) + a.shape[1:]), np.cumsum(a, axis=0)])

    def F(t):  # integral from the block's start to global position t
        t = t - offset
        i = np.minimum(np.floor(t).astype(np.int64), len(a) - 1)
        frac = (t - i).reshape((-1,) + (1,) * (a.ndim - 1))
        return c[i] + frac * a[i]

    j = np.arange(start, start + n, dtype=np.float64)
    out = (F((j + 1) * s) - F(j * s)) / s
    return np.moveaxis(out, 0, axis)
