"""Synthetic H&E images built from the Beer–Lambert law (ground truth constructed here)."""

from __future__ import annotations

import numpy as np

# Ruifrok & Johnston (2001), Anal Quant Cytol Histol 23:291-299 (also skimage.color.rgb_from_hed)
RJ_H = np.array([0.65, 0.70, 0.29])
RJ_E = np.array([0.07, 0.99, 0.11])
RJ_DAB = np.array([0.27, 0.57, 0.78])


def unit(v):
    v = np.asarray(v, dtype=np.float64)
    return v / np.linalg.norm(v, axis=-1, keepdims=True)


def angle_deg(u, v) -> float:
    return float(np.degrees(np.arccos(np.clip(np.dot(unit(u), unit(v)), -1.0, 1.0))))


def render(stains, conc, *, quantize=True, glass=255.0):
    """RGB of concentrations ``conc`` (..., 2) under unit stains (2, 3): I = I0*10^(-C S).

    ``glass`` is the incident light I0 (scalar or per channel), Beer–Lambert law.
    """
    od = np.asarray(conc, np.float64) @ np.asarray(stains, np.float64)
    rgb = np.asarray(glass, np.float64) * 10.0 ** (-od)
    return np.clip(np.rint(rgb), 0, 255).astype(np.uint8) if quantize else rgb


def random_stain_mixtures(rng, n=40_000):
    """A random stain pair near Ruifrok & Johnston (2001) H and E (perturbed up to ~10 degrees) and
    ``n`` concentration pairs: the first tenth pure hematoxylin, the next tenth pure eosin, the
    rest mixtures. Returns ``(stains, conc)``; the ground truth of stain-recovery tests."""
    stains = unit(np.stack([RJ_H, RJ_E]) + rng.normal(0, 0.08, (2, 3)).clip(-0.06, 0.06))
    conc = rng.uniform(0.1, 1.2, (n, 2))
    conc[: n // 10, 1] = 0
    conc[n // 10 : n // 5, 0] = 0
    return stains, conc


def synthetic_concentrations(rng, *, shape=(128, 128), scale=(1.0, 1.0), background=0.3, pure=0.1):
    """Random H and E concentrations (H, W, 2): some glass (both 0), some pure-stain pixels."""
    h, w = shape
    n = h * w
    conc = rng.gamma(shape=2.0, scale=0.35, size=(n, 2)) * np.asarray(scale)
    kind = rng.random(n)
    conc[kind < pure, 1] = 0.0  # pure hematoxylin
    conc[(kind >= pure) & (kind < 2 * pure), 0] = 0.0  # pure eosin
    conc[kind > 1.0 - background] = 0.0  # glass
    return conc.reshape(h, w, 2)


def synthetic_tissue(rng, stains, *, shape=(128, 128), scale=(1.0, 1.0), background=0.3,
                     pure=0.1):
    """A tissue-like image: random H and E concentrations, some glass, some pure stains.

    Ground truth: every tissue pixel is a Beer–Lambert mixture of ``stains`` (2, 3).
    """
    conc = synthetic_concentrations(rng, shape=shape, scale=scale, background=background, pure=pure)
    return render(unit(stains), conc)


# Two invented sites: "site-north" stains close to Ruifrok & Johnston; "site-south" has a bluer
# hematoxylin, a more orange eosin and different staining intensities.
NORTH_STAINS = unit(np.stack([RJ_H, RJ_E]))
SOUTH_STAINS = unit(np.stack([[0.55, 0.75, 0.38], [0.02, 0.90, 0.30]]))
NORTH_SCALE = (1.0, 1.0)
SOUTH_SCALE = (0.6, 1.5)


def site_image(seed, site, shape=(128, 128)):
    """Synthetic tissue of one invented site (ground truth: its stains and scales above)."""
    stains, scale = {"north": (NORTH_STAINS, NORTH_SCALE), "south": (SOUTH_STAINS, SOUTH_SCALE)}[site]
    return synthetic_tissue(np.random.default_rng(seed), stains, shape=shape, scale=scale)


# Glass colours of the demo's two invented sites (RGB of blank glass, the incident light I0).
NORTH_GLASS = np.array([238.0, 236.0, 240.0])
SOUTH_GLASS = np.array([232.0, 234.0, 226.0])


def mean_lab(rgb, mask=None):
    """Mean CIELAB colour of the masked pixels (reference: skimage.color.rgb2lab)."""
    from skimage.color import rgb2lab

    lab = rgb2lab(rgb)
    return lab[mask].mean(axis=0) if mask is not None else lab.reshape(-1, 3).mean(axis=0)
