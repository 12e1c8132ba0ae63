"""Optics of the veiled family: absorbers as RGB optical-density (OD) vectors, and the scanner's way
from optical density on a subpixel grid to an 8-bit JPEG thumbnail.

Beer–Lambert: every absorber adds ``OD = c * v`` per RGB channel (``v`` a unit vector, ``c`` its
amount); the light through a point is ``glass * 10**-OD``. Light, not OD, is averaged over the
subpixels of a thumbnail pixel, as a sensor pixel integrates light.

- Hematoxylin and eosin: the Ruifrok & Johnston (2001) colour-deconvolution vectors
  H = (0.650, 0.704, 0.286), E = (0.072, 0.990, 0.105), each turned by a planned angle (<= 8 deg).
- Red blood cells: oxy-haemoglobin, from Prahl's tabulated molar extinction of HbO2 (10 nm steps,
  400-700 nm, values as tabulated to a few per cent) reduced to RGB: the mean *transmission* of a
  reference layer (OD 0.8 at 540 nm) over Gaussian camera bands (R 615 +- 25 nm, G 545 +- 30 nm,
  B 460 +- 25 nm), then -log10 and normalised; this gives about (0.09, 0.58, 0.81): weak in red.
- Marker dyes and debris: invented broad-band absorbers (a blue dye absorbs red and green, a red dye
  green and blue, and so on), normalised.
"""

from __future__ import annotations

import math

import cv2
import numpy as np

H_RJ = (0.650, 0.704, 0.286)
E_RJ = (0.072, 0.990, 0.105)
PRAHL_NM = np.arange(400, 701, 10)
PRAHL_HBO2 = np.array([266232, 466816, 480360, 246072, 102580, 62816, 44480, 33209.2, 26629.2, 23684.4,
                       20932.8, 20035.2, 24202.4, 39956.8, 53236, 43016, 32613.2, 44496, 50104, 14400.8,
                       3200, 1506, 942, 610, 442, 368, 319.6, 294, 277.6, 276, 290.0])
BANDS = ((615.0, 25.0), (545.0, 30.0), (460.0, 25.0))  # R, G, B camera bands (centre, sigma) in nm


def unit(v) -> np.ndarray:
    v = np.asarray(v, dtype=np.float64)
    return v / np.linalg.norm(v)


def haemoglobin_vector(ref_od_540: float = 0.8) -> np.ndarray:
    """Unit RGB OD vector of oxy-haemoglobin from Prahl's table (see the module docstring)."""
    od = PRAHL_HBO2 / PRAHL_HBO2[PRAHL_NM == 540][0] * ref_od_540
    out = []
    for centre, sigma in BANDS:
        w = np.exp(-0.5 * ((PRAHL_NM - centre) / sigma) ** 2)
        out.append(-math.log10(float((w * 10.0 ** -od).sum() / w.sum())))
    return unit(out)


HB = haemoglobin_vector()
DYES = {"blue": unit((0.82, 0.55, 0.12)), "green": unit((0.78, 0.22, 0.62)),
        "black": unit((0.60, 0.57, 0.56)), "red": unit((0.06, 0.78, 0.62)),
        "violet": unit((0.42, 0.86, 0.30))}
NEUTRAL = unit((1.0, 1.0, 1.0))
DUST = unit((0.45, 0.58, 0.68))  # brownish specks: a little more blue absorbed than red


def turned(v, degrees: float, axis_angle: float) -> np.ndarray:
    """``v`` turned by ``degrees`` towards a direction perpendicular to it (chosen by ``axis_angle``),
    kept non-negative."""
    v = unit(v)
    a = unit(np.cross(v, (0.0, 0.0, 1.0)))
    b = np.cross(v, a)
    d = math.cos(axis_angle) * a + math.sin(axis_angle) * b
    t = math.radians(degrees)
    return unit(np.clip(math.cos(t) * v + math.sin(t) * d, 0.005, None))


def glass_light(p: dict, h: int, w: int) -> np.ndarray:
    """Noise-free light of bare glass per pixel (H, W, 3): the planned colour times a gentle uneven
    illumination (a linear ramp and a vignette); draw() multiplies in a coverslip edge's step."""
    yy, xx = np.mgrid[0:h, 0:w].astype(np.float32)
    u, v = xx / w - 0.5, yy / h - 0.5
    ill = p["illumination"]
    gain = 1.0 + ill["ramp"] * (math.cos(ill["ramp_angle"]) * u + math.sin(ill["ramp_angle"]) * v) * 2
    gain -= ill["vignette"] * (u * u + v * v) * 2
    return gain[..., None] * np.asarray(p["glass"], np.float32)[None, None, :]


def to_light(od: np.ndarray, s: int) -> np.ndarray:
    """Mean transmission 10**-OD over each s x s block of subpixels: (H*s, W*s, 3) -> (H, W, 3)."""
    t = np.exp(od * np.float32(-math.log(10.0)))
    hs, ws = od.shape[:2]
    return t.reshape(hs // s, s, ws // s, s, 3).mean(axis=(1, 3), dtype=np.float32)


def blur_patches(t: np.ndarray, patches: list) -> np.ndarray:
    """Out-of-focus patches: inside each soft ellipse the transmission is replaced by a blurred copy."""
    out = t.copy()
    h, w = t.shape[:2]
    for cy, cx, ry, rx, angle, sigma in patches:
        m = np.zeros((h, w), np.float32)
        cv2.ellipse(m, (int(cx), int(cy)), (int(rx), int(ry)), float(angle), 0, 360, 1.0, -1)
        m = cv2.GaussianBlur(m, (0, 0), max(1.0, rx / 4))[..., None]
        out = out * (1 - m) + cv2.GaussianBlur(t, (0, 0), sigma) * m
    return out


def sensor(light: np.ndarray, sigma: float, rng) -> np.ndarray:
    """Shot-like noise (growing with the light) plus read noise, rounded to 8 bits."""
    sd = sigma * np.sqrt(np.clip(light, 1, None) / 240.0) + 0.3
    noisy = light + rng.standard_normal(light.shape, dtype=np.float32) * sd
    return np.clip(np.rint(noisy), 0, 255).astype(np.uint8)


def jpeg(rgb: np.ndarray, quality: int, subsample: bool) -> np.ndarray:
    """JPEG-code an RGB uint8 image (with 4:2:0 chroma subsampling or without) and decode it."""
    factor = cv2.IMWRITE_JPEG_SAMPLING_FACTOR_420 if subsample else cv2.IMWRITE_JPEG_SAMPLING_FACTOR_444
    ok, buf = cv2.imencode(".jpg", rgb[..., ::-1], [cv2.IMWRITE_JPEG_QUALITY, int(quality),
                                                     cv2.IMWRITE_JPEG_SAMPLING_FACTOR, factor])
    assert ok, "JPEG coding failed"
    return np.ascontiguousarray(cv2.imdecode(buf, cv2.IMREAD_COLOR)[..., ::-1])
