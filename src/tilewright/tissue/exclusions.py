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
from .pieces import GrainMap, ink_over_cells, lying_on_glass, smooth_films, split_pieces
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


def _split(classes, mpp, stroke_kw, grains_of):
    """Grey pixels and the :class:`~.pieces.OffPlane` split of the coloured and reddish classes
    (granular cores only for the reddish class: red cells are never blue or green)."""
    grey = _open(classes == _ink.GREY, 1)
    coloured = split_pieces(_open(classes == _ink.COLOURED, 1), mpp, **stroke_kw)
    reddish = split_pieces(_open(classes == _ink.REDDISH, 1), mpp, grains_of=grains_of, **stroke_kw)
    return grey, coloured, reddish


def _fit_exclusions(split, glassy, rgb, tables):
    """Pass 1 (against the prior plane, which may not be the slide's): the pixels left out of the
    plane fit, the share of the stained area re-read as tissue (0 when none), and the grey pixels
    and strokes (with their rims) among them. Left out: grey pixels, strokes, red cells (granular
    cores: blood should not pull the plane) and compact off-plane pieces lying on glass (marker
    dots). But when what is off the prior
    plane and not a stroke is most of the stained area, the prior is not this slide's plane: that
    is its tissue (textured, and granular for all we know), and only grey pixels and strokes are
    left out (see :data:`REREAD_SHARE`)."""
    import cv2

    grey, coloured, reddish = split
    # strokes with their blurred rims: mixtures of ink and tissue lie off every plane
    rims = cv2.getStructuringElement(cv2.MORPH_ELLIPSE, (5, 5))
    sure = grey | cv2.dilate((coloured.strokes | reddish.strokes).view(np.uint8), rims).view(bool)
    pieces = coloured.compact | reddish.compact | reddish.grains
    share = float(pieces.sum()) / max(1, int((pieces | ~(glassy | sure)).sum()))  # a share, never over 1
    if share >= REREAD_SHARE and not off_own_stain(rgb, tables, pieces, ~(glassy | sure | pieces)):
        return sure, share, sure
    return sure | reddish.grains | lying_on_glass(coloured.compact | reddish.compact, glassy | sure), 0.0, sure


def _keep_cells(split, cells, was_red=None):
    """Red cells found against the prior plane stay red cells against the slide's fitted plane.

    The reddish-or-coloured side of an off-plane pixel is read in the plane's own axes; a plane
    tilted from the prior turns them, and packed red cells (haemoglobin absorbs blue as well as
    green) can then read as hematoxylin-like, the class of green marker, which is never blood.
    Their granular cores, found in the reddish class against the prior, are kept as red cells:
    taken out of the coloured class's pieces and added to the reddish class's cores. The other
    pixels that were reddish against the prior (``was_red``; smooth sheets of packed cells are not
    granular at a thumbnail's 8 µm/px) and are coloured against the fitted plane go back to the
    reddish class's compact pieces, judged there by place and texture (blue and green marker are
    coloured against both planes)."""
    grey, coloured, reddish = split
    if not (coloured.compact | coloured.strokes).any():
        return split
    moved = cells & (coloured.compact | coloured.strokes)
    flipped = np.zeros_like(moved) if was_red is None else was_red & coloured.compact & ~moved
    if not (moved.any() or flipped.any()):
        return split
    gone = moved | flipped
    return (grey, coloured._replace(compact=coloured.compact & ~gone, strokes=coloured.strokes & ~moved),
            reddish._replace(grains=reddish.grains | moved, compact=reddish.compact | flipped))


def _resolve(split, glassy, rgb, tables, normal, sigma_px, grains_of, mpp):
    """Ink from pixel classes (see :mod:`.pieces`): grey pixels; strokes of either off-plane
    class, and the red cells a reddish stroke runs across; compact coloured pieces (blue, green:
    never blood); compact reddish pieces lying on glass, and those in tissue that are smooth
    films away from red cells. Other red cells (granular cores) and compact reddish pieces
    beside them are tissue. Returns (ink, ink by greyness or shape, compact pieces taken for ink
    by colour, place and texture, reddish pixels kept)."""
    grey, coloured, reddish = split
    sure = grey | coloured.strokes | reddish.strokes
    sure |= ink_over_cells(reddish.grains, reddish.strokes, rgb, tables, normal, sigma_px)
    blobs = coloured.compact | lying_on_glass(reddish.compact, glassy | sure | coloured.compact)
    rest = reddish.compact & ~blobs
    if rest.any():
        grains_of(rest)  # the texture over the box of what is asked about
        blobs |= smooth_films(rest, reddish.grains, grains_of.smooth, min_px=FILM_UM2 / (mpp * mpp))
    ink = sure | blobs
    return ink, sure, blobs, (reddish.grains | reddish.compact) & ~(blobs | sure)


#: The off-plane limit after a plane fit: this many robust standard deviations of the slide's own
#: H&E pixels about their plane, never above the given ``ink_residual`` (the limit against a prior
#: plane that may not be the slide's) nor under :data:`RESIDUAL_FLOOR` (JPEG and sensor noise).
SPREAD_LIMIT = 8.0
#: The limit's part proportional to the density (of :func:`.ink.ink_classes`) against the prior;
#: after a fit it narrows with the absolute part (the plane is the slide's own).
RELATIVE = 0.03
RESIDUAL_FLOOR = 0.02
#: OD norm of the pixels a plane is fitted to (:func:`.plane.fit_hne_plane`'s ``min_od``): the
#: slide's spread is measured there; fainter pixels, noisier in colour, get a limit rising to
#: ``ink_residual`` at no density.
FIT_MIN_OD = 0.15


def residual_limit(plane: PlaneFit, ink_residual: float) -> float:
    """The OD distance from a fitted plane past which a pixel is off it (see :data:`SPREAD_LIMIT`).

    A fixed limit wide enough for any slide's scatter about the Ruifrok & Johnston plane hides
    light or faded marker over tissue (0.02-0.04 OD off the plane) on a slide whose own H&E
    pixels lie within 0.01 of their fitted plane; the limit follows the slide's own scatter
    (at pixels as dense as those it was measured on: see :data:`FIT_MIN_OD`)."""
    if not plane.fitted or not math.isfinite(plane.spread):
        return ink_residual
    return float(min(ink_residual, max(RESIDUAL_FLOOR, SPREAD_LIMIT * plane.spread)))


#: Smallest smooth reddish film in tissue taken for marker (µm², a disc of about 70 µm: a pen tap
#: is larger, a lone capillary smaller); see :func:`.pieces.smooth_films`.
FILM_UM2 = 4000.0

#: A refused plane fit is retried with the compact off-plane pieces pass 1 left out only when
#: they are at least this share of the stained area (they may be the slide's stain, not ink).
RETRY_SHARE = 0.5

#: Compact off-plane pieces taken for ink by colour over at least this share of the stained area
#: (all but glass, grey ink and strokes) mean the H&E plane is not the slide's: they are read as
#: tissue instead (a marker does not cover most of what is on a slide but in strokes).
REREAD_SHARE = 0.7


#: Compact off-plane pieces whose optical densities lie at least this far (a median, per unit of
#: their own OD norm: the sine of the angle, about 6 degrees) from the H&E plane fitted to the
#: rest of the slide's stained pixels are not its stain, however much of the slide they cover.
OFF_STAIN = 0.1
#: ... or this far (about 14 degrees) when the rest is of one colour: its plane is then only the
#: prior turned to hold that colour, and an eosin off the prior (the magenta of issue 28's third
#: case lies 0.22 from the Ruifrok & Johnston plane) must not be taken for marker.
OFF_STAIN_ONE_COLOUR = 0.25
#: ... over the pixels of both dense enough to carry a direction (Macenko et al. 2009's 0.15).
STAIN_MIN_OD = 0.15
#: A rest whose colours spread in one direction only (the middle eigenvalue of their scatter under
#: this many times the smallest, as in :func:`~.plane.fit_hne_plane`) fixes one stain, not a plane.
ONE_COLOUR = 4.0
_FIT_SAMPLE = 20000


def off_own_stain(rgb, tables, pieces, rest) -> bool:
    """Whether ``pieces`` lie far from the H&E plane of the ``rest`` of the slide's stained pixels.

    A slide is stained in one run, so all its tissue lies on one stain plane (spanned by its two
    stain vectors, Ruifrok & Johnston 2001, whatever their colour). When compact pieces off the
    prior plane cover most of the stained area, they may be tissue of an unusual colour (the
    slide's own stain) or marker over most of a slide whose own tissue is the rest. The rest
    decides: when it holds a plausible plane (:func:`~.plane.fit_hne_plane`'s checks: enough
    pixels, a share of those given, a tilt, most pixels near it), pieces lying :data:`OFF_STAIN`
    or more from it (the median of distance over OD norm) are not the slide's stain; when the
    rest's colours spread in one direction only (:data:`ONE_COLOUR`: one stain, the plane's second
    direction taken from the prior), the limit is :data:`OFF_STAIN_ONE_COLOUR`. Without such a
    rest (all the tissue off the prior plane) nothing is decided here: False.
    """
    if not rest.any() or not pieces.any():
        return False
    od = od_lookup(np.ascontiguousarray(rgb[rest]), tables)
    od = od[::max(1, len(od) // _FIT_SAMPLE)]
    fit = fit_hne_plane(od)
    if not fit.fitted:
        return False
    dense = od[np.linalg.norm(od, axis=1) >= STAIN_MIN_OD].astype(np.float64)
    vals = np.linalg.eigvalsh(dense.T @ dense)
    limit = OFF_STAIN_ONE_COLOUR if vals[1] < ONE_COLOUR * vals[0] else OFF_STAIN
    od = od_lookup(np.ascontiguousarray(rgb[pieces]), tables)
    norm = np.linalg.norm(od, axis=1)
    dense = norm >= STAIN_MIN_OD
    if not dense.any():
        return False
    return float(np.median(np.abs(od[dense] @ fit.normal) / norm[dense])) >= limit


def find_exclusions(rgb, glass, sigma_px: float, mpp: float, glassy, *, exclude_ink: bool = True,
                    ink_residual: float = 0.04, exclude_dark: bool = False, dark_od: float = 0.9,
                    stroke_kw: dict | None = None, noise_od: float = 0.0) -> SimpleNamespace:
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
        return SimpleNamespace(ink=np.zeros((h, w), bool), dark=dark, blood=np.zeros((h, w), bool), plane=None,
                               reread=0.0, residual=ink_residual)
    # the plane is fitted to sampled pixels that are neither stroke-shaped ink nor glass nor dark
    grains_of = GrainMap(rgb, tables, noise_od)  # texture is measured once, where it is asked about
    split = _split(classes, mpp, stroke_kw, grains_of)
    left_out, reread, sure = _fit_exclusions(split, glassy, rgb, tables)
    usable = ~(left_out | glassy | dark).reshape(-1)[::step][:at]
    del left_out
    plane = fit_hne_plane(sample[:at][usable])
    if not plane.fitted and plane.n_pixels > 0:
        # a fit was made and refused: what pass 1 left out (off the prior and not on tissue) may be
        # the slide's own stain; a fit to every stained pixel but grey ones and strokes holds when
        # it is H&E (trimmed, and refused again when most pixels do not lie close to it). Strokes
        # stay out: on a slide of faint tissue a marker ring is most of the density, and a plane
        # through it would make the ring tissue. And the pieces brought back must be most of what
        # is stained: a few marker dots on a slide of faint tissue are not its stain
        again = ~(sure | glassy | dark).reshape(-1)[::step][:at]
        if (again & ~usable).sum() >= RETRY_SHARE * max(1, int(again.sum())):
            retry = fit_hne_plane(sample[:at][again])
            if retry.fitted:
                plane = retry
    del sample
    residual = residual_limit(plane, ink_residual)
    if plane.fitted and (plane.tilt_deg > 1.0 or residual < ink_residual):  # class again against the slide's plane
        was_red = classes == _ink.REDDISH  # what was reddish against the prior
        for r0, r1, a0, a1 in bands(h, sigma_px):
            od = _smoothed_od(rgb[a0:a1], tables, sigma_px)[r0 - a0:r1 - a0]
            _ink.ink_classes(od, plane.normal, residual=residual, relative=RELATIVE * residual / ink_residual, faint=(ink_residual, FIT_MIN_OD), out=classes[r0:r1])
            del od
        cells = split[2].grains  # red cells against the prior
        split = _split(classes, mpp, stroke_kw, grains_of)
        split = _keep_cells(split, cells, was_red)
    del classes
    ink, sure, blobs, blood = _resolve(split, glassy, rgb, tables, plane.normal, sigma_px, grains_of, mpp)
    del grains_of
    del split
    # the stained area that is not ink by shape or greyness (with the pieces below the tissue
    # threshold that were taken for ink by colour: a share, never over 1)
    share = float(blobs.sum()) / max(1, int((blobs | ~(glassy | sure)).sum()))
    if share >= REREAD_SHARE and not off_own_stain(rgb, tables, blobs, ~(glassy | sure | blobs)):
        # "ink" over most of the stained area, and no H&E of the slide's own that it lies far
        # from: the stain, not ink
        ink &= ~blobs
        reread = max(reread, share)
    return SimpleNamespace(ink=ink, dark=dark, blood=blood, plane=plane, reread=reread, residual=residual)


__all__ += ["bands", "smooth", "PlaneFit"]
