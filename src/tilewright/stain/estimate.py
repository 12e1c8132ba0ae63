"""Macenko stain-vector estimation for H&E (and hematoxylin-DAB) images.

Optical density is taken relative to the glass colour when one is given (``glass=``): with a
tinted glass every pixel's OD against pure white carries the glass's own OD, which shifts the
tissue's OD cloud away from the origin and tilts the stain plane and its extreme angles. The
Beer–Lambert law with the glass as incident light removes that offset exactly.

References
----------
Macenko M, Niethammer M, Marron JS, Borland D, Woosley JT, Guan X, Schmitt C, Thomas NE (2009).
A method for normalizing histology slides for quantitative analysis. IEEE International
Symposium on Biomedical Imaging (ISBI), 1107-1110.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

from ..errors import StainEstimationError
from ..tissue.plane import RUIFROK_E, RUIFROK_H
from .estimate_od import FLOOR, EstimateOD, estimate_od
from .tissue_pixels import DEFAULT_BETA, MAX_STAT_PIXELS

__all__ = [
    "StainProfile",
    "estimate_stains",
    "estimate_stain_profile",
    "max_concentrations",
    "sample_maxima",
    "MIN_TISSUE_PIXELS",
    "implausible",
    "uncertain",
    "RUIFROK_STAINS",
]

#: Fewer tissue pixels than this and the stain plane is not trusted.
MIN_TISSUE_PIXELS = 500
#: Two estimated stain vectors closer than this (degrees) mean a single-stain image.
MIN_STAIN_ANGLE_DEG = 2.0
#: Ruifrok & Johnston (2001) hematoxylin and eosin optical-density vectors (unit rows).
RUIFROK_STAINS = np.stack([RUIFROK_H, RUIFROK_E])
#: Plausibility of a slide's own estimate (see :func:`implausible`). Stain pairs measured on real
#: H&E slides lie 20-45 degrees apart (the Ruifrok & Johnston pair 39; a widely used Macenko
#: reference pair, (0.5626, 0.7201, 0.4062) and (0.2159, 0.8012, 0.5581), 22).
PLAUSIBLE_MIN_ANGLE_DEG = 18.0
#: Each stain lies within this many degrees of its Ruifrok & Johnston vector (that reference
#: pair: 8 and 29 degrees).
PLAUSIBLE_MAX_DEVIATION_DEG = 40.0
#: Hematoxylin's share of red optical density exceeds eosin's by at least this (hematoxylin is
#: the bluer stain; Ruifrok & Johnston: 0.39 vs 0.06).
PLAUSIBLE_RED_SHARE_GAP = 0.1
#: Fewest tissue pixels and the range of the 99th-percentile concentrations (OD units).
PLAUSIBLE_MIN_PIXELS = 2000
PLAUSIBLE_MAX_RANGE = (0.1, 4.0)
#: A share of clipped tissue pixels from which an estimate is flagged uncertain (:func:`uncertain`).
UNCERTAIN_CLIPPED = 0.01
#: Rows of the covariance are accumulated in float64 this many pixels at a time.
_CHUNK = 1 << 16


class StainProfile(NamedTuple):
    """Stain vectors and robust maximum concentrations of one image (or slide sample).

    Attributes
    ----------
    stain_matrix : ndarray, float32, shape (2, 3)
        Unit optical-density rows, hematoxylin first.
    max_concentrations : ndarray, float32, shape (2,)
        99th percentile of each stain's concentration over the tissue pixels.
    n_tissue_pixels : int
        How many tissue pixels the estimate examined.
    clipped_share : float
        Share of those left out as clipped (a channel at 0 or 1,
        :mod:`tilewright.stain.estimate_od`); see :func:`uncertain`.
    """

    stain_matrix: np.ndarray
    max_concentrations: np.ndarray
    n_tissue_pixels: int
    clipped_share: float = 0.0


def _covariance(od: np.ndarray) -> np.ndarray:
    """3x3 covariance of float32 OD rows, accumulated chunkwise in float64."""
    n = od.shape[0]
    total = np.zeros(3)
    gram = np.zeros((3, 3))
    for start in range(0, n, _CHUNK):
        block = od[start : start + _CHUNK].astype(np.float64)
        total += block.sum(axis=0)
        gram += block.T @ block
    mean = total / n
    return gram / n - np.outer(mean, mean)


def _angle_between(u: np.ndarray, v: np.ndarray) -> float:
    cos = float(np.dot(u, v) / (np.linalg.norm(u) * np.linalg.norm(v)))
    return float(np.degrees(np.arccos(np.clip(cos, -1.0, 1.0))))


def _stain_vectors(od: np.ndarray, alpha: float) -> np.ndarray:
    cov = _covariance(od)
    _, vectors = np.linalg.eigh(cov)  # ascending eigenvalues
    plane = vectors[:, [2, 1]]  # two leading eigenvectors, (3, 2)
    # Orient each axis into positive optical density so that angles are comparable.
    plane *= np.where(plane.sum(axis=0) < 0, -1.0, 1.0)
    projected = od @ plane.astype(np.float32)  # (K, 2)
    angles = np.arctan2(projected[:, 1], projected[:, 0])
    lo, hi = np.percentile(angles, [alpha, 100.0 - alpha])
    v_lo = plane @ np.array([np.cos(lo), np.sin(lo)])
    v_hi = plane @ np.array([np.cos(hi), np.sin(hi)])
    stains = np.stack([v_lo, v_hi])
    stains *= np.where(stains.sum(axis=1, keepdims=True) < 0, -1.0, 1.0)
    stains /= np.linalg.norm(stains, axis=1, keepdims=True)
    # Hematoxylin absorbs red light strongly, eosin hardly at all (Ruifrok & Johnston 2001:
    # H red OD 0.65, E 0.07; DAB 0.27): the row with the larger red OD is hematoxylin.
    if stains[0, 0] < stains[1, 0]:
        stains = stains[::-1]
    return stains


def _validate(beta: float, alpha: float) -> None:
    if not (np.isfinite(beta) and beta >= 0):
        raise ValueError(f"beta must be a finite OD threshold >= 0, got {beta}")
    if not (0 <= alpha < 50):
        raise ValueError(f"alpha must be a percentile in [0, 50), got {alpha}")


def _tissue_for_estimate(rgb, beta, max_pixels, min_pixels, glass=None) -> EstimateOD:
    sample = estimate_od(rgb, beta=beta, max_pixels=max_pixels, glass=glass)
    if sample.single.shape[0] < min_pixels:
        n_clipped = sample.clipped.shape[0]
        clipped = f" ({n_clipped} more have a channel below {FLOOR}, too dark to read)" if n_clipped else ""
        raise StainEstimationError(
            f"only {sample.single.shape[0]} usable tissue pixels (optical density >= {beta}){clipped}; at "
            f"least {min_pixels} are needed to estimate stain vectors. Give a region with more "
            "stained tissue, or lower beta."
        )
    return sample


def _checked_vectors(od: np.ndarray, alpha: float) -> np.ndarray:
    stains = _stain_vectors(od, alpha)
    if not np.all(np.isfinite(stains)):
        raise StainEstimationError("stain vectors are not finite (degenerate colours)")
    angle = _angle_between(stains[0], stains[1])
    if angle < MIN_STAIN_ANGLE_DEG:
        raise StainEstimationError(
            f"the two stain vectors are only {angle:.2f} degrees apart: the tissue shows a "
            "single stain colour, so two stains cannot be separated. Use a region with both "
            "hematoxylin and eosin."
        )
    return stains


def estimate_stains(
    rgb,
    *,
    beta: float = DEFAULT_BETA,
    alpha: float = 1.0,
    min_tissue_pixels: int = MIN_TISSUE_PIXELS,
    max_pixels: int = MAX_STAT_PIXELS,
    glass=None,
) -> np.ndarray:
    """Estimate the two stain vectors of an H&E (or H-DAB) image by Macenko's method.

    The tissue pixels' optical densities (norm ``>= beta``) are projected onto the plane of the
    two leading eigenvectors of their covariance; the stain vectors are the directions at the
    ``alpha`` and ``100 - alpha`` percentiles of the angle within that plane.

    Parameters
    ----------
    rgb : array_like, uint8, shape (..., 3)
        Image or batch of images; all pixels are pooled.
    beta : float, default 0.15
        OD threshold separating tissue from glass (Macenko et al. 2009).
    alpha : float, default 1.0
        Percentile (in percent) of the extreme angles (Macenko et al. 2009).
    min_tissue_pixels : int, default 500
        Fewer tissue pixels raise :class:`~tilewright.errors.StainEstimationError`.
    max_pixels : int
        Larger inputs are examined on an evenly strided subset of this many pixels.
    glass : array_like (3,), optional
        RGB of the slide's blank glass, the incident light ``I0`` of the Beer–Lambert law
        (``OD = max(0, log10(I0 / I))``). Default pure white (255, 255, 255). Estimating it from
        the brightest background of the slide is common practice, e.g. with
        :func:`tilewright.tissue.density.glass_colour` on a thumbnail.

    Returns
    -------
    ndarray, float64, shape (2, 3)
        Unit OD rows (R, G, B absorbance), hematoxylin first. The order rule: the row with the
        larger red optical density is hematoxylin, since hematoxylin absorbs red light strongly
        and eosin hardly at all (Ruifrok & Johnston 2001).

    Raises
    ------
    StainEstimationError
        Too few tissue pixels, or a single stain colour (vectors under 2 degrees apart).
    TypeError, ValueError
        For a non-uint8 / non-RGB image, out-of-range ``beta`` / ``alpha``, or an invalid
        glass colour.

    References
    ----------
    Macenko M, Niethammer M, Marron JS, Borland D, Woosley JT, Guan X, Schmitt C, Thomas NE
    (2009). A method for normalizing histology slides for quantitative analysis. IEEE
    International Symposium on Biomedical Imaging (ISBI), 1107-1110.

    Ruifrok AC, Johnston DA (2001). Quantification of histochemical staining by color
    deconvolution. Analytical and Quantitative Cytology and Histology 23(4):291-299.

    Examples
    --------
    >>> from skimage import data
    >>> stains = estimate_stains(data.immunohistochemistry())
    >>> stains.shape
    (2, 3)
    """
    _validate(beta, alpha)
    sample = _tissue_for_estimate(rgb, beta, max_pixels, min_tissue_pixels, glass)
    return _checked_vectors(sample.averaged, alpha)


def max_concentrations(od: np.ndarray, stain_matrix, percentile: float = 99.0) -> np.ndarray:
    """Robust maximum concentration of each stain over given OD rows.

    Parameters
    ----------
    od : ndarray, shape (K, 3)
        Optical densities (tissue pixels).
    stain_matrix : array_like, shape (2, 3)
        Unit stain rows.
    percentile : float
        Percentile taken as the maximum (99 in Macenko et al. 2009).

    Returns
    -------
    ndarray, float32, shape (2,)
    """
    unmix = np.linalg.pinv(np.asarray(stain_matrix, np.float64)).astype(np.float32)  # (3, 2)
    conc = np.asarray(od, np.float32) @ unmix
    return np.percentile(conc, percentile, axis=0).astype(np.float32)


def sample_maxima(sample: EstimateOD, stain_matrix, percentile: float = 99.0) -> np.ndarray:
    """Robust maximum concentration of each stain over an estimate's usable pixels.

    The first stain's (hematoxylin: nuclei, a few µm) from single pixels, the second's (eosin:
    stroma) from window-averaged intensities, which remove the upward bias compression noise gives
    dark channels (:mod:`tilewright.stain.estimate_od`). Pixels left out as clipped do not count:
    counted by the rank their damaged values give them, they put the eosin maximum 10-45 % too
    high on the JPEG and wide-gamut draws of ``tests/stain/he_draws.py``.

    Parameters
    ----------
    sample : EstimateOD
    stain_matrix : array_like, shape (2, 3)
    percentile : float

    Returns
    -------
    ndarray, float32, shape (2,)
    """
    first = max_concentrations(sample.single, stain_matrix, percentile)
    second = max_concentrations(sample.averaged, stain_matrix, percentile)
    return np.array([first[0], second[1]], np.float32)


def estimate_stain_profile(
    rgb,
    *,
    beta: float = DEFAULT_BETA,
    alpha: float = 1.0,
    percentile: float = 99.0,
    min_tissue_pixels: int = MIN_TISSUE_PIXELS,
    max_pixels: int = MAX_STAT_PIXELS,
    glass=None,
) -> StainProfile:
    """Stain vectors and 99th-percentile stain concentrations of an image.

    This is the estimate a Macenko normalizer needs for both its target (``fit``) and its
    source (``fit_source`` or the image being transformed). Concentrations come from
    least-squares unmixing of the tissue pixels only, so the amount of glass in an image does
    not change its maxima.

    Parameters
    ----------
    rgb : array_like, uint8, shape (..., 3)
        Image or batch of images; all pixels are pooled.
    beta, alpha, min_tissue_pixels, max_pixels, glass
        As in :func:`estimate_stains`; the concentrations are unmixed from OD relative to
        ``glass`` too.
    percentile : float, default 99
        Percentile of each stain's concentration used as its maximum (Macenko et al. 2009).

    Returns
    -------
    StainProfile

    Raises
    ------
    StainEstimationError
        As in :func:`estimate_stains`, or when a maximum concentration is not positive.

    References
    ----------
    Macenko M, Niethammer M, Marron JS, Borland D, Woosley JT, Guan X, Schmitt C, Thomas NE
    (2009). A method for normalizing histology slides for quantitative analysis. IEEE
    International Symposium on Biomedical Imaging (ISBI), 1107-1110.
    """
    _validate(beta, alpha)
    sample = _tissue_for_estimate(rgb, beta, max_pixels, min_tissue_pixels, glass)
    stains = _checked_vectors(sample.averaged, alpha)
    maxima = sample_maxima(sample, stains, percentile)
    if not np.all(np.isfinite(maxima)) or np.any(maxima <= 0):
        raise StainEstimationError(
            f"stain concentrations have no positive maximum ({maxima.tolist()}): the image "
            "does not look like a two-stain tissue image."
        )
    return StainProfile(stains.astype(np.float32), maxima, int(sample.n_tissue), float(sample.clipped_share))


def implausible(profile: StainProfile) -> str:
    """Why a Macenko estimate is not a plausible H&E estimate ("" when it is).

    Checks: the stains at least :data:`PLAUSIBLE_MIN_ANGLE_DEG` apart; hematoxylin the bluer
    stain (its share of red optical density larger than eosin's by
    :data:`PLAUSIBLE_RED_SHARE_GAP`); each stain within :data:`PLAUSIBLE_MAX_DEVIATION_DEG` of its
    Ruifrok & Johnston (2001) vector; at least :data:`PLAUSIBLE_MIN_PIXELS` tissue pixels (when the
    count is known, i.e. not 0); 99th-percentile concentrations inside
    :data:`PLAUSIBLE_MAX_RANGE`. A failed estimate (for example a small biopsy with few nuclei,
    whose two "stains" are both eosin-like) otherwise unmixes with a nearly singular matrix and
    blows noise and JPEG blocks up into black nuclei.

    Parameters
    ----------
    profile : StainProfile

    Returns
    -------
    str
        The first reason found, or "".

    References
    ----------
    Ruifrok AC, Johnston DA (2001). Quantification of histochemical staining by color
    deconvolution. Analytical and Quantitative Cytology and Histology 23(4):291-299.
    """
    stains = np.asarray(profile.stain_matrix, np.float64)
    maxima = np.asarray(profile.max_concentrations, np.float64)
    if not (np.all(np.isfinite(stains)) and np.all(np.isfinite(maxima))):
        return "the estimate is not finite"
    angle = _angle_between(stains[0], stains[1])
    if angle < PLAUSIBLE_MIN_ANGLE_DEG:
        return f"the two stains are only {angle:.0f} degrees apart"
    share = stains[:, 0] / np.maximum(stains.sum(axis=1), 1e-9)
    if share[0] < share[1] + PLAUSIBLE_RED_SHARE_GAP:
        return "hematoxylin is not bluer than eosin"
    for name, row, ref in zip(("hematoxylin", "eosin"), stains, RUIFROK_STAINS):
        off = _angle_between(row, ref)
        if off > PLAUSIBLE_MAX_DEVIATION_DEG:
            return f"the {name} vector is {off:.0f} degrees from any H&E {name}"
    if 0 < profile.n_tissue_pixels < PLAUSIBLE_MIN_PIXELS:
        return f"only {profile.n_tissue_pixels} tissue pixels"
    lo, hi = PLAUSIBLE_MAX_RANGE
    if np.any(maxima < lo) or np.any(maxima > hi):
        return f"concentration maxima {np.round(maxima, 2).tolist()} outside {lo}-{hi}"
    return ""


def uncertain(profile: StainProfile) -> str:
    """Why a plausible estimate may still be off by more than 3 degrees or 10 % ("" when not).

    Flagged when at least :data:`UNCERTAIN_CLIPPED` (1 %) of the tissue pixels were clipped (a
    channel at 0 or 1): the recording damaged the darkest pixels (JPEG chroma errors, a wide-gamut
    profile converted to sRGB), the estimate leaves them out, and what is left may not hold the
    stain's extremes. Measured on 200 seeded draws of ``tests/stain/he_draws.py``: 54 flagged, 4
    of them off (eosin maximum 10-15 % high, a vector 3.0 degrees away); 146 not flagged, 2 off by
    a little (an eosin maximum 11 % high, a vector 3.1 degrees away).

    Parameters
    ----------
    profile : StainProfile

    Returns
    -------
    str
    """
    share = float(getattr(profile, "clipped_share", 0.0) or 0.0)
    if share >= UNCERTAIN_CLIPPED:
        return (f"{100 * share:.1f} % of the tissue pixels are clipped (a channel at 0 or 1), left out of the "
                "estimate: its vectors or maxima may be off by more than 3 degrees or 10 %")
    return ""
