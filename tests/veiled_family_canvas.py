"""The subpixel canvas of a veiled-family draw and the shape primitives its parts are drawn with.

The canvas holds, on a grid of ``sub x sub`` subpixels per thumbnail pixel, the summed optical
density (RGB) of every absorber and what each subpixel holds (tissue, red cells, faint tissue, ink,
debris, and which piece). Shapes are local boolean masks with their top-left corner, clipped to the
canvas, so every part works in its own small box.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import cv2
import numpy as np

SHIFT = 3  # fixed-point bits for subpixel-exact polygon filling


@dataclass
class Shape:
    y0: int
    x0: int
    mask: np.ndarray  # bool (h, w)

    @property
    def box(self):
        h, w = self.mask.shape
        return slice(self.y0, self.y0 + h), slice(self.x0, self.x0 + w)


class Canvas:
    def __init__(self, p: dict):
        self.h, self.w = p["size"]
        self.s = p["sub"]
        self.hs, self.ws = self.h * self.s, self.w * self.s
        self.um = self.s / p["mpp"]  # subpixels per micrometre
        self.od = np.zeros((self.hs, self.ws, 3), np.float32)
        for name in ("tissue", "blood", "faint", "ink", "debris"):
            setattr(self, name, np.zeros((self.hs, self.ws), bool))
        self.label = np.zeros((self.hs, self.ws), np.int16)
        self.ink_label = np.zeros((self.hs, self.ws), np.uint8)  # last mark over each subpixel
        self.ink_count = np.zeros((self.hs, self.ws), np.uint8)  # how many marks cover it
        self.pieces: list[dict] = []  # one entry per labelled piece (label = index + 1)
        self.shapes: list[Shape] = []  # the pieces' shapes, in the same order
        self.clear = np.zeros((self.hs, self.ws), bool)  # kept free of ink and debris (faint pieces)

    def mm(self, v: float) -> float:
        """Subpixels for a length in millimetres."""
        return v * 1000.0 * self.um

    def add_od(self, shape: Shape, od: np.ndarray) -> None:
        self.od[shape.box] += od

    def mark(self, name: str, shape: Shape) -> None:
        getattr(self, name)[shape.box] |= shape.mask

    def add_piece(self, entry: dict, shape: Shape) -> int:
        """Record a piece (JSON-friendly ``entry``) and label its subpixels; returns its label."""
        self.pieces.append(entry)
        self.shapes.append(shape)
        lab = self.label[shape.box]
        lab[shape.mask] = len(self.pieces)
        return len(self.pieces)

    def hits_clear(self, shape: Shape) -> bool:
        return bool((self.clear[shape.box] & shape.mask).any())


def box_of(canvas: Canvas, pts_list, pad: float = 2.0):
    pts = np.concatenate([np.asarray(p, np.float64).reshape(-1, 2) for p in pts_list])
    x0, y0 = np.floor(pts.min(0) - pad).astype(int)
    x1, y1 = np.ceil(pts.max(0) + pad).astype(int)
    x0, y0, x1, y1 = max(0, x0), max(0, y0), min(canvas.ws, x1), min(canvas.hs, y1)
    return (y0, x0, y1, x1) if x1 > x0 and y1 > y0 else None


def poly_shape(canvas: Canvas, polys, holes=()) -> Shape | None:
    """Filled polygons (lists of (x, y) subpixel points) minus holes, clipped to the canvas."""
    b = box_of(canvas, polys)
    if b is None:
        return None
    y0, x0, y1, x1 = b
    m = np.zeros((y1 - y0, x1 - x0), np.uint8)
    off = np.array([x0, y0], np.float64)
    fix = lambda ps: [np.rint((np.asarray(q, np.float64) - off) * (1 << SHIFT)).astype(np.int32) for q in ps]
    cv2.fillPoly(m, fix(polys), 1, cv2.LINE_8, SHIFT)
    if holes:
        cv2.fillPoly(m, fix(holes), 0, cv2.LINE_8, SHIFT)
    return Shape(y0, x0, m.astype(bool)) if m.any() else None


def band_outline(path, widths) -> np.ndarray:
    """Outline of a band of varying width along a path (N, 2), round-ended (caps of 12 points)."""
    path = np.asarray(path, np.float64)
    widths = np.broadcast_to(np.asarray(widths, np.float64), (len(path),))
    d = np.gradient(path, axis=0)
    n = np.stack([-d[:, 1], d[:, 0]], 1) / (np.linalg.norm(d, axis=1, keepdims=True) + 1e-9)
    left, right = path + n * widths[:, None] / 2, path - n * widths[:, None] / 2

    def cap(c, r, a0):
        a = a0 + np.linspace(0, math.pi, 12)
        return c + r * np.stack([np.cos(a), np.sin(a)], 1)

    a_end = math.atan2(n[-1, 1], n[-1, 0])
    a_start = math.atan2(-n[0, 1], -n[0, 0])
    return np.concatenate([left, cap(path[-1], widths[-1] / 2, a_end - math.pi), right[::-1],
                           cap(path[0], widths[0] / 2, a_start - math.pi)])


def curve(rng, p0, p1, bend: float, n: int = 64) -> np.ndarray:
    """A quadratic Bezier curve from p0 to p1 whose control point lies ``bend`` x length aside."""
    p0, p1 = np.asarray(p0, float), np.asarray(p1, float)
    d = p1 - p0
    c = (p0 + p1) / 2 + np.array([-d[1], d[0]]) * bend * rng.uniform(-1, 1)
    t = np.linspace(0, 1, n)[:, None]
    return (1 - t) ** 2 * p0 + 2 * (1 - t) * t * c + t * t * p1


def ragged_outline(rng, cx, cy, rx, ry, angle, rough: float, n: int = 240, kmax: int = 30) -> np.ndarray:
    """A closed outline: an ellipse whose radius carries random harmonics 2..kmax (amplitude
    ``rough`` x k^-1.2), so low ``rough`` gives smooth pieces and high ``rough`` ragged ones."""
    t = np.linspace(0, 2 * math.pi, n, endpoint=False)
    r = np.ones(n)
    for k in range(2, kmax + 1):
        r += rough * k ** -1.2 * rng.normal() * np.cos(k * t + rng.uniform(0, 2 * math.pi)) / 2
    r = np.clip(r, 0.35, None)
    x, y = rx * r * np.cos(t), ry * r * np.sin(t)
    ca, sa = math.cos(angle), math.sin(angle)
    return np.stack([cx + ca * x - sa * y, cy + sa * x + ca * y], 1)


def smooth_noise(rng, shape, cell: float) -> np.ndarray:
    """Zero-mean, unit-sd random field varying over about ``cell`` subpixels (cubic upsampling)."""
    h, w = shape
    cell = max(1.5, float(cell))
    gh, gw = int(h / cell) + 3, int(w / cell) + 3
    g = rng.standard_normal((gh, gw)).astype(np.float32)
    f = cv2.resize(g, (int(gw * cell), int(gh * cell)), interpolation=cv2.INTER_CUBIC)[:h, :w]
    return (f - f.mean()) / (f.std() + 1e-6)


def dots(rng, mask: np.ndarray, count: int, sigma: float, elong: float = 1.0, angle: float = 0.0) -> np.ndarray:
    """``count`` blobs of peak about 1 at random points inside ``mask`` (Gaussian, sd ``sigma``
    subpixels, stretched ``elong`` times along ``angle``)."""
    h, w = mask.shape
    out = np.zeros((h, w), np.float32)
    if count <= 0 or not mask.any():
        return out
    frac = max(mask.mean(), 1e-3)
    idx = rng.integers(0, h * w, int(count / frac) + 1)
    idx = idx[mask.ravel()[idx]]
    out = np.bincount(idx, weights=rng.uniform(0.6, 1.0, len(idx)), minlength=h * w).astype(np.float32).reshape(h, w)
    if elong <= 1.01:
        return cv2.GaussianBlur(out, (0, 0), sigma) * np.float32(2 * math.pi * sigma * sigma)
    r = int(math.ceil(3 * sigma * elong))
    yy, xx = np.mgrid[-r:r + 1, -r:r + 1].astype(np.float32)
    u = xx * math.cos(angle) + yy * math.sin(angle)
    v = -xx * math.sin(angle) + yy * math.cos(angle)
    k = np.exp(-0.5 * ((u / (sigma * elong)) ** 2 + (v / sigma) ** 2)).astype(np.float32)
    return cv2.filter2D(out, -1, k, borderType=cv2.BORDER_CONSTANT)

