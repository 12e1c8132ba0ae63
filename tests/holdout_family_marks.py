"""Marks and debris of the held-back family (tests/holdout_family.py): pathologists' marker on the
coverslip (rings round a piece, dots, strokes, hatching, arrows, written letters and digits), with
the dye pooled darker at a stroke's edges as it dried, overlaps adding, and ink partly wiped off;
dust specks, lint fibres and air bubbles (a dark refractive rim).

A mark is a centreline (or a point) and a width: its footprint is every fine pixel within half the
width of the centreline. Its OD is the dye's direction × strength × a profile across the stroke
(0.75 in the middle rising to 0.75 + ``pool`` at the edges) × the wipe left (0.35-1).
"""

from __future__ import annotations

import cv2
import numpy as np

from holdout_family_layouts import free_spot
from holdout_family_optics import DUST, DYE_ODDS, DYES, smooth, unit

# A small stroke font on a unit box (x right, y down): each glyph a list of polylines.
GLYPHS = {"1": [[(0.2, 0.25), (0.55, 0), (0.55, 1)]], "2": [[(0.1, 0.2), (0.45, 0), (0.85, 0.2), (0.1, 1), (0.9, 1)]],
          "4": [[(0.7, 1), (0.7, 0), (0.05, 0.7), (0.95, 0.7)]], "7": [[(0.1, 0), (0.9, 0), (0.35, 1)]],
          "L": [[(0.15, 0), (0.15, 1), (0.85, 1)]], "R": [[(0.15, 1), (0.15, 0), (0.8, 0.15), (0.8, 0.4), (0.15, 0.5), (0.85, 1)]],
          "T": [[(0.05, 0), (0.95, 0)], [(0.5, 0), (0.5, 1)]], "X": [[(0.1, 0), (0.9, 1)], [(0.9, 0), (0.1, 1)]],
          "+": [[(0.5, 0.1), (0.5, 0.9)], [(0.1, 0.5), (0.9, 0.5)]], "A": [[(0.05, 1), (0.5, 0), (0.95, 1)], [(0.25, 0.6), (0.75, 0.6)]]}
KIND_ODDS = {"ring": 0.2, "dot": 0.18, "stroke": 0.24, "hatch": 0.1, "arrow": 0.12, "writing": 0.16}


def _curve(rng, cy, cx, length, bend):
    n = 24
    ang = rng.uniform(0, 2 * np.pi) + np.cumsum(rng.normal(0, bend, n))
    step = length / n
    pts = np.cumsum(np.stack([np.cos(ang), np.sin(ang)], 1) * step, 0)
    pts -= pts.mean(0)
    return [pts + (cx, cy)]


def _lines(rng, kind, cy, cx, size, piece_box):
    """Centrelines (lists of (x, y) arrays, fine px) of a mark of ``kind`` about (cy, cx)."""
    if kind == "dot":
        return [np.array([[cx, cy]])]
    if kind == "ring":
        if piece_box is not None:
            (y0, x0, y1, x1), grow = piece_box, rng.uniform(1.05, 1.35)
            cy, cx, ry, rx = (y0 + y1) / 2, (x0 + x1) / 2, (y1 - y0) / 2 * grow, (x1 - x0) / 2 * grow
        else:
            ry, rx = size * rng.uniform(0.3, 0.5), size * rng.uniform(0.4, 0.6)
        pts = cv2.ellipse2Poly((int(cx), int(cy)), (int(rx), int(ry)), int(rng.uniform(0, 20)), 0,
                               int(rng.uniform(300, 370)), 5)
        return [pts.astype(float)]
    if kind == "stroke":
        return _curve(rng, cy, cx, size, 0.12)
    if kind == "hatch":
        ang, gap = rng.uniform(0, np.pi), size * rng.uniform(0.15, 0.3)
        d, nrm = np.array([np.cos(ang), np.sin(ang)]), np.array([-np.sin(ang), np.cos(ang)])
        return [np.array([(cx, cy) + nrm * gap * (i - 2) - d * size / 2, (cx, cy) + nrm * gap * (i - 2) + d * size / 2])
                for i in range(rng.integers(3, 6))]
    if kind == "arrow":
        ang = rng.uniform(0, 2 * np.pi)
        d = np.array([np.cos(ang), np.sin(ang)])
        tip = np.array([cx, cy])
        tail = tip - d * size
        head = [tip - size * 0.3 * np.array([np.cos(ang + s), np.sin(ang + s)]) for s in (0.5, -0.5)]
        return [np.array([tail, tip]), np.array([head[0], tip, head[1]])]
    text = "".join(rng.choice(list(GLYPHS), rng.integers(2, 5)))
    out, h = [], size
    for i, ch in enumerate(text):
        for line in GLYPHS[ch]:
            out.append(np.array(line) * (0.6 * h, h) + (cx - len(text) * 0.4 * h + i * 0.8 * h, cy - h / 2))
    return out


def render_mark(lines, width, shape):
    """Footprint (bool crop) and distance to the centreline over half the width, with the crop box."""
    allp = np.concatenate(lines)
    pad = width / 2 + 3
    y0, x0 = int(max(0, allp[:, 1].min() - pad)), int(max(0, allp[:, 0].min() - pad))
    y1, x1 = int(min(shape[0], allp[:, 1].max() + pad)), int(min(shape[1], allp[:, 0].max() + pad))
    if y1 - y0 < 2 or x1 - x0 < 2:
        return None
    img = np.full((y1 - y0, x1 - x0), 255, np.uint8)
    for ln in lines:
        pts = np.round(ln - (x0, y0)).astype(np.int32)
        if len(pts) == 1:
            cv2.circle(img, tuple(int(v) for v in pts[0]), 0, 0, -1)
        else:
            cv2.polylines(img, [pts], False, 0, 1)
    rel = cv2.distanceTransform(img, cv2.DIST_L2, 5) / (width / 2)
    return (y0, x0, y1, x1), rel


def marks(rng, tissue, faint_zone, pieces_boxes, p, ink_od, ink_fp) -> list[dict]:
    """Draw 0-5 marks into ``ink_od`` (Hf, Wf, 3) and their footprints into ``ink_fp``."""
    out = []
    if rng.random() < 0.25:
        return out
    taken = tissue | faint_zone
    for _ in range(rng.integers(1, 6)):
        kind = str(rng.choice(list(KIND_ODDS), p=list(KIND_ODDS.values())))
        where = str(rng.choice(["glass", "tissue", "across"], p=[0.4, 0.3, 0.3]))
        dye = str(rng.choice(list(DYE_ODDS), p=list(DYE_ODDS.values())))
        width = rng.uniform(200, 500) if kind in ("writing", "hatch", "arrow") else rng.uniform(250, 1100)
        if kind == "ring":
            width = rng.uniform(200, 700)
        elif kind == "dot":
            width = rng.uniform(300, 1200)
        size = {"ring": 3000, "stroke": rng.uniform(1200, 4000), "hatch": rng.uniform(700, 1600),
                "arrow": rng.uniform(800, 2000), "writing": rng.uniform(700, 1500), "dot": 0}[kind] / p
        size = min(size, 0.45 * min(tissue.shape))
        width /= p
        box = None
        if kind == "ring" and where != "glass" and pieces_boxes:
            box = pieces_boxes[rng.integers(len(pieces_boxes))]
            where = "around"
        if where == "glass":
            spot = free_spot(rng, taken, size / 2 + width)
        else:
            ys, xs = np.nonzero(tissue[::7, ::7])
            if where == "across":
                edge = tissue ^ cv2.erode(tissue.astype(np.uint8), np.ones((5, 5), np.uint8)).astype(bool)
                ys, xs = np.nonzero(edge[::3, ::3])
                ys, xs = ys * 3, xs * 3
            else:
                ys, xs = ys * 7, xs * 7
            spot = (ys[j := rng.integers(ys.size)], xs[j]) if ys.size else None
        if spot is None:
            continue
        lines = _lines(rng, kind, spot[0], spot[1], size, box)
        r = render_mark(lines, width, tissue.shape)
        if r is None:
            continue
        (y0, x0, y1, x1), rel = r
        fp = rel <= 1
        if (fp & faint_zone[y0:y1, x0:x1]).any() or not fp.any():
            continue
        strength, pool = rng.uniform(0.45, 1.5), rng.uniform(0.0, 0.7)
        prof = 0.75 + pool * np.clip(rel, 0, 1) ** 4
        wiped = rng.random() < 0.25
        if wiped:
            prof = prof * np.clip(0.55 + 0.45 * smooth(rng, fp.shape, max(8, 300 / p)), 0.35, 1)
        vec = unit(DYES[dye] * rng.uniform(0.9, 1.1, 3))
        ink_od[y0:y1, x0:x1] += np.where(fp, prof, 0)[..., None] * (vec * strength).astype(np.float32)
        ink_fp[y0:y1, x0:x1] |= fp
        out.append({"kind": kind, "where": where, "dye": dye, "width_um": round(width * p), "od": round(strength, 2),
                    "pool": round(pool, 2), "wiped": wiped, "box": [y0, x0, y1, x1]})
    return out


def debris(rng, shape, p, faint_zone, neutral, art) -> dict:
    """Dust specks, lint fibres and air bubbles into ``neutral`` (OD along DUST) and ``art``."""
    h, w = shape
    n_dust, n_lint, n_bub = int(rng.integers(0, 40)), int(rng.integers(0, 4)), int(rng.choice([0, 0, 1, 2]))
    for _ in range(n_dust):
        cy, cx, r = rng.uniform(0, h), rng.uniform(0, w), rng.uniform(4, 30) / p
        if faint_zone[int(cy), int(cx)]:
            continue
        y0, y1, x0, x1 = int(max(0, cy - r - 2)), int(min(h, cy + r + 2)), int(max(0, cx - r - 2)), int(min(w, cx + r + 2))
        yy, xx = np.ogrid[y0:y1, x0:x1]
        sp = ((yy - cy) ** 2 + (xx - cx) ** 2 * rng.uniform(0.5, 1.5)) < r * r
        neutral[y0:y1, x0:x1] += sp * rng.uniform(0.3, 1.2)
        art[y0:y1, x0:x1] |= sp
    for _ in range(n_lint):
        cy, cx = rng.uniform(0, h), rng.uniform(0, w)
        lines = _curve(rng, cy, cx, rng.uniform(300, 2000) / p, 0.25)
        res = render_mark(lines, rng.uniform(5, 15) / p, shape)
        if res is None:
            continue
        (y0, x0, y1, x1), rel = res
        fp = rel <= 1
        if (fp & faint_zone[y0:y1, x0:x1]).any():
            continue
        neutral[y0:y1, x0:x1] += fp * rng.uniform(0.2, 0.8)
        art[y0:y1, x0:x1] |= fp
    for _ in range(n_bub):
        r, rim = rng.uniform(150, 1200) / p, rng.uniform(8, 30) / p
        cy, cx = rng.uniform(0, h), rng.uniform(0, w)
        y0, y1, x0, x1 = int(max(0, cy - r - rim)), int(min(h, cy + r + rim)), int(max(0, cx - r - rim)), int(min(w, cx + r + rim))
        if y1 - y0 < 2 or x1 - x0 < 2:
            continue
        yy, xx = np.ogrid[y0:y1, x0:x1]
        d = np.hypot(yy - cy, xx - cx)
        ring = np.abs(d - r) < rim / 2
        if (ring & faint_zone[y0:y1, x0:x1]).any():
            continue
        neutral[y0:y1, x0:x1] += ring * rng.uniform(0.25, 0.7)
        art[y0:y1, x0:x1] |= ring
    return {"dust": n_dust, "lint": n_lint, "bubbles": n_bub}


DUST_VECTOR = unit(DUST)
