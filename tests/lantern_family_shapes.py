"""The lantern family's drawing primitives on the subpixel grid: outlines (lumpy blobs, strips
along a centre line), filling them, and the textures tissue is given (smooth fields, cell-scale
speckle, fibres)."""

from __future__ import annotations

from dataclasses import dataclass, field

import cv2
import numpy as np

F32 = np.float32


def blob(rng, cx, cy, rx, ry, angle=0.0, rough=0.18, n=180) -> np.ndarray:
    """A lumpy closed outline (x, y points): an ellipse whose radius wanders with a few random
    harmonics."""
    t = np.linspace(0, 2 * np.pi, n, endpoint=False)
    r = np.ones(n)
    for k in range(2, 9):
        r += rough * rng.normal() / k ** 1.3 * np.cos(k * t + rng.uniform(0, 2 * np.pi))
    r = np.clip(r, 0.45, 1.8)
    x, y = rx * r * np.cos(t), ry * r * np.sin(t)
    ca, sa = np.cos(angle), np.sin(angle)
    return np.stack([cx + ca * x - sa * y, cy + sa * x + ca * y], 1)


def wander(rng, x0, y0, x1, y1, n=60, sway=0.12) -> np.ndarray:
    """A gently bending centre line from (x0, y0) to (x1, y1)."""
    t = np.linspace(0, 1, n)
    dx, dy = x1 - x0, y1 - y0
    length = np.hypot(dx, dy) + 1e-9
    nx, ny = -dy / length, dx / length
    bend = sum(rng.normal() * sway / k * np.sin(np.pi * k * t + rng.uniform(0, 0.6)) for k in (1, 2, 3))
    return np.stack([x0 + dx * t + nx * bend * length, y0 + dy * t + ny * bend * length], 1)


def strip(centre: np.ndarray, half: np.ndarray) -> np.ndarray:
    """The outline of a band of half-width ``half`` (one value per centre point) along ``centre``."""
    d = np.gradient(centre, axis=0)
    d /= np.linalg.norm(d, axis=1, keepdims=True) + 1e-9
    nrm = np.stack([-d[:, 1], d[:, 0]], 1)
    return np.concatenate([centre + nrm * half[:, None], (centre - nrm * half[:, None])[::-1]])


def fill(shape, polys, value=1) -> np.ndarray:
    """uint8 mask of the polygons (x, y in subpixels, 1/16 subpixel precision)."""
    out = np.zeros(shape, np.uint8)
    pts = [np.round(np.asarray(p) * 16).astype(np.int32) for p in polys]
    cv2.fillPoly(out, pts, value, lineType=cv2.LINE_8, shift=4)
    return out


def smooth(rng, shape, cell: float) -> np.ndarray:
    """A smooth random field (mean 0, sd about 1) varying over about ``cell`` subpixels."""
    h, w = shape
    gh, gw = max(2, int(h / cell) + 2), max(2, int(w / cell) + 2)
    g = rng.normal(size=(gh, gw)).astype(F32)
    out = cv2.resize(g, (w, h), interpolation=cv2.INTER_CUBIC)
    return (out - out.mean()) / (out.std() + 1e-6)


def speckle(rng, shape, per_mm2: float, radius_um: float, um: float) -> np.ndarray:
    """Cell-scale grain: Poisson-placed cells of radius ``radius_um`` blurred to their size, mean
    about 1 (``um``: µm per subpixel)."""
    lam = per_mm2 * (um / 1000.0) ** 2
    cnt = rng.poisson(lam, shape).astype(F32)
    sig = max(0.5, 0.7 * radius_um / um)
    return cv2.GaussianBlur(cnt, (0, 0), sig) / max(lam, 1e-6)


def fibres(rng, shape, length: float, angle: float) -> np.ndarray:
    """Streaky stroma: white noise drawn out along ``angle`` over ``length`` subpixels (mean 0)."""
    n = max(3, int(length) | 1)
    k = np.zeros((n, n), F32)
    c = n // 2
    cv2.line(k, (int(c - c * np.cos(angle)), int(c - c * np.sin(angle))),
             (int(c + c * np.cos(angle)), int(c + c * np.sin(angle))), 1.0, 1)
    k /= k.sum()
    out = cv2.filter2D(rng.normal(size=shape).astype(F32), -1, k)
    return out / (out.std() + 1e-6)


def edge_distance(mask: np.ndarray) -> np.ndarray:
    """Distance (subpixels) from each pixel of ``mask`` to its outside."""
    return cv2.distanceTransform(mask.astype(np.uint8), cv2.DIST_L2, 3)


@dataclass
class Piece:
    """One tissue piece on its own window of the subpixel canvas (top-left y0, x0): footprint of
    tissue material, haematoxylin and eosin amounts, haemoglobin amount, packed red cells."""
    name: str
    y0: int
    x0: int
    cover: np.ndarray
    h: np.ndarray = field(default=None)
    e: np.ndarray = field(default=None)
    hb: np.ndarray = field(default=None)
    blood: np.ndarray = field(default=None)

    def __post_init__(self):
        z = np.zeros(self.cover.shape, F32)
        self.h = z.copy() if self.h is None else self.h
        self.e = z.copy() if self.e is None else self.e
        self.hb = z.copy() if self.hb is None else self.hb
        self.blood = np.zeros(self.cover.shape, bool) if self.blood is None else self.blood


def piece_from(name, polys, holes=(), pad=40) -> Piece:
    """A Piece holding the polygons ``polys`` (canvas x, y) minus ``holes``, on a window padded by
    ``pad`` subpixels (room for folds and blood hanging off an edge)."""
    allp = np.concatenate([np.asarray(p) for p in polys])
    x0, y0 = int(np.floor(allp[:, 0].min())) - pad, int(np.floor(allp[:, 1].min())) - pad
    x1, y1 = int(np.ceil(allp[:, 0].max())) + pad, int(np.ceil(allp[:, 1].max())) + pad
    off = np.array([x0, y0])
    shape = (y1 - y0, x1 - x0)
    cover = fill(shape, [np.asarray(p) - off for p in polys]).astype(bool)
    if len(holes):
        cover &= ~fill(shape, [np.asarray(p) - off for p in holes]).astype(bool)
    return Piece(name, y0, x0, cover)
