"""Marker ink of the sealed family (tests/sealed_family.py): strokes with uneven pressure, rings
round regions, dots, hand-written letters and ticks, arrows and partly wiped smears. A mark is
drawn as an amount (OD along its dye's unit vector) on the subpixel grid; its footprint is where
the amount is above zero, whatever lies under it. Ink adds OD on top of tissue and glass
(Beer–Lambert), so marks over tissue darken it in the dye's own colour.
"""

from __future__ import annotations

import cv2
import numpy as np

from sealed_family_shapes import blob, fill, wander

KINDS = ("stroke", "ring", "dot", "letters", "tick", "arrow", "smear")

GLYPHS = {
    "L": [[(0, 0), (0, 1), (0.6, 1)]],
    "V": [[(0, 0), (0.5, 1), (1, 0)]],
    "X": [[(0, 0), (1, 1)], [(1, 0), (0, 1)]],
    "T": [[(0, 0), (1, 0)], [(0.5, 0), (0.5, 1)]],
    "N": [[(0, 1), (0, 0), (1, 1), (1, 0)]],
    "Z": [[(0, 0), (1, 0), (0, 1), (1, 1)]],
    "1": [[(0.2, 0.25), (0.55, 0), (0.55, 1)]],
    "7": [[(0, 0), (1, 0), (0.4, 1)]],
    "+": [[(0.5, 0), (0.5, 1)], [(0, 0.5), (1, 0.5)]],
    "O": [[(0.5 + 0.5 * np.cos(t), 0.5 + 0.5 * np.sin(t)) for t in np.linspace(0, 2.1 * np.pi, 24)]],
    "C": [[(0.5 + 0.5 * np.cos(t), 0.5 + 0.5 * np.sin(t)) for t in np.linspace(0.3 * np.pi, 1.75 * np.pi, 18)]],
}
TICK = [[(0, 0.6), (0.35, 1), (1, 0)]]


def _resample(path: np.ndarray, step: float) -> np.ndarray:
    seg = np.linalg.norm(np.diff(path, axis=0), axis=1)
    s = np.concatenate([[0], np.cumsum(seg)])
    if s[-1] < 1e-6:
        return path[:1]
    t = np.linspace(0, s[-1], max(2, int(s[-1] / step) + 1))
    return np.stack([np.interp(t, s, path[:, 0]), np.interp(t, s, path[:, 1])], axis=1)


def pen(buf: np.ndarray, paths, width: float, amount: float, rng) -> None:
    """Draw ``paths`` with a felt-tip pen ``width`` subpixels wide: pressure (amount and width)
    wanders smoothly along each stroke between about 50 and 100 % and lifts off at the ends; the
    pressure is spread smoothly over the footprint (no overlapping dabs)."""
    h, w = buf.shape
    foot, press_map = np.zeros((h, w), np.float32), np.zeros((h, w), np.float32)
    for p in paths:
        pts = _resample(np.asarray(p, float), max(1.0, 0.2 * width))
        n = len(pts)
        press = 0.75 + 0.25 * np.clip(wander(rng, n, 1.0, smooth=max(2, n // 6)), -1, 1)
        ends = np.minimum(1, np.minimum(np.arange(n), np.arange(n)[::-1]) / max(1, 0.06 * n) + 0.6)
        press = press * (ends if n > 8 else 1)
        for (x, y), q in zip(pts, press):
            r = max(1, int(round(0.5 * width * (0.85 + 0.15 * q))))
            cv2.circle(foot, (int(round(x)), int(round(y))), r, 1.0, -1)
            cv2.circle(press_map, (int(round(x)), int(round(y))), r, float(q), -1)
    f = 4
    small = (max(1, w // f), max(1, h // f))
    sig = max(1.0, 0.35 * width / f)
    num = cv2.GaussianBlur(cv2.resize(press_map, small, interpolation=cv2.INTER_AREA), (0, 0), sig)
    den = cv2.GaussianBlur(cv2.resize(foot, small, interpolation=cv2.INTER_AREA), (0, 0), sig)
    smooth = cv2.resize(num / np.maximum(den, 1e-3), (w, h), interpolation=cv2.INTER_LINEAR)
    on = foot > 0
    buf[on] = np.maximum(buf[on], amount * np.clip(smooth[on], 0.4, 1.0))


def _curve(rng, start, length, bend):
    n = 30
    a = rng.uniform(0, 2 * np.pi)
    turn = np.cumsum(rng.normal(0, bend, n))
    step = length / n
    pts = np.cumsum(np.stack([np.cos(a + turn), np.sin(a + turn)], 1) * step, axis=0)
    return np.asarray(start, float) + pts - pts[n // 2]


def mark(buf, kind: str, rng, u: float, width_um: float, amount: float, target, span: float) -> None:
    """One mark of ``kind`` near ``target`` (x, y subpixels; a piece's centre for rings and
    arrows, given with its half size ``span``) on ``buf``."""
    w = width_um * u
    cx, cy = target
    if kind == "stroke":
        pen(buf, [_curve(rng, (cx, cy), rng.uniform(1000, 4000) * u, 0.08)], w, amount, rng)
    elif kind == "ring":
        t = np.linspace(0, rng.uniform(1.85, 2.15) * np.pi, 60) + rng.uniform(0, 2 * np.pi)
        rr = (span + rng.uniform(-0.1, 0.6) * span + w) * (1 + wander(rng, 60, 0.1))
        ry = rr * rng.uniform(0.7, 1.0)
        pen(buf, [np.stack([cx + rr * np.cos(t), cy + ry * np.sin(t)], 1)], w, amount, rng)
    elif kind == "dot":
        for _ in range(int(rng.integers(1, 4))):
            d = w * rng.uniform(0.8, 1.2)
            c = np.array([cx, cy]) + rng.normal(0, d, 2)
            cv2.fillPoly(buf, [np.round(c + blob(rng, d / 2, d / 2 * rng.uniform(0.8, 1), 0.08)).astype(np.int32)],
                         float(amount * rng.uniform(0.8, 1.1)))
    elif kind in ("letters", "tick"):
        size = rng.uniform(700, 2000) * u
        a = rng.uniform(-0.5, 0.5)
        rot = np.array([[np.cos(a), -np.sin(a)], [np.sin(a), np.cos(a)]])
        names = [None] if kind == "tick" else list(rng.choice(list(GLYPHS), size=int(rng.integers(1, 4))))
        for k, g in enumerate(names):
            strokes = TICK if g is None else GLYPHS[g]
            for s in strokes:
                p = _resample((np.asarray(s, float) + [1.2 * k, 0]) * [0.7 * size, size], size / 12)
                p += rng.normal(0, 0.02 * size, p.shape) + wander(rng, len(p), 0.04 * size)[:, None]
                pen(buf, [p @ rot.T + [cx, cy]], w, amount, rng)
    elif kind == "arrow":
        length = rng.uniform(1000, 2500) * u
        a = rng.uniform(0, 2 * np.pi)
        tip = np.array([cx, cy]) + (span + rng.uniform(0, 300) * u) * np.array([np.cos(a), np.sin(a)])
        tail = tip + length * np.array([np.cos(a), np.sin(a)])
        head = max(rng.uniform(300, 800) * u, 1.5 * w)
        arms = [tip + head * np.array([np.cos(a + s), np.sin(a + s)]) for s in (0.5, -0.5)]
        pen(buf, [np.stack([tail, tip]), np.stack([arms[0], tip, arms[1]])], w, amount, rng)
    elif kind == "smear":
        _smear(buf, rng, u, amount, (cx, cy))


def _smear(buf, rng, u, amount, centre) -> None:
    """A partly wiped mark: a broad patch, streaky along the wipe, fading across it (never to
    zero inside its footprint)."""
    r = rng.uniform(300, 1000) * u
    a = rng.uniform(0, np.pi)
    poly = blob(rng, r, r * rng.uniform(0.3, 0.7), 0.3)
    poly = poly @ np.array([[np.cos(a), -np.sin(a)], [np.sin(a), np.cos(a)]]).T + centre
    x0, y0 = np.floor(poly.min(0)).astype(int)
    x1, y1 = np.ceil(poly.max(0)).astype(int) + 1
    h, w = buf.shape
    xa, ya, xb, yb = max(0, x0), max(0, y0), min(w, x1), min(h, y1)
    if xb <= xa or yb <= ya:
        return
    shape = (yb - ya, xb - xa)
    foot = fill(shape, [poly - [xa, ya]])
    yy, xx = np.mgrid[0:shape[0], 0:shape[1]]
    across = -np.sin(a) * (xx - shape[1] / 2) + np.cos(a) * (yy - shape[0] / 2)
    lines = np.linspace(-max(shape), max(shape), max(8, int(2 * max(shape) / (25 * u))))
    streak = np.interp(across, lines, rng.standard_normal(lines.size))
    fade = 0.5 + 0.5 * np.cos(a) * (xx - shape[1] / 2) / max(shape) + 0.5 * np.sin(a) * (yy - shape[0] / 2) / max(shape)
    val = amount * rng.uniform(0.25, 0.7) * np.clip(0.6 * fade + 0.3 * streak, 0.1, 1.2)
    win = buf[ya:yb, xa:xb]
    win[foot] = np.maximum(win[foot], val[foot])
