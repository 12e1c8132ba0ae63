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


def render(stains, conc, *, quantize=True):
    """RGB of concentrations ``conc`` (..., 2) under unit stains (2, 3): I = 255*10^(-C S)."""
    od = np.asarray(conc, np.float64) @ np.asarray(stains, np.float64)
    rgb = 255.0 * 10.0 ** (-od)
    return np.clip(np.rint(rgb), 0, 255).astype(np.uint8) if quantize else rgb


def synthetic_tissue(rng, stains, *, shape=(128, 128), scale=(1.0, 1.0), background=0.3,
                     pure=0.1):
    """A tissue-like image: smooth random H and E concentrations, some glass, some pure stains.

    Ground truth: every tissue pixel is a Beer–Lambert mixture of ``stains`` (2, 3).
    """
    h, w = shape
    n = h * w
    conc = rng.gamma(shape=2.0, scale=0.35, size=(n, 2)) * np.asarray(scale)
    kind = rng.random(n)
    conc[kind < pure, 1] = 0.0  # pure hematoxylin
    conc[(kind >= pure) & (kind < 2 * pure), 0] = 0.0  # pure eosin
    conc[kind > 1.0 - background] = 0.0  # glass
    return render(unit(stains), conc.reshape(h, w, 2))

