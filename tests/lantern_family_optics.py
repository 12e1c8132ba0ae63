"""The lantern family's optics: stain vectors turned from Ruifrok & Johnston (2001), glass colour
and uneven light, Beer-Lambert transmission (light x 10^-OD, ODs add), area-averaging the
subpixel render to the thumbnail (a pyramid level), sensor noise, 8-bit rounding and JPEG."""

from __future__ import annotations

import cv2
import numpy as np

# Ruifrok & Johnston (2001) haematoxylin and eosin RGB OD vectors, normalized.
H_RJ = np.array([0.65, 0.70, 0.29]) / np.linalg.norm([0.65, 0.70, 0.29])
E_RJ = np.array([0.07, 0.99, 0.11]) / np.linalg.norm([0.07, 0.99, 0.11])
# how much of ``tint_depth`` each channel (R, G, B) loses
TINT = {"white": (0, 0, 0), "yellow": (0, 0.15, 1), "blue": (1, 0.1, 0), "grey": (0.6, 0.6, 0.6)}


def turned(rng, v, degrees):
    """``v`` turned by ``degrees`` towards a random perpendicular, kept non-negative, unit length."""
    u = rng.normal(size=3)
    u -= u.dot(v) * v
    u /= np.linalg.norm(u)
    a = np.radians(degrees)
    w = np.clip(np.cos(a) * v + np.sin(a) * u, 0.005, None)
    return w / np.linalg.norm(w)


def glass(plan):
    """Glass colour (0-255 per channel): near white, tinted yellow (less blue), blue (less red)
    or grey by ``tint_depth``."""
    g = np.full(3, 255.0 * plan["glass_level"])
    return g * (1 - plan["tint_depth"] * np.array(TINT[plan["tint"]]))


def illumination(rng, plan, h, w):
    """Uneven light at thumbnail size (mean about 1): a tilted plane, plus a soft band (a scan
    stripe) and/or a shadow creeping in from a corner."""
    yy, xx = np.mgrid[0:h, 0:w].astype(np.float32)
    a = rng.uniform(0, 2 * np.pi)
    t = ((xx / w - 0.5) * np.cos(a) + (yy / h - 0.5) * np.sin(a)) * plan["light_tilt"]
    f = 1 + t
    if "band" in plan["light"]:
        pos, width = rng.uniform(0.1, 0.9), rng.uniform(0.04, 0.2)
        along = xx / w if rng.random() < 0.5 else yy / h
        f *= 1 + rng.uniform(-0.06, 0.05) * np.exp(-0.5 * ((along - pos) / width) ** 2)
    if "shadow" in plan["light"]:
        cy, cx = rng.choice([0, 1]) * h, rng.choice([0, 1]) * w
        d = np.hypot((yy - cy) / h, (xx - cx) / w)
        f *= 1 - rng.uniform(0.08, 0.3) * np.exp(-((d / rng.uniform(0.15, 0.45)) ** 2))
    return f.astype(np.float32)


def area_mean(a, s):
    """Mean over s x s blocks (a pyramid level read from the subpixel render)."""
    h, w = a.shape[0] // s, a.shape[1] // s
    return cv2.resize(np.ascontiguousarray(a[:h * s, :w * s], np.float32), (w, h), interpolation=cv2.INTER_AREA)


def finish(rng, clean, plan):
    """Sensor noise (shot + read), 8-bit rounding, then JPEG at the plan's quality (if any)."""
    sig = np.sqrt(plan["noise_gain"] * clean + plan["noise_floor"] ** 2)
    rgb = np.clip(np.round(clean + rng.normal(size=clean.shape) * sig), 0, 255).astype(np.uint8)
    q = plan["jpeg_quality"]
    if q is not None:
        ok, buf = cv2.imencode(".jpg", rgb[..., ::-1], [cv2.IMWRITE_JPEG_QUALITY, int(q)])
        assert ok
        rgb = cv2.imdecode(buf, cv2.IMREAD_COLOR)[..., ::-1].copy()
    return rgb
