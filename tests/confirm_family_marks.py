"""Marker pen of the confirmation family (tests/confirm_family.py): dyes, the marks people draw on
slides (rings around a region, arrows, dots, hand-written numbers and letters, ticks, crosses,
underlines, smears) and a felt tip that lays them down with its own width, pressure, fading
and streaks.

Dye optical densities per unit of ink, (R, G, B), peak 1: plausible values, not measurements
(a black ink absorbs all three about alike; blue takes red, green takes red and blue, red takes
green and blue, violet takes green most and red a little).
"""

from __future__ import annotations

import numpy as np
from scipy import ndimage as ndi

from confirm_family_paint import resample, smooth_noise, tube

DYES = {"black": (1.00, 0.97, 0.90), "blue": (0.95, 0.52, 0.10), "green": (0.90, 0.24, 0.78),
        "red": (0.06, 0.90, 0.60), "violet": (0.55, 0.95, 0.24)}
DYE_P = {"black": 0.3, "blue": 0.25, "green": 0.2, "red": 0.15, "violet": 0.1}
KINDS = {"ring": 0.22, "arrow": 0.12, "dots": 0.14, "text": 0.16, "tick": 0.08, "cross": 0.08,
         "underline": 0.10, "smear": 0.10}

# A hand's stroke font: polylines in a box 1 wide and 1.5 high (y down), corners rounded later.
GLYPHS = {
    "0": [[(0.5 + 0.45 * np.sin(t), 0.75 - 0.73 * np.cos(t)) for t in np.linspace(0, 2 * np.pi, 24)]],
    "1": [[(0.25, 0.3), (0.55, 0.0), (0.55, 1.5)]],
    "2": [[(0.05, 0.35), (0.3, 0.02), (0.75, 0.05), (0.9, 0.4), (0.1, 1.5), (1.0, 1.5)]],
    "3": [[(0.05, 0.15), (0.5, 0.0), (0.9, 0.3), (0.45, 0.7), (0.95, 1.05), (0.55, 1.5), (0.0, 1.35)]],
    "4": [[(0.7, 1.5), (0.7, 0.0), (0.0, 1.05), (1.0, 1.05)]],
    "5": [[(0.9, 0.0), (0.15, 0.0), (0.1, 0.65), (0.6, 0.55), (0.95, 0.95), (0.6, 1.5), (0.05, 1.35)]],
    "6": [[(0.8, 0.05), (0.3, 0.4), (0.05, 1.1), (0.4, 1.5), (0.9, 1.2), (0.6, 0.75), (0.1, 0.95)]],
    "7": [[(0.0, 0.0), (1.0, 0.0), (0.35, 1.5)]],
    "8": [[(0.5, 0.7), (0.1, 0.35), (0.5, 0.0), (0.9, 0.35), (0.5, 0.7), (0.05, 1.1), (0.5, 1.5), (0.95, 1.1), (0.5, 0.7)]],
    "9": [[(0.9, 0.45), (0.5, 0.8), (0.1, 0.45), (0.5, 0.0), (0.9, 0.4), (0.8, 1.5)]],
    "A": [[(0.0, 1.5), (0.5, 0.0), (1.0, 1.5)], [(0.2, 0.95), (0.8, 0.95)]],
    "L": [[(0.1, 0.0), (0.1, 1.5), (0.95, 1.5)]],
    "R": [[(0.1, 1.5), (0.1, 0.0), (0.7, 0.05), (0.9, 0.35), (0.6, 0.7), (0.1, 0.72)], [(0.4, 0.72), (0.95, 1.5)]],
    "T": [[(0.0, 0.0), (1.0, 0.0)], [(0.5, 0.0), (0.5, 1.5)]],
    "X": [[(0.0, 0.0), (1.0, 1.5)], [(1.0, 0.0), (0.0, 1.5)]],
}


class Pen:
    """A felt-tip pen of one dye: ``tip_um`` wide, pressing ``load`` (ink units) that fades to
    ``load * (1 - fade)`` along each stroke. Strokes add optical density to ``od`` (fine, (H, W, 3))
    and their footprint to ``foot`` (fine bool)."""

    def __init__(self, rng, px, dye, tip_um, load, fade):
        self.rng, self.px, self.dye = rng, px, np.asarray(DYES[dye], np.float32)
        self.tip, self.load, self.fade = tip_um / px, load, fade

    def stroke(self, od, foot, pts, width=1.0, load=1.0, blotch=0.15):
        pts = np.asarray(pts, float)
        if len(pts) == 1:
            pts = np.concatenate([pts, pts + 0.01])
        path, s = resample(pts, 1.0)
        hw = self.tip * width / 2 * (1 + 0.08 * np.sin(s / max(self.tip, 1) + self.rng.uniform(0, 6)))
        t = tube(od.shape[:2], path, np.maximum(hw, 0.5))
        if t is None:
            return
        box, dist, near, inside = t
        frac = s[near] / max(s[-1], 1.0)
        amount = self.load * load * (1 - self.fade * frac)
        edge = np.clip(hw[near] - dist + 0.5, 0, 1)  # soft edge one fine pixel wide
        rim = 1 + 0.12 * np.exp(-((hw[near] - dist) / np.maximum(1.0, 0.15 * hw[near])) ** 2)  # ink pools at the edge
        streak = smooth_noise(self.rng, dist.shape, max(2.0, self.tip / 6), 1 - blotch, 1 + blotch)
        val = amount * edge * rim * streak
        od[box] += val[..., None] * self.dye
        foot[box] |= inside


def _hand(rng, pts, size, jitter=0.03, smooth=0.04):
    """Round a polyline's corners and shake it a little as a hand does (``size`` in fine px)."""
    p, _ = resample(np.asarray(pts, float), max(size / 60, 0.5))
    p = p + ndi.gaussian_filter1d(rng.normal(0, jitter * size, p.shape), 4, axis=0)
    return ndi.gaussian_filter1d(p, max(1.0, smooth * len(p)), axis=0, mode="nearest")


def write(rng, pen, od, foot, text, origin, height, angle):
    """Hand-written ``text`` from ``origin`` (top left, fine px), letters ``height`` fine px."""
    slant, adv = rng.uniform(-0.05, 0.35), 0.0
    c, s = np.cos(angle), np.sin(angle)
    for ch in text:
        scale = height / 1.5 * rng.uniform(0.9, 1.1)
        for poly in GLYPHS[ch]:
            g = np.asarray(poly, float) * scale
            x = g[:, 0] + adv + slant * (height - g[:, 1])
            y = g[:, 1] + rng.normal(0, 0.03 * height)
            xy = np.stack([origin[0] + y * c + x * s, origin[1] - y * s + x * c], 1)
            pen.stroke(od, foot, _hand(rng, xy, height), load=rng.uniform(0.85, 1.1))
        adv += scale * rng.uniform(1.15, 1.45)


def _ellipse(rng, centre, ry, rx, sweep, start):
    t = start + np.linspace(0, sweep, 200)
    wob = 1 + ndi.gaussian_filter1d(rng.normal(0, 0.06, t.size), 12) * 3
    return np.stack([centre[0] + ry * wob * np.sin(t), centre[1] + rx * wob * np.cos(t)], 1)


def draw_mark(rng, pen, od, foot, kind, cv):
    """One mark of ``kind`` on the field of canvas ``cv`` (its pieces give targets to ring or point
    at). Returns the mark's own footprint (fine bool)."""
    mine = np.zeros(foot.shape, bool)
    H, W = foot.shape
    um = cv.um
    piece = cv.pieces[rng.integers(len(cv.pieces))][0]
    inner = np.argwhere(piece)
    target = inner[rng.integers(len(inner))] if len(inner) else np.array([H / 2, W / 2])
    free = lambda: np.array([rng.uniform(0.05, 0.95) * H, rng.uniform(0.05, 0.95) * W])  # noqa: E731
    if kind == "ring":
        r = max(um(rng.uniform(300, 1000)), 2.5 * pen.tip)
        pts = _ellipse(rng, target, r * rng.uniform(0.6, 1), r, rng.uniform(5.6, 7.0), rng.uniform(0, 6.3))
        pen.stroke(od, mine, _hand(rng, pts, r))
    elif kind == "arrow":
        L = max(um(rng.uniform(600, 1800)), 3 * pen.tip)
        ang = rng.uniform(0, 2 * np.pi)
        tip = target + um(rng.uniform(50, 300)) * np.array([np.sin(ang), np.cos(ang)])
        tail = tip + L * np.array([np.sin(ang), np.cos(ang)])
        pen.stroke(od, mine, _hand(rng, [tail, tip], L))
        head = max(um(rng.uniform(200, 450)), 1.5 * pen.tip)
        for side in (-1, 1):
            a2 = ang + side * rng.uniform(0.4, 0.7)
            pen.stroke(od, mine, _hand(rng, [tip, tip + head * np.array([np.sin(a2), np.cos(a2)])], head))
    elif kind == "dots":
        for _ in range(rng.integers(1, 4)):
            p = target + rng.normal(0, um(600), 2) if rng.random() < 0.6 else free()
            pen.stroke(od, mine, [p, p + rng.normal(0, pen.tip * 0.3, 2)], width=rng.uniform(1.0, 1.3))
    elif kind == "text":
        text = "".join(rng.choice(list(GLYPHS), size=rng.integers(1, 4)))
        h = max(um(rng.uniform(600, 2000)), 3 * pen.tip)
        corner = free() if rng.random() < 0.5 else np.array([rng.uniform(0.02, 0.3) * H, rng.uniform(0.02, 0.6) * W])
        write(rng, pen, od, mine, text, corner, h, rng.normal(0, 0.2))
    elif kind in ("tick", "cross", "underline"):
        p = target + rng.normal(0, um(300), 2)
        a = rng.uniform(0, 2 * np.pi)
        d = np.array([np.sin(a), np.cos(a)])
        n = np.array([-d[1], d[0]])
        if kind == "tick":
            s1, s2 = um(rng.uniform(200, 500)), um(rng.uniform(500, 1200))
            pts = [p - s1 * (d + n) / 1.4, p, p + s2 * (d - 1.2 * n) / 1.6]
            pen.stroke(od, mine, _hand(rng, pts, s2))
        elif kind == "cross":
            s = um(rng.uniform(400, 1200)) / 2
            pen.stroke(od, mine, _hand(rng, [p - s * (d + n), p + s * (d + n)], s))
            pen.stroke(od, mine, _hand(rng, [p - s * (d - n), p + s * (d - n)], s))
        else:
            L = um(rng.uniform(1000, 3000))
            pts = [p - L / 2 * d, p + 0.05 * L * n, p + L / 2 * d]
            pen.stroke(od, mine, _hand(rng, pts, L))
    else:  # smear: a finger or wipe through wet ink, broad, thin and blotchy
        p = target if rng.random() < 0.5 else free()
        a = rng.uniform(0, 2 * np.pi)
        L = um(rng.uniform(600, 1800))
        pts = [p, p + L * np.array([np.sin(a), np.cos(a)])]
        pen.stroke(od, mine, _hand(rng, pts, L, 0.06), width=um(rng.uniform(500, 1500)) / pen.tip, load=rng.uniform(0.15, 0.45), blotch=0.45)
    foot |= mine
    return mine
