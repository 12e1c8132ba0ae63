"""What a tissue mask leaves out: marker ink (over glass and over tissue) and dark debris.

Two passes over the smoothed optical density of the thumbnail, band by band (float temporaries
stay a few MB whatever the slide size):

1. pixels are classed against the Ruifrok & Johnston (2001) H&E plane (:func:`.ink.ink_classes`)
   and a strided sample of the optical density is kept;
2. the H&E plane is refitted to the sampled pixels that are neither glass nor grey nor part of a
   stroke-shaped off-plane piece (:func:`.plane.fit_hne_plane`; the prior is kept when the fit is
   implausible), and when it moved, the pixels are classed again against it;
3. ink is the grey and coloured pixels and the stroke-shaped reddish pieces
   (:func:`.ink.stroke_pieces`: strokes and rings are ink, blood is tissue).

The published methods these passes use, and their references, are in :mod:`.plane` (the H&E
plane of Ruifrok & Johnston 2001, fitted as in Macenko et al. 2009) and :mod:`.ink`.
"""

from __future__ import annotations

import math
from types import SimpleNamespace

import numpy as np

from . import ink as _ink
from .density import od_lookup, od_tables
from .plane import RUIFROK_PLANE_NORMAL, PlaneFit, fit_hne_plane

__all__ = ["find_exclusions", "BAND_ROWS"]

BAND_ROWS = 256  # whole-slide work runs in bands of rows: float temporaries stay a few MB
_SAMPLE = 1_000_000  # at most this many optical densities are kept for the plane fit


def bands(h: int, sigma_px: float):
    """Row bands ``(r0, r1, a0, a1)``: rows ``[r0, r1)`` are produced from rows ``[a0, a1)``,
    which add a halo wide enough for a Gaussian of ``sigma_px`` (OpenCV's kernel reaches about
    4 sigma), so a band's result equals the whole image's in its own rows."""
    halo = int(math.ceil(4.0 * sigma_px)) + 2 if sigma_px > 0 else 0
    for r0 in range(0, h, BAND_ROWS):
        r1 = min(h, r0 + BAND_ROWS)
        yield r0, r1, max(0, r0 - halo), min(h, r1 + halo)


def smooth(a: np.ndarray, sigma_px: float) -> np.ndarray:
    """Gaussian blur of ``sigma_px`` pixels (edges replicated); ``a`` itself when sigma is 0."""
    if sigma_px <= 0:
        return a
    import cv2

    return cv2.GaussianBlur(a, (0, 0), sigma_px, borderType=cv2.BORDER_REPLICATE)


def _smoothed_od(band, tables, sigma_px):
    return smooth(od_lookup(np.ascontiguousarray(band), tables), sigma_px)


def _open(mask: np.ndarray, radius: int) -> np.ndarray:
    import cv2

    kernel = cv2.getStructuringElement(cv2.MORPH_ELLIPSE, (2 * radius + 1, 2 * radius + 1))
    return cv2.morphologyEx(mask.view(np.uint8), cv2.MORPH_OPEN, kernel).view(bool)


def _strokes_only(classes, glassy, mpp, stroke_kw):
    """Pass 1 (against the prior plane, which may not be the slide's): only grey pixels and the
    stroke-shaped pieces of each off-plane class are ink, so that tissue stained a little off the
    prior (compact pieces) still takes part in the plane fit."""
    grey = _open(classes == _ink.GREY, 1)
    out = grey.copy()
    for cls in (_ink.COLOURED, _ink.REDDISH):  # apart: tissue of one class and a pen of the other
        out |= _ink.stroke_pieces(_open(classes == cls, 1), glassy | grey, mpp, **stroke_kw)  # do not merge
    return out


def _resolve(classes, glassy, mpp, stroke_kw):
    """Ink from pixel classes: grey and coloured pixels, and the stroke-shaped reddish pieces.
    Returns (ink, blood-like reddish pixels kept as tissue)."""
    sure = _open((classes == _ink.GREY) | (classes == _ink.COLOURED), 1)
    reddish = _open(classes == _ink.REDDISH, 1)
    strokes = _ink.stroke_pieces(reddish, glassy | sure, mpp, **stroke_kw)
    return sure | strokes, reddish & ~strokes


def find_exclusions(rgb, glass, sigma_px: float, mpp: float, glassy, *, exclude_ink: bool = True,
                    ink_residual: float = 0.04, exclude_dark: bool = False, dark_od: float = 0.9,
                    stroke_kw: dict | None = None) -> SimpleNamespace:
    """Ink, dark debris and the H&E plane of a thumbnail.

    Parameters
    ----------
    rgb : ndarray (H, W, 3) uint8
    glass : array_like (3,)
        Glass colour, the ``I0`` of the optical density.
    sigma_px : float
        Gaussian smoothing of the optical density, in pixels.
    mpp : float
        µm per pixel.
    glassy : ndarray (H, W) bool
        Pixels whose density is that of glass (below the tissue threshold).
    exclude_ink, ink_residual, exclude_dark, dark_od
        As in :func:`tilewright.tissue.mask.tissue_mask`.
    stroke_kw : dict, optional
        Keywords of :func:`tilewright.tissue.ink.stroke_pieces`.

    Returns
    -------
    SimpleNamespace
        ``ink``, ``dark``, ``blood`` (reddish pixels kept as tissue) bool (H, W) arrays, and
        ``plane`` (a :class:`~tilewright.tissue.plane.PlaneFit`, None without ink exclusion).
    """
    h, w = rgb.shape[:2]
    tables = od_tables(glass)
    stroke_kw = dict(stroke_kw or {})
    dark = np.zeros((h, w), bool)
    classes = np.zeros((h, w), np.uint8) if exclude_ink else None
    step = (h * w) // _SAMPLE + 1 if h * w > _SAMPLE else 1
    sample = np.empty(((h * w + step - 1) // step, 3), np.float32) if exclude_ink else None
    at = 0
    for r0, r1, a0, a1 in bands(h, sigma_px):
        od = _smoothed_od(rgb[a0:a1], tables, sigma_px)[r0 - a0:r1 - a0]
        if exclude_dark:
            dark[r0:r1] = _ink.dark_debris(od, min_od=dark_od)
        if exclude_ink:
            _ink.ink_classes(od, RUIFROK_PLANE_NORMAL, residual=ink_residual, out=classes[r0:r1])
            part = od.reshape(-1, 3)[(-r0 * w) % step::step]
            sample[at:at + len(part)] = part
            at += len(part)
        del od
    if not exclude_ink:
        return SimpleNamespace(ink=np.zeros((h, w), bool), dark=dark, blood=np.zeros((h, w), bool), plane=None)
    # the plane is fitted to sampled pixels that are neither stroke-shaped ink nor glass nor dark
    usable = ~(_strokes_only(classes, glassy, mpp, stroke_kw) | glassy | dark).reshape(-1)[::step][:at]
    plane = fit_hne_plane(sample[:at][usable])
    del sample
    if plane.fitted and plane.tilt_deg > 1.0:  # the prior was not the slide's plane: class again
        for r0, r1, a0, a1 in bands(h, sigma_px):
            od = _smoothed_od(rgb[a0:a1], tables, sigma_px)[r0 - a0:r1 - a0]
            _ink.ink_classes(od, plane.normal, residual=ink_residual, out=classes[r0:r1])
            del od
    ink, blood = _resolve(classes, glassy, mpp, stroke_kw)
    return SimpleNamespace(ink=ink, dark=dark, blood=blood, plane=plane)


__all__ += ["bands", "smooth", "PlaneFit"]
