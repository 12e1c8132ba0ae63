"""Optics of the held-back family (tests/holdout_family.py): stain and dye absorbance vectors, the
scanner's light (glass colour, uneven illumination, stitching stripes), averaging a fine grid to the
thumbnail as light, sensor noise, 8-bit quantization and tiled JPEG.

Beer–Lambert throughout: every absorber adds optical density (OD, base 10) per RGB channel and the
light reaching the sensor is ``glass × illumination × 10^-OD`` (Ruifrok & Johnston 2001 use the
same model for colour deconvolution).
"""

from __future__ import annotations

import io

import cv2
import numpy as np
from PIL import Image

# Ruifrok & Johnston (2001), Table 1: normalized OD vectors (R, G, B) of haematoxylin and eosin.
RJ_H = np.array([0.650, 0.704, 0.286])
RJ_E = np.array([0.072, 0.990, 0.105])

# Oxyhaemoglobin in red cells seen through RGB filters: absorbs little red, strongly green (Q bands
# 540/577 nm) and blue (Soret tail); direction from memory of measured H&E slides.
HAEMOGLOBIN = np.array([0.10, 0.72, 0.68])

# Marker dyes as OD directions (R, G, B): what each colour absorbs (from memory: a blue marker
# absorbs red and some green, a red one green and blue, ...). Strength is drawn apart.
DYES = {
    "black": np.array([1.00, 1.00, 0.92]),
    "blue": np.array([0.86, 0.52, 0.10]),
    "green": np.array([0.82, 0.22, 0.66]),
    "red": np.array([0.05, 0.86, 0.62]),
    "violet": np.array([0.52, 0.90, 0.18]),
    "orange": np.array([0.03, 0.45, 0.95]),
}
DYE_ODDS = {"black": 0.3, "blue": 0.2, "green": 0.2, "red": 0.12, "violet": 0.1, "orange": 0.08}

# Dust and lint: near-neutral absorbers, slightly brownish (from memory).
DUST = np.array([0.55, 0.60, 0.66])


def unit(v) -> np.ndarray:
    v = np.asarray(v, dtype=float)
    return v / np.linalg.norm(v)


def turned(rng, v, max_deg: float = 8.0) -> tuple[np.ndarray, float]:
    """``v`` turned by an angle drawn in [0, max_deg] degrees about a random axis normal to it, kept
    with every component positive (a stain cannot add light); returns the vector and its angle."""
    v = unit(v)
    while True:
        axis = rng.standard_normal(3)
        axis = unit(axis - axis.dot(v) * v)
        a = np.deg2rad(rng.uniform(0.0, max_deg))
        w = v * np.cos(a) + axis * np.sin(a)
        if w.min() > 0.01:
            return unit(w), float(np.rad2deg(np.arccos(np.clip(unit(w).dot(v), -1, 1))))


def smooth(rng, shape, cell: float) -> np.ndarray:
    """A smooth random field of unit spread whose features are about ``cell`` pixels across:
    Gaussian noise on a coarse grid, enlarged by bicubic interpolation."""
    h, w = shape
    cell = max(cell, 1.0)
    gh, gw = int(np.ceil(h / cell)) + 4, int(np.ceil(w / cell)) + 4
    g = rng.standard_normal((gh, gw)).astype(np.float32)
    big = cv2.resize(g, (int(gw * cell), int(gh * cell)), interpolation=cv2.INTER_CUBIC)
    oy, ox = int(2 * cell) - int(cell // 2), int(2 * cell) - int(cell // 2)
    f = big[oy:oy + h, ox:ox + w]
    return (f - f.mean()) / (f.std() + 1e-6)


def illumination(light: dict, shape) -> np.ndarray:
    """The illumination field (H, W, 3) at the thumbnail from the drawn ``light`` parameters: a
    tilted plane, a radial fall-off, a colour shading and, for line-scanning scanners, stripes of
    slightly different gain (one a scan strip); normalized to a median of 1."""
    h, w = shape
    y, x = np.mgrid[0:h, 0:w].astype(np.float32)
    yn, xn = (y - h / 2) / max(h, w), (x - w / 2) / max(h, w)
    base = 1.0 + light["tilt"][0] * xn + light["tilt"][1] * yn - light["falloff"] * (xn ** 2 + yn ** 2) * 4
    out = np.repeat(base[..., None], 3, axis=2)
    out *= 1.0 + np.asarray(light["shade"], np.float32) * xn[..., None]
    if light["strip_px"]:
        idx = (x // light["strip_px"]).astype(int) % len(light["strip_gain"])
        out *= np.asarray(light["strip_gain"], np.float32)[idx][..., None]
    return (out / np.median(out.reshape(-1, 3), axis=0)).astype(np.float32)


def draw_light(rng, px_mm: float) -> dict:
    """Uneven light: up to ~4 % tilt, ~5 % fall-off, 1.5 % colour shading, 0-1 % stripes."""
    stripes = rng.random() < 0.5
    return {"tilt": [float(v) for v in rng.uniform(-0.04, 0.04, 2)],
            "falloff": float(rng.uniform(0.0, 0.05)),
            "shade": [float(v) for v in rng.uniform(-0.015, 0.015, 3)],
            "strip_px": int(round(rng.uniform(0.8, 1.6) * px_mm)) if stripes else 0,
            "strip_gain": [float(v) for v in 1 + rng.uniform(-0.01, 0.01, 5)] if stripes else [1.0]}


def block_mean(a: np.ndarray, f: int) -> np.ndarray:
    """Mean over ``f`` × ``f`` blocks (the thumbnail pixel averaging its fine-grid light)."""
    h, w = a.shape[0] // f, a.shape[1] // f
    a = a[:h * f, :w * f]
    return a.reshape(h, f, w, f, *a.shape[2:]).mean(axis=(1, 3))


def transmission(od: np.ndarray, f: int) -> np.ndarray:
    """Fine OD (Hf, Wf, 3) -> thumbnail transmission (H, W, 3), averaged as light."""
    return block_mean(np.power(10.0, -od, dtype=np.float32), f)


def expose(rng, trans: np.ndarray, glass, light: np.ndarray, noise: dict) -> np.ndarray:
    """Light in digital numbers with shot and read noise, quantized to 8 bits."""
    signal = trans * np.asarray(glass, np.float32) * light
    sigma = np.sqrt(noise["shot"] * signal + noise["read"] ** 2)
    out = signal + sigma * rng.standard_normal(signal.shape).astype(np.float32)
    return np.clip(np.rint(out), 0, 255).astype(np.uint8)


def jpeg_tiles(rgb: np.ndarray, quality: int, subsampling: int, tile: int) -> np.ndarray:
    """Each ``tile`` × ``tile`` tile JPEG-coded apart, as a tiled pyramid level stores it
    (``subsampling``: Pillow's 0 = 4:4:4, 1 = 4:2:2, 2 = 4:2:0)."""
    out = np.empty_like(rgb)
    for y in range(0, rgb.shape[0], tile):
        for x in range(0, rgb.shape[1], tile):
            buf = io.BytesIO()
            Image.fromarray(rgb[y:y + tile, x:x + tile]).save(buf, "JPEG", quality=quality, subsampling=subsampling)
            out[y:y + tile, x:x + tile] = np.asarray(Image.open(io.BytesIO(buf.getvalue())).convert("RGB"))
    return out


def disc_kernel(diameter_px: float, pallor: float = 0.0) -> np.ndarray:
    """A disc of ``diameter_px`` (at least 1 px), anti-aliased by 4 × 4 supersampling, peak 1;
    ``pallor`` > 0 thins its centre (a red cell's biconcave shape)."""
    r = max(diameter_px, 1.0) / 2
    n = int(np.ceil(r)) * 2 + 1
    s = (np.arange(n * 4) + 0.5) / 4 - n / 2
    yy, xx = np.meshgrid(s, s, indexing="ij")
    rr = np.hypot(yy, xx) / r
    prof = np.where(rr <= 1, 1.0 - pallor * np.exp(-(rr / 0.45) ** 2), 0.0)
    return prof.reshape(n, 4, n, 4).mean(axis=(1, 3)).astype(np.float32)


def line_kernel(length_px: float, angle: float, width_px: float = 1.0) -> np.ndarray:
    """A normalized line of ``length_px`` at ``angle`` radians (elongated nuclei, fibre streaks)."""
    n = int(np.ceil(length_px)) | 1
    k = np.zeros((n, n), np.float32)
    c = n // 2
    dx, dy = np.cos(angle) * (n - 1) / 2, np.sin(angle) * (n - 1) / 2
    cv2.line(k, (int(round(c - dx)), int(round(c - dy))), (int(round(c + dx)), int(round(c + dy))), 1.0,
             max(1, int(round(width_px))), cv2.LINE_AA)
    return k / max(k.sum(), 1e-6)
