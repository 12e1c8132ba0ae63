"""A seeded, parameterized family of hard slides (the first TUNING family; tests/second_family.py,
written apart, is the second): each draw picks, from its seed, everything a cohort varies in.

- stain vectors: the Ruifrok & Johnston (2001) H and E turned by up to 8 degrees each, stain
  strengths 0.15-1.6 times (hematoxylin and eosin apart), texture;
- glass colour and tint, sensor noise, JPEG quality (50-95, applied at the pyramid level the
  thumbnail is read from);
- red cells: 0-60 % of a piece, packed (one disc a cell, tests/red_cells.py), at its edge, inside,
  or both, and vessels;
- marker: colours (the inks of tests/hard_slides.py with their densities and hues varied),
  widths, strokes over glass and across tissue, rings, dots on glass and on tissue; and in 65 %
  of the draws hand-drawn marks (tests/marker_marks.py: circles, arrows, labels, ticks, lines
  drawn twice or crossing, dotted and dashed, strokes off the slide's edge and over folds,
  hatching, scribbles, dot clusters; black, blue, green, red, pink, violet, brown; fine to
  chisel tips; pressure-varying and faded ink) drawn from a second generator, so the round-1
  choices of each draw stay as they were;
- fat, folds, bubbles, dust, faint areas and faint pieces;
- scan resolution 0.24-0.5 µm/px: the thumbnail is the pyramid level (x16 or x32) within 5 %
  of 8 µm/px when there is one (its true µm/px, as tilewright reads it), else a finer level area
  averaged to 8 µm/px.

Ground truth is the layout drawn (:meth:`HardSlide.truth` at the thumbnail's µm/px).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from hard_slides import E_RJ, H_RJ, INKS, Area, HardSlide, Piece, Ring, Stroke
from marker_marks import (MORE_INKS, Mark, arrow_paths, broken, circle_paths, dot_paths, glyph_paths, hatch_paths,
                          scribble_paths, stroke_path)

THUMB_MPP = 8.0


def turned(v, rng, max_deg):
    """Unit vector ``v`` turned by up to ``max_deg`` degrees about a random perpendicular axis."""
    v = np.asarray(v, float) / np.linalg.norm(v)
    axis = np.cross(v, rng.normal(size=3))
    axis /= np.linalg.norm(axis)
    a = np.radians(rng.uniform(-max_deg, max_deg))
    out = v * np.cos(a) + np.cross(axis, v) * np.sin(a)
    return out / np.linalg.norm(out)


def _log_uniform(rng, lo, hi):
    return float(np.exp(rng.uniform(np.log(lo), np.log(hi))))


@dataclass(frozen=True)
class FamilyDraw:
    """One draw: the slide, its scan resolution, the µm/px it is rendered and JPEG-compressed
    at, and the thumbnail's (the mask's) µm/px."""

    seed: int
    slide: HardSlide
    scan_mpp: float
    render_mpp: float
    thumb_mpp: float
    quality: int

    @property
    def name(self) -> str:
        return f"family-{self.seed:03d}"

    def thumbnail(self) -> np.ndarray:
        """The thumbnail tilewright would read: the rendered level, JPEG-compressed, area
        averaged to the thumbnail's size when it is a finer level."""
        import cv2

        rgb = self.slide.render(self.render_mpp)
        ok, buf = cv2.imencode(".jpg", rgb[..., ::-1], [cv2.IMWRITE_JPEG_QUALITY, self.quality])
        rgb = np.ascontiguousarray(cv2.imdecode(buf, cv2.IMREAD_COLOR)[..., ::-1])
        h, w = self.slide.shape_at(self.thumb_mpp)
        if rgb.shape[:2] != (h, w):
            rgb = cv2.resize(rgb, (w, h), interpolation=cv2.INTER_AREA)
        return rgb

    def truth(self) -> dict:
        return self.slide.truth(self.thumb_mpp)


def _levels(rng):
    """Scan µm/px, rendered level's µm/px and the thumbnail's µm/px."""
    scan = float(rng.uniform(0.24, 0.5))
    for k in (32, 16):
        if abs(scan * k / THUMB_MPP - 1) <= 0.05:  # tilewright reuses a level within 5 % (THUMBNAIL_TOLERANCE)
            return scan, scan * k, scan * k
    return scan, scan * 16, THUMB_MPP


def _ink(rng):
    """A marker's transmission: a named ink with its density and each channel's varied."""
    name = str(rng.choice(list(INKS)))
    od = -np.log10(np.asarray(INKS[name])) * rng.uniform(0.6, 1.4) * rng.uniform(0.85, 1.15, 3)
    return tuple(float(v) for v in 10 ** -od)


def _mark_ink(rng):
    """A hand-drawn mark's ink: its name and transmission. Mostly black, blue, green and red; now
    and then pink, violet or brown (tests/marker_marks.py); density and each channel's varied."""
    table = MORE_INKS if rng.random() < 0.2 else INKS
    name = str(rng.choice(list(table)))
    od = -np.log10(np.asarray(table[name])) * rng.uniform(0.6, 1.4) * rng.uniform(0.85, 1.15, 3)
    return name, tuple(float(v) for v in 10 ** -od)


MARK_KINDS = ("circle", "arrow", "label", "tick", "line", "edge", "fold", "hatch", "scribble", "dots")


def _mark(rng, kind, paths, width, pressure):
    dye, ink = _mark_ink(rng)
    return Mark(paths, width, ink, pressure, float(rng.uniform(0, 0.3)), int(rng.integers(1 << 30)), kind, dye)


def _marks(rng, pieces, folds, H, W):
    """Hand-drawn marks (tests/marker_marks.py): circles around a piece or a region in it (some
    dotted or dashed), arrows, labels, ticks and crosses, lines (crossing, drawn twice, dotted or
    dashed), strokes running off the slide's edge and over a fold, hatching, scribbles and dot
    clusters, over glass and over tissue; fine (0.1-0.25 mm), medium and chisel (0.7-1.5 mm)
    tips; pressure varying along each path, a fifth of the marks faded to 0.3-0.6 of their ink."""
    out = []
    for _ in range(int(rng.integers(1, 5))):
        kind = str(rng.choice(MARK_KINDS))
        r = rng.random()
        width = float(rng.uniform(100, 250) if r < 0.3 else rng.uniform(250, 700) if r < 0.85 else rng.uniform(700, 1500))
        faded = rng.uniform(0.3, 0.6) if rng.random() < 0.2 else 1.0
        pressure = (float(rng.uniform(0.6, 1.2) * faded), float(rng.uniform(0.5, 1.2) * faded))
        p = pieces[int(rng.integers(len(pieces)))]
        gap = {"dotted": 0.0, "dashed": 0.0}
        style = rng.random()
        if style < 0.15:
            gap["dotted"] = float(width * rng.uniform(1.8, 4))
        elif style < 0.3:
            gap["dashed"] = float(rng.uniform(3, 8) * width)
        over_tissue = rng.random() < 0.5  # a label, scribble, hatching or dots over tissue, else anywhere
        if over_tissue:
            ey, ex = _edge_point(p, rng.uniform(0, 2 * np.pi))
            f = rng.uniform(0, 0.6)
            ay, ax = p.cy + f * (ey - p.cy), p.cx + f * (ex - p.cx)
        else:
            ay, ax = rng.uniform(0.05, 0.95) * H, rng.uniform(0.05, 0.95) * W
        if kind == "circle":  # around the piece, or a region inside it
            k = rng.uniform(0.8, 1.3) if rng.random() < 0.6 else rng.uniform(0.25, 0.6)
            cy, cx = _edge_point(p, rng.uniform(0, 2 * np.pi))
            f = 0.0 if k > 0.7 else rng.uniform(0, 0.4)
            paths = circle_paths(rng, p.cy + f * (cy - p.cy), p.cx + f * (cx - p.cx), k * p.ry, k * p.rx, **gap)
        elif kind == "arrow":
            ty, tx = _edge_point(p, rng.uniform(0, 2 * np.pi))
            paths = arrow_paths(rng, ty, tx, float(rng.uniform(1000, 3000)))
        elif kind in ("label", "tick"):
            if kind == "label":
                text = [str(c) for c in rng.choice(list("0123456789ABLNT"), int(rng.integers(1, 5)))]
                height = float(rng.uniform(800, 3000))
            else:
                text, height = [str(rng.choice(["tick", "X", "+"]))], float(rng.uniform(500, 2000))
            width = min(width, 0.25 * height)
            if over_tissue:
                y, x = ay - height / 2, ax - 0.4 * height
            else:
                y = rng.uniform(0.02, 0.98) * H - height / 2 if rng.random() < 0.4 else rng.choice([0.03, 0.8]) * H
                x = rng.uniform(0.02, 0.75) * W
            paths = glyph_paths(rng, text, float(y), float(x), height)
        elif kind == "line":
            y0, y1 = rng.uniform(0, H, 2)
            paths = stroke_path(rng, y0, rng.uniform(0, 0.3) * W, y1, rng.uniform(0.7, 1.0) * W)
            if rng.random() < 0.4:  # crossed by another, or drawn twice
                twice = rng.random() < 0.5
                other = stroke_path(rng, y0 + rng.normal(0, 0.3 * width), 0.0, y1 + rng.normal(0, 0.3 * width), W) if twice \
                    else stroke_path(rng, rng.uniform(0, H), rng.uniform(0, 0.5) * W, rng.uniform(0, H), rng.uniform(0.5, 1) * W)
                out.append(_mark(rng, kind, broken(other), width, pressure))
            paths = broken(paths, **gap)
        elif kind == "edge":  # along the slide's edge, partly off it
            y = float(rng.choice([rng.uniform(-0.4, 0.4) * width, H + rng.uniform(-0.4, 0.4) * width]))
            paths = stroke_path(rng, y, rng.uniform(0, 0.4) * W, y + rng.normal(0, 100), rng.uniform(0.6, 1.0) * W, bow=0.01)
        elif kind == "fold":  # over a fold when there is one, else across the piece
            a = folds[int(rng.integers(len(folds)))] if folds else Area("fold", p.cy, p.cx, p.ry, 100.0, p.angle)
            c, s_ = np.cos(a.angle), np.sin(a.angle)
            paths = stroke_path(rng, a.cy - c * a.ry * 1.2, a.cx + s_ * a.ry * 1.2, a.cy + c * a.ry * 1.2, a.cx - s_ * a.ry * 1.2, bow=0.05)
        elif kind == "hatch":  # shading a region: strokes a little more than a tip's width apart
            width = min(width, 600.0)
            paths = hatch_paths(rng, ay, ax, float(rng.uniform(1000, 3500)), spacing=float(width * rng.uniform(1.3, 3.0)))
        elif kind == "scribble":
            height = float(rng.uniform(400, 1500))
            width = min(width, 0.3 * height)
            paths = scribble_paths(rng, ay, ax - rng.uniform(0, 2000), float(rng.uniform(1500, 5000)), height)
        else:  # dots: a cluster of pen taps
            width = float(rng.uniform(120, 600))
            paths = dot_paths(rng, ay, ax, float(rng.uniform(200, 1500)), int(rng.integers(2, 12)))
        out.append(_mark(rng, kind, paths, width, pressure))
    return out


def _edge_point(p: Piece, theta):
    """A point on the wobble-free outline of piece ``p`` at polar angle ``theta``."""
    c, s = np.cos(p.angle), np.sin(p.angle)
    u, v = p.rx * np.cos(theta), p.ry * np.sin(theta)
    return p.cy + s * u + c * v, p.cx + c * u - s * v


def draw(seed: int) -> FamilyDraw:
    """The family's draw number ``seed`` (all choices from one seeded generator)."""
    rng = np.random.default_rng([2801, seed])
    H, W = float(rng.uniform(4000, 6500)), float(rng.uniform(5000, 9000))
    tiny = rng.random() < 0.1
    n = int(rng.integers(4, 8)) if tiny else int(rng.integers(1, 4))
    pieces = []
    for i in range(n):
        if tiny:  # biopsies: 0.2-0.5 mm
            ry, rx = rng.uniform(200, 500), rng.uniform(150, 400)
        else:
            ry, rx = rng.uniform(0.2, 0.36) * H, rng.uniform(0.2, 0.36) * W / n * 1.5
        cx = (i + 0.5) / n * W + rng.uniform(-0.05, 0.05) * W / n
        cy = H / 2 + rng.uniform(-0.12, 0.12) * H
        pieces.append(Piece(cy, cx, ry, rx, float(rng.uniform(0, np.pi)), float(rng.uniform(0.03, 0.12))))
    areas, vessels, inks = [], [], []
    big = [p for p in pieces if p.ry > 600]
    if big and rng.random() < 0.6:  # red cells: 0-60 % of a piece, at its edge, inside or both
        p = big[int(rng.integers(len(big)))]
        share = rng.uniform(0.05, 0.6)
        where = rng.choice(["edge", "inside", "both"])
        for spot in (["edge", "inside"] if where == "both" else [where]):
            part = share / (2 if where == "both" else 1)
            r = np.sqrt(part) * np.sqrt(p.ry * p.rx)
            if spot == "edge":  # centred on the outline: about half of it lies on glass
                cy, cx = _edge_point(p, rng.uniform(0, 2 * np.pi))
                r *= 1.4
            else:
                cy, cx = _edge_point(p, rng.uniform(0, 2 * np.pi))
                cy, cx = p.cy + 0.45 * (cy - p.cy), p.cx + 0.45 * (cx - p.cx)
            areas.append(Area("blood", float(cy), float(cx), float(r * rng.uniform(0.7, 1.3)),
                              float(r * rng.uniform(0.7, 1.3)), float(rng.uniform(0, np.pi))))
    if big and rng.random() < 0.3:
        for _ in range(int(rng.integers(3, 12))):
            p = big[int(rng.integers(len(big)))]
            cy, cx = _edge_point(p, rng.uniform(0, 2 * np.pi))
            f = rng.uniform(0, 0.8)
            vessels.append((float(p.cy + f * (cy - p.cy)), float(p.cx + f * (cx - p.cx)), float(rng.uniform(40, 150))))
    for kind, chance in (("fat", 0.3), ("fold", 0.3), ("faint", 0.3), ("dense", 0.2)):
        if big and rng.random() < chance:
            p = big[int(rng.integers(len(big)))]
            cy, cx = _edge_point(p, rng.uniform(0, 2 * np.pi))
            f = rng.uniform(0, 0.6)
            thin = kind == "fold"
            areas.append(Area(kind, float(p.cy + f * (cy - p.cy)), float(p.cx + f * (cx - p.cx)),
                              float(rng.uniform(0.2, 0.6) * p.ry), float(rng.uniform(60, 160) if thin else rng.uniform(0.2, 0.6) * p.rx),
                              float(rng.uniform(0, np.pi))))
    faint_piece = rng.random() < 0.15
    if faint_piece:  # a whole piece faint
        p = pieces[int(rng.integers(len(pieces)))]
        areas.append(Area("faint", p.cy, p.cx, p.ry * 1.3, p.rx * 1.3, p.angle))
    if rng.random() < 0.7:  # marker
        for _ in range(int(rng.integers(1, 5))):
            kind = rng.choice(["glass", "across", "ring", "dot"])
            width = float(rng.uniform(150, 700))
            ink = _ink(rng)
            if kind == "ring":
                p = pieces[int(rng.integers(len(pieces)))]
                inks.append(Ring(p.cy, p.cx, float(max(p.ry, p.rx) * rng.uniform(0.7, 1.3)), width, ink))
            elif kind == "dot":
                inks.append(Ring(float(rng.uniform(0.1, 0.9) * H), float(rng.uniform(0.1, 0.9) * W), 0.0,
                                 float(rng.uniform(200, 600)), ink))
            elif kind == "glass":  # along an edge of the slide, mostly over glass
                y = float(rng.choice([rng.uniform(0.03, 0.12), rng.uniform(0.88, 0.97)]) * H)
                inks.append(Stroke(((y, rng.uniform(0, 0.3) * W), (y + rng.uniform(-300, 300), rng.uniform(0.6, 1.0) * W)), width, ink))
            else:
                pts = tuple((float(rng.uniform(0, H)), float(x)) for x in np.linspace(rng.uniform(0, 0.2) * W, rng.uniform(0.8, 1) * W, 3))
                inks.append(Stroke(pts, width, ink))
    bubbles = tuple((float(rng.uniform(0, H)), float(rng.uniform(0, W)), float(rng.uniform(200, 700)))
                    for _ in range(int(rng.integers(0, 3)) if rng.random() < 0.3 else 0))
    dust = tuple((float(rng.uniform(0, H)), float(rng.uniform(0, W)), float(rng.uniform(15, 60)))
                 for _ in range(int(rng.integers(0, 30)) if rng.random() < 0.4 else 0))
    more = np.random.default_rng([2802, seed])  # hand-drawn marks (round 2): the other choices stay as drawn
    if more.random() < 0.65:
        inks += _marks(more, pieces, [a for a in areas if a.kind == "fold"], H, W)
    hema, eosin = _log_uniform(rng, 0.15, 1.6), _log_uniform(rng, 0.15, 1.6)
    # faint areas: 0.03-0.09 OD above glass in green (mean field 0.2 hematoxylin, 0.425 eosin)
    green = rng.uniform(0.03, 0.09)
    fe = green / (0.99 * 0.425 * eosin + 0.70 * 0.2 * hema * 0.3)
    base = float(rng.uniform(226, 248))
    glass = tuple(float(np.clip(base + rng.uniform(-6, 6), 0, 252)) for _ in range(3))
    slide = HardSlide(f"family-{seed:03d}", H, W, tuple(pieces), areas=tuple(areas), vessels=tuple(vessels),
                      inks=tuple(inks), bubbles=bubbles, dust=dust, glass=glass,
                      stains=np.stack([turned(H_RJ, rng, 8), turned(E_RJ, rng, 8)]), hema=hema, eosin=eosin,
                      noise=float(rng.uniform(0.8, 2.5)), blood_od=float(rng.uniform(0.6, 1.6)),
                      faint=(float(0.3 * fe), float(fe)), texture=float(rng.uniform(0.6, 1.3)), seed=seed)
    scan, render, thumb = _levels(rng)
    return FamilyDraw(seed, slide, scan, render, thumb, int(rng.integers(50, 96)))
