"""Synthetic H&E slides with a known layout, for the demo, tests and benchmarks.

Everything here is invented. A slide is a few tissue "islands" (ellipses with wavy borders),
optional marker-pen strokes and an optional region of denser nuclei ("tumour-like"), all defined
in physical units (µm) so that a 0.25 µm/px and a 0.5 µm/px scan of one layout agree. Colour is
made with the Beer–Lambert law from two stain optical-density vectors, so stain estimation and
normalization can be checked against the vectors that made the image.

References
----------
.. [1] A. C. Ruifrok and D. A. Johnston, "Quantification of histochemical staining by color
       deconvolution", Analytical and Quantitative Cytology and Histology 23(4):291-299, 2001.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import lru_cache

import numpy as np

from tilewright.tissue.plane import RUIFROK_E, RUIFROK_H  # Ruifrok & Johnston (2001), unit length

__all__ = [
    "RUIFROK_H",
    "RUIFROK_E",
    "Island",
    "PenStroke",
    "SlideLayout",
    "random_layout",
]


#: Transmission (fraction of light passed) of marker inks, per RGB channel (invented values).
PEN_INKS = {
    "blue": (0.30, 0.45, 0.85),
    "green": (0.35, 0.80, 0.45),
    "black": (0.12, 0.12, 0.14),
}

_BANK_MPP = 0.25  # texture banks are drawn at 0.25 µm/px ("40x", common practice)
_BANK_SIZE = 1024


@dataclass(frozen=True)
class Island:
    """One tissue island: an ellipse (µm) with a wavy border, a stain strength and density."""

    cy: float
    cx: float
    ry: float
    rx: float
    angle: float = 0.0
    strength: float = 1.0  # < 1 for pale, faintly stained tissue
    wobble: float = 0.12  # relative amplitude of the border waves


@dataclass(frozen=True)
class PenStroke:
    """A straight marker stroke from (y0, x0) to (y1, x1) in µm, ``width`` µm wide."""

    y0: float
    x0: float
    y1: float
    x1: float
    width: float = 400.0
    ink: str = "blue"


@dataclass(frozen=True)
class SlideLayout:
    """The ground truth of a synthetic slide, in physical units.

    Parameters
    ----------
    height_um, width_um : float
        Physical size of the scanned area.
    islands : tuple of Island
    pens : tuple of PenStroke
    tumour : tuple of Island
        Regions (inside tissue) drawn with denser, darker nuclei.
    stains : ndarray (2, 3)
        Unit OD vectors, hematoxylin first.
    concentration : (float, float)
        Scale of the H and E concentration fields.
    background : (float, float, float)
        RGB of blank glass (0-255).
    seed : int
        Seed of the texture and sensor noise.
    """

    height_um: float
    width_um: float
    islands: tuple = ()
    pens: tuple = ()
    tumour: tuple = ()
    stains: np.ndarray = field(default_factory=lambda: np.stack([RUIFROK_H, RUIFROK_E]))
    concentration: tuple = (1.0, 1.0)
    background: tuple = (238.0, 236.0, 240.0)
    seed: int = 0
    noise: float = 2.0

    def shape_at(self, mpp: float) -> tuple[int, int]:
        """(height, width) in pixels of a scan at ``mpp`` µm/px."""
        return int(round(self.height_um / mpp)), int(round(self.width_um / mpp))

    # ground truth ---------------------------------------------------------------------------
    def _grid(self, mpp, y, x, h, w):
        yy = (np.arange(y, y + h, dtype=np.float64) + 0.5) * mpp
        xx = (np.arange(x, x + w, dtype=np.float64) + 0.5) * mpp
        return yy[:, None], xx[None, :]

    def tissue_truth(self, mpp: float, region=None) -> np.ndarray:
        """Boolean tissue mask at ``mpp`` (pixel centres), optionally for ``(y, x, h, w)``."""
        y, x, h, w = region if region is not None else (0, 0, *self.shape_at(mpp))
        yy, xx = self._grid(mpp, y, x, h, w)
        return _islands_inside(self.islands, yy, xx) > 0

    def pen_truth(self, mpp: float, region=None) -> np.ndarray:
        """Boolean pen-ink mask at ``mpp``."""
        y, x, h, w = region if region is not None else (0, 0, *self.shape_at(mpp))
        yy, xx = self._grid(mpp, y, x, h, w)
        out = np.zeros((h, w), dtype=bool)
        for pen in self.pens:
            out |= _stroke_inside(pen, yy, xx)
        return out

    def tumour_truth(self, mpp: float, region=None) -> np.ndarray:
        """Boolean mask of the dense-nuclei ("tumour-like") regions inside tissue at ``mpp``."""
        y, x, h, w = region if region is not None else (0, 0, *self.shape_at(mpp))
        yy, xx = self._grid(mpp, y, x, h, w)
        return (_islands_inside(self.tumour, yy, xx) > 0) & (_islands_inside(self.islands, yy, xx) > 0)

    # rendering ------------------------------------------------------------------------------
    def render(self, mpp: float, y: int, x: int, h: int, w: int) -> np.ndarray:
        """RGB uint8 pixels of a scan at ``mpp`` µm/px for the box ``(y, x, h, w)`` in its pixels.

        Deterministic: the same box always gives the same pixels, so any tiling of the scan
        composes into one seamless image.
        """
        yy, xx = self._grid(mpp, y, x, h, w)
        strength = _islands_inside(self.islands, yy, xx)
        bank_h, bank_e, bank_dense = _banks(self.seed, round(mpp, 6))
        size = bank_h.shape[0]
        iy = (np.arange(y, y + h) % size)[:, None]
        ix = (np.arange(x, x + w) % size)[None, :]
        c_h = bank_h[iy, ix] if strength.any() else None
        c_e = bank_e[iy, ix] if strength.any() else None
        if self.tumour and c_h is not None:
            dense = _islands_inside(self.tumour, yy, xx) > 0
            if dense.any():
                c_h = np.where(dense, bank_dense[iy, ix], c_h)
                c_e = np.where(dense, c_e * 0.7, c_e)
        background = np.asarray(self.background, dtype=np.float32)
        if strength.any():
            c_h = c_h * (strength * self.concentration[0])
            c_e = c_e * (strength * self.concentration[1])
            stains = np.asarray(self.stains, dtype=np.float32)
            od = c_h[..., None] * stains[0] + c_e[..., None] * stains[1]
            rgb = np.exp(-od * np.float32(np.log(10.0))) * background
        else:
            rgb = np.empty((h, w, 3), dtype=np.float32)
            rgb[:] = background
        for pen in self.pens:
            inside = _stroke_inside(pen, yy, xx)
            if inside.any():
                rgb[inside] *= np.asarray(PEN_INKS[pen.ink], dtype=np.float32)
        if self.noise:
            rgb += _noise_bank(self.seed)[iy % 509, ix % 509] * np.float32(self.noise)
        return np.clip(rgb + 0.5, 0, 255).astype(np.uint8)

    def renderer(self, mpp: float):
        """A callable ``render(y, x, h, w)`` for a scan at ``mpp`` (for pyramid writers)."""

        def render(y, x, h, w):
            return self.render(mpp, y, x, h, w)

        return render


def _islands_inside(islands, yy, xx) -> np.ndarray:
    """Per-pixel stain strength of the union of islands (0 outside).

    Only pixels inside an island's bounding box are evaluated, and the wavy border (an angle
    function) only in the annulus where it can matter.
    """
    shape = (yy.shape[0], xx.shape[1])
    out = np.zeros(shape, dtype=np.float32)
    ys = yy[:, 0]
    xs = xx[0, :]
    for isl in islands:
        reach = max(isl.ry, isl.rx) * (1.0 + isl.wobble)
        r0, r1 = np.searchsorted(ys, [isl.cy - reach, isl.cy + reach])
        c0, c1 = np.searchsorted(xs, [isl.cx - reach, isl.cx + reach])
        if r0 >= r1 or c0 >= c1:
            continue
        dy = (ys[r0:r1] - isl.cy).astype(np.float32)[:, None]
        dx = (xs[c0:c1] - isl.cx).astype(np.float32)[None, :]
        c, s = np.float32(np.cos(isl.angle)), np.float32(np.sin(isl.angle))
        u = (c * dx + s * dy) / np.float32(isl.rx)
        v = (-s * dx + c * dy) / np.float32(isl.ry)
        rr = u * u + v * v
        inside = rr < (1.0 - isl.wobble) ** 2
        ring = ~inside & (rr < (1.0 + isl.wobble) ** 2)
        if ring.any():
            theta = np.arctan2(v[ring], u[ring])
            border = 1.0 + isl.wobble * (0.6 * np.sin(3 * theta + 1.3) + 0.4 * np.sin(7 * theta + 0.4))
            inside[ring] = rr[ring] < border * border
        sub = out[r0:r1, c0:c1]
        np.maximum(sub, np.where(inside, np.float32(isl.strength), np.float32(0)), out=sub)
    return out


def _stroke_inside(pen: PenStroke, yy, xx) -> np.ndarray:
    py = yy - pen.y0
    px = xx - pen.x0
    dy, dx = pen.y1 - pen.y0, pen.x1 - pen.x0
    length2 = dy * dy + dx * dx
    t = np.clip((py * dy + px * dx) / length2, 0.0, 1.0) if length2 > 0 else 0.0
    ey = py - t * dy
    ex = px - t * dx
    return ey * ey + ex * ex < (pen.width / 2.0) ** 2


@lru_cache(maxsize=4)
def _noise_bank(seed: int) -> np.ndarray:
    """Periodic unit-variance sensor noise (509 px, a prime so it does not align with textures)."""
    return np.random.default_rng([seed, 509]).standard_normal((509, 509, 3)).astype(np.float32)


@lru_cache(maxsize=8)
def _banks(seed: int, mpp: float):
    """Periodic concentration textures (H, E, dense H) drawn at 0.25 µm/px, resampled to ``mpp``."""
    import cv2

    rng = np.random.default_rng(seed)
    n = _BANK_SIZE

    def nuclei(count, radius_um, amount):
        field_ = np.zeros((n, n), dtype=np.float32)
        ys = rng.integers(0, n, count)
        xs = rng.integers(0, n, count)
        radii = (rng.uniform(0.7, 1.3, count) * radius_um / _BANK_MPP).astype(int)
        for yc, xc, r in zip(ys, xs, radii):
            # draw on a wrapped canvas so the texture tiles seamlessly
            for oy in (0, -n, n):
                for ox in (0, -n, n):
                    cv2.ellipse(field_, (int(xc + ox), int(yc + oy)), (int(r), int(r * 0.8)),
                                float(rng.uniform(0, 180)), 0, 360, float(amount), -1)
        return cv2.GaussianBlur(field_, (0, 0), 1.2)

    def smooth_noise(scale_px, lo, hi):
        base = rng.random((n // scale_px, n // scale_px)).astype(np.float32)
        big = cv2.resize(np.tile(base, (3, 3)), (3 * n, 3 * n), interpolation=cv2.INTER_CUBIC)[n:2 * n, n:2 * n]
        return lo + (hi - lo) * np.clip(big, 0, 1)

    eosin = smooth_noise(64, 0.25, 0.55) + smooth_noise(8, -0.05, 0.05)
    hema = nuclei(900, 3.0, 0.75) + smooth_noise(32, 0.03, 0.10)
    dense = nuclei(2600, 3.5, 0.95) + smooth_noise(32, 0.05, 0.12)
    banks = []
    for arr in (hema, eosin, dense):
        arr = np.clip(arr, 0.0, 2.0).astype(np.float32)
        if abs(mpp - _BANK_MPP) > 1e-9:
            size = max(8, int(round(n * _BANK_MPP / mpp)))
            arr = cv2.resize(arr, (size, size), interpolation=cv2.INTER_AREA)
        banks.append(arr)
    return tuple(banks)


def random_layout(height_um: float, width_um: float, *, seed: int = 0, n_islands: int = 3,
                  pens: int = 0, tumour: bool = False, faint: bool = False, stains=None,
                  concentration=(1.0, 1.0), background=(238.0, 236.0, 240.0), noise: float = 2.0) -> SlideLayout:
    """A reproducible random layout: islands inside the slide, optional pens, tumour and faint island.

    Parameters
    ----------
    height_um, width_um : float
        Physical slide size in µm.
    seed : int
        Seed of the layout and its texture.
    n_islands : int
        Number of tissue islands (0 for a blank slide).
    pens : int
        Number of marker strokes (cycling blue, green, black).
    tumour : bool
        Add one dense-nuclei region inside the first island.
    faint : bool
        Make the last island pale (stain strength 0.35).
    """
    rng = np.random.default_rng(seed)
    islands = []
    for i in range(n_islands):
        ry = rng.uniform(0.12, 0.22) * height_um
        rx = rng.uniform(0.10, 0.20) * width_um
        cy = (i + 0.5) / n_islands * height_um if n_islands else 0
        cy = float(np.clip(cy + rng.uniform(-0.05, 0.05) * height_um, ry * 1.2, height_um - ry * 1.2))
        cx = float(rng.uniform(rx * 1.3, width_um - rx * 1.3))
        strength = 0.35 if (faint and i == n_islands - 1) else 1.0
        islands.append(Island(cy, cx, ry, rx, float(rng.uniform(0, np.pi)), strength))
    strokes = []
    inks = ("blue", "green", "black")
    for i in range(pens):
        y0 = float(rng.uniform(0.1, 0.9) * height_um)
        x0 = float(rng.uniform(0.05, 0.3) * width_um)
        strokes.append(PenStroke(y0, x0, float(np.clip(y0 + rng.uniform(-0.2, 0.2) * height_um, 0, height_um)),
                                 float(rng.uniform(0.6, 0.95) * width_um), width=float(min(height_um, width_um) * 0.03),
                                 ink=inks[i % 3]))
    regions = []
    if tumour and islands:
        isl = islands[0]
        regions.append(Island(isl.cy, isl.cx, isl.ry * 0.45, isl.rx * 0.45, isl.angle, 1.0, wobble=0.05))
    kw = {}
    if stains is not None:
        kw["stains"] = np.asarray(stains, dtype=np.float64)
    return SlideLayout(height_um, width_um, tuple(islands), tuple(strokes), tuple(regions),
                       concentration=tuple(concentration), background=tuple(background), seed=seed,
                       noise=noise, **kw)
