"""Per-slide colour, stain and quality metrics over tissue pixels.

Metric names, in table order (``METRICS``):

- ``rgb_r_mean``, ``rgb_g_mean``, ``rgb_b_mean``: channel means, 0..255.
- ``hsv_h_mean`` (circular mean hue, degrees), ``hsv_s_mean``, ``hsv_v_mean`` (0..1).
- ``lab_l_mean``, ``lab_a_mean``, ``lab_b_mean``, ``lab_l_std``, ``lab_a_std``, ``lab_b_std``,
  ``lab_l_p05``, ``lab_l_p95``: CIELAB (D65, skimage.color.rgb2lab) mean, standard deviation and
  5th / 95th lightness percentiles.
- ``brightness`` (mean BT.601 luma, 0..255) and ``contrast`` (RMS contrast: standard deviation
  of luma / 255, Peli 1990).
- ``od_mean``: mean optical density over channels (Beer–Lambert, Ruifrok & Johnston 2001).
- ``h_polar_deg``, ``h_azimuth_deg``, ``e_polar_deg``, ``e_azimuth_deg``, ``he_angle_deg``:
  Macenko stain vectors in spherical angles about the grey axis (1, 1, 1)/sqrt(3): *polar* is
  the angle from that axis (how chromatic the stain is), *azimuth* the signed rotation about it
  relative to the Ruifrok & Johnston (2001) vector of the same stain (a stain hue shift);
  ``he_angle_deg`` is the angle between the two vectors.
- ``h_max_conc``, ``e_max_conc``: 99th percentile of the stain concentrations (Macenko 2009).
- ``background_l``, ``background_a``, ``background_b``: CIELAB mean of non-tissue pixels.
- ``sharpness``: variance of the Laplacian over tissue pixels (Pech-Pacheco et al. 2000).
- ``tissue_fraction``: share of the slide thumbnail under the tissue mask; ``n_tiles``: tiles
  stored for the slide.

The first group (:data:`COLOUR_METRICS`) describes colour and stain and is all the colour
clusters are built from. Tissue amount and sharpness (:data:`QUALITY_METRICS`) are reported in
their own section: a biopsy and a resection differ in tissue amount, not in colour, and must not
look like a colour effect.

Which pixels are tissue is decided by the same rule stain estimation uses
(:mod:`tilewright.stain.tissue_pixels`). Stain metrics are NaN when the stain vectors cannot be
estimated (too little tissue).

References
----------
Macenko M, Niethammer M, Marron JS, et al. (2009). A method for normalizing histology slides for
quantitative analysis. IEEE International Symposium on Biomedical Imaging, 1107-1110.
Ruifrok AC, Johnston DA (2001). Quantification of histochemical staining by color deconvolution.
Analytical and Quantitative Cytology and Histology 23(4):291-299.
Peli E (1990). Contrast in complex images. Journal of the Optical Society of America A
7(10):2032-2040.
Pech-Pacheco JL, Cristóbal G, Chamorro-Martínez J, Fernández-Valdivia J (2000). Diatom
autofocusing in brightfield microscopy: a comparative study. Proceedings of the 15th
International Conference on Pattern Recognition, vol. 3, 314-317.
"""

from __future__ import annotations

import numpy as np

from tilewright.tissue.plane import RUIFROK_E, RUIFROK_H

__all__ = ["METRICS", "COLOUR_METRICS", "QUALITY_METRICS", "slide_metrics", "stain_angles"]

#: Colour and stain metrics: the colour clusters are built from these only.
COLOUR_METRICS = (
    "rgb_r_mean", "rgb_g_mean", "rgb_b_mean",
    "hsv_h_mean", "hsv_s_mean", "hsv_v_mean",
    "lab_l_mean", "lab_a_mean", "lab_b_mean", "lab_l_std", "lab_a_std", "lab_b_std",
    "lab_l_p05", "lab_l_p95",
    "brightness", "contrast", "od_mean",
    "h_polar_deg", "h_azimuth_deg", "e_polar_deg", "e_azimuth_deg", "he_angle_deg",
    "h_max_conc", "e_max_conc",
    "background_l", "background_a", "background_b",
)  # fmt: skip
#: Tissue amount and sharpness: reported in their own section, never clustered.
QUALITY_METRICS = ("tissue_fraction", "n_tiles", "sharpness")
METRICS = COLOUR_METRICS + QUALITY_METRICS

GREY_AXIS = np.ones(3) / np.sqrt(3.0)
#: Fewer tissue pixels than this give NaN colour metrics.
MIN_PIXELS = 16


def slide_metrics(pixels) -> dict:
    """Every metric of ``METRICS`` for one slide.

    Parameters
    ----------
    pixels : tilewright.audit.source.SlidePixels
        Tissue and background pixels, grey images with tissue masks, tissue fraction.

    Returns
    -------
    dict
        Metric name -> float (NaN where it cannot be computed).
    """
    out = dict.fromkeys(METRICS, float("nan"))
    out["tissue_fraction"] = float(pixels.tissue_fraction)
    out["n_tiles"] = float(pixels.n_tiles)
    out.update(_sharpness(pixels.gray))
    out.update(_lab_means(pixels.background, prefix="background_"))
    tissue = np.asarray(pixels.tissue, dtype=np.uint8).reshape(-1, 3)
    if tissue.shape[0] < MIN_PIXELS:
        return out
    out.update(_colour(tissue))
    out.update(_stain(tissue, getattr(pixels, "tiles", None), getattr(pixels, "glass", None)))
    return out


def _colour(tissue: np.ndarray) -> dict:
    from skimage import color

    rgb = tissue.astype(np.float64)
    out = {f"rgb_{c}_mean": float(rgb[:, i].mean()) for i, c in enumerate("rgb")}
    hsv = color.rgb2hsv(tissue[:, None, :])[:, 0, :]
    angle = hsv[:, 0] * 2 * np.pi
    hue = np.degrees(np.arctan2(np.sin(angle).mean(), np.cos(angle).mean())) % 360.0
    out.update(hsv_h_mean=float(hue), hsv_s_mean=float(hsv[:, 1].mean()), hsv_v_mean=float(hsv[:, 2].mean()))
    lab = color.rgb2lab(tissue[:, None, :])[:, 0, :]
    for i, c in enumerate("lab"):
        out[f"lab_{c}_mean"] = float(lab[:, i].mean())
        out[f"lab_{c}_std"] = float(lab[:, i].std())
    out["lab_l_p05"], out["lab_l_p95"] = (float(v) for v in np.percentile(lab[:, 0], [5, 95]))
    luma = rgb @ np.array([0.299, 0.587, 0.114])
    out["brightness"] = float(luma.mean())
    out["contrast"] = float(luma.std() / 255.0)
    return out


def _stain(tissue: np.ndarray, tiles=None, glass=None) -> dict:
    """Mean OD of the tissue pixels, and the Macenko estimate of the sampled tiles when there are
    some (read the way the normalizer reads a slide's sample, against the slide's glass), else of
    the tissue pixels."""
    from tilewright.errors import StainEstimationError
    from tilewright.stain.density import rgb_to_od
    from tilewright.stain.macenko import estimate_stain_profile

    out = {"od_mean": float(rgb_to_od(tissue).mean(dtype=np.float64))}
    try:
        profile = (estimate_stain_profile(tiles, glass=glass) if tiles is not None and len(tiles)
                   else estimate_stain_profile(tissue[:, None, :]))
    except StainEstimationError:
        return out
    out.update(stain_angles(profile.stain_matrix))
    out["h_max_conc"], out["e_max_conc"] = (float(v) for v in profile.max_concentrations)
    return out


def stain_angles(stains) -> dict:
    """Spherical angles of a (2, 3) hematoxylin/eosin stain matrix about the grey axis.

    Parameters
    ----------
    stains : array_like, shape (2, 3)
        Optical-density vectors, hematoxylin first.

    Returns
    -------
    dict
        ``h_polar_deg, h_azimuth_deg, e_polar_deg, e_azimuth_deg, he_angle_deg`` (see the module
        notes). The Ruifrok & Johnston (2001) vectors themselves have azimuth 0.
    """
    stains = np.asarray(stains, dtype=np.float64)
    stains = stains / np.linalg.norm(stains, axis=1, keepdims=True)
    out = {}
    for name, vector, reference in (("h", stains[0], RUIFROK_H), ("e", stains[1], RUIFROK_E)):
        out[f"{name}_polar_deg"] = _angle(vector, GREY_AXIS)
        out[f"{name}_azimuth_deg"] = _azimuth(vector, reference)  # unit vectors
    out["he_angle_deg"] = _angle(stains[0], stains[1])
    return out


def _angle(u: np.ndarray, v: np.ndarray) -> float:
    return float(np.degrees(np.arccos(np.clip(np.dot(u, v), -1.0, 1.0))))


def _azimuth(vector: np.ndarray, reference: np.ndarray) -> float:
    """Signed rotation (degrees) about the grey axis from ``reference`` to ``vector``."""
    p = vector - np.dot(vector, GREY_AXIS) * GREY_AXIS
    q = reference - np.dot(reference, GREY_AXIS) * GREY_AXIS
    if np.linalg.norm(p) < 1e-9:
        return float("nan")
    return float(np.degrees(np.arctan2(np.dot(GREY_AXIS, np.cross(q, p)), np.dot(q, p))))


def _lab_means(pixels: np.ndarray, prefix: str) -> dict:
    from skimage import color

    pixels = np.asarray(pixels, dtype=np.uint8).reshape(-1, 3)
    if pixels.shape[0] < MIN_PIXELS:
        return {}
    lab = color.rgb2lab(pixels[:, None, :])[:, 0, :]
    return {f"{prefix}{c}": float(lab[:, i].mean()) for i, c in enumerate("lab")}


def _sharpness(gray_and_masks) -> dict:
    import cv2

    values = []
    for gray, mask in gray_and_masks:
        if not np.any(mask):
            continue
        laplacian = cv2.Laplacian(np.asarray(gray, np.float32), cv2.CV_32F, ksize=1)
        values.append(laplacian[mask].astype(np.float64))
    if not values:
        return {}
    pooled = np.concatenate(values)
    return {"sharpness": float(pooled.var())} if pooled.size >= MIN_PIXELS else {}
