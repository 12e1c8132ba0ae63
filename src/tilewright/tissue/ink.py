"""Marker ink and dark debris in optical density: what is on the slide but is not H&E tissue.

Hematoxylin and eosin optical densities lie, by the Beer–Lambert law, in the plane spanned by the
two stain vectors (:mod:`.plane`); marker ink drawn on the cover glass adds its own optical
density on top, whatever lies beneath, so its distance from the plane (its *residual*) is the
same over glass and over tissue. Each pixel of the smoothed thumbnail falls in one class:

- grey: dense and nearly grey (black marker, dust, bubble rims): its smallest channel OD, the
  part a flat absorber explains, is large and at least the spread between channels (H&E is
  strongly coloured: hematoxylin's smallest OD is under half its spread);
- coloured: below the plane (blue marker: more red absorbed than H&E could explain), in it but
  with a negative amount of eosin (blue marker on a slide whose plane happens to contain it:
  green passed better than by hematoxylin alone), or above it while hematoxylin-like (green
  marker: red and blue absorbed, green passed);
- reddish: above the plane and eosin-like. Red marker and red blood cells both fall here (red
  cells carry haemoglobin, which absorbs blue and green), so colour alone cannot tell them
  apart; the shape does. Marker leaves strokes and rings: long, at least ``min_stroke_um`` wide,
  or lying on glass. Blood fills vessels and haemorrhages inside tissue: compact pieces
  surrounded by tissue. Only stroke-shaped reddish pieces are ink; the rest is tissue.

References
----------
.. [1] A. C. Ruifrok and D. A. Johnston, "Quantification of histochemical staining by color
       deconvolution", Analytical and Quantitative Cytology and Histology 23(4):291-299, 2001
       (the stain vectors, hence the plane; :mod:`.plane` fits it to the slide).
"""

from __future__ import annotations

import numpy as np

from .density import black_ink, dark_debris  # noqa: F401 - dark_debris: public here too
from .plane import RUIFROK_PLANE_NORMAL, fit_hne_plane, plane_basis

__all__ = ["RUIFROK_PLANE_NORMAL", "hne_plane_normal", "ink_residual", "ink_classes", "stroke_pieces",
           "black_ink", "dark_debris", "GREY", "COLOURED", "REDDISH"]

#: Pixel classes of :func:`ink_classes` (0 is none).
GREY, COLOURED, REDDISH = 1, 2, 3


def hne_plane_normal(od: np.ndarray, **kw) -> np.ndarray:
    """Unit normal of the H&E plane fitted to ``od`` (the Ruifrok & Johnston plane when the fit is
    not plausible); see :func:`tilewright.tissue.plane.fit_hne_plane` for the keywords."""
    return fit_hne_plane(od, **kw).normal


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


def ink_classes(od: np.ndarray, normal, *, residual: float = 0.04, relative: float = 0.03,
                faint: tuple | None = None, out=None) -> np.ndarray:
    """Class of each pixel: 0 H&E or glass, :data:`GREY`, :data:`COLOURED` or :data:`REDDISH`.

    Parameters
    ----------
    od : ndarray (..., 3) float32
        Optical density relative to the glass (smoothed).
    normal : array_like (3,)
        H&E plane normal.
    residual, relative : float
        A pixel is off the plane when its residual exceeds ``residual + relative * |OD|`` (the
        relative part absorbs a plane that fits dense tissue slightly less well).
    faint : (float, float), optional
        ``(loose, od)``: the absolute limit rises linearly from ``residual`` at an OD norm of
        ``od`` to ``loose`` at 0. A limit measured on a slide's dense pixels does not hold for
        faint ones, whose colour direction is noisier (JPEG, sensor noise).

    Returns
    -------
    ndarray (...) uint8
    """
    od = np.asarray(od, dtype=np.float32)
    unmix = np.linalg.inv(plane_basis(normal)).astype(np.float32)
    coords = od @ unmix  # hematoxylin-like, eosin-like, off-plane
    norm = np.sqrt(np.einsum("...c,...c->...", od, od))
    limit = np.float32(residual) + np.float32(relative) * norm
    if faint is not None and faint[0] > residual:
        loose, at = faint
        limit += np.float32(loose - residual) * np.clip(np.float32(1.0) - norm / np.float32(at), 0, 1)
    res = coords[..., 2]
    out = np.zeros(od.shape[:-1], np.uint8) if out is None else out
    out[...] = 0
    above = res > limit
    out[above] = np.where(coords[..., 1][above] >= 0.5 * coords[..., 0][above], REDDISH, COLOURED)
    out[(res < -limit) | (coords[..., 1] < -limit)] = COLOURED  # below the plane, or less eosin than none
    out[black_ink(od)] = GREY
    return out


def stroke_pieces(reddish: np.ndarray, glassy: np.ndarray, mpp: float, *, min_stroke_um: float = 100.0,
                  elongation: float = 3.0, on_glass: float = 0.5) -> np.ndarray:
    """The reddish pieces that are marker strokes, rings or dots on glass (not blood).

    A piece is ink when it is long (area over squared width at least ``elongation``) and at least
    ``min_stroke_um`` wide (the width is twice its largest inscribed radius: a ring drawn with a
    0.5 mm marker is 0.5 mm wide and tens of widths long; a haemorrhage or a cut vessel is about
    as long as it is wide), or when at least ``on_glass`` of the pixels around it are glass or
    other ink (a stroke cut into pieces where other strokes cross it).

    Parameters
    ----------
    reddish : ndarray (H, W) bool
        Reddish pixels (see :func:`ink_classes`).
    glassy : ndarray (H, W) bool
        Pixels that are not tissue: blank glass, and ink of other classes.
    mpp : float
        µm per pixel.

    Returns
    -------
    ndarray (H, W) bool
        The reddish pixels that belong to ink pieces.
    """
    import cv2

    if not reddish.any():
        return np.zeros_like(reddish)
    n, labels, stats, _ = cv2.connectedComponentsWithStats(reddish.view(np.uint8), connectivity=8,
                                                           ltype=cv2.CV_32S)
    area = stats[:, cv2.CC_STAT_AREA].astype(np.float64)
    ink = np.zeros(n, bool)
    min_px = min_stroke_um / mpp
    # only pieces large enough to be a stroke by shape are measured, each in its own box (the
    # distance map is never slide-sized): the width is twice the largest inscribed radius
    for k in np.flatnonzero(area[1:] >= elongation * max(min_px, 1.0) ** 2) + 1:
        x, y, w, h = stats[k, :4]
        piece = np.pad(labels[y:y + h, x:x + w] == k, 1)  # a background rim: distances to the edge
        width = 2.0 * float(cv2.distanceTransform(piece.view(np.uint8), cv2.DIST_L2, 5).max())
        ink[k] = width >= min_px and area[k] / max(width, 1.0) ** 2 >= elongation
    kernel = cv2.getStructuringElement(cv2.MORPH_ELLIPSE, (7, 7))
    for k in np.flatnonzero(~ink[1:] & (area[1:] >= 3)) + 1:  # pieces lying on glass
        x, y, w, h = stats[k, :4]
        y0, x0 = max(0, y - 4), max(0, x - 4)
        piece = labels[y0:y + h + 4, x0:x + w + 4] == k
        ring = cv2.dilate(piece.view(np.uint8), kernel).view(bool) & ~piece
        if ring.any() and glassy[y0:y + h + 4, x0:x + w + 4][ring].mean() >= on_glass:
            ink[k] = True
    return ink[labels]
