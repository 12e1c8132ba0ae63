"""Geometry and texture helpers of the sealed family (tests/sealed_family.py): a piece's local frame,
wobbly outlines, filled and stroked polygons, smooth noise, nuclear speckle and fat-cell membranes.

All lengths are in subpixels of the drawing grid unless a name ends in ``_um``.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import cv2
import numpy as np


@dataclass
class Piece:
    """One drawn piece of tissue on its own patch: the filled outline (``mask``, truth), and the
    hematoxylin and eosin amounts (OD along each unit stain vector before the draw's strengths)."""
    kind: str
    mask: np.ndarray
    h: np.ndarray
    e: np.ndarray
    notes: dict = field(default_factory=dict)


class Frame:
    """Local coordinates (x along the piece's length, centred on 0) turned by ``angle`` and moved
    into a patch that holds ``outline`` with ``margin`` subpixels to spare."""

    def __init__(self, outline: np.ndarray, angle: float, margin: float = 4):
        c, s = np.cos(angle), np.sin(angle)
        self.r = np.array([[c, -s], [s, c]])
        p = outline @ self.r.T
        self.off = -p.min(axis=0) + margin
        size = np.ceil(p.max(axis=0) - p.min(axis=0) + 2 * margin).astype(int)
        self.shape = (int(size[1]), int(size[0]))

    def __call__(self, pts) -> np.ndarray:
        return np.asarray(pts, float) @ self.r.T + self.off

    def blank(self, dtype=np.float32) -> np.ndarray:
        return np.zeros(self.shape, dtype)


def blob(rng, rx: float, ry: float, wobble: float = 0.15, n: int = 120, harmonics: int = 6) -> np.ndarray:
    """A closed outline: an ellipse whose radius wanders by a few random harmonics."""
    t = np.linspace(0, 2 * np.pi, n, endpoint=False)
    r = np.ones(n)
    for k in range(2, 2 + harmonics):
        r += wobble / k ** 0.8 * rng.uniform(-1, 1) * np.cos(k * t + rng.uniform(0, 2 * np.pi))
    return np.stack([rx * r * np.cos(t), ry * r * np.sin(t)], axis=1)


def wander(rng, n: int, amp: float, smooth: int = 8) -> np.ndarray:
    """A smooth 1-D random walk of ``n`` values with peak size about ``amp``."""
    v = np.cumsum(rng.standard_normal(n + 2 * smooth))
    v = np.convolve(v, np.ones(smooth) / smooth, mode="same")[smooth:smooth + n]
    v -= np.linspace(v[0], v[-1], n)
    return amp * v / max(1e-9, np.abs(v).max())


def fill(shape, polys, value=1) -> np.ndarray:
    out = np.zeros(shape, np.uint8)
    cv2.fillPoly(out, [np.round(p).astype(np.int32) for p in polys], value)
    return out.astype(bool)


def line(shape, pts, width: float) -> np.ndarray:
    out = np.zeros(shape, np.uint8)
    cv2.polylines(out, [np.round(pts).astype(np.int32)], False, 1, max(1, int(round(width))))
    return out.astype(bool)


def noise(shape, cell: float, rng) -> np.ndarray:
    """Smooth noise of unit spread with features about ``cell`` subpixels wide."""
    h, w = shape
    cell = max(1.0, cell)
    low = rng.standard_normal((int(h / cell) + 3, int(w / cell) + 3)).astype(np.float32)
    up = cv2.resize(low, (int(round(low.shape[1] * cell)), int(round(low.shape[0] * cell))),
                    interpolation=cv2.INTER_CUBIC)[:h, :w]
    if up.shape != (h, w):
        up = cv2.resize(low, (w, h), interpolation=cv2.INTER_CUBIC)
    return (up - up.mean()) / (up.std() + 1e-6)


def speckle(shape, rng, density: float, size: float) -> np.ndarray:
    """Nuclei: random spots ``size`` subpixels wide covering about ``density`` of the area,
    values 0..1."""
    p = min(0.9, density / max(1.0, size * size * 0.8))
    spots = (rng.random(shape, dtype=np.float32) < p).astype(np.float32)
    k = max(1, int(round(size)))
    spots = cv2.dilate(spots, cv2.getStructuringElement(cv2.MORPH_ELLIPSE, (k, k)))
    return cv2.GaussianBlur(spots, (0, 0), max(0.4, size / 4))


def membranes(shape, spacing: float, rng, thickness: int = 1) -> np.ndarray:
    """Fat: the walls between cells ``spacing`` subpixels across (nearest-seed cells)."""
    h, w = shape
    n = max(4, int(h * w / spacing ** 2))
    seeds = np.ones(shape, np.uint8)
    ys, xs = rng.integers(0, h, n), rng.integers(0, w, n)
    seeds[ys, xs] = 0
    _, labels = cv2.distanceTransformWithLabels(seeds, cv2.DIST_L2, 3, labelType=cv2.DIST_LABEL_PIXEL)
    wall = np.zeros(shape, bool)
    wall[:, 1:] |= labels[:, 1:] != labels[:, :-1]
    wall[1:, :] |= labels[1:, :] != labels[:-1, :]
    if thickness > 1:
        wall = cv2.dilate(wall.astype(np.uint8), np.ones((thickness, thickness), np.uint8)).astype(bool)
    return wall


def depth(mask: np.ndarray) -> np.ndarray:
    """Distance of each pixel inside ``mask`` to the outside (subpixels)."""
    m = np.pad(mask.astype(np.uint8), 1)
    return cv2.distanceTransform(m, cv2.DIST_L2, 3)[1:-1, 1:-1]


def crack(rng, piece: Piece, width: float, cut: bool) -> None:
    """A crack or tear across the piece: stain removed along a wandering line; a wide tear
    (``cut``) is also left out of the outline (truth), a narrow crack stays tissue."""
    h, w = piece.mask.shape
    ys, xs = np.nonzero(piece.mask)
    if ys.size < 50:
        return
    i = rng.integers(ys.size)
    a = rng.uniform(0, np.pi)
    n = 40
    t = np.linspace(-1, 1, n) * max(h, w)
    pts = np.stack([xs[i] + t * np.cos(a), ys[i] + t * np.sin(a)], axis=1)
    pts += wander(rng, n, max(h, w) * 0.06)[:, None] * np.array([-np.sin(a), np.cos(a)])
    if not cut:  # a narrow crack runs part of the way in from the edge or across
        keep = slice(int(rng.integers(0, n // 3)), int(rng.integers(2 * n // 3, n)))
        pts = pts[keep]
    gap = line(piece.mask.shape, pts, width) & piece.mask
    piece.h[gap] = 0
    piece.e[gap] = 0
    if cut:
        piece.mask &= ~gap
