"""Red blood cells, mucin and faint pieces of the sealed family (tests/sealed_family.py).

Red cells are discs of about 7-8 um absorbing as oxy-haemoglobin; packed regions are granular
(cells and gaps), some sheets are denser and smoother. They lie at piece edges and inside pieces,
up to 60 % of a piece; the regions count as tissue. Mucin lakes are pale, hematoxylin-tinged and
wispy, inside pieces. Faint pieces are separate pieces whose strength is set afterwards so that
their mean green OD above glass hits a drawn target (tests/sealed_family.py, ``_faint``).
"""

from __future__ import annotations

import cv2
import numpy as np

from sealed_family_shapes import Frame, Piece, blob, fill, membranes, noise, speckle


def blood_regions(rng, u: float, canvas: np.ndarray, where: tuple, fraction: float) -> tuple[np.ndarray, np.ndarray]:
    """Blobs of blood on the piece ``canvas[where]`` until about ``fraction`` of its area is
    covered (blobs centred on its edge or inside it). Returns (granular, sheet) regions of the
    window ``where``, grown by a margin (the window is clipped to the canvas by the caller)."""
    m = canvas[where]
    area = int(m.sum())
    gran, sheet = np.zeros(m.shape, np.uint8), np.zeros(m.shape, np.uint8)
    if area == 0 or fraction <= 0:
        return gran.astype(bool), sheet.astype(bool)
    edge = m & ~cv2.erode(m.astype(np.uint8), np.ones((3, 3), np.uint8)).astype(bool)
    ey, ex = np.nonzero(edge)
    iy, ix = np.nonzero(m)
    nblobs = int(rng.integers(1, 6))
    r0 = np.sqrt(fraction * area / np.pi / nblobs)
    got = 0
    for _ in range(40):
        if got >= fraction * area:
            break
        at_edge = rng.random() < 0.55 and ey.size
        i = rng.integers(ey.size if at_edge else iy.size)
        c = np.array([ex[i], ey[i]] if at_edge else [ix[i], iy[i]], float)
        r = max(20 * u, r0 * rng.uniform(0.5, 1.2))
        poly = np.round(c + blob(rng, r, r * rng.uniform(0.4, 1), 0.3, n=60)).astype(np.int32)
        cv2.fillPoly(sheet if rng.random() < 0.3 else gran, [poly], 1)
        got = int(((gran | sheet).astype(bool) & m).sum())
    sheet = sheet.astype(bool)
    return gran.astype(bool) & ~sheet, sheet


def red_cells(rng, u: float, gran: np.ndarray, sheet: np.ndarray) -> np.ndarray:
    """Haemoglobin amount (OD along the haemoglobin vector) over granular and sheet regions:
    granular = separate ~7.5 um discs with gaps; sheets = overlapping cells, smoother, denser."""
    shape = gran.shape
    cell = rng.uniform(7.0, 8.0) * u
    k = max(2, int(round(cell)))
    disc = cv2.getStructuringElement(cv2.MORPH_ELLIPSE, (k, k))
    cover = rng.uniform(0.35, 0.8)
    p = min(0.9, cover / (np.pi * k * k / 4))
    cells = cv2.dilate((rng.random(shape, dtype=np.float32) < p).astype(np.float32), disc)
    cells = cv2.GaussianBlur(cells, (0, 0), 0.35 * k / 2 + 0.3)
    vary = 1 + 0.15 * noise(shape, 30 * u, rng)
    out = np.zeros(shape, np.float32)
    out[gran] = (rng.uniform(0.3, 0.85) * cells * vary)[gran]
    out[sheet] = (rng.uniform(0.55, 1.3) * (0.82 + 0.18 * cells) * vary)[sheet]
    return np.clip(out, 0, None)


def mucin(rng, u: float, piece: Piece) -> bool:
    """A mucin lake inside ``piece``: pale blue-grey wisps with a few floating cell strips
    (tissue in truth, far paler than the rest)."""
    ys, xs = np.nonzero(piece.mask)
    if ys.size < 400:
        return False
    i = rng.integers(ys.size)
    r = np.sqrt(ys.size * rng.uniform(0.08, 0.3) / np.pi)
    lake = fill(piece.mask.shape, [np.array([xs[i], ys[i]]) + blob(rng, r, r * rng.uniform(0.5, 1), 0.3)]) & piece.mask
    wisp = np.clip(0.35 + 0.5 * noise(lake.shape, 25 * u, rng) + 0.3 * noise(lake.shape, 6 * u, rng), 0.05, 1.5)
    piece.h[lake] = (rng.uniform(0.05, 0.14) * wisp)[lake]
    piece.e[lake] = 0.015
    strips = (speckle(lake.shape, rng, 0.02, 12 * u) > 0.5) & lake
    piece.h[strips] = rng.uniform(0.3, 0.6)
    return True


FAINT_KINDS = ("mucin pool", "loose fat", "thin smear", "oedematous stroma")


def faint_piece(rng, u: float, kind: str, size_um: float) -> Piece:
    """A faint piece's outline and its relative hematoxylin/eosin pattern (scaled later)."""
    r = 0.5 * size_um * u
    outline = blob(rng, r, r * rng.uniform(0.45, 0.95), rng.uniform(0.15, 0.4), harmonics=8)
    f = Frame(outline, rng.uniform(0, np.pi))
    mask = fill(f.shape, [f(outline)])
    if kind == "mucin pool":
        pat = np.clip(0.6 + 0.4 * noise(f.shape, 30 * u, rng) + 0.25 * noise(f.shape, 6 * u, rng), 0.1, 2)
        h, e = pat, 0.15 * pat
    elif kind == "loose fat":
        walls = membranes(f.shape, rng.uniform(50, 100) * u, rng, thickness=max(1, int(round(3 * u))))
        pat = np.where(walls, 1.0, 0.08).astype(np.float32)
        h, e = 0.15 * pat, pat
    elif kind == "thin smear":
        pat = np.clip(0.5 + 0.5 * noise(f.shape, 40 * u, rng), 0.05, 2) * (0.6 + 0.8 * speckle(f.shape, rng, 0.1, 6 * u))
        h, e = pat, 0.6 * pat
    else:
        pat = np.clip(0.7 + 0.3 * noise(f.shape, 10 * u, rng), 0.1, 2)
        h, e = 0.25 * pat + 0.3 * speckle(f.shape, rng, 0.03, 6 * u), pat
    return Piece(kind, mask, (h * mask).astype(np.float32), (e * mask).astype(np.float32))
