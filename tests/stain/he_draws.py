"""Seeded draws of Beer–Lambert H&E tissue with a known truth, as a scanner would record it.

Each draw is a small field of tissue at a random resolution (0.24-0.5 µm/px) that, like real
H&E, holds near-pure hematoxylin pixels (dense nuclei, little eosin over them), near-pure eosin
pixels (stroma with a trace of hematoxylin), mixtures (cytoplasm around nuclei) and blank glass.
It is rendered by the Beer–Lambert law, ``RGB = glass * 10**-(c_H h + c_E e)``, at four times the
resolution and area-averaged in intensity (what optics and a sensor do), with sensor noise; then
recorded like a scanner: optionally encoded into a wide-gamut device RGB with an ICC profile
(LittleCMS through Pillow ImageCms), JPEG-compressed at quality 70-95, and read back (the profile
applied by LittleCMS again, as ``tile-out --colour-profile apply`` does).

The truth of a draw: its stain vectors (Ruifrok & Johnston 2001 hematoxylin and eosin, each
rotated by up to 8 degrees in a random direction) and the 99th percentile of the true
concentrations over the tissue pixels (optical-density norm >= 0.15 against the glass, Macenko
et al. 2009), both constructed here, independently of the estimator under test.

References
----------
Ruifrok AC, Johnston DA (2001). Quantification of histochemical staining by color
deconvolution. Analytical and Quantitative Cytology and Histology 23(4):291-299.
Macenko M, Niethammer M, Marron JS, et al. (2009). A method for normalizing histology slides for
quantitative analysis. IEEE ISBI, 1107-1110.
"""

from __future__ import annotations

import io
from dataclasses import dataclass

import numpy as np

from .synthetic import RJ_E, RJ_H, unit

#: Super-sampling factor of the rendering (intensities averaged over SUPER x SUPER sub-pixels).
SUPER = 4


@dataclass
class Draw:
    """One draw: the recorded image and its truth."""

    rgb: np.ndarray  # (H, W, 3) uint8, as read back (sRGB)
    stains: np.ndarray  # (2, 3) true unit stain vectors, hematoxylin first
    maxima: np.ndarray  # (2,) 99th percentile of the true concentrations over tissue pixels
    glass: np.ndarray  # (3,) true glass colour (sRGB, 0..255)
    background: np.ndarray  # (H, W) bool, blank glass by construction
    params: dict


def rotate(v, degrees, rng):
    """``v`` rotated by ``degrees`` towards a random direction perpendicular to it (redrawn until
    every component stays positive: a stain absorbs some light in every channel)."""
    v = unit(v)
    a = np.deg2rad(degrees)
    while True:
        w = rng.normal(size=3)
        w -= np.dot(w, v) * v
        out = unit(np.cos(a) * v + np.sin(a) * unit(w))
        if np.all(out > 0.01):
            return out


def _blobs(rng, shape, count, radius_px, value_range):
    """A field of filled ellipses (nuclei) with random values, and their union mask."""
    import cv2

    field = np.zeros(shape, np.float32)
    h, w = shape
    for _ in range(count):
        r = rng.uniform(0.7, 1.3) * radius_px
        cv2.ellipse(field, (int(rng.integers(0, w)), int(rng.integers(0, h))),
                    (max(1, int(r)), max(1, int(r * rng.uniform(0.6, 0.95)))), float(rng.uniform(0, 180)), 0, 360,
                    float(rng.uniform(*value_range)), -1)
    return field


def _smooth(rng, shape, cells, lo, hi):
    import cv2

    h, w = shape
    base = rng.random((max(2, h // cells), max(2, w // cells))).astype(np.float32)
    return lo + (hi - lo) * np.clip(cv2.resize(base, (w, h), interpolation=cv2.INTER_CUBIC), 0, 1)


def concentrations(rng, shape, mpp):
    """True hematoxylin and eosin concentration fields (2, H, W) at SUPER x resolution, and glass.

    Stroma: eosin 0.25-0.75 with a trace of hematoxylin (near-pure eosin). Nuclei (3-4.5 µm
    radius): hematoxylin 0.55-1.1; dense ones hold almost no eosin (near-pure hematoxylin), the
    others sit in cytoplasm (eosin 0.15-0.4 under them). About a fifth of the field is glass.
    """
    sub = mpp / SUPER
    h, w = shape
    eosin = _smooth(rng, shape, int(40 / sub) or 1, 0.25, 0.75)
    hema = _smooth(rng, shape, int(20 / sub) or 1, 0.0, 0.04)
    r_px = rng.uniform(3.0, 4.5) / sub
    density = (h * w) * sub * sub / 150.0  # one nucleus in ~150 µm²
    dense = _blobs(rng, shape, int(density * 0.5), r_px, (0.55, 1.1))
    loose = _blobs(rng, shape, int(density * 0.5), r_px * 1.2, (0.4, 0.8))
    cytoplasm = _blobs(rng, shape, int(density * 0.3), r_px * 2.5, (0.15, 0.4))
    hema = np.maximum(hema, np.maximum(dense, loose))
    in_dense = dense > 0
    eosin = np.where(in_dense, eosin * 0.05, np.where(cytoplasm > 0, np.maximum(cytoplasm, eosin * 0.6), eosin))
    field = _smooth(rng, shape, int(30 / sub) or 1, 0, 1)
    glass = field < np.percentile(field, 20.0)  # a fifth of the field is blank glass
    conc = np.stack([hema, eosin]).astype(np.float32)
    conc[:, glass] = 0.0
    return conc, glass


def _area_mean(a, k):
    h, w = a.shape[0] // k * k, a.shape[1] // k * k
    a = a[:h, :w]
    return a.reshape(h // k, k, w // k, k, *a.shape[2:]).mean(axis=(1, 3))


def _jpeg(rgb, quality, subsampling):
    from PIL import Image

    buf = io.BytesIO()
    Image.fromarray(rgb).save(buf, "JPEG", quality=int(quality), subsampling=int(subsampling))
    return np.asarray(Image.open(io.BytesIO(buf.getvalue())).convert("RGB"))


def _cms(rgb, source, target):
    from PIL import Image, ImageCms

    transform = ImageCms.buildTransform(source, target, "RGB", "RGB",
                                        renderingIntent=ImageCms.Intent.RELATIVE_COLORIMETRIC)
    return np.asarray(ImageCms.applyTransform(Image.fromarray(np.ascontiguousarray(rgb)), transform))


def wide_gamut_profile():
    """An ICC profile of a wide-gamut device RGB (the demo's invented scanner-B: primaries beyond
    sRGB's, gamma 1.8), as ImageCms profiles (device, sRGB)."""
    from PIL import ImageCms

    from tilewright.demo.icc import SCANNER_B, matrix_trc_profile

    return ImageCms.ImageCmsProfile(io.BytesIO(matrix_trc_profile(**SCANNER_B))), ImageCms.createProfile("sRGB")


def draw(seed: int, *, side: int = 384, max_rotation: float = 8.0, strength=(0.5, 1.6), **fixed) -> Draw:
    """One seeded draw (see the module notes); ``fixed`` overrides drawn values (``quality``,
    ``subsampling``, ``profile``, ``mpp``) with the rest of the draw unchanged."""
    rng = np.random.default_rng([seed, 27])
    mpp = float(rng.uniform(0.24, 0.5))
    stains = np.stack([rotate(RJ_H, rng.uniform(0, max_rotation), rng), rotate(RJ_E, rng.uniform(0, max_rotation), rng)])
    scale = rng.uniform(*strength, size=2)
    base = rng.uniform(225.0, 250.0)
    glass = np.clip(base + rng.uniform(-5.0, 5.0, 3), 200.0, 255.0)
    quality = int(rng.integers(70, 96))
    subsampling = int(rng.choice([0, 2]))
    profile = bool(rng.random() < 0.5)
    mpp = fixed.get("mpp", mpp)
    quality, subsampling, profile = (fixed.get(k, v) for k, v in (("quality", quality), ("subsampling", subsampling),
                                                                     ("profile", profile)))
    conc, glass_mask = concentrations(rng, (side * SUPER, side * SUPER), mpp)
    conc *= scale[:, None, None].astype(np.float32)
    od = np.tensordot(conc, stains.astype(np.float32), axes=(0, 0))  # (H, W, 3)
    fine = glass.astype(np.float32) * np.power(np.float32(10.0), -od)
    linear = _area_mean(fine, SUPER) + rng.normal(0, 1.5, (side, side, 3))
    srgb = np.clip(np.rint(linear), 0, 255).astype(np.uint8)
    if quality is None:
        recorded = srgb
    elif profile:
        device, standard = wide_gamut_profile()
        recorded = _cms(_jpeg(_cms(srgb, standard, device), quality, subsampling), device, standard)
    else:
        recorded = _jpeg(srgb, quality, subsampling)
    true_conc = np.moveaxis(_area_mean(np.moveaxis(conc, 0, -1), SUPER), -1, 0)  # (2, side, side)
    background = _area_mean(glass_mask.astype(np.float32), SUPER) == 1.0
    from tilewright.stain.tissue_pixels import tissue_mask

    tissue = tissue_mask(recorded, glass=glass)
    maxima = np.percentile(true_conc[:, tissue], 99.0, axis=1)
    params = dict(seed=seed, mpp=round(mpp, 4), strength=np.round(scale, 2).tolist(), glass=np.round(glass, 1).tolist(),
                  quality=quality, subsampling=subsampling, profile=profile)
    return Draw(recorded, stains, maxima, glass, background, params)
