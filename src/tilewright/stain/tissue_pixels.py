"""Which pixels count as stained tissue: one rule for stain estimation, stain statistics and the
cohort audit.

Stain estimation (Macenko), colour statistics (Reinhard) and the audit's colour metrics must
ignore blank glass, or the near-white background dominates every estimate. The rule, in one place
so every user applies the same one: a pixel is tissue when the Euclidean norm of its
optical-density vector is at least ``beta`` = 0.15.

What comes from where:

- Macenko et al. (2009) remove pixels whose optical density is below a threshold beta = 0.15
  before estimating stain vectors (transparent pixels, which carry no stain information); the
  value 0.15 is theirs.
- How a three-channel optical density is compared with one number is our choice, not the
  paper's: we take the vector's Euclidean norm (rather than requiring every channel, or any
  channel, to reach beta), which keeps faint eosin, which absorbs little red light. Blank glass
  has an OD below about 0.15 (common practice).
- Optical density is measured against the glass colour when one is given (``glass=``, the
  incident light ``I0`` of the Beer–Lambert law; see :mod:`tilewright.stain.density`), so that a
  tinted glass is OD 0 and the tissue's OD is its stains' alone.

API: :func:`tissue_mask` (which pixels) and :func:`tissue_od` (their optical densities and
RGB values), both taking ``beta`` (default :data:`DEFAULT_BETA`) and ``glass``.

References
----------
Macenko M, Niethammer M, Marron JS, Borland D, Woosley JT, Guan X, Schmitt C, Thomas NE (2009).
A method for normalizing histology slides for quantitative analysis. IEEE International
Symposium on Biomedical Imaging (ISBI), 1107-1110.
"""

from __future__ import annotations

import numpy as np

from .density import check_glass, check_rgb, glass_od_lut, od_lut

__all__ = ["DEFAULT_BETA", "MAX_STAT_PIXELS", "COLOUR_PIXELS", "tissue_od", "tissue_mask", "colour_pixels"]

#: OD threshold of Macenko et al. (2009), applied to the OD vector's norm (our reading).
DEFAULT_BETA = 0.15
#: Above this many pixels, statistics use an evenly strided subset (deterministic).
MAX_STAT_PIXELS = 1_000_000


def _channel_luts(glass):
    if check_glass(glass) is None:
        lut = od_lut()
        return lut, lut, lut
    lut3 = glass_od_lut(glass)
    return lut3[:, 0], lut3[:, 1], lut3[:, 2]


def _od_norm_sq(rgb_flat: np.ndarray, glass=None) -> np.ndarray:
    r, g, b = _channel_luts(glass)
    sq = r[rgb_flat[:, 0]] ** 2
    sq += g[rgb_flat[:, 1]] ** 2
    sq += b[rgb_flat[:, 2]] ** 2
    return sq


def tissue_mask(rgb, *, beta: float = DEFAULT_BETA, glass=None) -> np.ndarray:
    """Boolean mask of pixels whose OD vector has norm ``>= beta``.

    Parameters
    ----------
    rgb : array_like, uint8, shape (..., 3)
        Image or batch of images.
    beta : float
        OD threshold (Macenko et al. 2009 use 0.15).
    glass : array_like (3,), optional
        RGB of blank glass, the ``I0`` the OD is measured against (default pure white).

    Returns
    -------
    ndarray of bool, shape ``rgb.shape[:-1]``
    """
    arr = check_rgb(rgb)
    flat = arr.reshape(-1, 3)
    return (_od_norm_sq(flat, glass) >= np.float32(beta) ** 2).reshape(arr.shape[:-1])


def tissue_od(rgb, *, beta: float = DEFAULT_BETA, max_pixels: int = MAX_STAT_PIXELS, glass=None):
    """Optical densities and RGB values of the tissue pixels of an image.

    Parameters
    ----------
    rgb : array_like, uint8, shape (..., 3)
        Image or batch of images (all pixels are pooled).
    beta : float
        OD threshold, see :func:`tissue_mask`.
    max_pixels : int
        When the image has more pixels than this, every ``k``-th pixel is used so that at most
        ``max_pixels`` are examined (deterministic; no random state).
    glass : array_like (3,), optional
        RGB of blank glass, the ``I0`` the OD is measured against (default pure white).

    Returns
    -------
    od : ndarray, float32, shape (K, 3)
        Optical densities of the K tissue pixels (relative to ``glass``).
    rgb : ndarray, uint8, shape (K, 3)
        Their RGB values.
    """
    arr = check_rgb(rgb)
    if beta < 0 or not np.isfinite(beta):
        raise ValueError(f"beta must be a finite OD threshold >= 0, got {beta}")
    flat = arr.reshape(-1, 3)
    if max_pixels and flat.shape[0] > max_pixels:
        step = -(-flat.shape[0] // int(max_pixels))
        flat = flat[::step]
    keep = _od_norm_sq(flat, glass) >= np.float32(beta) ** 2
    pixels = flat[keep]
    if check_glass(glass) is None:
        return od_lut()[pixels], pixels
    return glass_od_lut(glass)[pixels, np.arange(3)], pixels


#: Tissue pixels of a stain sample kept to measure its colour (a slide's, a target's).
COLOUR_PIXELS = 20_000


def colour_pixels(sample: np.ndarray, glass=None, n: int = COLOUR_PIXELS) -> np.ndarray:
    """An evenly strided subset of at most ``n`` of the sample's tissue pixels, (K, 1, 3) uint8."""
    pixels = np.asarray(sample)[tissue_mask(sample, glass=glass)]
    if pixels.shape[0] > n:
        pixels = pixels[np.linspace(0, pixels.shape[0] - 1, n).astype(np.int64)]
    return np.ascontiguousarray(pixels.reshape(-1, 1, 3))
