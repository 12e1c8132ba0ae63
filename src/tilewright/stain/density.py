"""Optical density (Beer–Lambert law) for 8-bit RGB images.

Transmitted light falls exponentially with the amount of stain it crosses, so the optical
density ``OD = -log10(I / I0)`` of each colour channel is additive over stains (Beer–Lambert
law). ``I0`` is the incident light, i.e. the colour of blank glass. By default ``I0 = 255`` and
``I`` is clipped to at least 1 so that a black pixel has a finite OD of ``log10(255) ≈ 2.41``
and white glass has an OD of exactly 0.

Real glass is seldom pure white: a scanner's light source, white balance or mounting medium
tints it (for example RGB (232, 234, 226)). With ``I0 = 255`` every tissue pixel then carries
the glass's own optical density ``log10(255 / I0)`` on top of its stains, which biases stain
estimates. Every function here therefore takes an optional ``glass`` (per-channel ``I0``):
``OD = max(0, log10(I0 / max(I, 1)))``, clipped at 0 so that pixels brighter than the glass
(noise) count as glass. Estimating ``I0`` as the colour of the brightest background of the slide
is common practice (see :func:`tilewright.tissue.density.glass_colour`).

The forward conversion is a 256-entry float32 lookup table (one column per channel when a glass
colour is given; no logarithm per pixel); the inverse is ``I = I0 * 10**(-OD)`` rounded and
saturated to ``0..255``.

References
----------
Ruifrok AC, Johnston DA (2001). Quantification of histochemical staining by color
deconvolution. Analytical and Quantitative Cytology and Histology 23(4):291-299.

Macenko M, Niethammer M, Marron JS, Borland D, Woosley JT, Guan X, Schmitt C, Thomas NE (2009).
A method for normalizing histology slides for quantitative analysis. IEEE International
Symposium on Biomedical Imaging (ISBI), 1107-1110.
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np

__all__ = [
    "WHITE",
    "MAX_OD",
    "od_lut",
    "glass_od_lut",
    "check_glass",
    "glass_key",
    "glass_od",
    "estimate_glass",
    "slide_glass",
    "rgb_to_od",
    "od_to_rgb",
    "check_rgb",
]

#: Transmitted intensity of blank glass (I0 in the Beer–Lambert law).
WHITE = 255
#: Background colours darker than this (mean of R, G, B) are not glass (labels, scan borders).
MIN_GLASS_LEVEL = 180.0
#: Background pixels closer than this (pixels) to tissue are not used for the glass colour.
GLASS_EDGE_PX = 2
#: Optical density of a pixel with intensity 0 (clipped to 1 before the logarithm).
MAX_OD = float(np.log10(255.0))

LN10 = float(np.log(10.0))


@lru_cache(maxsize=1)
def od_lut() -> np.ndarray:
    """Float32 lookup table mapping each 8-bit intensity to its optical density.

    Returns
    -------
    ndarray, shape (256,), float32, read-only
        ``lut[i] = -log10(max(i, 1) / 255)``; ``lut[255] == 0`` and ``lut[0] == lut[1]``.
    """
    levels = np.maximum(np.arange(256, dtype=np.float64), 1.0)
    lut = (-np.log10(levels / WHITE)).astype(np.float32)
    lut[WHITE] = 0.0
    lut.flags.writeable = False
    return lut


def check_glass(glass) -> np.ndarray | None:
    """Validate a glass colour (the incident light ``I0`` of the Beer–Lambert law).

    Parameters
    ----------
    glass : array_like of 3 numbers in [1, 255], or None
        RGB of blank glass on the 0..255 scale (for example from
        :func:`tilewright.tissue.density.glass_colour`). None means pure white (255, 255, 255).

    Returns
    -------
    ndarray (3,) float64, or None
        None for None and for pure white (so both take the exact default path).

    Raises
    ------
    ValueError
        When the value is not three finite numbers between 1 and 255.
    """
    if glass is None:
        return None
    try:
        arr = np.asarray(glass, dtype=np.float64).reshape(-1)
    except (TypeError, ValueError):
        raise ValueError(f"glass must be three numbers (RGB of blank glass, 0..255), got {glass!r}") from None
    if arr.shape != (3,) or not np.all(np.isfinite(arr)) or np.any(arr < 1) or np.any(arr > WHITE):
        raise ValueError(
            f"glass must be three finite numbers between 1 and 255 (RGB of blank glass), got {glass!r}"
        )
    if np.all(arr == WHITE):
        return None
    return arr


def glass_key(glass) -> tuple | None:
    """Hashable form of a validated glass colour (None for white), for caches and dictionaries."""
    arr = check_glass(glass)
    return None if arr is None else tuple(round(float(v), 4) for v in arr)


def glass_od(glass) -> np.ndarray:
    """Optical density of the glass itself measured against pure white, ``log10(255 / I0)``.

    Parameters
    ----------
    glass : array_like (3,) or None
        Glass colour; None is white (OD 0).

    Returns
    -------
    ndarray (3,) float64
    """
    arr = check_glass(glass)
    return np.zeros(3) if arr is None else np.log10(WHITE / arr)


@lru_cache(maxsize=64)
def _glass_od_lut(key: tuple) -> np.ndarray:
    levels = np.maximum(np.arange(256, dtype=np.float64), 1.0)[:, None]
    lut = np.log10(np.asarray(key, np.float64)[None, :] / levels)
    lut = np.maximum(lut, 0.0).astype(np.float32)
    lut.flags.writeable = False
    return lut


def glass_od_lut(glass) -> np.ndarray:
    """Per-channel lookup table of optical density relative to a glass colour.

    Parameters
    ----------
    glass : array_like (3,) or None
        The incident light ``I0`` per channel (None: white).

    Returns
    -------
    ndarray, shape (256, 3), float32, read-only
        ``lut[i, c] = max(0, log10(glass[c] / max(i, 1)))``. With ``glass=None`` every column
        equals :func:`od_lut`.

    References
    ----------
    Ruifrok AC, Johnston DA (2001). Quantification of histochemical staining by color
    deconvolution. Analytical and Quantitative Cytology and Histology 23(4):291-299.
    """
    key = glass_key(glass)
    if key is None:
        return _white_lut3()
    return _glass_od_lut(key)


@lru_cache(maxsize=1)
def _white_lut3() -> np.ndarray:
    lut = np.repeat(od_lut()[:, None], 3, axis=1)
    lut.flags.writeable = False
    return lut


def estimate_glass(rgb, background=None, *, edge: int = GLASS_EDGE_PX) -> np.ndarray | None:
    """Estimate the colour of blank glass (the incident light ``I0``) from a slide thumbnail.

    With a background mask, the estimate is the per-channel median of the background pixels
    that are at least ``edge`` pixels from tissue and brighter than a mean level of 180 (which
    leaves out labels and dark scan borders). Pixels at tissue edges are avoided because lossy
    compression and resampling overshoot there, leaving some brighter than the glass itself, so
    that the brightest pixels of a slide are not always its glass. Without a mask (or with too
    few usable background pixels, fewer than 50 or 0.5 %), the median of the brightest 2 % of
    pixels is used (:func:`tilewright.tissue.density.glass_colour`). Estimating ``I0`` from the
    slide's bright background is common practice.

    Parameters
    ----------
    rgb : array_like, uint8, shape (H, W, 3)
        Slide thumbnail.
    background : array_like of bool, shape (H, W), optional
        True where there is no tissue (and no ink or debris), e.g. ``~mask.array`` of a
        :class:`~tilewright.tissue.mask.TissueMask`. Cropped to the common shape with ``rgb``.
    edge : int
        Background pixels within this distance of a non-background pixel are not used.

    Returns
    -------
    ndarray (3,) float64, or None
        The glass colour, or None when it is white (or no glass is found, e.g. a slide covered
        edge to edge, which is then treated as white glass).

    References
    ----------
    Ruifrok AC, Johnston DA (2001). Quantification of histochemical staining by color
    deconvolution. Analytical and Quantitative Cytology and Histology 23(4):291-299.
    """
    arr = check_rgb(rgb)
    pixels = None
    if background is not None:
        bg = np.asarray(background, dtype=bool)
        h, w = min(bg.shape[0], arr.shape[0]), min(bg.shape[1], arr.shape[1])
        bg, img = bg[:h, :w], arr[:h, :w]
        if edge > 0 and bg.any():
            from scipy import ndimage

            bg = ndimage.binary_erosion(bg, iterations=int(edge), border_value=1)
        candidates = img[bg]
        candidates = candidates[candidates.astype(np.int32).sum(axis=1) >= 3 * MIN_GLASS_LEVEL]
        if len(candidates) >= max(50, 0.005 * h * w):
            pixels = candidates
    if pixels is None:
        from tilewright.tissue.density import glass_colour

        colour = glass_colour(arr)
    else:
        colour = np.median(pixels.astype(np.float64), axis=0)
    if colour.mean() < MIN_GLASS_LEVEL:
        return None
    return check_glass(np.clip(colour, 1, WHITE))


def check_rgb(rgb, name: str = "rgb") -> np.ndarray:
    """Return ``rgb`` as a uint8 ndarray whose last axis has 3 channels.

    Parameters
    ----------
    rgb : array_like
        Image or batch of images, shape ``(..., 3)``, dtype uint8.
    name : str
        Argument name used in error messages.

    Returns
    -------
    ndarray
        The same data (no copy when already a uint8 ndarray).

    Raises
    ------
    TypeError
        When the dtype is not uint8.
    ValueError
        When the last axis does not hold 3 channels.
    """
    arr = np.asarray(rgb)
    if arr.dtype != np.uint8:
        raise TypeError(
            f"{name} must be uint8 RGB (0..255), got dtype {arr.dtype}; "
            "convert with skimage.util.img_as_ubyte first"
        )
    if arr.ndim < 2 or arr.shape[-1] != 3:
        raise ValueError(f"{name} must have shape (..., 3) (RGB last), got {arr.shape}")
    return arr


def rgb_to_od(rgb, *, glass=None) -> np.ndarray:
    """Optical density of every channel of an 8-bit RGB image.

    Parameters
    ----------
    rgb : array_like, uint8, shape (..., 3)
        Image or batch of images.
    glass : array_like (3,), optional
        RGB of blank glass (the incident light ``I0``); default pure white.

    Returns
    -------
    ndarray, float32, same shape
        ``max(0, log10(I0 / max(I, 1)))`` per channel; with the default ``I0 = 255``: 0 for
        255, ``MAX_OD`` for 0 and 1.

    Raises
    ------
    TypeError, ValueError
        For a non-uint8 or non-RGB input, or an invalid glass colour.

    References
    ----------
    Ruifrok AC, Johnston DA (2001). Quantification of histochemical staining by color
    deconvolution. Analytical and Quantitative Cytology and Histology 23(4):291-299.

    Examples
    --------
    >>> import numpy as np
    >>> rgb_to_od(np.array([[255, 0, 25]], np.uint8)).round(3)
    array([[0.   , 2.407, 1.009]], dtype=float32)
    """
    arr = check_rgb(rgb)
    if check_glass(glass) is None:
        return od_lut()[arr]
    return glass_od_lut(glass)[arr, np.arange(3)]


def od_to_rgb(od, *, glass=None) -> np.ndarray:
    """8-bit RGB intensities of given optical densities (inverse of :func:`rgb_to_od`).

    Parameters
    ----------
    od : array_like, float, shape (..., 3)
        Optical densities; negative values (brighter than glass) saturate and very large ones
        go to 0. NaN counts as OD 0 (glass).
    glass : array_like (3,), optional
        Incident light ``I0`` to render with; default pure white (255).

    Returns
    -------
    ndarray, uint8, same shape
        ``round(I0 * 10**(-OD))`` saturated to ``0..255``.
    """
    od = np.asarray(od, dtype=np.float32)
    arr = check_glass(glass)
    i0 = np.float32(WHITE) if arr is None else arr.astype(np.float32)
    intensity = np.exp(np.nan_to_num(od, nan=0.0) * np.float32(-LN10)) * i0
    np.clip(intensity, 0, WHITE, out=intensity)
    return np.rint(intensity).astype(np.uint8)


def slide_glass(thumbnail, mask) -> list[float] | None:
    """RGB of a slide's blank glass (the incident light of the Beer–Lambert law), or None for
    white: the median colour of the thumbnail's background away from tissue, marker ink and dark
    debris (:func:`estimate_glass`; common practice).

    Parameters
    ----------
    thumbnail : ndarray (H, W, 3) uint8
        The slide's thumbnail, at the mask's µm/px.
    mask : TissueMask
        Its tissue mask (:func:`tilewright.tissue.mask.tissue_mask`); when the mask saw no glass,
        its fallback colour is the answer.
    """
    params = getattr(mask, "params", None) or {}
    if params.get("glass_found") is False:  # no glass on the slide: the mask's fallback colour
        glass = [float(v) for v in params.get("glass", (255.0, 255.0, 255.0))]
        return None if min(glass) >= 255.0 else glass
    background = ~np.asarray(mask.array, bool)
    for extra in ("ink", "dark"):
        if getattr(mask, extra, None) is not None:
            background &= ~np.asarray(getattr(mask, extra), bool)
    glass = estimate_glass(thumbnail, background)
    return None if glass is None else [float(v) for v in glass]
