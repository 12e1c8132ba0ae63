"""Marker whose colour lies on the H&E plane (violet, pink, some reds), found by texture and shape.

Colour tells most marker from tissue (:mod:`.ink`), but a violet marker is a mixture of about
equal parts of hematoxylin-like and eosin-like absorption, and a pink one is close to eosin: their
optical densities lie on or near the slide's H&E plane, and over glass they look like a dense
piece of tissue. What still tells them apart is what a marker is: a film of dye on the cover
glass, smooth from pixel to pixel, drawn with a tip as a band of even width. Tissue at a
thumbnail's 8 µm/px is textured: each pixel holds a different share of nuclei, stroma and fibres.

So, on a slide whose own tissue is textured (:data:`MIN_TEXTURE`; the cue is not used where
tissue looks smooth, as after heavy JPEG compression):

1. the slide's tissue texture ``T`` is the median :func:`.pieces.granularity` of its tissue
   (dense enough, red cells left out);
2. *films* are connected pieces of dense (:data:`MIN_FILM_OD`) pixels smoother than
   :data:`SMOOTH_SHARE` x ``T`` that are stroke-shaped (:func:`.pieces.band_shape`: at least
   ``min_stroke_um`` wide and ``elongation`` times longer) or lie on glass (a dot, a label);
3. a film is grown into connected pixels smoother than :data:`LOOSE_SHARE` x ``T`` (its rims,
   where it starts to cross tissue), and into the tissue it crosses: connected pixels whose
   density exceeds the tissue's local level (a normalized convolution over the tissue around,
   Knutsson & Westin 1993, 1.5 stroke widths) by :data:`EXCESS` of the film's own density
   (optical densities add: Beer-Lambert); both only into pixels of :data:`MIN_FILM_OD`;
4. a slide whose tissue is mostly smooth has a low texture ``T`` (a median): the cue is off
   there, whatever lies on it (also where a broad smooth stroke is most of what is dense).

Marker over tissue far from any film over glass is not found this way (its texture is the
tissue's beneath it), except where it is dark:

5. a *dark film* over tissue (:func:`dark_films`) is a connected piece of tissue at least
   :data:`DARK_MEDIAN` times as dense as the slide's median tissue and :data:`DARK_STEP` times the
   tissue just around it (a step at its rim), ringed mostly by tissue, with no more fine detail
   than that tissue (x :data:`DARK_TEXTURE`: a film on the cover glass adds a constant density,
   so the tissue's own detail shows through it, Beer-Lambert) and lying on the H&E plane (not
   red cells: haemoglobin lies off it). A fold is two layers (twice the density), a three-layer
   fold three times; a nuclear-dense region about twice: a dark violet marker dot is more.
"""

from __future__ import annotations

import numpy as np

from .density import od_lookup
from .morphology import touching
from .pieces import band_shape, granularity_bands, lying_on_glass
from .plane import RUIFROK_PLANE_NORMAL

__all__ = ["on_plane_films", "dark_films", "MIN_TEXTURE", "SMOOTH_SHARE", "LOOSE_SHARE", "MIN_FILM_OD", "EXCESS",
           "DARK_MEDIAN", "DARK_STEP", "DARK_TEXTURE", "DARK_OFF_PLANE"]

#: Median tissue granularity under which the slide's tissue is too smooth for the texture cue.
MIN_TEXTURE = 0.02
#: A film's fine detail is under this share of the slide's tissue texture ...
SMOOTH_SHARE = 0.3
#: ... and it grows into connected pixels under this share.
LOOSE_SHARE = 0.5
#: Median mean optical density of a film (faint tissue is smooth too, but not dense).
MIN_FILM_OD = 0.1
#: Tissue beside films set aside that is enough to measure the slide's texture on (a share of it).
REST_SHARE = 0.2
#: Over tissue, a film lifts the density above the tissue's local median by this share of its own.
EXCESS = 0.5

#: A dark film is at least this many times the slide's median tissue density ...
DARK_MEDIAN = 5.0
#: ... and this many times the density of the tissue around it (2 to 6 pixels beyond its rim) ...
DARK_STEP = 3.0
#: ... which is most of that ring (a share: a piece on glass is judged by steps 1-4) ...
DARK_RING = 0.5
#: ... with fine detail (|OD - its Gaussian blur at 2 px|, a median) at most this times the ring's ...
DARK_TEXTURE = 1.3
#: ... and its optical densities within this share of their norm of the Ruifrok & Johnston plane.
DARK_OFF_PLANE = 0.1
#: Tissue pixels of at least this mean optical density are the slide's tissue for the median.
TISSUE_OD = 0.03


def dark_films(rgb: np.ndarray, dens: np.ndarray, tissue: np.ndarray, tables: np.ndarray, min_px: float,
               noise_od: float = 0.0) -> np.ndarray:
    """Dark on-plane marker over tissue (step 5 of the module's text).

    Parameters
    ----------
    rgb : ndarray (H, W, 3) uint8
    dens : ndarray (H, W) float32
        Mean optical density of ``rgb`` over its three channels (unsmoothed).
    tissue : ndarray (H, W) bool
        Tissue still in question (films and red cells left out).
    tables : ndarray (3, 256)
        Optical-density tables of the glass.
    min_px : float
        Smallest film, pixels.
    noise_od : float
        The glass's pixel noise in one channel's OD. Through a film of optical density ``D`` a
        pixel gets ``10**-D`` of the light, and its noise in OD grows by ``10**D`` (the same noise
        on fewer grey levels): the film's fine detail may exceed the tissue's by that much (its
        median absolute deviation, each channel's at the film's median density in it, over the
        mean of the three).

    Returns
    -------
    ndarray (H, W) bool
    """
    import cv2

    out = np.zeros_like(tissue)
    d = cv2.GaussianBlur(dens, (0, 0), 1.0)
    ref = tissue & (d >= TISSUE_OD)
    if ref.sum() < max(100, min_px):
        return out
    dark = tissue & (d >= DARK_MEDIAN * float(np.median(d[ref])))
    n, labels, stats, _ = cv2.connectedComponentsWithStats(dark.view(np.uint8), connectivity=8, ltype=cv2.CV_32S)
    if n <= 1:
        return out
    near, far = np.ones((5, 5), np.uint8), np.ones((13, 13), np.uint8)
    for k in np.flatnonzero(stats[1:, cv2.CC_STAT_AREA] >= min_px) + 1:
        x, y, bw, bh, _ = stats[k]
        sl = (slice(max(0, y - 8), y + bh + 8), slice(max(0, x - 8), x + bw + 8))
        part = (labels[sl] == k).view(np.uint8)
        ring = cv2.dilate(part, far).view(bool) & ~cv2.dilate(part, near).view(bool)
        around = ring & ref[sl]
        if around.sum() < DARK_RING * ring.sum():
            continue
        core = part.view(bool)
        if np.median(d[sl][core]) < DARK_STEP * np.median(d[sl][around]):
            continue
        od = od_lookup(np.ascontiguousarray(rgb[sl][core]), tables)
        off = np.abs(od @ RUIFROK_PLANE_NORMAL) / np.maximum(np.linalg.norm(od, axis=1), 1e-3)
        if np.median(off) > DARK_OFF_PLANE:
            continue
        # the sensor's noise through the film, per channel, on the mean of the three
        noise = 0.6745 * noise_od * float(np.sqrt(np.sum(10.0 ** (2.0 * np.median(od, axis=0))))) / 3.0
        detail = _detail(dens, sl)
        if np.median(detail[core]) <= DARK_TEXTURE * np.median(detail[around]) + noise:
            out[sl] |= core
    return out


def _detail(dens, sl, sigma=2.0, margin=16):
    """``|dens - its Gaussian blur|`` over the slices ``sl``, blurred with a margin around them."""
    import cv2

    (ys, xs), (h, w) = sl, dens.shape
    y0, x0 = max(0, ys.start - margin), max(0, xs.start - margin)
    y1, x1 = min(h, ys.stop + margin), min(w, xs.stop + margin)
    part = dens[y0:y1, x0:x1]
    fine = np.abs(part - cv2.GaussianBlur(part, (0, 0), sigma))
    return fine[ys.start - y0:min(h, ys.stop) - y0, xs.start - x0:min(w, xs.stop) - x0]


def _measure(rgb, tables, noise_od, box):
    """Granularity and mean optical density over ``box`` (y0, y1, x0, x1), band by band."""
    y0, y1, x0, x1 = box
    grain = np.empty((y1 - y0, x1 - x0), np.float32)
    dens = np.empty((y1 - y0, x1 - x0), np.float32)
    for r0, r1, g in granularity_bands(rgb, tables, noise_od, box):
        grain[r0 - y0:r1 - y0] = g
        dens[r0 - y0:r1 - y0] = od_lookup(np.ascontiguousarray(rgb[r0:r1, x0:x1]), tables).mean(axis=2)
    return grain, dens


def _seeds(smooth, away, dens, mpp, min_px, min_stroke_um, elongation):
    """The smooth pieces that are films: dense, stroke-shaped or lying on glass."""
    import cv2

    n, labels, stats, _ = cv2.connectedComponentsWithStats(smooth.view(np.uint8), connectivity=8, ltype=cv2.CV_32S)
    out = np.zeros_like(smooth)
    compact = np.zeros_like(smooth)  # dense smooth pieces that are not strokes: films if on glass
    widths, others = [], []
    stroke_px = max(min_stroke_um / mpp, 1.0)
    for k in np.flatnonzero(stats[1:, cv2.CC_STAT_AREA] >= min_px) + 1:
        x, y, bw, bh, _ = stats[k]
        part = labels[y:y + bh, x:x + bw] == k
        if np.median(dens[y:y + bh, x:x + bw][part]) < MIN_FILM_OD:
            continue
        width, stretch = band_shape(part)
        if width >= stroke_px and stretch >= elongation:
            out[y:y + bh, x:x + bw] |= part
            widths.append(width)
        else:
            compact[y:y + bh, x:x + bw] |= part
            others.append((y, x, bh, bw, part, width))
    if others:  # one pass over all of them (each piece is judged by its own ring)
        on_glass = lying_on_glass(compact, away)
        for y, x, bh, bw, part, width in others:
            if on_glass[y:y + bh, x:x + bw][part].any():
                out[y:y + bh, x:x + bw] |= part
                widths.append(width)
    return out, max(widths, default=0.0)


def _texture_beside_films(grain, dens, tissue, away, disc, mpp, min_px, min_stroke_um, elongation):
    """The tissue's texture left beside what would be films at any texture: a broad smooth marker
    that is most of the dense area makes the median texture that of the marker. The pieces with
    no fine detail at all (under :data:`SMOOTH_SHARE` x :data:`MIN_TEXTURE`) that would be films
    are set aside; the median texture of the rest of the tissue is the slide's, when the rest is
    at least :data:`REST_SHARE` of the tissue (a slide of smooth tissue stays smooth: its pieces
    on glass would all be set aside)."""
    import cv2

    flat = cv2.morphologyEx((tissue & (grain < SMOOTH_SHARE * MIN_TEXTURE)).view(np.uint8), cv2.MORPH_OPEN, disc).view(bool)
    films, _ = _seeds(flat, away, dens, mpp, min_px, min_stroke_um, elongation)
    if not films.any():
        return 0.0
    rest = tissue & ~cv2.dilate(films.view(np.uint8), disc).view(bool)
    if rest.sum() < max(100, min_px) or rest.sum() < REST_SHARE * tissue.sum():
        return 0.0
    return float(np.median(grain[rest]))


def on_plane_films(rgb: np.ndarray, tissue: np.ndarray, away: np.ndarray, tables: np.ndarray, mpp: float, *,
                   blood: np.ndarray | None = None, noise_od: float = 0.0, min_px: float = 60.0,
                   min_stroke_um: float = 100.0, elongation: float = 3.0) -> np.ndarray:
    """Marker films among the pixels of ``tissue`` (see the module's text for the steps).

    Parameters
    ----------
    rgb : ndarray (H, W, 3) uint8
        The thumbnail.
    tissue : ndarray (H, W) bool
        What is taken for tissue so far (ink of other kinds already left out).
    away : ndarray (H, W) bool
        Pixels that are not tissue: glass, and ink found by colour.
    tables : ndarray (3, 256)
        Optical-density tables of the glass (:func:`tilewright.tissue.density.od_tables`).
    mpp : float
        µm per pixel.
    blood : ndarray (H, W) bool, optional
        Red cells (left out of the slide's tissue texture, granular, and of what a film grows into,
        dense).
    noise_od : float
        The glass's pixel noise in one channel's OD (:func:`.pieces.granularity`).
    min_px : float
        Smallest film, pixels.
    min_stroke_um, elongation : float
        A stroke's narrowest width (µm) and least length over width.

    Returns
    -------
    ndarray (H, W) bool
        Film pixels: smooth films (none when the slide's tissue is smooth) and dark films (found
        on any slide).
    """
    out = np.zeros_like(tissue)
    rows, cols = np.flatnonzero(tissue.any(axis=1)), np.flatnonzero(tissue.any(axis=0))
    if rows.size == 0:
        return out
    box = (int(rows[0]), int(rows[-1]) + 1, int(cols[0]), int(cols[-1]) + 1)
    grain, dens = _measure(rgb, tables, noise_od, box)
    sub = (slice(box[0], box[1]), slice(box[2], box[3]))
    t = tissue[sub]
    cells = np.zeros_like(t) if blood is None else blood[sub]
    films = _textured_films(grain, dens, t, cells, away[sub], mpp, min_px, min_stroke_um, elongation)
    films |= dark_films(rgb[sub], dens, t & ~films & ~cells, tables, min_px, noise_od)
    out[sub] = films
    return out


def _textured_films(grain, dens, t, cells, away, mpp, min_px, min_stroke_um, elongation):
    """Steps 1-4 of the module's text over the tissue's box: smooth films and what they grow into."""
    import cv2

    films = np.zeros_like(t)
    ref = t & (dens >= MIN_FILM_OD) & ~cells
    if ref.sum() < max(100, min_px):
        return films
    disc = cv2.getStructuringElement(cv2.MORPH_ELLIPSE, (5, 5))
    texture = float(np.median(grain[ref]))
    if texture < MIN_TEXTURE:
        texture = _texture_beside_films(grain, dens, t & ~cells, away, disc, mpp, min_px, min_stroke_um, elongation)
        if texture < MIN_TEXTURE:
            return films
    # red cells are off the plane (haemoglobin), found by colour: never a film on it, however smooth
    # (packed sheets of cells 7 µm across are smooth at a thumbnail's 8 µm/px)
    smooth = cv2.morphologyEx((t & ~cells & (grain < SMOOTH_SHARE * texture)).view(np.uint8), cv2.MORPH_OPEN, disc).view(bool)
    films, width = _seeds(smooth, away, dens, mpp, min_px, min_stroke_um, elongation)
    if not films.any():
        return films
    level = float(np.median(dens[films]))
    dense = t & (dens >= MIN_FILM_OD) & ~cells  # red cells are dense too
    films |= touching(dense & (grain < LOOSE_SHARE * texture), films)
    # over tissue: density above the tissue's local level (its mean over a Gaussian of 1.5 stroke
    # widths, over tissue pixels only, the films left out) by a share of the film's own
    sigma = max(5.0, 1.5 * width)
    weight = (t & ~films).astype(np.float32)
    den = cv2.GaussianBlur(weight, (0, 0), sigma)
    local = cv2.GaussianBlur(dens * weight, (0, 0), sigma) / np.maximum(den, np.float32(1e-3))
    films |= touching(dense & (den > 0.05) & (dens - local >= EXCESS * level), films)
    return films
