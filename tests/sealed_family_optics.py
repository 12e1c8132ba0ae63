"""Optics of the sealed family of hard slides (tests/sealed_family.py): absorbers, light, sensor.

Every absorber adds optical density (OD) per RGB channel along its own unit vector (Beer–Lambert:
transmitted light = glass colour x illumination x 10^-OD). Hematoxylin and eosin use the colour
deconvolution vectors of Ruifrok & Johnston (2001), "Quantification of histochemical staining by
color deconvolution", Anal Quant Cytol Histol 23:291-299, each turned by up to 8 degrees about a
random axis per draw. Red blood cells absorb as oxy-haemoglobin (strong Soret/Q-band absorption in
blue and green, little in red). Marker dyes have their own vectors.

Light is averaged, not OD: the scene is drawn on a grid of ``S x S`` subpixels per thumbnail
pixel, turned into transmission there, and averaged per thumbnail pixel (``block_mean``).
"""

from __future__ import annotations

import io

import numpy as np
from PIL import Image

# Ruifrok & Johnston (2001), table 1 (H&E), as OD per (R, G, B)
HEMATOXYLIN = (0.650, 0.704, 0.286)
EOSIN = (0.072, 0.990, 0.105)
HAEMOGLOBIN = (0.08, 0.90, 0.55)

# marker dyes, OD per (R, G, B) before normalising: each absorbs the complement of its colour
DYES = {
    "black": (0.92, 0.88, 0.80),
    "blue": (0.95, 0.55, 0.12),
    "green": (0.90, 0.25, 0.75),
    "red": (0.06, 0.95, 0.75),
    "violet": (0.55, 0.95, 0.22),
    "magenta": (0.12, 0.92, 0.35),
    "brown": (0.35, 0.62, 0.95),
}


def unit(v) -> np.ndarray:
    v = np.asarray(v, dtype=np.float64)
    return v / np.linalg.norm(v)


def turned(v, degrees: float, rng: np.random.Generator) -> np.ndarray:
    """``v`` (normalised) turned by ``degrees`` about a random axis at right angles to it
    (Rodrigues' formula); negative OD components are clipped to a small positive value."""
    v = unit(v)
    axis = np.cross(v, unit(rng.standard_normal(3)))
    axis = axis / np.linalg.norm(axis)
    a = np.radians(degrees)
    out = v * np.cos(a) + np.cross(axis, v) * np.sin(a) + axis * np.dot(axis, v) * (1 - np.cos(a))
    return unit(np.clip(out, 0.01, None))


def angle_between(a, b) -> float:
    return float(np.degrees(np.arccos(np.clip(np.dot(unit(a), unit(b)), -1, 1))))


def jittered(v, spread: float, rng: np.random.Generator) -> np.ndarray:
    """``v`` normalised after each component moved by up to ``spread`` (a dye's batch)."""
    return unit(np.clip(np.asarray(v) + rng.uniform(-spread, spread, 3), 0.01, None))


def block_mean(a: np.ndarray, s: int) -> np.ndarray:
    """Mean over ``s x s`` blocks of the first two axes (light averaged per thumbnail pixel)."""
    h, w = a.shape[0] // s, a.shape[1] // s
    return a.reshape(h, s, w, s, *a.shape[2:]).mean(axis=(1, 3), dtype=np.float64).astype(np.float32)


def covered(mask: np.ndarray, s: int) -> np.ndarray:
    """Thumbnail pixels at least half covered by ``mask`` (drawn on the subpixel grid)."""
    return block_mean(mask.astype(np.float32), s) >= 0.5 - 1e-6


def transmission(od: np.ndarray, s: int) -> np.ndarray:
    """Beer–Lambert on the subpixel grid, averaged per thumbnail pixel: mean of 10^-OD. Works in
    place: ``od`` is used up (it holds the subpixel transmission afterwards)."""
    np.multiply(od, -np.log(10.0), out=od)
    np.exp(od, out=od)
    return block_mean(od, s)


def glass_light(shape, glass, vignette: float, tilt, centre, rng: np.random.Generator) -> np.ndarray:
    """Light through bare glass per thumbnail pixel (8-bit units): the tinted glass colour times
    uneven illumination (a vignette about ``centre``, shares of the slide, differing a little per
    channel, and a linear tilt)."""
    h, w = shape
    y, x = np.mgrid[0:h, 0:w].astype(np.float32)
    cy, cx = h * centre[0], w * centre[1]
    r2 = ((y - cy) ** 2 + (x - cx) ** 2) / (0.25 * (h * h + w * w))
    light = np.empty((h, w, 3), np.float32)
    for c in range(3):
        v = vignette * rng.uniform(0.8, 1.2)
        light[..., c] = glass[c] * (1 - v * r2) * (1 + tilt[0] * (y / h - 0.5) + tilt[1] * (x / w - 0.5))
    return light


def sensor(light: np.ndarray, read: float, shot: float, rng: np.random.Generator) -> np.ndarray:
    """Read noise plus shot noise (variance proportional to the light), 8-bit rounding."""
    noisy = light + rng.standard_normal(light.shape).astype(np.float32) * np.sqrt(read ** 2 + shot * light)
    return np.clip(np.rint(noisy), 0, 255).astype(np.uint8)


def jpeg(rgb: np.ndarray, quality: int, tile: int, subsampling: int) -> np.ndarray:
    """JPEG (Pillow) on the whole thumbnail (``tile`` 0) or tile by tile, each tile coded apart
    as in a pyramid level kept as JPEG tiles; ``subsampling`` 0 (4:4:4) or 2 (4:2:0)."""
    def code(a):
        buf = io.BytesIO()
        Image.fromarray(a).save(buf, format="JPEG", quality=int(quality), subsampling=int(subsampling))
        return np.asarray(Image.open(io.BytesIO(buf.getvalue())).convert("RGB"))

    if not tile:
        return code(rgb)
    out = np.empty_like(rgb)
    for y in range(0, rgb.shape[0], tile):
        for x in range(0, rgb.shape[1], tile):
            out[y:y + tile, x:x + tile] = code(np.ascontiguousarray(rgb[y:y + tile, x:x + tile]))
    return out
