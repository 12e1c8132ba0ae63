"""Uneven light across a thumbnail, measured on its blank glass and divided out (flat-field).

A scanner lights a slide unevenly: the image of blank glass falls off a few per cent toward the
corners (vignetting) or across the slide (a tilted lamp, stitched fields). The tissue threshold
sits a few thousandths of an optical density above the glass (faint tissue is found relative to
the glass's own noise), so glass 3 % darker in a corner (0.013 OD) is taken for tissue there, and
tiles of blank glass are cut. Flat-field correction divides an image by the image of blank
illumination; with no blank frame at hand, the illumination is fitted to the slide's own glass
pixels (bright and nearly grey, :func:`.density.find_glass`): per channel, a smooth surface in
``log I`` over the slide (a quadratic in x and y and a fourth-power radial term, the shape of
lens fall-off), fitted by least squares to the mean glass of blocks of 16 x 16 pixels (glass
pixels away from the blurred rims of ink and tissue) with the darkest residuals trimmed again and
again (faint tissue is bright and nearly grey too, but lies below the light), and divided out
where it varies by more than :data:`MIN_VARIATION` and explains most of the glass's variation
(:data:`MIN_EXPLAINED`).

References
----------
.. [1] D. A. Tomazevic, B. Likar and F. Pernus, "Comparative evaluation of retrospective shading
       correction methods", Journal of Microscopy 208(3):212-223, 2002 (retrospective shading
       correction from the image itself; surface fitting to background pixels).
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
    """Surface terms at normalized coordinates (-1..1): 1, x, y, x², xy, y², r⁴."""
    r2 = x * x + y * y
    return np.stack([np.ones_like(x), x, y, x * x, x * y, y * y, r2 * r2], axis=-1)


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
    ys, xs = (by + 0.5) * b, (bx + 0.5) * b
    a = _terms(2.0 * ys / max(h - 1, 1) - 1.0, 2.0 * xs / max(w - 1, 1) - 1.0)
    logi = np.log(np.maximum(level[by, bx].astype(np.float64), 1.0))
    coef = np.zeros((a.shape[1], 3))
    explained = np.zeros(3)
    for c in range(3):
        keep = np.ones(len(ys), bool)
        for _ in range(5):  # tissue among the glass lies below the light: trimmed from below
            k = a[keep]  # normal equations summed in a fixed order (see plane.py), 7 x 7
            coef[:, c] = np.linalg.solve(np.einsum("ij,ik->jk", k, k, optimize=False) + 1e-12 * np.eye(k.shape[1]),
                                         np.einsum("ij,i->j", k, logi[keep, c], optimize=False))
            res = logi[:, c] - a @ coef[:, c]
            mad = float(np.median(np.abs(res[keep] - np.median(res[keep])))) + 1e-4
            keep = res > -2.0 * 1.4826 * mad
            if keep.sum() < a.shape[1] * 2:
                return rgb, 0.0
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
