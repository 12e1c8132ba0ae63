"""Packed red blood cells, one disc a cell, for the tuning family of hard slides (tests/hard_slides.py).

A red cell is a biconcave disc about 7-8 µm across and 2 µm thick (common practice): in a
section it shows as a disc whose centre is paler than its rim. Cells of a haemorrhage lie on a
jittered lattice about one cell apart; each cell takes its own amount of stain. A pixel larger
than a cell averages the light of the cells and gaps it covers (intensities, not densities, add
up over a pixel's area), which is what makes blood granular at thumbnail resolution.

The lattice is a pure function of position (a hash of the cell's lattice index), so any box of
a slide renders the same cells as the whole slide.
"""

from __future__ import annotations

import numpy as np

__all__ = ["cell_thickness", "red_cell_od"]

_MASK = np.uint64(0xFFFFFFFF)


def _hash(i, j, salt):
    """Uniform [0, 1) numbers from integer lattice indices (a 32-bit integer mix)."""
    x = (i.astype(np.int64) * 73856093) ^ (j.astype(np.int64) * 19349663) ^ (int(salt) * 83492791)
    x = x.astype(np.uint64) & _MASK
    for _ in range(2):
        x = ((x ^ (x >> np.uint64(16))) * np.uint64(0x45D9F3B)) & _MASK
    x = x ^ (x >> np.uint64(16))
    return x.astype(np.float64) / 4294967296.0


def cell_thickness(y, x, *, pitch=7.4, radius=3.7, seed=0):
    """Relative stain amount of red cells at points ``(y, x)`` (µm): 0 between cells, about 1 on
    a cell's rim and 0.6 at its centre (biconcave), times each cell's own amount (0.75-1.25)."""
    y, x = np.asarray(y, np.float64), np.asarray(x, np.float64)
    i0, j0 = np.floor(y / pitch).astype(np.int64), np.floor(x / pitch).astype(np.int64)
    best = np.full(y.shape, np.inf)
    amount = np.zeros(y.shape)
    for di in (-1, 0, 1):
        for dj in (-1, 0, 1):
            i, j = i0 + di, j0 + dj
            cy = (i + 0.5 + 0.6 * (_hash(i, j, seed) - 0.5)) * pitch
            cx = (j + 0.5 + 0.6 * (_hash(i, j, seed + 1) - 0.5)) * pitch
            d2 = (y - cy) ** 2 + (x - cx) ** 2
            nearer = d2 < best
            best = np.where(nearer, d2, best)
            amount = np.where(nearer, 0.75 + 0.5 * _hash(i, j, seed + 2), amount)
    rho = np.sqrt(best) / radius
    profile = np.where(rho < 1.0, 0.6 + 0.4 * np.clip(rho / 0.7, 0, 1) ** 2, 0.0)  # pale centre, dense rim
    return (profile * amount).astype(np.float32)


def red_cell_od(yy, xx, mpp, where, cell_od, gap_od, *, seed=0, pitch=7.4):
    """Optical density (per channel) of the pixels ``where`` covered by packed red cells.

    Each pixel is sampled at ``n x n`` points (``n`` about ``mpp / 1.5`` µm, at most 6) and the
    transmitted light averaged, so cells smaller than a pixel still make it granular.

    Parameters
    ----------
    yy, xx : ndarray
        Pixel-centre coordinates (µm), broadcastable to the image shape.
    mpp : float
        µm per pixel.
    where : ndarray (H, W) bool
        Pixels to render.
    cell_od, gap_od : array_like (3,)
        Optical density of a full-thickness cell and of the gaps between cells.

    Returns
    -------
    ndarray (N, 3) float32
        Optical density of each pixel of ``where`` (row-major order).
    """
    ys, xs = np.nonzero(where)
    cy = np.broadcast_to(yy, where.shape)[ys, xs].astype(np.float64)
    cx = np.broadcast_to(xx, where.shape)[ys, xs].astype(np.float64)
    n = int(np.clip(np.ceil(mpp / 1.5), 1, 6))
    offsets = ((np.arange(n) + 0.5) / n - 0.5) * mpp
    cell_od, gap_od = np.asarray(cell_od, np.float64), np.asarray(gap_od, np.float64)
    light = np.zeros((len(ys), 3))
    for oy in offsets:
        for ox in offsets:
            t = cell_thickness(cy + oy, cx + ox, pitch=pitch, seed=seed).astype(np.float64)
            light += np.power(10.0, -(t[:, None] * cell_od + gap_od))
    return (-np.log10(light / (n * n))).astype(np.float32)
