"""The lantern family's marker ink: dyes as RGB optical densities (what each absorbs: blue ink
absorbs red, red ink green and blue...) and marks drawn with them on the subpixel canvas:
strokes, rings round a piece, dots, hand-written letters and ticks. Density varies along a mark
(pen pressure), across it (felt-tip streaks) and pools at its rim as it dries."""

from __future__ import annotations

import cv2
import numpy as np

from lantern_family_shapes import edge_distance, smooth, wander

DYE_OD = {"blue": (0.95, 0.55, 0.12), "green": (0.9, 0.3, 0.8), "black": (1.0, 1.0, 0.95),
          "red": (0.08, 0.95, 0.75), "violet": (0.55, 1.0, 0.25), "brown": (0.45, 0.75, 1.0),
          "pink": (0.05, 0.75, 0.35)}

# Hand-written glyphs as strokes in a unit box (x right, y down).
GLYPHS = {"L": [[(0, 0), (0, 1), (0.6, 1)]], "T": [[(0, 0), (0.8, 0)], [(0.4, 0), (0.4, 1)]],
          "R": [[(0, 1), (0, 0), (0.6, 0.05), (0.6, 0.45), (0, 0.5), (0.65, 1)]],
          "A": [[(0, 1), (0.35, 0), (0.7, 1)], [(0.15, 0.6), (0.55, 0.6)]],
          "X": [[(0, 0), (0.7, 1)], [(0.7, 0), (0, 1)]], "1": [[(0.15, 0.2), (0.4, 0), (0.4, 1)]],
          "2": [[(0, 0.2), (0.3, 0), (0.6, 0.2), (0.55, 0.45), (0, 1), (0.7, 1)]],
          "+": [[(0.35, 0), (0.35, 0.8)], [(0, 0.4), (0.7, 0.4)]],
          "tick": [[(0, 0.55), (0.3, 1), (0.9, 0)]]}


def _lines(shape, lines, width):
    m = np.zeros(shape, np.uint8)
    for pts in lines:
        cv2.polylines(m, [np.round(np.asarray(pts) * 16).astype(np.int32)], False, 1,
                      max(1, int(round(width))), cv2.LINE_8, 4)
    return m.astype(bool)


def stroke(rng, hs, ws, um, target):
    """A felt-tip stroke, often across a piece (``target``: a point on tissue or None)."""
    x0, y0 = rng.uniform(0.05, 0.95) * ws, rng.uniform(0.05, 0.95) * hs
    if target is not None:
        x1, y1 = 2 * np.array(target) - [x0, y0]
    else:
        ang = rng.uniform(0, 2 * np.pi)
        x1, y1 = x0 + np.cos(ang) * 0.4 * ws, y0 + np.sin(ang) * 0.4 * ws
    return [wander(rng, x0, y0, x1, y1, sway=0.06)], rng.uniform(120, 450) / um


def ring(rng, hs, ws, um, target):
    """A hand-drawn loop round a piece, wobbly, its ends overshooting or short of closing."""
    cx, cy = target if target is not None else (rng.uniform(0.3, 0.7) * ws, rng.uniform(0.3, 0.7) * hs)
    r = rng.uniform(0.15, 0.35) * min(hs, ws)
    t = np.linspace(0, 2 * np.pi * rng.uniform(0.85, 1.12), 120) + rng.uniform(0, 6)
    wob = 1 + 0.06 * np.sin(3 * t + rng.uniform(0, 6)) + 0.04 * rng.normal()
    pts = np.stack([cx + r * wob * np.cos(t) * rng.uniform(1, 1.5), cy + r * wob * np.sin(t)], 1)
    return [pts], rng.uniform(60, 220) / um


def dot(rng, hs, ws, um, target):
    """A dot dabbed on the glass or on a piece's edge (a short, thick stroke)."""
    cx, cy = target if target is not None else (rng.uniform(0.05, 0.95) * ws, rng.uniform(0.05, 0.95) * hs)
    r = rng.uniform(80, 350) / um
    a = rng.uniform(0, np.pi)
    return [[(cx - 0.2 * r * np.cos(a), cy - 0.2 * r * np.sin(a)), (cx + 0.2 * r * np.cos(a), cy + 0.2 * r * np.sin(a))]], 2 * r


def letters(rng, hs, ws, um, target):
    """One to three hand-written letters or a tick, in a corner of the glass (or on tissue)."""
    size = rng.uniform(400, 1000) / um
    x, y = target if target is not None else (rng.choice([0.04, 0.75]) * ws, rng.choice([0.04, 0.75]) * hs)
    out = []
    names = ["tick"] if rng.random() < 0.3 else list(rng.choice([k for k in GLYPHS if k != "tick"], int(rng.integers(1, 4))))
    slant = rng.uniform(-0.25, 0.25)
    for i, g in enumerate(names):
        for st in GLYPHS[g]:
            q = np.array(st, float) + rng.normal(0, 0.04, (len(st), 2))
            out.append(np.stack([x + (q[:, 0] + slant * (1 - q[:, 1]) + 0.9 * i) * size, y + q[:, 1] * size], 1))
    return out, size * rng.uniform(0.07, 0.14)


MARKS = {"stroke": stroke, "ring": ring, "dot": dot, "letters": letters}


def draw_marks(rng, hs, ws, um, dyes, count, tissue_points):
    """Ink OD (Hs x Ws x 3, float32), ink footprint and the marks drawn (kind, dye, over tissue)."""
    od = np.zeros((hs, ws, 3), np.float32)
    cover = np.zeros((hs, ws), bool)
    drawn = []
    for i in range(count):
        dye = dyes[i % len(dyes)]
        kind = str(rng.choice(list(MARKS), p=[0.35, 0.2, 0.2, 0.25]))
        on_tissue = len(tissue_points) and rng.random() < (0.7 if kind in ("stroke", "ring") else 0.4)
        target = tuple(tissue_points[int(rng.integers(len(tissue_points)))]) if on_tissue else None
        lines, width = MARKS[kind](rng, hs, ws, um, target)
        m = _lines((hs, ws), lines, width)
        if not m.any():
            continue
        ys, xs = np.nonzero(m)
        y0, y1, x0, x1 = ys.min(), ys.max() + 1, xs.min(), xs.max() + 1
        mw = m[y0:y1, x0:x1]
        sh = mw.shape
        pressure = np.clip(1 + 0.25 * smooth(rng, sh, max(8, 400 / um)), 0.45, 1.4)
        streak = np.clip(1 + 0.12 * smooth(rng, sh, max(2, 25 / um)), 0.7, 1.3)
        rim = 1 + 0.4 * np.exp(-edge_distance(mw) * um / 40.0)  # dried ink pools at the rim
        strength = rng.uniform(0.5, 1.5)
        dens = mw * strength * pressure * streak * rim
        od[y0:y1, x0:x1] += dens[..., None] * np.array(DYE_OD[dye], np.float32)
        cover[y0:y1, x0:x1] |= mw
        drawn.append({"kind": kind, "dye": dye, "aimed_at_tissue": bool(on_tissue)})
    return od, cover, drawn
