"""Uneven light across a thumbnail, measured on its blank glass and divided out (flat-field).

A scanner lights a slide unevenly: the image of blank glass falls off a few per cent toward the
corners (vignetting) or across the slide (a tilted lamp, stitched fields). The tissue threshold
sits a few thousandths of an optical density above the glass (faint tissue is found relative to
the glass's own noise), so glass 3 % darker in a corner (0.013 OD) is taken for tissue there, and
tiles of blank glass are cut. Flat-field correction divides an image by the image of blank
illumination; with no blank frame at hand, the illumination is fitted to the slide's own glass
pixels (bright and nearly grey, :func:`.density.find_glass`): per channel, a smooth surface in
``log I`` over the slide (a plane and second- and fourth-power radial terms: a tilted lamp and
lens fall-off), fitted to the mean glass of blocks of 16 x 16 pixels (glass pixels away from the
blurred rims of ink and tissue). Faint tissue is bright and nearly grey too and may be most of
those blocks, so (1) only blocks of the glass's own colour are kept (light dims the three channels
alike, stain does not), (2) the surface is first fitted to their upper envelope (an expectile
regression: faint tissue lies below the light) and (3) refitted by least squares with the darkest
residuals trimmed, their spread measured above the surface. It is divided out where it varies by
more than :data:`MIN_VARIATION` and explains most of the glass's variation (:data:`MIN_EXPLAINED`).

References
----------
.. [1] D. A. Tomazevic, B. Likar and F. Pernus, "Comparative evaluation of retrospective shading
       correction methods", Journal of Microscopy 208(3):212-223, 2002 (retrospective shading
       correction from the image itself; surface fitting to background pixels).
.. [2] W. K. Newey and J. L. Powell, "Asymmetric least squares estimation and testing",
       Econometrica 55(4):819-847, 1987 (expectiles).
"""

from __future__ import annotations

import numpy as np

__all__ = ["flatten_light", "MIN_VARIATION", "MIN_EXPLAINED", "MAX_GAIN"]

#: Light varying by less than this share over the slide's glass is left as it is.
MIN_VARIATION = 0.01
#: The fitted light must explain at least this share of the variance of the glass samples it kept
#: in every channel (else the glass differs by noise, tints and rims, not by light).
MIN_EXPLAINED = 0.4
#: The correction never brightens or darkens a pixel by more than this share (a fit extrapolated
#: over a slide mostly covered by tissue).
MAX_GAIN = 0.08
_BLOCK = 16  # the light is sampled in blocks of this many pixels a side
_COARSE = 8  # the surface is evaluated on a grid this many times coarser, then interpolated


def _terms(y, x):
    """Surface terms at normalized coordinates (-1..1): 1, x, y, r², r⁴."""
    r2 = x * x + y * y
    return np.stack([np.ones_like(x), x, y, r2, r2 * r2], axis=-1)


def _neutral(logi, floor=0.004):
    """Blocks whose colour is the glass's: light dims all three channels by the same factor, so the
    log-chromaticity (each channel's log minus the mean of the three) of glass stays put under it,
    while faint stain (bright and nearly grey, but eosin dims green ~14 times more than red, Ruifrok
    & Johnston 2001) moves it. Kept: within 4 robust standard deviations (or ``floor``) of the median
    block's in every channel."""
    chroma = logi - logi.mean(axis=1, keepdims=True)
    dev = np.abs(chroma - np.median(chroma, axis=0))
    mad = 1.4826 * np.median(dev, axis=0)
    return np.all(dev <= np.maximum(4.0 * mad, floor), axis=1)


def _least_squares(a, y, wts=None):
    """Coefficients of the (weighted) least-squares surface: normal equations summed in a fixed
    order (see plane.py), so that the result does not depend on the BLAS's threads."""
    aw = a if wts is None else a * wts[:, None]
    return np.linalg.solve(np.einsum("ij,ik->jk", aw, a, optimize=False) + 1e-12 * np.eye(a.shape[1]),
                           np.einsum("ij,i->j", aw, y, optimize=False))


def _upper_fit(a, y, tau=0.9, rounds=12):
    """Least asymmetrically weighted squares (an expectile regression, Newey & Powell 1987) at
    ``tau``: residuals above the surface weigh ``tau``, below it ``1 - tau``, so the surface keeps
    to the upper envelope of the samples (glass) when faint tissue is many of them."""
    wts = np.full(len(y), 0.5)
    for _ in range(rounds):
        coef = _least_squares(a, y, wts)
        wts = np.where(y - a @ coef > 0, tau, 1.0 - tau)
    return coef


def flatten_light(rgb: np.ndarray, glass: np.ndarray, *, min_fraction: float = 0.05) -> tuple[np.ndarray, float]:
    """The thumbnail with uneven light divided out, and the light's variation over the glass.

    Parameters
    ----------
    rgb : ndarray (H, W, 3) uint8
    glass : ndarray (H, W) bool
        Blank-glass candidates (bright, nearly grey pixels).
    min_fraction : float
        At least this share of the pixels, spread over three quarters of the slide or more, must be
        glass for a fit (else ``rgb`` is returned unchanged).

    Returns
    -------
    (ndarray (H, W, 3) uint8, float)
        The corrected thumbnail (``rgb`` itself when nothing was corrected) and the fitted light's
        relative variation (largest over smallest minus one, 0 without a fit).
    """
    import cv2

    h, w = glass.shape
    n = int(glass.sum())
    if n < max(500, min_fraction * h * w):
        return rgb, 0.0
    quads = [glass[:h // 2, :w // 2].any(), glass[:h // 2, w // 2:].any(), glass[h // 2:, :w // 2].any(),
             glass[h // 2:, w // 2:].any()]
    if sum(quads) < 3:
        return rgb, 0.0
    # block samples: the mean of the glass pixels in each block of B x B pixels that is mostly glass
    b = _BLOCK
    hb, wb = h // b, w // b
    # glass away from anything else: the blurred rims of ink and tissue are bright and grey too
    glass = cv2.erode(glass.view(np.uint8), cv2.getStructuringElement(cv2.MORPH_ELLIPSE, (9, 9))).view(bool)
    if hb < 3 or wb < 3:
        return rgb, 0.0
    share = np.empty((hb, wb), np.float32)
    level = np.empty((hb, wb, 3), np.float32)
    for r0 in range(0, hb * b, 256):  # block means of the glass pixels, a band of rows at a time
        r1 = min(hb * b, r0 + 256)
        g = glass[r0:r1, :wb * b].astype(np.float32)
        sums = cv2.resize(rgb[r0:r1, :wb * b].astype(np.float32) * g[..., None], (wb, (r1 - r0) // b),
                          interpolation=cv2.INTER_AREA)
        frac = cv2.resize(g, (wb, (r1 - r0) // b), interpolation=cv2.INTER_AREA)
        share[r0 // b:r1 // b] = frac
        level[r0 // b:r1 // b] = sums / np.maximum(frac, 1e-6)[..., None]
    use = share >= 0.5
    if use.sum() < 12:
        return rgb, 0.0
    by, bx = np.nonzero(use)
    logi = np.log(np.maximum(level[by, bx].astype(np.float64), 1.0))
    grey = _neutral(logi)  # light dims every channel alike; stain does not
    if grey.sum() < 12:
        return rgb, 0.0
    by, bx, logi = by[grey], bx[grey], logi[grey]
    ys, xs = (by + 0.5) * b, (bx + 0.5) * b
    a = _terms(2.0 * ys / max(h - 1, 1) - 1.0, 2.0 * xs / max(w - 1, 1) - 1.0)
    coef = np.zeros((a.shape[1], 3))
    explained = np.zeros(3)
    for c in range(3):
        coef[:, c] = _upper_fit(a, logi[:, c])
        res = logi[:, c] - a @ coef[:, c]
        keep = np.ones(len(ys), bool)
        for _ in range(5):  # tissue among the glass lies below the light: trimmed from below
            up = res[keep][res[keep] > 0]  # glass noise, measured above the surface (half-normal)
            spread = (float(np.median(up)) / 0.6745 if up.size else 0.0) + 1e-4
            keep = res > -2.5 * spread
            if keep.sum() < a.shape[1] * 2:
                return rgb, 0.0
            coef[:, c] = _least_squares(a[keep], logi[keep, c])
            res = logi[:, c] - a @ coef[:, c]
        explained[c] = 1.0 - float(np.var(res[keep])) / max(float(np.var(logi[keep, c])), 1e-12)
    if explained.min() < MIN_EXPLAINED:  # no smooth light across the glass: blocks differ by noise or rims
        return rgb, 0.0
    gy, gx = np.mgrid[0:h:_COARSE, 0:w:_COARSE].astype(np.float64)
    field = _terms(2.0 * gy / max(h - 1, 1) - 1.0, 2.0 * gx / max(w - 1, 1) - 1.0) @ coef  # log light
    fitted = a @ coef
    level = np.quantile(fitted, 0.9, axis=0)  # the light on the brightest glass: the reference
    variation = float(np.max(np.exp(fitted.max(axis=0) - fitted.min(axis=0))) - 1.0)
    if variation < MIN_VARIATION:
        return rgb, variation
    gain = np.clip(np.exp(level - field), 1.0 - MAX_GAIN, 1.0 + MAX_GAIN).astype(np.float32)
    gain = cv2.resize(gain, (w, h), interpolation=cv2.INTER_LINEAR)
    out = np.empty_like(rgb)
    for r0 in range(0, h, 256):  # float temporaries a band at a time
        band = rgb[r0:r0 + 256].astype(np.float32) * gain[r0:r0 + 256]
        out[r0:r0 + 256] = np.clip(band + 0.5, 0, 255).astype(np.uint8)
    return out, variation
