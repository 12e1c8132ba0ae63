"""Marks people draw on glass slides with felt-tip markers, for the tuning family of hard slides
(tests/hard_family.py): hand-drawn circles around a region, arrows, hand-written labels and
numbers, ticks and crosses, dotted and dashed lines and circles, strokes drawn twice or crossing,
strokes whose ink density varies with pressure or that have faded, fine and chisel tips, strokes
over a fold and strokes running off the slide's edge, felt-tip hatching (parallel strokes shading
a region), scribbles and clusters of dots.

A mark is a set of paths (poly-lines in µm; a path of one point is a dot) drawn with one tip
``width`` and one ink. The ink lies on the cover glass as a film of dye: by the Beer–Lambert law
its optical density adds to whatever lies beneath, in proportion to the film's thickness, which
follows the pen's pressure along each path (``pressure``: the density at its start and end, a
slow wobble between). Ground truth is the tip's footprint (half a pixel covered or more).

Real slide markers (common practice): black, blue, green and red felt-tip markers are the usual
ones (:data:`hard_slides.INKS`); pink, violet and brown ones exist. Their transmissions here are
plausible dye values, not measurements (from memory): a pink (a rhodamine-like magenta absorbing
near 550 nm: much green, a little blue, hardly any red; close to eosin in colour), a violet (a
methyl-violet-like dye, absorbing near 590 nm: much green, some red, little blue) and a brown (a
mix of dyes absorbing blue most, then green).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

#: Transmission (R, G, B) of marker inks beyond :data:`hard_slides.INKS` (plausible dye values).
MORE_INKS = {
    "pink": (0.88, 0.38, 0.68),
    "violet": (0.45, 0.17, 0.62),
    "brown": (0.50, 0.36, 0.26),
}

#: Hand-written glyphs as strokes in a unit box ((y, x), y down): digits, a few capitals, a tick
#: and a cross (the shapes people write on slides: case numbers, block letters, "this one").
GLYPHS = {
    "0": [[(0.5 + 0.5 * np.sin(t), 0.5 + 0.42 * np.cos(t)) for t in np.linspace(0, 2 * np.pi, 14)]],
    "1": [[(0.22, 0.25), (0.0, 0.55), (1.0, 0.55)]],
    "2": [[(0.22, 0.08), (0.0, 0.5), (0.2, 0.92), (0.45, 0.8), (1.0, 0.08), (1.0, 0.95)]],
    "3": [[(0.05, 0.1), (0.0, 0.6), (0.22, 0.9), (0.46, 0.45), (0.72, 0.95), (1.0, 0.5), (0.88, 0.05)]],
    "4": [[(0.0, 0.68), (0.66, 0.04), (0.66, 0.96)], [(0.32, 0.74), (1.0, 0.74)]],
    "5": [[(0.0, 0.9), (0.0, 0.15), (0.42, 0.1), (0.38, 0.7), (0.7, 0.96), (1.0, 0.5), (0.9, 0.04)]],
    "6": [[(0.0, 0.8), (0.35, 0.15), (0.8, 0.1), (1.0, 0.5), (0.78, 0.9), (0.5, 0.6), (0.62, 0.15)]],
    "7": [[(0.0, 0.05), (0.0, 0.95), (1.0, 0.35)]],
    "8": [[(0.25 + 0.25 * np.sin(t), 0.5 + 0.3 * np.cos(t)) for t in np.linspace(0, 2 * np.pi, 10)],
          [(0.74 + 0.26 * np.sin(t), 0.5 + 0.38 * np.cos(t)) for t in np.linspace(0, 2 * np.pi, 12)]],
    "9": [[(0.45, 0.92), (0.5, 0.3), (0.15, 0.08), (0.0, 0.6), (0.3, 0.92), (1.0, 0.8)]],
    "A": [[(1.0, 0.0), (0.0, 0.5), (1.0, 1.0)], [(0.62, 0.2), (0.62, 0.8)]],
    "B": [[(1.0, 0.1), (0.0, 0.1), (0.08, 0.8), (0.45, 0.8), (0.5, 0.1)], [(0.5, 0.1), (0.55, 0.9), (0.95, 0.85), (1.0, 0.1)]],
    "L": [[(0.0, 0.1), (1.0, 0.1), (1.0, 0.9)]],
    "N": [[(1.0, 0.05), (0.0, 0.05), (1.0, 0.95), (0.0, 0.95)]],
    "T": [[(0.0, 0.0), (0.0, 1.0)], [(0.0, 0.5), (1.0, 0.5)]],
    "X": [[(0.0, 0.0), (1.0, 1.0)], [(0.0, 1.0), (1.0, 0.0)]],
    "+": [[(0.5, 0.0), (0.5, 1.0)], [(0.0, 0.5), (1.0, 0.5)]],
    "tick": [[(0.55, 0.0), (1.0, 0.35), (0.0, 1.0)]],
}


@dataclass(frozen=True)
class Mark:
    """One mark: ``paths`` (poly-lines of (y, x) µm; one point is a dot) drawn ``width`` µm wide
    with ``ink`` (transmission R, G, B). ``pressure``: ink density at each path's start and end
    (1: the ink's own), ``wobble``: relative swing of the density along a path (period about
    1.5 mm, phase from ``seed``); ``kind`` and ``dye`` name the mark for reports."""

    paths: tuple
    width: float
    ink: tuple
    pressure: tuple = (1.0, 1.0)
    wobble: float = 0.0
    seed: int = 0
    kind: str = ""  #: what was drawn (circle, arrow, label, hatch, ...), for reports
    dye: str = ""  #: the ink's name (black, blue, ...), for reports

    def paint(self, yy, xx, mpp):
        """Covered fraction of each pixel (antialiased tip) and the ink density there.

        ``yy`` (H, 1) and ``xx`` (1, W): pixel-centre coordinates in µm. Only the box around each
        path is computed."""
        shape = (yy.shape[0], xx.shape[1])
        cover = np.zeros(shape, np.float32)
        density = np.zeros(shape, np.float32)
        ys, xs = yy[:, 0], xx[0]
        reach = self.width / 2.0 + 2 * mpp
        phase = np.random.default_rng(self.seed).uniform(0, 2 * np.pi, len(self.paths))
        for path, ph in zip(self.paths, phase):
            pts = np.asarray(path, np.float64).reshape(-1, 2)
            r0, r1 = np.searchsorted(ys, [pts[:, 0].min() - reach, pts[:, 0].max() + reach])
            c0, c1 = np.searchsorted(xs, [pts[:, 1].min() - reach, pts[:, 1].max() + reach])
            if r0 >= r1 or c0 >= c1:
                continue
            py, px = ys[r0:r1, None].astype(np.float64), xs[None, c0:c1].astype(np.float64)
            d = np.hypot(py - pts[0, 0], px - pts[0, 1])
            s = np.zeros_like(d)
            run = 0.0
            for (y0, x0), (y1, x1) in zip(pts[:-1], pts[1:]):
                dy, dx = y1 - y0, x1 - x0
                length = float(np.hypot(dy, dx))
                if length == 0:
                    continue
                t = np.clip(((py - y0) * dy + (px - x0) * dx) / (length * length), 0.0, 1.0)
                dist = np.hypot(py - y0 - t * dy, px - x0 - t * dx)
                nearer = dist < d
                d = np.where(nearer, dist, d)
                s = np.where(nearer, run + t * length, s)
                run += length
            c = np.clip((self.width / 2.0 - d) / mpp + 0.5, 0.0, 1.0).astype(np.float32)
            f = s / max(run, 1e-9)
            p = (self.pressure[0] + (self.pressure[1] - self.pressure[0]) * f) * (1 + self.wobble * np.sin(s / 240.0 + ph))
            box_c, box_d = cover[r0:r1, c0:c1], density[r0:r1, c0:c1]
            more = c > box_c
            box_d[more] = p[more]
            box_c[more] = c[more]
        return cover, density


def _jitter(rng, pts, amount):
    return [(float(y + rng.normal(0, amount)), float(x + rng.normal(0, amount))) for y, x in pts]


def circle_paths(rng, cy, cx, ry, rx, *, dotted=0.0, dashed=0.0):
    """A hand-drawn circle (an ellipse with a wavy radius, open or overlapping where it ends);
    ``dotted``/``dashed``: the spacing (µm) of its dots or dashes (0: drawn in one go)."""
    start = rng.uniform(0, 2 * np.pi)
    sweep = 2 * np.pi * rng.uniform(0.85, 1.12)  # not quite closed, or overlapping at the end
    t = np.linspace(start, start + sweep, 72)
    wave = 1 + 0.06 * np.sin(2 * t + rng.uniform(0, 6)) + 0.03 * np.sin(5 * t + rng.uniform(0, 6))
    turn = rng.uniform(0, np.pi)
    u, v = rx * wave * np.cos(t), ry * wave * np.sin(t)
    pts = list(zip(cy + np.sin(turn) * u + np.cos(turn) * v, cx + np.cos(turn) * u - np.sin(turn) * v))
    return broken([pts], dotted=dotted, dashed=dashed)


def broken(paths, *, dotted=0.0, dashed=0.0):
    """Paths drawn as dots every ``dotted`` µm or dashes of ``dashed`` µm with gaps of half that."""
    if not (dotted or dashed):
        return tuple(tuple(p) for p in paths)
    out = []
    for path in paths:
        pts = np.asarray(path, float)
        seg = np.hypot(*np.diff(pts, axis=0).T)
        s = np.concatenate([[0], np.cumsum(seg)])
        if dotted:
            for at in np.arange(0, s[-1], dotted):
                out.append(((float(np.interp(at, s, pts[:, 0])), float(np.interp(at, s, pts[:, 1]))),))
        else:
            for at in np.arange(0, s[-1], 1.5 * dashed):
                q = np.linspace(at, min(at + dashed, s[-1]), 4)
                out.append(tuple(zip(np.interp(q, s, pts[:, 0]).tolist(), np.interp(q, s, pts[:, 1]).tolist())))
    return tuple(out)


def glyph_paths(rng, text, y, x, height, *, slant=None):
    """Hand-written ``text`` (keys of :data:`GLYPHS`, a list) starting at (y, x) µm, glyphs
    ``height`` µm tall, each point jittered by about 4 % of the height, slanted."""
    slant = rng.uniform(-0.25, 0.25) if slant is None else slant
    out = []
    for k, ch in enumerate(text):
        w = 0.65 * height
        x0 = x + k * w * 1.35
        for stroke in GLYPHS[ch]:
            pts = [(y + py * height, x0 + px * w + slant * (1 - py) * height) for py, px in stroke]
            out.append(tuple(_jitter(rng, pts, 0.04 * height)))
    return tuple(out)


def arrow_paths(rng, ty, tx, length, *, angle=None):
    """An arrow pointing at (ty, tx) µm from ``length`` µm away: a shaft and a two-stroke head."""
    a = rng.uniform(0, 2 * np.pi) if angle is None else angle
    sy, sx = ty + length * np.sin(a), tx + length * np.cos(a)
    bend = rng.normal(0, 0.05 * length)
    shaft = _jitter(rng, [(sy, sx), ((sy + ty) / 2 + bend, (sx + tx) / 2 - bend), (ty, tx)], 0.01 * length)
    head = 0.25 * length
    wings = [((ty + head * np.sin(a + d), tx + head * np.cos(a + d)), (ty, tx)) for d in (0.45, -0.45)]
    return (tuple(shaft),) + tuple(tuple(_jitter(rng, w, 0.01 * length)) for w in wings)


def stroke_path(rng, y0, x0, y1, x1, *, bow=0.1):
    """A hand-drawn line from (y0, x0) to (y1, x1), bowed by up to ``bow`` of its length."""
    t = np.linspace(0, 1, 12)
    length = float(np.hypot(y1 - y0, x1 - x0))
    b = rng.uniform(-bow, bow) * length * np.sin(np.pi * t)
    ny, nx = (x1 - x0) / max(length, 1e-9), -(y1 - y0) / max(length, 1e-9)
    return (tuple(zip((y0 + (y1 - y0) * t + b * ny).tolist(), (x0 + (x1 - x0) * t + b * nx).tolist())),)


def hatch_paths(rng, cy, cx, size, *, spacing, angle=None):
    """Felt-tip hatching: parallel strokes ``spacing`` µm apart shading a region about ``size`` µm
    across centred at (cy, cx), each stroke's ends ragged (drawn by hand, back and forth)."""
    a = rng.uniform(0, np.pi) if angle is None else angle
    c, s = np.cos(a), np.sin(a)
    out = []
    for off in np.arange(-size / 2, size / 2, spacing):
        half = size / 2 * np.sqrt(max(0.0, 1 - (2 * off / size) ** 2)) * rng.uniform(0.8, 1.1)
        if half < spacing:
            continue
        pts = [(cy + off * c + t * s, cx - off * s + t * c) for t in (-half, 0.0, half)]
        out.append(tuple(_jitter(rng, pts, 0.15 * spacing)))
    return tuple(out)


def scribble_paths(rng, y, x, length, height):
    """A text-like scribble (a signature or a hurried note): a zig-zag running ``length`` µm to
    the right of (y, x), swinging ``height`` µm up and down, with loops."""
    n = max(6, int(length / (0.4 * height)))
    t = np.linspace(0, 1, n * 3)
    ys = y + height * (0.5 * np.sin(t * n * np.pi + rng.uniform(0, 6)) + 0.15 * rng.normal(size=t.size))
    xs = x + length * t + 0.25 * height * np.cos(t * n * 2 * np.pi)
    return (tuple(zip(ys.tolist(), xs.tolist())),)


def dot_paths(rng, cy, cx, spread, count):
    """A cluster of ``count`` dots (one-point paths) within ``spread`` µm of (cy, cx): dots marking
    a spot, or the stipple people leave tapping a pen."""
    return tuple(((float(cy + rng.normal(0, spread)), float(cx + rng.normal(0, spread))),) for _ in range(count))
