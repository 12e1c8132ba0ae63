"""Marker marks of the third hard-slide family (tests/third_family.py): what people draw on slides
with a felt-tip marker, as strokes with a width, a pressure and fading along them.

Written apart from the tissue mask and the other families (see third_family.py).

Kinds (odds per mark): an outline circling a piece, a group of pieces or a region inside a large
piece, following the tissue's contour 0.15-1.2 mm out, solid or dashed (a quarter), with a gap or
an overshoot (0.32); a hand-written label of 1-3 characters from the stroke font below, 1.2-3 mm
high, slanted and shaky (0.16); an arrow pointing at a tissue edge (0.14); a dot of 0.3-1.2 mm
pressed on glass or tissue (0.12); a line crossing the field through tissue (0.10); a tick or a
dash at a tissue edge (0.08); a wipe of 3-6 broad, pale, wavy strokes (0.08). Tips: fine
0.2-0.6 mm, or for outlines, lines and dots broad 0.6-1.5 mm (30 %), log-uniform in each; pressure 0.35-1 of
the dye's full density; half the pens fade along the stroke by up to half of it. Strokes of a
mark that cross add their ink. Dyes (odds): black 0.30, blue 0.25, green 0.18, red 0.14, violet
0.08, brown 0.05.
"""

from __future__ import annotations

import numpy as np
from scipy import ndimage
from skimage import measure

# Marker dyes: optical density (R, G, B) of a full stroke. Plausible values, not measurements.
DYES = {"black": (0.95, 0.92, 0.86), "blue": (0.72, 0.44, 0.09), "green": (0.82, 0.24, 0.52),
        "red": (0.07, 0.82, 0.64), "violet": (0.40, 0.74, 0.17), "brown": (0.26, 0.46, 0.64)}
DYE_ODDS = {"black": 0.30, "blue": 0.25, "green": 0.18, "red": 0.14, "violet": 0.08, "brown": 0.05}
KIND_ODDS = {"circle": 0.32, "text": 0.16, "arrow": 0.14, "dot": 0.12, "line": 0.10, "tick": 0.08,
             "wipe": 0.08}


def _arc(cx, cy, rx, ry, a0, a1, n=14):
    a = np.radians(np.linspace(a0, a1, n))
    return list(zip(cx + rx * np.cos(a), cy - ry * np.sin(a)))


# A stroke font on a 0.6 x 1 box (x right, y down), one list of polylines a character.
FONT = {
    "0": [_arc(0.3, 0.5, 0.28, 0.5, 90, 450, 24)],
    "1": [[(0.12, 0.22), (0.34, 0.0), (0.34, 1.0)]],
    "2": [_arc(0.3, 0.28, 0.27, 0.27, 160, -30) + [(0.02, 1.0), (0.6, 1.0)]],
    "3": [_arc(0.28, 0.26, 0.26, 0.25, 150, -90), _arc(0.28, 0.74, 0.3, 0.26, 90, -150)],
    "4": [[(0.46, 1.0), (0.46, 0.0), (0.0, 0.68), (0.6, 0.68)]],
    "5": [[(0.55, 0.0), (0.1, 0.0), (0.06, 0.44)] + _arc(0.28, 0.7, 0.29, 0.3, 120, -150)],
    "6": [_arc(0.32, 0.45, 0.28, 0.45, 60, 180, 8) + _arc(0.3, 0.72, 0.28, 0.28, 180, 540, 20)],
    "7": [[(0.0, 0.0), (0.6, 0.0), (0.22, 1.0)]],
    "8": [_arc(0.3, 0.25, 0.24, 0.25, -90, 270, 20), _arc(0.3, 0.74, 0.29, 0.26, 90, 450, 20)],
    "9": [_arc(0.3, 0.28, 0.28, 0.28, 0, 360, 20), [(0.58, 0.28), (0.5, 1.0)]],
    "A": [[(0.0, 1.0), (0.3, 0.0), (0.6, 1.0)], [(0.12, 0.62), (0.48, 0.62)]],
    "B": [[(0.05, 1.0), (0.05, 0.0)] + _arc(0.28, 0.24, 0.24, 0.24, 90, -90, 10) + [(0.05, 0.48)],
          _arc(0.3, 0.74, 0.27, 0.26, 90, -90, 10) + [(0.05, 1.0)]],
    "C": [_arc(0.33, 0.5, 0.3, 0.5, 50, 310, 20)],
    "H": [[(0.03, 0.0), (0.03, 1.0)], [(0.57, 0.0), (0.57, 1.0)], [(0.03, 0.5), (0.57, 0.5)]],
    "L": [[(0.05, 0.0), (0.05, 1.0), (0.56, 1.0)]],
    "R": [[(0.05, 1.0), (0.05, 0.0)] + _arc(0.3, 0.26, 0.26, 0.26, 90, -90, 10) + [(0.05, 0.52),
                                                                                 (0.58, 1.0)]],
    "X": [[(0.0, 0.0), (0.6, 1.0)], [(0.6, 0.0), (0.0, 1.0)]],
    "-": [[(0.05, 0.55), (0.5, 0.55)]],
}
LABELS = "0123456789ABCHLRX"


def stroke_cover(shape, pts, width, dens=None):
    """Coverage (0..1, anti-aliased) and density of a polyline of fine-pixel points ``pts`` (N, 2)
    as (y, x), ``width`` and ``dens`` per point (linear between them), as the maximum over
    its segments: a stroke drawn once."""
    pts = np.asarray(pts, float)
    width = np.broadcast_to(np.asarray(width, float), len(pts))
    dens = np.broadcast_to(np.asarray(1.0 if dens is None else dens, float), len(pts))
    cov = np.zeros(shape, np.float32)
    den = np.zeros(shape, np.float32)
    for i in range(len(pts) - 1):
        a, b = pts[i], pts[i + 1]
        r = max(width[i], width[i + 1]) / 2 + 1.5
        y0, x0 = np.floor(np.minimum(a, b) - r).astype(int)
        y1, x1 = np.ceil(np.maximum(a, b) + r).astype(int) + 1
        y0, x0, y1, x1 = max(y0, 0), max(x0, 0), min(y1, shape[0]), min(x1, shape[1])
        if y1 <= y0 or x1 <= x0:
            continue
        yy, xx = np.mgrid[y0:y1, x0:x1].astype(np.float32)
        d = b - a
        t = np.clip(((yy - a[0]) * d[0] + (xx - a[1]) * d[1]) / max(d @ d, 1e-9), 0, 1)
        dist = np.hypot(yy - a[0] - t * d[0], xx - a[1] - t * d[1])
        c = np.clip((width[i] + t * (width[i + 1] - width[i])) / 2 - dist + 0.5, 0, 1)
        sl = (slice(y0, y1), slice(x0, x1))
        cov[sl] = np.maximum(cov[sl], c)
        den[sl] = np.maximum(den[sl], c * (dens[i] + t * (dens[i + 1] - dens[i])))
    return cov, den


def resample(pts, step):
    """Points every ``step`` along a polyline (at least two)."""
    pts = np.asarray(pts, float)
    s = np.r_[0, np.cumsum(np.hypot(*np.diff(pts, axis=0).T))]
    n = max(2, int(np.ceil(s[-1] / max(step, 1e-6))) + 1)
    u = np.linspace(0, s[-1], n)
    return np.c_[np.interp(u, s, pts[:, 0]), np.interp(u, s, pts[:, 1])]


def _wobble(rng, n, amp):
    """A smooth random offset of ``n`` points, amplitude ``amp``."""
    k = np.arange(1, 5)
    ph = rng.uniform(0, 2 * np.pi, (2, 4))
    u = np.linspace(0, 1, n)[:, None]
    return amp * np.c_[(np.sin(2 * np.pi * k * u + ph[0]) / k).sum(1),
                       (np.sin(2 * np.pi * k * u + ph[1]) / k).sum(1)]


class Pen:
    """A marker: dye, tip width (µm), pressure and fading."""

    def __init__(self, rng, dye, tip_um):
        self.rng, self.dye, self.tip = rng, dye, tip_um
        self.pressure = rng.uniform(0.35, 1.0)
        self.fade = rng.uniform(0.0, 0.5) if rng.random() < 0.5 else 0.0

    def stroke(self, pts_um, *, scale=1.0):
        """(points µm, widths µm, densities) of one stroke, resampled to the tip's size."""
        pts = resample(pts_um, float(np.clip(0.5 * self.tip, 30.0, 300.0)))
        n = len(pts)
        u = np.linspace(0, 1, n)
        ph = self.rng.uniform(0, 2 * np.pi, 2)
        fading = 1 - self.fade * (0.5 + 0.5 * np.sin(2 * np.pi * u * self.rng.uniform(0.5, 2) + ph[0]))
        width = self.tip * (1 + 0.08 * np.sin(2 * np.pi * u * 3 + ph[1]))
        return pts, width, scale * self.pressure * fading


def _circle(rng, scene, pen):
    lab, mpp = scene["labels"], scene["mpp"]
    ids = [i for i in range(1, lab.max() + 1) if (lab == i).sum() * mpp ** 2 > 0.03e6]
    if not ids:
        return []
    target = lab == rng.choice(ids)
    roll = rng.random()
    if roll < 0.2:  # a group: the nearby pieces too
        target = ndimage.binary_dilation(target, iterations=int(600 / mpp)) & (lab > 0)
    elif roll < 0.4 and target.sum() * mpp ** 2 > 4e6:  # a region of interest inside a large piece
        d = ndimage.distance_transform_edt(target)
        cy, cx = np.argwhere(d > 0.5 * d.max())[rng.integers(0, (d > 0.5 * d.max()).sum())]
        yy, xx = np.ogrid[:lab.shape[0], :lab.shape[1]]
        r = rng.uniform(0.3, 0.7) * d.max()
        target = (((yy - cy) / rng.uniform(0.7, 1.3)) ** 2 + (xx - cx) ** 2 < r * r) & target
    off = rng.uniform(150, 1200) / mpp
    grown = np.pad(ndimage.distance_transform_edt(~target) <= off, 2)
    contour = max(measure.find_contours(grown.astype(np.float32), 0.5), key=len) - 2
    if len(contour) < 8:
        return []
    contour = ndimage.gaussian_filter1d(contour, 3, axis=0, mode="wrap") * mpp
    start = rng.integers(0, len(contour))
    ring = np.roll(contour, -start, axis=0)
    keep = rng.uniform(0.86, 1.08)
    ring = np.r_[ring, ring][: max(8, int(keep * len(ring)))]
    ring = ring + _wobble(rng, len(ring), rng.uniform(30, 250))
    if rng.random() < 0.25:  # dashed
        pts = resample(ring, 40.0)
        dash, gap = rng.uniform(400, 1800) / 40, rng.uniform(250, 900) / 40
        period = int(dash + gap)
        return [pen.stroke(pts[i:i + int(dash)]) for i in range(0, len(pts) - 2, period)]
    return [pen.stroke(ring)]


def _edge_point(rng, scene):
    """A point (µm) on a tissue edge and the outward direction there."""
    tis = scene["labels"] > 0
    edge = tis & ~ndimage.binary_erosion(tis)
    if not edge.any():
        h, w = tis.shape
        return np.array([h, w]) * scene["mpp"] / 2, np.array([1.0, 0.0])
    p = np.argwhere(edge)[rng.integers(0, edge.sum())]
    g = ndimage.gaussian_filter(tis.astype(np.float32), 4)
    n = -np.array([ndimage.sobel(g, 0)[tuple(p)], ndimage.sobel(g, 1)[tuple(p)]])
    return p * scene["mpp"], n / max(np.hypot(*n), 1e-9)


def _rot(v, deg):
    a = np.radians(deg)
    return np.array([v[0] * np.cos(a) - v[1] * np.sin(a), v[0] * np.sin(a) + v[1] * np.cos(a)])


def _arrow(rng, scene, pen):
    tip, out = _edge_point(rng, scene)
    tip = tip - out * rng.uniform(0, 300)
    d = _rot(out, rng.uniform(-40, 40))
    tail = tip + d * rng.uniform(1200, 3500)
    head = rng.uniform(300, 800)
    a, b = _rot(d, rng.uniform(22, 40)), _rot(d, -rng.uniform(22, 40))
    return [pen.stroke([tail, tip]), pen.stroke([tip + a * head, tip, tip + b * head])]


def _glass_point(rng, scene):
    """A point (µm) far from tissue where there is room, else anywhere."""
    d = ndimage.distance_transform_edt(scene["labels"] == 0)
    far = d > 0.5 * d.max()
    p = np.argwhere(far)[rng.integers(0, far.sum())] if far.any() else np.array(d.shape) // 2
    return p * scene["mpp"]


def _dot(rng, scene, pen):
    r = rng.uniform(150, 600)
    c = _glass_point(rng, scene) if rng.random() < 0.5 else _edge_point(rng, scene)[0]
    pts = resample(c + rng.normal(0, r / 4, (3, 2)), r / 2)
    return [(pts, np.full(len(pts), 2 * r * rng.uniform(0.8, 1)), np.full(len(pts), pen.pressure))]


def _text(rng, scene, pen):
    text = "".join(rng.choice(list(LABELS), rng.integers(1, 4)))
    h = rng.uniform(1200, 3000)
    slant, turn = np.tan(np.radians(rng.uniform(0, 20))), rng.uniform(-15, 15)
    size = np.array([h, 0.8 * h * len(text)])
    field = np.array(scene["labels"].shape) * scene["mpp"]
    at = np.clip(_glass_point(rng, scene) - size / 2, 0, np.maximum(field - size, 0))
    out = []
    for i, ch in enumerate(text):
        s = h * rng.uniform(0.85, 1.1)
        for line in FONT[ch]:
            p = np.asarray(line, float)
            xy = np.c_[(p[:, 0] + slant * (1 - p[:, 1])) * s + i * 0.8 * h, p[:, 1] * s]
            xy = xy + rng.normal(0, 0.02 * h, xy.shape)
            yx = np.array([_rot(v, turn) for v in xy])[:, ::-1] + at
            out.append(pen.stroke(yx))
    return out


def _tick(rng, scene, pen):
    c, _ = _edge_point(rng, scene)
    s = rng.uniform(600, 1500)
    shape = np.array([(0.0, 0.5), (0.35, 1.0), (1.0, 0.0)]) if rng.random() < 0.6 else \
        np.array([(0.0, 0.5), (1.0, 0.5)])
    ang = rng.uniform(-30, 30)
    yx = np.array([_rot(v, ang) for v in (shape - 0.5) * s])[:, ::-1] + c
    return [pen.stroke(yx)]


def _line(rng, scene, pen):
    c, _ = _edge_point(rng, scene)
    d = _rot(np.array([1.0, 0.0]), rng.uniform(0, 180))
    span = np.hypot(*scene["labels"].shape) * scene["mpp"]
    return [pen.stroke([c - d * span * rng.uniform(0.2, 1), c + d * span * rng.uniform(0.2, 1)])]


def _wipe(rng, scene, pen):
    c = _glass_point(rng, scene) if rng.random() < 0.5 else _edge_point(rng, scene)[0]
    d = _rot(np.array([1.0, 0.0]), rng.uniform(0, 180))
    n = np.array([-d[1], d[0]])
    length, w = rng.uniform(1000, 3000), rng.uniform(500, 1500)
    pen.tip, pen.pressure = w, rng.uniform(0.12, 0.35)
    out = []
    for k in range(rng.integers(3, 7)):
        base = c + n * (k - 2) * 0.5 * w
        pts = base + np.outer(np.linspace(-0.5, 0.5, 12), d * length)
        out.append(pen.stroke(pts + _wobble(rng, 12, 0.15 * w)))
    return out


KINDS = {"circle": _circle, "text": _text, "arrow": _arrow, "dot": _dot, "line": _line,
         "tick": _tick, "wipe": _wipe}


def draw_marks(rng, scene, shape, px):
    """Marks of one draw: a list of dicts with ``dye``, ``kind``, ``cov`` and ``den`` (fine arrays).
    ``scene``: ``labels`` (int, piece id a thumbnail pixel), ``mpp``; ``px``: fine pixel (µm)."""
    n = rng.choice([1, 2, 3, 4], p=[0.45, 0.35, 0.15, 0.05])
    same = rng.random() < 0.65
    dyes, dodds = list(DYE_ODDS), list(DYE_ODDS.values())
    dye = rng.choice(dyes, p=dodds)
    marks = []
    for _ in range(n):
        kind = rng.choice(list(KIND_ODDS), p=list(KIND_ODDS.values()))
        d = dye if same else rng.choice(dyes, p=dodds)
        broad = kind in ("circle", "line", "dot") and rng.random() < 0.3
        tip = np.exp(rng.uniform(np.log(600), np.log(1500)) if broad else rng.uniform(np.log(200), np.log(600)))
        strokes = KINDS[kind](rng, scene, Pen(rng, d, tip))
        cov = np.zeros(shape, np.float32)
        den = np.zeros(shape, np.float32)
        for pts, width, dens in strokes:
            c, e = stroke_cover(shape, np.asarray(pts) / px, np.asarray(width) / px, dens)
            cov = np.maximum(cov, c)
            den += e  # a stroke drawn over another doubles the ink there
        if cov.max() >= 0.5:
            marks.append({"dye": str(d), "kind": str(kind), "cov": cov, "den": den})
    return marks
