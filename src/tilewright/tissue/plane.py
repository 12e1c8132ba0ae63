"""The H&E plane of a slide: the plane of optical densities its two stains can make.

By the Beer–Lambert law the optical density of a pixel stained by hematoxylin and eosin is a
non-negative mix of the two stain vectors, so every H&E pixel lies in the plane they span; marker
ink on the cover glass adds its own optical density and lifts a pixel out of the plane. The
plane starts at the Ruifrok & Johnston (2001) vectors and is refitted to the slide's own pixels
that are confidently H&E (the two leading singular vectors of their optical densities, as in
Macenko et al. 2009, trimmed so the pixels farthest from the plane do not pull it). A fit that is
not plausible (too few pixels, tilted far from the prior, or one that most of its own pixels do
not lie close to) is replaced by the Ruifrok & Johnston plane, and the caller is told.

References
----------
.. [1] A. C. Ruifrok and D. A. Johnston, "Quantification of histochemical staining by color
       deconvolution", Analytical and Quantitative Cytology and Histology 23(4):291-299, 2001.
.. [2] M. Macenko et al., "A method for normalizing histology slides for quantitative analysis",
       IEEE International Symposium on Biomedical Imaging (ISBI), 1107-1110, 2009.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

__all__ = ["RUIFROK_H", "RUIFROK_E", "RUIFROK_DAB", "RUIFROK_PLANE_NORMAL", "PlaneFit", "fit_hne_plane", "plane_basis"]


def _unit(v) -> np.ndarray:
    v = np.asarray(v, dtype=np.float64)
    return v / np.linalg.norm(v)


#: Ruifrok & Johnston (2001) hematoxylin, eosin and DAB optical-density vectors (R, G, B), unit
#: length: Anal Quant Cytol Histol 23:291-299, the values ``skimage.color.hed_from_rgb`` inverts.
#: The one home of these published values (stain estimation, augmentation, the audit and the demo
#: read them from here).
RUIFROK_H = _unit((0.65, 0.70, 0.29))
RUIFROK_E = _unit((0.07, 0.99, 0.11))
RUIFROK_DAB = _unit((0.27, 0.57, 0.78))
#: Unit normal of the plane spanned by the Ruifrok & Johnston (2001) H and E vectors.
RUIFROK_PLANE_NORMAL = _unit(np.cross(RUIFROK_H, RUIFROK_E))


class PlaneFit(NamedTuple):
    """A fitted H&E plane: unit ``normal`` (oriented like the prior), whether the fit was accepted
    (``fitted``; False means the Ruifrok & Johnston plane is used), the number of pixels it used,
    its tilt from the prior in degrees, the fraction of its pixels lying close to it, and
    ``spread``: the robust standard deviation of their distances from it (1.4826 times the
    median absolute distance; NaN when no fit was made), the slide's own scatter about its plane."""

    normal: np.ndarray
    fitted: bool
    n_pixels: int
    tilt_deg: float
    inliers: float
    reason: str = ""
    spread: float = float("nan")


def _tilt(normal) -> float:
    return float(np.degrees(np.arccos(min(1.0, abs(float(np.dot(normal, RUIFROK_PLANE_NORMAL)))))))


def fit_hne_plane(od, *, min_od: float = 0.15, keep: float = 0.8, iterations: int = 4,
                  min_pixels: int = 200, max_tilt_deg: float = 60.0, min_inliers: float = 0.5,
                  inlier_od: float = 0.03, flat: float = 4.0, min_share: float = 0.1) -> PlaneFit:
    """Fit the H&E plane to optical densities of pixels believed to be H&E.

    Pixels with an OD norm below ``min_od`` carry no direction and are not used (Macenko et al.
    2009 use 0.15); neither are pixels that do not absorb green the most (true of hematoxylin,
    eosin and their mixtures) or that are grey and dense (black marker). Starting from the Ruifrok
    & Johnston plane, the ``keep`` fraction of pixels closest to the current plane is refitted
    (the eigenvector of the smallest eigenvalue of their 3 x 3 scatter matrix), ``iterations``
    times (trimmed least squares). Pixels of nearly one colour (a flat stain, or one stain only:
    their spread across that colour is the same in every direction, the middle eigenvalue under
    ``flat`` times the smallest) fix only one direction of the plane; the fit is then the plane
    nearest the prior that holds that direction (the prior turned about the least angle), not a
    plane through noise.

    The fit is accepted only when it is plausible: at least ``min_pixels`` pixels, and at least
    ``min_share`` of all the pixels given (on a faint slide a few dense spots, a marker dot among
    them, would set the plane for all; faint tissue lies close to any H&E plane), a tilt from
    the Ruifrok & Johnston plane of at most ``max_tilt_deg`` (stain pairs measured on real slides
    differ from it by up to about 45 degrees), and at least ``min_inliers`` of the pixels within
    ``inlier_od`` (plus 5 % of their own OD norm) of the plane: a plane pulled by ink lying on
    tissue runs through a smear of ink-and-tissue mixtures that few pixels lie close to.

    Parameters
    ----------
    od : ndarray (..., 3)
        Optical densities (ink and artefacts already removed as far as known).
    min_od, keep, iterations, min_pixels, max_tilt_deg, min_inliers, inlier_od, flat, min_share
        See above.

    Returns
    -------
    PlaneFit

    References
    ----------
    .. [1] A. C. Ruifrok and D. A. Johnston, Anal. Quant. Cytol. Histol. 23(4):291-299, 2001.
    .. [2] M. Macenko et al., ISBI 2009, 1107-1110.
    """
    from .density import black_ink

    x = np.asarray(od).reshape(-1, 3)
    if x.shape[0] > 1_000_000:  # bounded memory whatever the slide size: a strided subsample first
        x = x[:: x.shape[0] // 1_000_000 + 1]
    stained = np.empty(x.shape[0], bool)
    for start in range(0, x.shape[0], 1 << 16):  # float64 only a chunk at a time
        c = x[start:start + (1 << 16)].astype(np.float64)
        norm2 = c[:, 0] * c[:, 0] + c[:, 1] * c[:, 1] + c[:, 2] * c[:, 2]
        stained[start:start + len(c)] = ((norm2 > min_od * min_od) & (c[:, 1] >= c[:, 0])
                                         & (c[:, 1] >= c[:, 2]) & ~black_ink(c))
    idx = np.flatnonzero(stained)
    prior = RUIFROK_PLANE_NORMAL.copy()
    if idx.size < min_pixels:
        return PlaneFit(prior, False, int(idx.size), 0.0, 0.0, f"only {idx.size} stained pixels to fit")
    if idx.size < min_share * x.shape[0]:
        return PlaneFit(prior, False, 0, 0.0, 0.0,  # no fit made: a faint slide, the prior is fine
                        f"only {idx.size / x.shape[0]:.0%} of the tissue is dense enough to fit")
    if idx.size > 200_000:  # a deterministic subsample is plenty for a 3x3 fit
        idx = idx[:: idx.size // 200_000 + 1]
    x = x[idx].astype(np.float64)
    normal = prior
    for _ in range(iterations):
        res = np.abs(x @ normal)
        sub = x[res <= np.quantile(res, keep)]
        if sub.shape[0] < min_pixels:
            break
        # the 3 x 3 scatter summed in one fixed order (a threaded BLAS splits the sum over pixels
        # by its thread count: the same slide gave a plane differing in the last bits, and pixels
        # at a limit flipped between a one-process and a worker-process run)
        vals, vecs = np.linalg.eigh(np.einsum("ij,ik->jk", sub, sub, optimize=False))
        if vals[1] < flat * vals[0]:  # one colour only: the plane nearest the prior that holds it
            d = vecs[:, 2]
            v = prior - (prior @ d) * d
            v /= np.linalg.norm(v)
        else:
            v = vecs[:, 0]
        normal = v if v @ prior >= 0 else -v
    tilt = _tilt(normal)
    norm = np.sqrt((x * x).sum(axis=1))
    distance = np.abs(x @ normal)
    inliers = float(np.mean(distance <= inlier_od + 0.05 * norm))
    spread = 1.4826 * float(np.median(distance))
    if tilt > max_tilt_deg:
        return PlaneFit(prior, False, len(x), tilt, inliers, f"fitted plane tilted {tilt:.0f} degrees from H&E")
    if inliers < min_inliers:
        return PlaneFit(prior, False, len(x), tilt, inliers,
                        f"only {inliers:.0%} of the stained pixels lie on the fitted plane")
    return PlaneFit(normal, True, len(x), tilt, inliers, "", spread)


def plane_basis(normal) -> np.ndarray:
    """A 3 x 3 matrix whose rows are the Ruifrok & Johnston H and E vectors projected onto the
    plane of ``normal`` and the normal itself; ``od @ inv(basis)`` gives each pixel's
    (hematoxylin-like, eosin-like, off-plane) coordinates."""
    n = np.asarray(normal, dtype=np.float64)
    rows = [_unit(v - (v @ n) * n) for v in (RUIFROK_H, RUIFROK_E)]
    return np.stack(rows + [n])
