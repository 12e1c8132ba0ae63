"""The optical densities a stain estimate reads: clipped pixels left out, compression noise averaged.

Macenko's estimate takes the extreme angles and the 99th-percentile concentrations of the tissue
pixels' optical densities (OD). Both are tail statistics, and the tails of a scanned slide are
where its recording damages pixels most:

- **Clipped channels.** Strongly stained pixels have a channel near 0 (green of dense nuclei
  and of strong eosin). JPEG's chroma errors, and a wide-gamut ICC profile converted to sRGB,
  push such channels to 0 or a few codes: their OD (``log10(glass / 1)`` = 2.4) is not the
  stain's. Measured on Beer–Lambert draws (``tests/stain/he_draws.py``) they bent the estimated
  hematoxylin vector by up to 21 degrees and doubled or tripled the eosin maximum; on the demo's
  scanner-B slides they put eosin's maximum at 2.2 where the truth is 0.76. A pixel with any
  channel below :data:`FLOOR` (0 or 1: clipped) is therefore left out of the estimate (it still
  counts as tissue). A higher floor (4, 6 or 8) changed nothing on those draws once intensities
  are averaged (below), and would leave out the darkest real nuclei of strongly stained slides.
- **Noise in dark channels.** JPEG's errors of a few codes are small in bright channels and
  large in OD in dark ones, and ``-log`` of a noisy dark value is biased upwards (Jensen's
  inequality): dark stroma reads as more eosin than it holds, stretching the eosin tail by
  10-30 %. Averaging *intensities* over a small window before taking the logarithm removes both
  the noise and the bias (averaging ODs would keep the bias).

What each part of the estimate reads (our choice, measured on those draws; see DESIGN.md,
"Measured limits"): the stain directions and the eosin maximum read intensities averaged over
:data:`WINDOW` x :data:`WINDOW` pixels (broad structures: stroma, and a plane that needs many
clean pixels); the hematoxylin maximum reads single pixels (nuclei are a few µm across, and any
averaging erodes their peaks). Without a spatial layout (a pixel list, shape ``(K, 3)`` or
``(K, 1, 3)``), or where neighbouring pixels are unrelated (more than :data:`UNRELATED` of the
tissue's intensity variance left between a pixel and its window mean: about 0.03-0.06 on scanned
tissue with JPEG noise, 0.97 on pixels drawn independently), single pixels are read throughout.

Tissue is decided on the pixels as they are (OD norm >= ``beta``, :mod:`.tissue_pixels`).
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

from .density import check_glass, check_rgb, glass_od_lut

__all__ = ["EstimateOD", "estimate_od", "FLOOR", "WINDOW"]

#: A pixel with any channel below this (0..255) is left out of the estimate (clipped or swamped
#: by compression noise; see the module notes).
FLOOR = 2
#: Side (pixels) of the window intensities are averaged over for the stain directions and the
#: eosin maximum.
WINDOW = 5
#: Neighbouring pixels count as unrelated (no averaging) when the pixel-to-window-mean residual
#: holds more than this share of the tissue pixels' intensity variance.
UNRELATED = 0.5
#: Rows are processed in bands of about this many pixels (bounded float32 temporaries).
_BAND_PIXELS = 1 << 20


class EstimateOD(NamedTuple):
    """Optical densities of the usable tissue pixels of an image, two ways.

    Attributes
    ----------
    single : ndarray, float32, (K, 3)
        Each usable tissue pixel's own OD (relative to the glass).
    averaged : ndarray, float32, (K, 3)
        The same pixels' OD of the intensity averaged over a :data:`WINDOW` window of usable
        pixels (equal to ``single`` for a pixel list).
    clipped : ndarray, float32, (C, 3)
        The OD of the tissue pixels left out because a channel is below :data:`FLOOR`, as read
        (only their rank is used, see :func:`tilewright.stain.estimate.sample_maxima`).
    n_tissue : int
        Tissue pixels examined, usable or not.
    """

    single: np.ndarray
    averaged: np.ndarray
    clipped: np.ndarray
    n_tissue: int

    @property
    def clipped_share(self) -> float:
        """Share of the tissue pixels left out (0 when there is no tissue)."""
        return self.clipped.shape[0] / self.n_tissue if self.n_tissue else 0.0


def _glass_and_lut(glass):
    arr = check_glass(glass)
    return (np.full(3, 255.0, np.float32) if arr is None else arr.astype(np.float32)), glass_od_lut(arr)


def _images(arr: np.ndarray):
    """The input as a list of (H, W, 3) images, or None for a pixel list (no spatial layout)."""
    if arr.ndim < 3 or arr.shape[-3] < WINDOW or arr.shape[-2] < WINDOW:
        return None
    return arr.reshape((-1,) + arr.shape[-3:])


def _window_mean(band: np.ndarray, usable: np.ndarray) -> np.ndarray:
    """Intensity averaged over the WINDOW window of usable pixels, per pixel (float32)."""
    import cv2

    weight = usable.astype(np.float32)
    total = cv2.boxFilter(band.astype(np.float32) * weight[..., None], -1, (WINDOW, WINDOW), normalize=False,
                          borderType=cv2.BORDER_REFLECT)
    count = cv2.boxFilter(weight, -1, (WINDOW, WINDOW), normalize=False, borderType=cv2.BORDER_REFLECT)
    return total / np.maximum(count, 1.0)[..., None]


def _unrelated(pixels: np.ndarray, mean: np.ndarray) -> bool:
    """Whether neighbouring pixels are unrelated: the residual of the window mean holds more than
    :data:`UNRELATED` of the pixels' intensity variance (both (K, 3))."""
    values = pixels.astype(np.float32)
    if not len(values):  # no usable pixel in any window: nothing to compare (and no empty-mean warning)
        return False
    spread = float(np.square(values - values.mean(axis=0)).sum())
    return spread > 0 and float(np.square(values - mean).sum()) > UNRELATED * spread


def estimate_od(rgb, *, beta: float, glass=None, max_pixels: int = 0) -> EstimateOD:
    """The optical densities a stain estimate reads (see the module notes).

    Parameters
    ----------
    rgb : array_like, uint8, shape (..., 3)
        An image, a batch of images (tiles), or a pixel list.
    beta : float
        OD-norm threshold of tissue pixels.
    glass : array_like (3,), optional
        RGB of blank glass (the incident light); default pure white.
    max_pixels : int
        When positive and the input has more pixels, every ``k``-th pixel (in memory order) is
        kept so that at most this many are examined; the window averages still see every pixel.

    Returns
    -------
    EstimateOD
    """
    arr = check_rgb(rgb)
    glass_rgb, lut = _glass_and_lut(glass)
    limit = np.float32(beta) ** 2
    total = arr.size // 3
    step = -(-total // int(max_pixels)) if max_pixels and total > max_pixels else 1
    singles, averages, clipped, n_tissue = [], [], [], 0
    images = _images(arr)
    if images is None:
        bands = [(arr.reshape(-1, 3), None, 0)]
    else:
        h, w = images.shape[1:3]
        rows = max(WINDOW, _BAND_PIXELS // max(w, 1))
        bands = []
        for t, image in enumerate(images):
            for y in range(0, h, rows):
                bands.append((image, (y, min(y + rows, h)), (t * h + y) * w))
    for source, span, offset in bands:
        if span is None:
            flat = source
            pick = np.arange(0, flat.shape[0], step) if step > 1 else None
        else:
            y0, y1 = span
            lo, hi = max(0, y0 - WINDOW // 2), min(source.shape[0], y1 + WINDOW // 2)
            band = source[lo:hi]
            flat = source[y0:y1].reshape(-1, 3)
            first = (-offset) % step
            pick = np.arange(first, flat.shape[0], step) if step > 1 else None
        pixels = flat if pick is None else flat[pick]
        od = lut[pixels, np.arange(3)]
        tissue = np.einsum("ij,ij->i", od, od) >= limit
        usable = pixels.min(axis=1) >= FLOOR
        keep = tissue & usable
        n_tissue += int(np.count_nonzero(tissue))
        clipped.append(od[tissue & ~usable])
        singles.append(od[keep])
        if span is None:
            averages.append(od[keep])
            continue
        mean = _window_mean(band, band.min(axis=-1) >= FLOOR)[y0 - lo : y1 - lo].reshape(-1, 3)
        mean = (mean if pick is None else mean[pick])[keep]
        if _unrelated(pixels[keep], mean):
            averages.append(od[keep])
            continue
        averages.append(np.maximum(np.log10(glass_rgb / np.maximum(mean, 1.0)), 0.0).astype(np.float32))
    def joined(parts):
        return np.concatenate(parts).astype(np.float32, copy=False) if parts else np.zeros((0, 3), np.float32)

    return EstimateOD(joined(singles), joined(averages), joined(clipped), n_tissue)
