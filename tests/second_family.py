"""The SECOND tuning family of hard slides, written apart from ``tests/hard_slides.py``
(``tests/tissue/test_second_family.py``). It was held back through rounds 1 and 2 of the tissue
mask's work (run only to confirm, twice); in round 3 it was opened for tuning, since what leaked
there had not moved, and a fresh family written apart again (``tests/heldback_fresh.py``) is held
back in its place.

Different code and different shapes from the tuning family: tissue pieces are random polygons
(star-shaped Fourier outlines, bent needle cores, pieces with glass lumens) filled with OpenCV at
about a third of the thumbnail's pixel size and area-averaged down (the truth maps are area
fractions of the same drawing, not point samples); nuclei are drawn one by one; red cells are
drawn one disc each; marker is drawn as OpenCV poly-lines whose width changes along the stroke,
handwritten-like labels (``cv2.putText``), arcs, ticks and dots; the glass is lit unevenly
(a linear fall-off of a few levels across the slide).

Physics is the same law, written again: ``I = I0 * illumination * 10**-(sum of optical
densities)``; H and E at the Ruifrok & Johnston (2001) directions turned at random, red cells
with eosin and haemoglobin (OD direction about (0.04, 0.62, 0.78): strong Soret absorption in
blue, Q bands in green, little in red; a rough band average, from memory), and marker dyes as
transmissions of their own (plausible values for such dyes, not measurements).

References
----------
Ruifrok AC, Johnston DA (2001). Quantification of histochemical staining by color
deconvolution. Analytical and Quantitative Cytology and Histology 23(4):291-299.
"""

from __future__ import annotations

from dataclasses import dataclass

import cv2
import numpy as np

_H = np.array([0.65, 0.70, 0.29])
_E = np.array([0.07, 0.99, 0.11])
_HB = np.array([0.04, 0.62, 0.78])
#: Marker dye transmission (R, G, B): this family's own list.
DYES = {"black": (0.13, 0.12, 0.15), "navy": (0.22, 0.33, 0.78), "violet": (0.50, 0.28, 0.72),
        "green": (0.30, 0.68, 0.42), "red": (0.82, 0.17, 0.24), "scarlet": (0.90, 0.30, 0.22)}
SHIFT = 4  # OpenCV sub-pixel drawing: coordinates in 1/16 px


def _unit(v):
    v = np.asarray(v, float)
    return v / np.linalg.norm(v)


def _turn(v, rng, max_deg):
    """``v`` turned by up to ``max_deg`` about a random axis (Rodrigues' rotation)."""
    axis = _unit(np.cross(v, rng.normal(size=3)))
    a = np.radians(rng.uniform(-max_deg, max_deg))
    return _unit(v * np.cos(a) + np.cross(axis, v) * np.sin(a) + axis * (axis @ v) * (1 - np.cos(a)))


def _pts(xy):
    return np.round(np.asarray(xy) * (1 << SHIFT)).astype(np.int32).reshape(-1, 1, 2)


def _fill(shape, polys):
    m = np.zeros(shape, np.uint8)
    cv2.fillPoly(m, [_pts(p) for p in polys], 1, cv2.LINE_8, SHIFT)
    return m.astype(bool)


def _noise(shape, cell_px, rng):
    """Smooth noise in [0, 1]: a coarse random grid enlarged with bicubic interpolation."""
    gh, gw = max(2, int(shape[0] / cell_px) + 2), max(2, int(shape[1] / cell_px) + 2)
    g = cv2.resize(rng.random((gh, gw)).astype(np.float32), (shape[1], shape[0]), interpolation=cv2.INTER_CUBIC)
    return np.clip(g, 0, 1)


@dataclass
class Drawn:
    """A rendered held-back slide: the thumbnail, its µm/px and the truth maps at that size."""

    rgb: np.ndarray
    mpp: float
    truth: dict
    info: dict


def _outline(rng, cx, cy, r, px):
    """A star-shaped outline: radius ``r`` (px) modulated by a few random harmonics."""
    t = np.linspace(0, 2 * np.pi, 160, endpoint=False)
    rad = np.ones_like(t)
    for k in range(2, 7):
        rad += rng.uniform(0, 0.12 / k ** 0.5) * np.cos(k * t + rng.uniform(0, 6.3))
    ry = r * rng.uniform(0.55, 1.0)
    return np.c_[cx + r * rad * np.cos(t), cy + ry * rad * np.sin(t)]


def _core(rng, x0, y0, length, width, bend):
    """A needle core: a bent band ``width`` px wide, ``length`` px long."""
    s = np.linspace(0, 1, 40)
    ang = rng.uniform(0, np.pi)
    cx = x0 + length * s * np.cos(ang) + bend * np.sin(np.pi * s) * -np.sin(ang)
    cy = y0 + length * s * np.sin(ang) + bend * np.sin(np.pi * s) * np.cos(ang)
    nx, ny = -np.gradient(cy), np.gradient(cx)
    n = np.hypot(nx, ny)
    nx, ny = nx / n * width / 2, ny / n * width / 2
    return np.r_[np.c_[cx + nx, cy + ny], np.c_[cx - nx, cy - ny][::-1]]


def draw(seed: int, *, blood=True, faint=True, ink=True, artefacts=True) -> Drawn:
    """One held-back slide, all choices from ``seed``."""
    rng = np.random.default_rng([7919, seed])
    thumb = float(rng.uniform(7.6, 8.4))  # a reused pyramid level near 8 µm/px
    r = thumb / 3.0  # drawing µm/px
    h_um, w_um = rng.uniform(4200, 5600), rng.uniform(5600, 7600)
    H, W = int(h_um / r), int(w_um / r)
    um = 1.0 / r  # px per µm
    hv, ev = _turn(_unit(_H), rng, 8), _turn(_unit(_E), rng, 8)
    od = np.zeros((H, W, 3), np.float32)
    tissue = np.zeros((H, W), bool)
    holes = np.zeros((H, W), bool)
    faint_m = np.zeros((H, W), bool)
    blood_m = np.zeros((H, W), bool)
    info = {"seed": seed, "mpp": thumb, "faint_od": []}
    # tissue pieces ------------------------------------------------------------------------
    n = int(rng.integers(1, 4))
    for k in range(n):
        cx = (k + 0.5) / n * W + rng.uniform(-0.05, 0.05) * W
        cy = H / 2 + rng.uniform(-0.15, 0.15) * H
        kind = rng.choice(["round", "round", "core", "lumen"])
        if kind == "core":
            poly = _core(rng, cx - 0.3 * W / n, cy - 0.2 * H, rng.uniform(0.5, 0.8) * H, rng.uniform(300, 900) * um,
                         rng.uniform(-300, 300) * um)
        else:
            poly = _outline(rng, cx, cy, rng.uniform(0.28, 0.42) * min(H, W / n * 1.3), r)
        piece = _fill((H, W), [poly])
        if kind == "lumen" and piece.any():  # glands or a vessel cut open: glass inside the piece
            ys, xs = np.nonzero(piece)
            for _ in range(int(rng.integers(2, 6))):
                i = rng.integers(len(ys))
                holes |= _fill((H, W), [_outline(rng, xs[i], ys[i], rng.uniform(80, 250) * um, r)]) & piece
        pale = faint and rng.random() < 0.35
        strength = rng.uniform(0.05, 0.12) if pale else rng.uniform(0.3, 1.5)
        e = strength * (0.35 + 0.4 * _noise((H, W), 120 * um, rng))
        hh = strength * (0.05 + 0.1 * _noise((H, W), 60 * um, rng))
        nuclei = np.zeros((H, W), np.uint8)  # drawn one by one, ~6 µm across
        ys, xs = np.nonzero(piece[:: max(1, int(9 * um)), :: max(1, int(9 * um))])
        step = max(1, int(9 * um))
        keep = rng.random(len(ys)) < 0.45
        for y, x in zip(ys[keep] * step, xs[keep] * step):
            cv2.circle(nuclei, (int(x * 16 + rng.uniform(-64, 64)), int(y * 16 + rng.uniform(-64, 64))),
                       int(rng.uniform(2.2, 3.6) * um * 16), 1, -1, cv2.LINE_8, SHIFT)
        hh = hh + strength * 0.8 * nuclei
        tissue_od = hh[..., None] * hv + e[..., None] * ev
        od[piece] = tissue_od[piece]
        tissue |= piece
        if pale:
            faint_m |= piece & ~holes
            info["faint_od"].append(float(np.median(tissue_od[piece][:, 1])))
    tissue &= ~holes
    od[holes] = 0
    # red cells: haemorrhages at an edge or inside, one disc a cell ---------------------------
    if blood and rng.random() < 0.75 and (tissue & ~faint_m).any():
        ys, xs = np.nonzero(tissue & ~faint_m)
        for _ in range(int(rng.integers(1, 3))):
            i = rng.integers(len(ys))
            if rng.random() < 0.5:  # at the edge: move to the nearest glass
                ring = cv2.dilate(tissue.view(np.uint8), np.ones((3, 3), np.uint8)).view(bool) & ~tissue
                gy, gx = np.nonzero(ring)
                j = np.argmin((gy - ys[i]) ** 2 + (gx - xs[i]) ** 2)
                cy, cx = gy[j], gx[j]
            else:
                cy, cx = ys[i], xs[i]
            blob = _fill((H, W), [_outline(rng, cx, cy, rng.uniform(500, 1500) * um, r)])
            blob &= cv2.dilate(tissue.view(np.uint8), np.ones((5, 5), np.uint8),
                               iterations=int(200 * um)).view(bool) & ~holes  # at most 0.6 mm past the edge
            blood_m |= blob
        cells = np.zeros((H, W), np.float32)
        ys, xs = np.nonzero(blood_m)
        if len(ys):
            count = int(len(ys) / (um * um) / 44 * rng.uniform(0.8, 1.1))  # ~44 µm² of area a cell
            pick = rng.integers(len(ys), size=count)
            for y, x in zip(ys[pick], xs[pick]):
                cv2.circle(cells, (int((x + rng.random()) * 16), int((y + rng.random()) * 16)),
                           int(rng.uniform(3.2, 3.9) * um * 16), float(rng.uniform(0.7, 1.0)), -1, cv2.LINE_AA, SHIFT)
            cells = np.minimum(cells, 1.3)
            red = cells[..., None] * (0.75 * ev + 0.55 * _unit(_HB)) + 0.12 * ev
            od[blood_m] = red[blood_m]
            tissue |= blood_m
    # fat and folds -------------------------------------------------------------------------
    fat_m = np.zeros((H, W), bool)
    if artefacts and rng.random() < 0.5 and tissue.any():
        ys, xs = np.nonzero(tissue & ~blood_m & ~faint_m)
        if len(ys):
            i = rng.integers(len(ys))
            area = _fill((H, W), [_outline(rng, xs[i], ys[i], rng.uniform(400, 900) * um, r)]) & tissue & ~blood_m
            walls = np.zeros((H, W), np.uint8)
            for _ in range(int(area.sum() / (um * um) / 2500) + 1):
                j = rng.integers(len(ys))
                cv2.circle(walls, (int(xs[j] * 16), int(ys[j] * 16)), int(rng.uniform(25, 45) * um * 16), 1,
                           max(1, int(2 * um)), cv2.LINE_8, SHIFT)
            od[area] = (walls[area, None] * (0.5 * ev + 0.05 * hv)).astype(np.float32)
            fat_m = area
    if artefacts and rng.random() < 0.5 and tissue.any():
        ys, xs = np.nonzero(tissue & ~blood_m)
        if len(ys):
            i = rng.integers(len(ys))
            fold = _fill((H, W), [_core(rng, xs[i], ys[i], rng.uniform(800, 2000) * um, rng.uniform(60, 160) * um, 0)])
            fold &= tissue & ~blood_m
            od[fold] *= 2.0
    # marker ----------------------------------------------------------------------------------
    cover = np.zeros((H, W), np.float32)
    colour = np.zeros(3, np.float32)
    if ink and rng.random() < 0.8:
        name = str(rng.choice(list(DYES)))
        colour = -np.log10(np.asarray(DYES[name], np.float32)) * rng.uniform(0.7, 1.2)
        info["dye"] = name
        for _ in range(int(rng.integers(1, 4))):
            what = rng.choice(["line", "arc", "label", "dot", "tick"])
            width = rng.uniform(250, 700) * um
            if what == "line":  # width changes along the stroke (pressure)
                pts = np.c_[np.linspace(rng.uniform(0, W), rng.uniform(0, W), 12), np.linspace(rng.uniform(0, H), rng.uniform(0, H), 12)]
                pts += rng.normal(0, 40 * um, pts.shape)
                for a, b in zip(pts[:-1], pts[1:]):
                    cv2.line(cover, tuple(int(v * 16) for v in a), tuple(int(v * 16) for v in b), 1.0,
                             max(1, int(width * rng.uniform(0.85, 1.15))), cv2.LINE_AA, SHIFT)
            elif what == "arc":
                c = (int(rng.uniform(0.2, 0.8) * W * 16), int(rng.uniform(0.2, 0.8) * H * 16))
                ax = (int(rng.uniform(0.15, 0.35) * W * 16), int(rng.uniform(0.15, 0.35) * H * 16))
                start = rng.uniform(0, 360)
                cv2.ellipse(cover, c, ax, rng.uniform(0, 180), start, start + rng.uniform(200, 360), 1.0,
                            max(1, int(width)), cv2.LINE_AA, SHIFT)
            elif what == "label":
                scale = rng.uniform(600, 1200) * um / 22  # Hershey glyphs are ~22 units tall a scale of 1
                text = np.zeros((H, W), np.uint8)  # putText draws on 8-bit images only
                cv2.putText(text, str(rng.choice(["A1", "B", "T2", "x", "L"])),
                            (int(rng.uniform(0, 0.7) * W), int(rng.uniform(0.2, 1.0) * H)),
                            cv2.FONT_HERSHEY_SIMPLEX, scale, 255, max(1, int(width * 0.6)), cv2.LINE_AA)
                cover += text.astype(np.float32) / 255
            elif what == "dot":
                cv2.circle(cover, (int(rng.uniform(0, W) * 16), int(rng.uniform(0, H) * 16)),
                           int(rng.uniform(150, 450) * um * 16), 1.0, -1, cv2.LINE_AA, SHIFT)
            else:
                x, y = rng.uniform(0, W), rng.uniform(0, H)
                d = rng.uniform(400, 900) * um
                cv2.line(cover, (int(x * 16), int(y * 16)), (int((x + d) * 16), int((y + 0.3 * d) * 16)), 1.0,
                         max(1, int(width)), cv2.LINE_AA, SHIFT)
        cover = np.clip(cover, 0, 1) * (0.9 + 0.2 * _noise((H, W), 300 * um, rng))
    od += cover[..., None] * colour
    # bubbles and dust ----------------------------------------------------------------------
    grey = np.zeros((H, W), np.float32)
    if artefacts:
        for _ in range(int(rng.integers(0, 3))):
            cv2.ellipse(grey, (int(rng.uniform(0, W) * 16), int(rng.uniform(0, H) * 16)),
                        (int(rng.uniform(200, 700) * um * 16), int(rng.uniform(200, 700) * um * 16)),
                        rng.uniform(0, 180), 0, 360, 0.4, max(1, int(25 * um)), cv2.LINE_AA, SHIFT)
        for _ in range(int(rng.integers(0, 25))):
            cv2.circle(grey, (int(rng.uniform(0, W) * 16), int(rng.uniform(0, H) * 16)),
                       int(rng.uniform(8, 40) * um * 16), 0.9, -1, cv2.LINE_AA, SHIFT)
    od += grey[..., None]
    # light --------------------------------------------------------------------------------------
    glass = np.float32(rng.uniform(226, 247)) + rng.uniform(-6, 6, 3).astype(np.float32)  # tinted a little
    yy, xx = np.mgrid[0:H, 0:W].astype(np.float32)
    light = 1 + rng.uniform(-0.012, 0.012) * (yy / H - 0.5) + rng.uniform(-0.012, 0.012) * (xx / W - 0.5)
    img = glass * light[..., None] * np.power(np.float32(10), -od)
    h8, w8 = int(round(H * r / thumb)), int(round(W * r / thumb))
    small = cv2.resize(img, (w8, h8), interpolation=cv2.INTER_AREA)
    small += rng.normal(0, rng.uniform(0.8, 2.2), small.shape).astype(np.float32)
    rgb = np.clip(small + 0.5, 0, 255).astype(np.uint8)
    q = int(rng.integers(55, 96))
    ok, buf = cv2.imencode(".jpg", cv2.cvtColor(rgb, cv2.COLOR_RGB2BGR), [cv2.IMWRITE_JPEG_QUALITY, q])
    rgb = cv2.cvtColor(cv2.imdecode(buf, cv2.IMREAD_COLOR), cv2.COLOR_BGR2RGB)
    info.update(jpeg=q, glass=[float(v) for v in glass])

    def frac(m):
        return cv2.resize(m.astype(np.float32), (w8, h8), interpolation=cv2.INTER_AREA) >= 0.5

    truth = {"tissue": frac(tissue), "ink": frac(cover > 0.5), "blood": frac(blood_m), "faint": frac(faint_m),
             "fat": frac(fat_m), "artefact": frac(grey > 0.2)}
    return Drawn(rgb, thumb, truth, info)
