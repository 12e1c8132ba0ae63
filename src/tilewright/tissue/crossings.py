"""Marker strokes followed from the glass into the tissue they cross.

A marker is a film of dye on the cover glass: where a stroke leaves the glass and crosses tissue,
its optical density adds to the tissue's (Beer–Lambert law; optical densities of absorbers in the
light path add, Ruifrok & Johnston 2001). Over glass its colour is the dye's own, and the stroke
is found there by colour or shape (:mod:`.ink`, :mod:`.films`). Over tissue the sum can look like
tissue: blue marker over eosin reads as hematoxylin, red marker over textured tissue is as
granular as the tissue beneath. What still holds is the sum itself. So, for each piece of ink
with enough of it lying on glass:

1. the dye's optical density ``d`` is the median smoothed OD of the piece where it lies on glass
   (away from the tissue left in the mask);
2. near the piece, the tissue's local level ``L`` is the normalized convolution (Knutsson &
   Westin, CVPR 1993) of the OD over the tissue around, over a Gaussian of 1.5 stroke widths,
   with the pixels taken for the stroke left out (two rounds); the Gaussian is taken on blocks
   of a quarter of its sigma and read back a band of rows at a time (:class:`WideBlur`: a wide
   stroke's blur costs no more than a thin one's, and no full-size level is held);
3. a tissue pixel lies under the stroke when its excess ``e = OD - L`` carries at least
   :data:`CARRIED` of the dye's density along ``d`` and points along ``d`` within
   :data:`SPREAD` of it (tissue denser than its surroundings adds H&E, not this dye);
4. only such pixels connected to the piece are taken (a stroke is continuous); among red cells,
   only parts no wider than :data:`WIDER` times the stroke's band (a stroke keeps its width; a
   haemorrhage beside a red stroke is denser than the tissue around along about the same colour,
   and wider).
"""

from __future__ import annotations

import math

import numpy as np

from .density import od_lookup
from .morphology import touching

__all__ = ["strokes_over_tissue", "WideBlur", "CARRIED", "SPREAD", "WIDER", "MIN_GLASS_PX"]

#: Share of the dye's own density that the excess over the tissue's local level must carry.
CARRIED = 0.5
#: Largest part of the excess across the dye's direction, as a share of the part along it (plus
#: :data:`SLACK` OD): about 20 degrees.
SPREAD = 0.35
SLACK = 0.02
#: A part taken under a stroke is at most this many times as wide as the stroke's piece.
WIDER = 1.5
#: Red cells that are more than this share of what would be taken under a stroke are left to
#: the red cells (a haemorrhage beside or under a red stroke is judged by :mod:`.pieces`).
CELL_SHARE = 0.5
#: A piece of ink needs this many pixels lying on glass for its dye to be measured.
MIN_GLASS_PX = 20
#: A wide blur is computed on blocks of sigma / PER_BLOCK pixels (:class:`WideBlur`).
PER_BLOCK = 4
#: Rows of a box handled at a time where the excess over the level is measured.
ROWS = 256


class WideBlur:
    """Gaussian blur of ``sigma`` pixels at a cost and memory that do not grow with ``sigma``:
    the image is averaged over blocks of about ``f`` pixels (``f`` = sigma / :data:`PER_BLOCK`,
    at least 2), blurred there, and read back at full resolution a band of rows at a time by
    bilinear interpolation (as ``cv2.resize`` places pixel centres); the blur is made narrower by
    what the block average (variance f²/12) and the interpolation (f²/6) add. A smooth level
    sampled at a quarter of its sigma loses nothing a threshold can see.

    ``a`` is (H, W) or (H, W, C) float32; a 3-channel image is shrunk a channel at a time,
    ``weight`` (H, W), optional, multiplies it first (no full-size product is made)."""

    def __init__(self, a: np.ndarray, sigma: float, weight: np.ndarray | None = None):
        import cv2

        h, w = a.shape[:2]
        f = max(2, int(sigma // PER_BLOCK))
        size = (max(1, round(w / f)), max(1, round(h / f)))
        planes = [a] if a.ndim == 2 else [a[..., c] for c in range(a.shape[2])]
        small = [cv2.resize(p if weight is None else p * weight, size, interpolation=cv2.INTER_AREA) for p in planes]
        small = np.dstack(small) if a.ndim == 3 else small[0]
        self.small = cv2.GaussianBlur(small, (0, 0), math.sqrt(max(sigma * sigma - f * f / 4.0, 0.25)) / f)
        self.shape = (h, w)
        self._x = ((np.arange(w, dtype=np.float32) + 0.5) * (size[0] / w) - 0.5).astype(np.float32)

    def rows(self, r0: int, r1: int) -> np.ndarray:
        """The blurred image's rows ``r0:r1`` at full resolution."""
        import cv2

        h, w = self.shape
        ys = ((np.arange(r0, min(r1, h), dtype=np.float32) + 0.5) * (self.small.shape[0] / h) - 0.5).astype(np.float32)
        mx = np.broadcast_to(self._x, (ys.size, w))
        my = np.broadcast_to(ys[:, None], (ys.size, w))
        return cv2.remap(self.small, np.ascontiguousarray(mx), np.ascontiguousarray(my), cv2.INTER_LINEAR,
                         borderMode=cv2.BORDER_REPLICATE)


def strokes_over_tissue(rgb: np.ndarray, tables: np.ndarray, sigma_px: float, ink: np.ndarray,
                        tissue: np.ndarray, cells: np.ndarray | None = None) -> np.ndarray:
    """The tissue pixels that lie under a marker stroke found on the glass beside them.

    Parameters
    ----------
    rgb : ndarray (H, W, 3) uint8
        The thumbnail.
    tables : ndarray (3, 256)
        Optical-density tables of the glass (:func:`tilewright.tissue.density.od_tables`).
    sigma_px : float
        Gaussian smoothing of the optical density, pixels (as the ink was found).
    ink : ndarray (H, W) bool
        Ink found so far (by colour, shape and texture).
    tissue : ndarray (H, W) bool
        Tissue left in the mask (ink already out).
    cells : ndarray (H, W) bool, optional
        Red cells (reddish pixels kept as tissue): taken under a stroke only in parts no wider
        than :data:`WIDER` times the stroke's band.

    Returns
    -------
    ndarray (H, W) bool
        Pixels of ``tissue`` under a stroke (see the module's text).
    """
    import cv2

    out = np.zeros_like(tissue)
    if not (ink.any() and tissue.any()):
        return out
    h, w = ink.shape
    near_tissue = cv2.dilate(tissue.view(np.uint8), np.ones((7, 7), np.uint8)).view(bool)
    n, labels, stats, _ = cv2.connectedComponentsWithStats(ink.view(np.uint8), connectivity=8, ltype=cv2.CV_32S)
    # what is taken is connected to the piece: it lies in the pieces of tissue the piece touches
    nt, tlabels = cv2.connectedComponents(tissue.view(np.uint8), connectivity=8, ltype=cv2.CV_32S)
    for k in range(1, n):
        x, y, bw, bh, area = stats[k]
        if area < MIN_GLASS_PX:
            continue
        piece = labels[y:y + bh, x:x + bw] == k
        on_glass = piece & ~near_tissue[y:y + bh, x:x + bw]
        if on_glass.sum() < MIN_GLASS_PX:
            continue
        touched = _touched(tlabels, piece, y, x, 2)
        if not touched.size:
            continue
        width = 2.0 * float(cv2.distanceTransform(np.pad(piece, 1).view(np.uint8), cv2.DIST_L2, 5).max())
        sigma = max(5.0, 1.5 * width)
        reach = int(np.ceil(3 * sigma))
        y0, x0, y1, x1 = max(0, y - reach), max(0, x - reach), min(h, y + bh + reach), min(w, x + bw + reach)
        t = tissue[y0:y1, x0:x1]
        keep = np.zeros(nt, bool)
        keep[touched] = True
        reached = keep[tlabels[y0:y1, x0:x1]]
        box_od = _smoothed_od(rgb, tables, sigma_px, (y0, y1, x0, x1))
        seed = np.zeros(t.shape, bool)
        seed[y - y0:y - y0 + bh, x - x0:x - x0 + bw] = piece
        dye = np.median(box_od[y - y0:y - y0 + bh, x - x0:x - x0 + bw][on_glass], axis=0).astype(np.float32)
        strength = float(np.linalg.norm(dye))
        if strength < 0.05:
            continue
        u = dye / np.float32(strength)
        under = np.zeros_like(t)
        for _ in range(2):  # the level without the stroke's own pixels, then again without those found
            weight = (t & ~under).astype(np.float32)
            num, den = WideBlur(box_od, sigma, weight), WideBlur(weight, sigma)
            del weight
            match = np.zeros_like(t)
            for r in range(0, t.shape[0], ROWS):  # in bands of rows: the temporaries stay small
                rows = slice(r, r + ROWS)
                d = den.rows(r, r + ROWS)
                where = reached[rows] & (d > 0.05)
                e = box_od[rows][where] - num.rows(r, r + ROWS)[where] / d[where][:, None]  # excess over the level
                along = e @ u
                across = np.sqrt(np.maximum(np.einsum("ij,ij->i", e, e) - along * along, 0.0))
                match[rows][where] = (along >= CARRIED * strength) & (across <= SPREAD * along + SLACK)
            under = touching(match, seed)
        del box_od
        if cells is not None:  # red cells under the stroke: a band as wide as the stroke at most
            red = under & cells[y0:y1, x0:x1]
            if red.sum() > CELL_SHARE * under.sum():  # mostly red cells: a haemorrhage beside the stroke
                under &= ~red
            else:
                under &= ~(red & ~_no_wider(red, WIDER * _band_width(piece) + 2.0))
        out[y0:y1, x0:x1] |= under
    return out


def _touched(labels, piece, y, x, grow):
    """The labels (not 0) within ``grow`` px (a square) of ``piece``, placed at (y, x)."""
    import cv2

    h, w = labels.shape
    y0, x0 = max(0, y - grow), max(0, x - grow)
    y1, x1 = min(h, y + piece.shape[0] + grow), min(w, x + piece.shape[1] + grow)
    around = np.zeros((y1 - y0, x1 - x0), np.uint8)
    around[y - y0:y - y0 + piece.shape[0], x - x0:x - x0 + piece.shape[1]] = piece
    around = cv2.dilate(around, np.ones((2 * grow + 1, 2 * grow + 1), np.uint8)).view(bool)
    found = np.unique(labels[y0:y1, x0:x1][around])
    return found[found > 0]


def _band_width(piece):
    """Width of a band: twice the median distance to its outline along its ridge (the pixels
    farthest from the outline in their 3 x 3 neighbourhood). A stroke's crossings and corners,
    where its largest inscribed disc is wider, are a small part of its ridge."""
    import cv2

    dist = cv2.distanceTransform(np.pad(piece, 1).view(np.uint8), cv2.DIST_L2, 5)
    ridge = (dist > 0) & (dist >= cv2.dilate(dist, np.ones((3, 3), np.uint8)))
    return 2.0 * float(np.median(dist[ridge])) if ridge.any() else 0.0


def _no_wider(pieces, most):
    """The connected parts of ``pieces`` no wider (twice the largest inscribed radius) than
    ``most`` pixels."""
    import cv2

    if not pieces.any():
        return pieces
    n, labels, stats, _ = cv2.connectedComponentsWithStats(pieces.view(np.uint8), connectivity=8, ltype=cv2.CV_32S)
    keep = np.zeros(n, bool)
    for k in range(1, n):
        x, y, bw, bh, _ = stats[k]
        part = np.pad(labels[y:y + bh, x:x + bw] == k, 1).view(np.uint8)
        keep[k] = 2.0 * float(cv2.distanceTransform(part, cv2.DIST_L2, 5).max()) <= most
    return keep[labels]


def _smoothed_od(rgb, tables, sigma_px, box):
    """Smoothed optical density over ``box`` (y0, y1, x0, x1), read with a halo of 4 sigma."""
    y0, y1, x0, x1 = box
    h, w = rgb.shape[:2]
    halo = int(np.ceil(4 * sigma_px)) + 2 if sigma_px > 0 else 0
    a0, a1, b0, b1 = max(0, y0 - halo), min(h, y1 + halo), max(0, x0 - halo), min(w, x1 + halo)
    od = od_lookup(np.ascontiguousarray(rgb[a0:a1, b0:b1]), tables)
    if sigma_px > 0:  # as exclusions.smooth, in place
        import cv2

        cv2.GaussianBlur(od, (0, 0), sigma_px, dst=od, borderType=cv2.BORDER_REPLICATE)
    return od[y0 - a0:y1 - a0, x0 - b0:x1 - b0]
