"""Hard synthetic H&E slides with a known layout: ink over tissue, blood, no glass, faint tissue,
fat, folds, bubbles, dust and tiny biopsies (ground truth constructed here, in µm).

Colour follows the Beer–Lambert law: optical densities add, ``I = I0 * 10**(-OD)``, with ``I0``
the colour of the glass. Tissue is hematoxylin and eosin at the Ruifrok & Johnston (2001) optical
density vectors H = (0.65, 0.70, 0.29), E = (0.07, 0.99, 0.11) (or a given pair). Red blood cells
take up eosin strongly and carry haemoglobin, whose absorption is strongest in blue (the Soret
band near 415 nm) and green (the Q bands near 540 and 576 nm) and slight in red: as an RGB
optical-density direction about (0.02, 0.57, 0.82) (band averages of the tabulated molar
extinction of oxyhaemoglobin, Prahl 1999, from memory). Marker inks lie on the cover glass and
multiply the light by their own transmission (their optical density adds to the tissue's):
black (carbon / nigrosine, flat), blue (a triarylmethane dye absorbing near 600 nm: red and some
green), green (a phthalocyanine blue with a yellow: red and blue) and red (a rhodamine / azo red
absorbing near 500-560 nm: green and some blue); the transmissions below are plausible values
for such dyes, not measurements. Folds are two layers of the same tissue (OD doubled); fat is
adipocytes (thin membranes around empty cells); an air bubble has a dark refracting rim; dust is
small grey specks.

References
----------
Ruifrok AC, Johnston DA (2001). Quantification of histochemical staining by color
deconvolution. Analytical and Quantitative Cytology and Histology 23(4):291-299.
Prahl S (1999). Optical absorption of hemoglobin. Oregon Medical Laser Center (tabulated molar
extinction coefficients of oxy- and deoxyhaemoglobin).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from red_cells import red_cell_od

H_RJ = np.array([0.65, 0.70, 0.29]) / np.linalg.norm([0.65, 0.70, 0.29])
E_RJ = np.array([0.07, 0.99, 0.11]) / np.linalg.norm([0.07, 0.99, 0.11])
HAEMOGLOBIN = np.array([0.02, 0.57, 0.82]) / np.linalg.norm([0.02, 0.57, 0.82])

#: Transmission (fraction of light passed, R, G, B) of marker inks (plausible dye values).
INKS = {
    "black": (0.10, 0.10, 0.12),
    "blue": (0.25, 0.45, 0.85),
    "green": (0.35, 0.75, 0.45),
    "red": (0.85, 0.20, 0.30),
}


@dataclass(frozen=True)
class Piece:
    """A tissue piece: an ellipse (µm) with a wavy border."""

    cy: float
    cx: float
    ry: float
    rx: float
    angle: float = 0.0
    wobble: float = 0.08


@dataclass(frozen=True)
class Area:
    """An elliptic area inside tissue of one ``kind``: blood, fat, faint, fold, dense."""

    kind: str
    cy: float
    cx: float
    ry: float
    rx: float
    angle: float = 0.0


@dataclass(frozen=True)
class Stroke:
    """A marker stroke along a polyline of (y, x) points in µm, ``width`` µm wide; ``ink`` is a
    name of :data:`INKS` or a transmission (R, G, B)."""

    points: tuple
    width: float
    ink: str


@dataclass(frozen=True)
class Ring:
    """A marker ring (circle drawn around a region), radius and width in µm (radius 0: a dot)."""

    cy: float
    cx: float
    r: float
    width: float
    ink: str


@dataclass
class HardSlide:
    """A slide layout with ground truth. ``cover=True``: tissue covers the whole slide (no glass)."""

    name: str
    height_um: float
    width_um: float
    pieces: tuple = ()
    areas: tuple = ()
    vessels: tuple = ()  # (cy, cx, r) µm: small vessels full of red blood cells
    inks: tuple = ()
    bubbles: tuple = ()  # (cy, cx, r) µm
    dust: tuple = ()  # (cy, cx, r) µm
    cover: bool = False
    glass: tuple = (236.0, 234.0, 239.0)
    stains: np.ndarray = field(default_factory=lambda: np.stack([H_RJ, E_RJ]))
    hema: float = 1.0  # scale of the hematoxylin (nuclei) field
    eosin: float = 1.0  # scale of the eosin field
    noise: float = 1.5
    faint: tuple = (0.8, 0.15)  # hematoxylin and eosin scales of the faint areas
    texture: float = 1.0  # scale of the stain fields' variation about their means (0: flat)
    blood_od: float = 1.0  # optical density scale of a red cell (1: dark red when packed)
    seed: int = 0

    def shape_at(self, mpp):
        return int(round(self.height_um / mpp)), int(round(self.width_um / mpp))

    # geometry -----------------------------------------------------------------------------
    def _grid(self, mpp, box=None):
        y, x, h, w = (0, 0, *self.shape_at(mpp)) if box is None else box
        yy = (np.arange(y, y + h, dtype=np.float32) + 0.5) * np.float32(mpp)
        xx = (np.arange(x, x + w, dtype=np.float32) + 0.5) * np.float32(mpp)
        return yy[:, None], xx[None, :]

    @staticmethod
    def _ellipse(e, yy, xx, wobble=0.0):
        c, s = np.float32(np.cos(e.angle)), np.float32(np.sin(e.angle))
        dy, dx = yy - np.float32(e.cy), xx - np.float32(e.cx)
        u = (c * dx + s * dy) / np.float32(e.rx)
        v = (-s * dx + c * dy) / np.float32(e.ry)
        rr = u * u + v * v
        if wobble:
            theta = np.arctan2(v, u)
            border = 1.0 + wobble * (0.6 * np.sin(3 * theta + 1.3) + 0.4 * np.sin(7 * theta + 0.4))
            return rr < border * border
        return rr < 1.0

    def _ink_cover(self, ink, yy, xx, mpp):
        """Fraction of each pixel covered by a stroke or ring (antialiased edge); a mark with its
        own ``paint`` (tests/marker_marks.py) gives its cover and pressure-driven density."""
        if hasattr(ink, "paint"):
            return ink.paint(yy, xx, mpp)[0]
        if isinstance(ink, Ring):
            d = np.abs(np.sqrt((yy - ink.cy) ** 2 + (xx - ink.cx) ** 2) - ink.r)
        else:
            d = np.full(np.broadcast_shapes(yy.shape, xx.shape), np.inf, np.float32)
            pts = ink.points
            for (y0, x0), (y1, x1) in zip(pts[:-1], pts[1:]):
                py, px = yy - y0, xx - x0
                dy, dx = y1 - y0, x1 - x0
                t = np.clip((py * dy + px * dx) / (dy * dy + dx * dx), 0.0, 1.0)
                d = np.minimum(d, np.sqrt((py - t * dy) ** 2 + (px - t * dx) ** 2))
        return np.clip((ink.width / 2.0 - d) / mpp + 0.5, 0.0, 1.0).astype(np.float32)

    def truth(self, mpp, box=None):
        """Boolean ground-truth maps at ``mpp`` (pixel centres; ``box`` (y, x, h, w) px or all):
        tissue, ink, blood, faint, fat, fold, dense, artefact (bubble rims and dust)."""
        yy, xx = self._grid(mpp, box)
        shape = (yy.shape[0], xx.shape[1])
        tissue = np.ones(shape, bool) if self.cover else np.zeros(shape, bool)
        for p in self.pieces:
            tissue |= self._ellipse(p, yy, xx, p.wobble)
        out = {"tissue": tissue}
        for kind in ("blood", "faint", "fat", "fold", "dense"):
            m = np.zeros(shape, bool)
            for a in self.areas:
                if a.kind == kind:
                    m |= self._ellipse(a, yy, xx)
            out[kind] = m & tissue
        for cy, cx, r in self.vessels:
            out["blood"] |= ((yy - cy) ** 2 + (xx - cx) ** 2 < r * r) & tissue
        ink = np.zeros(shape, bool)
        for i in self.inks:
            ink |= self._ink_cover(i, yy, xx, mpp) >= 0.5
        out["ink"] = ink
        art = np.zeros(shape, bool)
        for cy, cx, r in self.bubbles:
            d = np.sqrt((yy - cy) ** 2 + (xx - cx) ** 2)
            art |= np.abs(d - r) < 20.0
        for cy, cx, r in self.dust:
            art |= (yy - cy) ** 2 + (xx - cx) ** 2 < r * r
        out["artefact"] = art
        return out

    # rendering ----------------------------------------------------------------------------
    def _fields(self, shape, mpp, rng):
        """Hematoxylin and eosin concentration fields (nuclei resolved below 3 µm/px)."""
        import cv2

        def smooth(scale_um, lo, hi):
            sigma = max(0.5, scale_um / mpp)
            f = cv2.GaussianBlur(rng.standard_normal(shape).astype(np.float32), (0, 0), sigma)
            f /= max(float(f.std()), 1e-6)
            return np.float32(lo) + np.float32(hi - lo) * np.clip(0.5 + 0.25 * f, 0, 1)

        if mpp <= 3.0:
            blob = cv2.GaussianBlur(rng.standard_normal(shape).astype(np.float32), (0, 0), 2.5 / mpp)
            nuclei = (blob > np.quantile(blob, 0.85)).astype(np.float32)  # ~15 % of the area
            nuclei = cv2.GaussianBlur(nuclei, (0, 0), 0.4 / mpp)
        else:  # nuclei below the pixel size: the covered fraction of each pixel
            nuclei = smooth(40.0, 0.08, 0.22) + rng.uniform(-0.03, 0.03, shape).astype(np.float32)
        hema = 0.08 + 0.85 * nuclei
        eosin = smooth(150.0, 0.25, 0.6) + smooth(20.0, -0.05, 0.05)
        if self.texture != 1.0:  # 0: flat (every pixel the mean concentrations)
            t = np.float32(self.texture)
            hema = np.float32(0.2075) + t * (hema - np.float32(0.2075))
            eosin = np.float32(0.425) + t * (eosin - np.float32(0.425))
        return hema * np.float32(self.hema), eosin * np.float32(self.eosin), smooth

    def render(self, mpp, box=None):
        """RGB uint8 of the slide at ``mpp`` µm/px (``box`` (y, x, h, w) in its pixels, or all)."""
        rng = np.random.default_rng([self.seed, int(round(mpp * 1000))] + list(box or ()))
        yy, xx = self._grid(mpp, box)
        shape = (yy.shape[0], xx.shape[1])
        t = self.truth(mpp, box)
        hema, eosin, smooth = self._fields(shape, mpp, rng)
        tissue = t["tissue"]
        hema = np.where(tissue, hema, 0)
        eosin = np.where(tissue, eosin, 0)
        hema[t["faint"]] *= np.float32(self.faint[0])
        eosin[t["faint"]] *= np.float32(self.faint[1])
        if t["fat"].any():  # adipocytes ~70 µm across: membranes 3 µm thick, empty inside
            cell = 70.0
            gy, gx = np.abs(np.sin(np.pi * yy / cell)), np.abs(np.sin(np.pi * (xx + 0.3 * yy) / cell))
            wall = np.minimum(gy, gx) * (cell / np.pi)  # µm to the nearest membrane
            membrane = np.clip(1.5 / np.maximum(wall, 1.5 / 2), 0, 1) if mpp <= 3 else np.float32(3.0 * 2 / cell)
            fat = t["fat"]
            eosin = np.where(fat, 0.6 * membrane, eosin)
            hema = np.where(fat, 0.05 * membrane, hema)
        dense = t["dense"]
        hema[dense] *= 1.6
        fold = t["fold"]
        hema[fold] *= 2.0  # two layers of the same section
        eosin[fold] *= 2.0
        stains = np.asarray(self.stains, np.float32)
        od = hema[..., None] * stains[0] + eosin[..., None] * stains[1]
        blood = t["blood"]
        if blood.any():  # packed red cells, one disc each: much eosin and their own haemoglobin
            cell = self.blood_od * (0.9 * stains[1] + 0.6 * HAEMOGLOBIN)
            od[blood] = red_cell_od(yy, xx, mpp, blood, cell, 0.12 * stains[1] + 0.03 * stains[0], seed=self.seed)
        for cy, cx, r in self.bubbles:  # a refracting rim, grey
            d = np.sqrt((yy - cy) ** 2 + (xx - cx) ** 2)
            od += (np.float32(0.45) * np.exp(-((d - r) / 12.0) ** 2))[..., None]
        for cy, cx, r in self.dust:
            d2 = (yy - cy) ** 2 + (xx - cx) ** 2
            od += (np.float32(0.8) * (d2 < r * r))[..., None]
        for ink in self.inks:
            cover = self._ink_cover(ink, yy, xx, mpp) if not hasattr(ink, "paint") else np.prod(ink.paint(yy, xx, mpp), axis=0)
            if cover.any():
                thickness = smooth(200.0, 0.85, 1.15)
                passed = INKS[ink.ink] if isinstance(ink.ink, str) else ink.ink
                od += (cover * thickness)[..., None] * -np.log10(np.asarray(passed, np.float32))
        rgb = np.asarray(self.glass, np.float32) * np.power(np.float32(10), -od)
        rgb += rng.standard_normal(rgb.shape).astype(np.float32) * np.float32(self.noise)
        return np.clip(rgb + 0.5, 0, 255).astype(np.uint8)


def _pieces(rng, height, width, n, size=(0.18, 0.3)):
    out = []
    for i in range(n):
        ry = rng.uniform(*size) * height
        rx = rng.uniform(*size) * width / n * 1.6
        cx = (i + 0.5) / n * width
        cy = height / 2 + rng.uniform(-0.1, 0.1) * height
        out.append(Piece(cy, cx, ry, rx, float(rng.uniform(0, np.pi))))
    return tuple(out)


def hard_slides():
    """The named hard cases (each about 6 x 8 mm)."""
    H, W = 6000.0, 8000.0
    rng = np.random.default_rng(23)
    two = (Piece(3000, 2300, 2300, 1900, 0.3), Piece(3000, 5900, 2200, 1800, -0.4))
    slides = []
    slides.append(HardSlide("ink-red-black", H, W, two, inks=(
        Stroke(((600, 300), (5400, 7600)), 500, "red"),
        Stroke(((5300, 600), (700, 7300)), 450, "black"),
        Ring(3000, 5900, 1300, 350, "black")), seed=1))
    slides.append(HardSlide("ink-blue-green", H, W, two, inks=(
        Stroke(((300, 1200), (2800, 4000), (5700, 4300)), 550, "blue"),
        Ring(3000, 2300, 1400, 400, "green")), seed=2,
        stains=np.stack([np.array([0.5626, 0.7201, 0.4062]), np.array([0.2159, 0.8012, 0.5581])])))
    slides.append(HardSlide("ink-red-rings", H, W, two, inks=(
        Ring(3000, 2300, 1500, 450, "red"), Ring(3000, 5900, 1200, 400, "red"),
        Stroke(((200, 4100), (5800, 4100)), 600, "red")), seed=3))
    slides.append(HardSlide("ink-heavy", H, W, (Piece(3000, 4000, 2500, 3300, 0.1),), inks=tuple(
        Stroke(((300 + 800 * k, 200), (700 + 800 * k, 7800)), 420, ("red", "black", "blue", "green")[k % 4])
        for k in range(7)), seed=4))
    vessels = tuple((float(3000 + rng.uniform(-1700, 1700)), float(c + rng.uniform(-1300, 1300)), float(rng.uniform(50, 140)))
                    for c in (2300, 5900) for _ in range(13))
    slides.append(HardSlide("blood", H, W, two, areas=(
        Area("blood", 2600, 2100, 900, 700, 0.5), Area("blood", 3600, 6200, 600, 1000, -0.2)),
        vessels=vessels, seed=5))
    slides.append(HardSlide("no-glass", H, W, cover=True, areas=(
        Area("faint", 1500, 2000, 900, 1400, 0.2), Area("fat", 4500, 6000, 900, 1200),
        Area("blood", 4200, 1800, 500, 500)), seed=6))
    slides.append(HardSlide("faint-fat", H, W, two, areas=(
        Area("faint", 3000, 2300, 2500, 2200), Area("fat", 3000, 5900, 1600, 1300)), eosin=0.6, seed=7))
    slides.append(HardSlide("folds-bubbles-dust", H, W, two, areas=(
        Area("fold", 2500, 2300, 1500, 120, 0.7), Area("fold", 3500, 5900, 110, 1400, 0.2)),
        bubbles=((1400, 4100, 500), (3000, 5000, 600)),
        dust=tuple((float(rng.uniform(300, 5700)), float(rng.uniform(300, 7700)), float(rng.uniform(20, 60)))
                   for _ in range(30)), seed=8))
    tiny = tuple(Piece(float(rng.uniform(1500, 4500)), float(700 + 1100 * k), float(rng.uniform(200, 450)),
                       float(rng.uniform(150, 350)), float(rng.uniform(0, 3))) for k in range(7))
    slides.append(HardSlide("tiny-biopsies", H, W, tiny, hema=0.3, inks=(
        Stroke(((5200, 500), (5300, 7500)), 400, "green"),), seed=9))
    return slides


def hard_slide(name):
    for s in hard_slides():
        if s.name == name:
            return s
    raise KeyError(name)
