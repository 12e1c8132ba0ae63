"""Marker ink and dark debris in optical density: what is on the slide but is not H&E tissue.

Hematoxylin and eosin optical densities lie, by the Beer–Lambert law, in the plane spanned by the
two stain vectors; ink drawn on the cover glass adds its own optical density on top. Blue and green
markers have OD directions well out of that plane, so the signed distance of a pixel's OD from the
plane (its *residual*) measures the ink, whatever tissue lies beneath. The plane starts at the
Ruifrok & Johnston (2001) vectors and is refitted to the slide's own tissue (the two leading
singular vectors of the OD of in-plane pixels, as in Macenko et al. 2009), so a slide stained a
little differently is not mistaken for ink. Black marker is nearly grey and very dense; dark
debris and folds are very dense in any hue.

References
----------
.. [1] A. C. Ruifrok and D. A. Johnston, "Quantification of histochemical staining by color
       deconvolution", Analytical and Quantitative Cytology and Histology 23(4):291-299, 2001.
.. [2] M. Macenko et al., "A method for normalizing histology slides for quantitative analysis",
       IEEE International Symposium on Biomedical Imaging (ISBI), 1107-1110, 2009.
"""

from __future__ import annotations

import numpy as np

from .density import channel_max, channel_mean, channel_min

__all__ = ["RUIFROK_PLANE_NORMAL", "hne_plane_normal", "ink_residual", "black_ink", "dark_debris"]


def _unit(v) -> np.ndarray:
    v = np.asarray(v, dtype=np.float64)
    return v / np.linalg.norm(v)


#: Unit normal of the plane spanned by the Ruifrok & Johnston (2001) H and E OD vectors.
RUIFROK_PLANE_NORMAL = _unit(np.cross(_unit((0.65, 0.70, 0.29)), _unit((0.07, 0.99, 0.11))))


def hne_plane_normal(od: np.ndarray, *, min_od: float = 0.15, keep: float = 0.8,
                     iterations: int = 4, min_pixels: int = 200, max_tilt_deg: float = 60.0) -> np.ndarray:
    """Unit normal of the H&E plane of a slide, fitted to its own stained pixels.

    Only pixels that absorb green the most (true of hematoxylin, eosin and their mixtures, not
    of blue or green marker on glass) and that are not black ink are used. Starting from the
    Ruifrok & Johnston plane, the ``keep`` fraction of pixels closest to the current plane is
    refitted with the two leading right singular vectors of their optical densities (as in
    Macenko et al. 2009), a few times (trimmed least squares), so ink lying on tissue does not
    pull the plane towards itself.

    Parameters
    ----------
    od : ndarray (..., 3)
        Optical density (see :func:`~tilewright.tissue.density.optical_density`).
    min_od : float
        Pixels with a smaller OD norm are not used (transparent pixels carry no direction;
        Macenko et al. 2009 use 0.15).
    keep : float
        Fraction of pixels closest to the plane kept for each refit.
    iterations : int
        Number of refits.
    min_pixels : int
        With fewer usable pixels the Ruifrok & Johnston plane is returned.
    max_tilt_deg : float
        A fitted plane tilted more than this from the Ruifrok & Johnston plane is not H&E (for
        example a slide that is mostly ink); the Ruifrok & Johnston plane is returned instead.

    Returns
    -------
    ndarray (3,)
        Unit normal, oriented like :data:`RUIFROK_PLANE_NORMAL`.

    References
    ----------
    .. [1] A. C. Ruifrok and D. A. Johnston, Anal. Quant. Cytol. Histol. 23(4):291-299, 2001.
    .. [2] M. Macenko et al., ISBI 2009, 1107-1110.
    """
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
    if idx.size < min_pixels:
        return RUIFROK_PLANE_NORMAL.copy()
    if idx.size > 200_000:  # a deterministic subsample is plenty for a 3x3 fit
        idx = idx[:: idx.size // 200_000 + 1]
    x = x[idx].astype(np.float64)
    normal = RUIFROK_PLANE_NORMAL.copy()
    for _ in range(iterations):
        res = np.abs(x @ normal)
        sub = x[res <= np.quantile(res, keep)]
        if sub.shape[0] < min_pixels:
            break
        # the right singular vector of the smallest singular value of ``sub``: the eigenvector of
        # the smallest eigenvalue of its 3 x 3 scatter matrix (no tall SVD needed)
        _, vecs = np.linalg.eigh(sub.T @ sub)
        v = vecs[:, 0]
        normal = v if v @ RUIFROK_PLANE_NORMAL >= 0 else -v
    if np.degrees(np.arccos(min(1.0, abs(float(normal @ RUIFROK_PLANE_NORMAL))))) > max_tilt_deg:
        return RUIFROK_PLANE_NORMAL.copy()
    return normal


def ink_residual(od: np.ndarray, normal=None) -> np.ndarray:
    """Signed OD distance of each pixel from the H&E plane (0 for pure H&E).

    Parameters
    ----------
    od : ndarray (..., 3)
        Optical density.
    normal : array_like (3,), optional
        Plane normal; :func:`hne_plane_normal` of ``od`` when omitted.

    Returns
    -------
    ndarray (...) float32
    """
    od = np.asarray(od, dtype=np.float32)
    if normal is None:
        normal = hne_plane_normal(od)
    return od @ np.asarray(normal, dtype=np.float32)


def black_ink(od: np.ndarray, *, min_od: float = 0.6, max_spread: float = 0.3) -> np.ndarray:
    """Pixels of black marker: dense and nearly grey.

    Parameters
    ----------
    od : ndarray (..., 3)
        Optical density.
    min_od : float
        Minimum mean OD (0.6 passes 25% of the light).
    max_spread : float
        Maximum (max - min) OD over the channels, relative to the mean OD. Dense H&E is strongly
        coloured (spread near 1 or more); marker black is near 0.1.

    Returns
    -------
    ndarray (...) bool
    """
    od = np.asarray(od, dtype=np.float32)
    mean = channel_mean(od)
    spread = channel_max(od) - channel_min(od)
    return (mean > min_od) & (spread < max_spread * mean)


def dark_debris(od: np.ndarray, *, min_od: float = 0.9) -> np.ndarray:
    """Very dense pixels of any colour (folds, debris, bubbles' edges), mean OD above ``min_od``."""
    return channel_mean(np.asarray(od, dtype=np.float32)) > min_od
