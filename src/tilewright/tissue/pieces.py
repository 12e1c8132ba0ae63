"""Which off-plane pieces of a slide are marker ink and which are tissue: texture, shape, context.

Colour alone cannot tell red marker from red blood cells (both absorb green and blue), nor a
marker dot from tissue stained off the H&E plane. Off-plane pixels are judged in connected
pieces, by what marker is and tissue is not:

- **texture**: marker lies on the cover glass as a film of dye, smooth from pixel to pixel;
  packed red cells (one disc of about 7 µm each) vary from pixel to pixel even at a thumbnail's
  8 µm/px. A piece's granular core (:func:`granularity`) is red cells: tissue, whatever its
  shape or place, and cut out of the piece before the rest is judged, so that a stroke touching
  a haemorrhage is still a stroke and the haemorrhage still tissue;
- **shape**: a marker leaves strokes and rings, long and at least ``min_stroke_um`` wide
  (:func:`band_shape`); a haemorrhage or a cut vessel is about as long as it is wide;
- **context**: of the compact rest, a piece that touches tissue along less than half of its
  border lies on glass: a marker dot (or, when such pieces are most of what is stained, tissue
  of an unusual colour: see :mod:`.exclusions`);
- **texture and context together**: a compact piece lying in tissue that is smooth (a film of
  dye: :data:`SMOOTH`) and not beside red cells (:func:`smooth_films`) is marker drawn over the
  tissue (a hand-written digit, a tick, a pen tap); the smooth rims of a haemorrhage lie against
  its granular core.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

from .density import od_lookup

__all__ = ["OffPlane", "GrainMap", "split_pieces", "lying_on_glass", "smooth_films", "ink_over_cells", "granularity",
           "granularity_bands",
           "band_shape", "GRANULAR", "SMOOTH"]

#: Fine-detail spread of at least this share of the density: granular (red cells), not a film of dye.
GRANULAR = 0.06
#: Fine-detail spread under this share of the density (glass noise taken out): smooth, a film of
#: dye (marker over glass or tissue measures 0-0.02 at 8 µm/px; packed red cells 0.1-0.2).
SMOOTH = 0.03
_HALO = 5


def band_shape(piece: np.ndarray) -> tuple[float, float]:
    """Width (px) and elongation (area over squared width) of a piece.

    The width is twice the largest inscribed radius (a ring drawn with a 0.5 mm marker is 0.5 mm
    wide and tens of widths long; a haemorrhage or a cut vessel is about as long as it is wide).
    Holes under a tenth of the piece's area (spots of another colour in stained tissue) are
    filled first: they would make a compact piece look thin. A ring's opening is larger.
    """
    import cv2

    padded = np.pad(piece, 1).view(np.uint8)  # a background rim: distances to the box's edge too
    n, labels, stats, _ = cv2.connectedComponentsWithStats(1 - padded, connectivity=4, ltype=cv2.CV_32S)
    small = stats[:, cv2.CC_STAT_AREA] < 0.1 * float(piece.sum())
    small[labels[0, 0]] = False  # the outside
    if small[1:].any():
        padded = padded | small[labels].view(np.uint8)
    width = 2.0 * float(cv2.distanceTransform(padded, cv2.DIST_L2, 5).max())
    return width, float(padded.sum()) / max(width, 1.0) ** 2


def granularity(rgb: np.ndarray, tables: np.ndarray, noise_od: float = 0.0) -> np.ndarray:
    """Fine-detail spread of the optical density relative to the density, per pixel, with the
    glass noise's share at that density taken out.

    The density is summed over R, G and B; its fine detail is what a 3 x 3 median removes (a
    median keeps edges, so the rim of a stroke is not detail); its spread is the root mean square
    of that detail over a Gaussian of 1.5 pixels.

    Parameters
    ----------
    rgb : ndarray (h, w, 3) uint8
        A box of the thumbnail.
    tables : ndarray (3, 256)
        Optical-density tables of the glass (:func:`tilewright.tissue.density.od_tables`).
    noise_od : float
        Robust standard deviation of the glass's optical density in one channel, pixel to pixel
        (its detail summed over R, G and B is about 1.64 times that: sqrt(3) channels, about 0.95
        of white noise passing the detail filter); noise grows as ``10**OD`` with density.

    Returns
    -------
    ndarray (h, w) float32
        About 0 on a film of uniform dye, 0.01-0.05 on stained tissue, 0.1-0.2 on packed red cells
        at 8 µm/px.
    """
    import cv2

    od = od_lookup(np.ascontiguousarray(rgb), tables)
    total = od[..., 0] + od[..., 1]
    total += od[..., 2]
    del od
    detail = total - cv2.medianBlur(total, 3)
    power = cv2.GaussianBlur(detail * detail, (0, 0), 1.5)
    level = np.maximum(cv2.GaussianBlur(total, (0, 0), 1.5), np.float32(0.05))
    if noise_od > 0:
        noise = np.float32(1.64 * noise_od) * np.power(np.float32(10.0), level / np.float32(3.0))
        power -= noise * noise
    return np.sqrt(np.maximum(power, 0.0)) / level


class OffPlane(NamedTuple):
    """Off-plane pixels of one class split by :func:`split_pieces` (bool (H, W) arrays)."""

    strokes: np.ndarray  #: parts long and wide enough to be marker strokes or rings
    compact: np.ndarray  #: the other parts (not granular)
    grains: np.ndarray  #: granular cores: red cells


class GrainMap:
    """Granular pixels of a thumbnail (:func:`granularity` at least :data:`GRANULAR`), and smooth
    ones (under :data:`SMOOTH`: ``smooth``), computed on demand, band by band (float temporaries
    stay a few MB), over the box of the pixels asked about, and kept for the next question."""

    def __init__(self, rgb: np.ndarray, tables: np.ndarray, noise_od: float = 0.0):
        self.rgb, self.tables, self.noise_od = rgb, tables, noise_od
        self.map = np.zeros(rgb.shape[:2], bool)
        self.smooth = np.zeros(rgb.shape[:2], bool)  #: valid over ``box`` as ``map`` is
        self.box = None  # (y0, y1, x0, x1) computed so far

    def __call__(self, where: np.ndarray) -> np.ndarray:
        """The granular-pixel map, valid at least over the box of ``where`` (False elsewhere)."""
        rows, cols = np.flatnonzero(where.any(axis=1)), np.flatnonzero(where.any(axis=0))
        if rows.size:
            want = (rows[0], rows[-1] + 1, cols[0], cols[-1] + 1)
            have = self.box
            if have is None or not (have[0] <= want[0] and want[1] <= have[1] and have[2] <= want[2]
                                    and want[3] <= have[3]):
                box = want if have is None else (min(have[0], want[0]), max(have[1], want[1]),
                                                 min(have[2], want[2]), max(have[3], want[3]))
                self._compute(*box)
                self.box = box
        return self.map

    def _compute(self, y0, y1, x0, x1):
        for r0, r1, g in granularity_bands(self.rgb, self.tables, self.noise_od, (y0, y1, x0, x1)):
            self.map[r0:r1, x0:x1] = g >= GRANULAR
            self.smooth[r0:r1, x0:x1] = g < SMOOTH


def granularity_bands(rgb: np.ndarray, tables: np.ndarray, noise_od: float, box):
    """:func:`granularity` over ``box`` (y0, y1, x0, x1) of a thumbnail, a band of 256 rows at a
    time (float temporaries stay a few MB): yields ``(r0, r1, g)``, ``g`` the granularity of rows
    ``[r0, r1)`` and columns ``[x0, x1)``, each band read with a halo wide enough that it equals
    the whole image's."""
    y0, y1, x0, x1 = box
    h, w = rgb.shape[:2]
    halo = 16  # a 3 x 3 median and two Gaussians of 1.5 px reach 14 px
    cx0, cx1 = max(0, x0 - halo), min(w, x1 + halo)
    for r0 in range(y0, y1, 256):
        r1 = min(y1, r0 + 256)
        a0, a1 = max(0, r0 - halo), min(h, r1 + halo)
        yield r0, r1, granularity(rgb[a0:a1, cx0:cx1], tables, noise_od)[r0 - a0:r1 - a0, x0 - cx0:x1 - cx0]


def split_pieces(candidates: np.ndarray, mpp: float, *, grains_of=None, min_stroke_um: float = 100.0,
                 elongation: float = 3.0) -> OffPlane:
    """Split off-plane pixels into strokes, compact parts and granular cores.

    With ``grains_of`` (a :class:`GrainMap`), the granular core of the pixels (granular pixels
    among them, opened by a disc of 2 pixels so that lone grainy pixels and thin rims do not
    count) is cut out first. The rest is split into connected parts; a part at least
    ``min_stroke_um`` wide and ``elongation`` times longer than wide (:func:`band_shape`) is a
    stroke, any other part compact.

    Parameters
    ----------
    candidates : ndarray (H, W) bool
        Off-plane pixels of one class (see :func:`tilewright.tissue.ink.ink_classes`).
    mpp : float
        µm per pixel.
    grains_of : GrainMap, optional
        Cut out granular cores (for the reddish class, which red cells fall in).
    min_stroke_um, elongation : float
        See above.

    Returns
    -------
    OffPlane
    """
    import cv2

    strokes = np.zeros_like(candidates)
    grains = np.zeros_like(candidates)
    if not candidates.any():
        return OffPlane(strokes, candidates.copy(), grains)
    if grains_of is not None:
        disc = cv2.getStructuringElement(cv2.MORPH_ELLIPSE, (5, 5))
        grains = cv2.morphologyEx((candidates & grains_of(candidates)).view(np.uint8), cv2.MORPH_OPEN,
                                  disc).view(bool)
    rest = candidates & ~grains
    n, labels, stats, _ = cv2.connectedComponentsWithStats(rest.view(np.uint8), connectivity=8, ltype=cv2.CV_32S)
    min_px = max(min_stroke_um / mpp, 1.0)
    whole = None  # labels of the whole off-plane pieces, cores and all (made when needed)
    made = []

    def cores():  # the granular cores labelled, and their areas (made when needed)
        if not made:
            n, lab, st, _ = cv2.connectedComponentsWithStats(grains.view(np.uint8), connectivity=8, ltype=cv2.CV_32S)
            made.append((lab, st[:, cv2.CC_STAT_AREA].astype(np.int64)))
        return made[0]
    for k in np.flatnonzero(stats[1:, cv2.CC_STAT_AREA] >= elongation * min_px ** 2) + 1:
        x, y, bw, bh, _ = stats[k]
        part = labels[y:y + bh, x:x + bw] == k
        width, stretch = band_shape(part)
        if width < min_px or stretch < elongation:
            continue
        if _carved(part, grains, (y, x), cores):  # a band cut out by granular cores: a stroke only if the
            if whole is None:  # whole piece, cores and all, is one too (grainy marker)
                whole = cv2.connectedComponents(candidates.view(np.uint8), connectivity=8, ltype=cv2.CV_32S)[1]
            iy, ix = np.argwhere(part)[0]
            one = whole == whole[y + iy, x + ix]
            rows, cols = np.flatnonzero(one.any(axis=1)), np.flatnonzero(one.any(axis=0))
            w2, s2 = band_shape(one[rows[0]:rows[-1] + 1, cols[0]:cols[-1] + 1])
            if w2 < min_px or s2 < elongation:
                continue
        strokes[y:y + bh, x:x + bw] |= part
    return OffPlane(strokes, rest & ~strokes, grains)


#: A part of off-plane pixels whose outline runs along granular cores over at least this share,
#: cores at least :data:`CARVED_CORES` times its own area, is the smooth rest of a haemorrhage cut
#: into a band by its cores, not a stroke of marker (a stroke that crosses red cells touches them
#: where it crosses only; grainy bits of a stroke are small beside it).
CARVED_SHARE = 0.5
CARVED_CORES = 0.5


def _carved(part, grains, at, cores) -> bool:
    """Whether the outline of ``part`` (a box of the slide at ``at``) runs along ``grains`` whose
    connected cores (labelled ``cores()``) are large beside it."""
    import cv2

    if not grains.any():
        return False
    y, x = at
    h, w = part.shape
    y0, x0 = max(0, y - 1), max(0, x - 1)
    box = np.zeros((min(grains.shape[0], y + h + 1) - y0, min(grains.shape[1], x + w + 1) - x0), np.uint8)
    box[y - y0:y - y0 + h, x - x0:x - x0 + w] = part
    rim = cv2.dilate(box, np.ones((3, 3), np.uint8)).view(bool) & ~box.view(bool)
    near = grains[y0:y0 + box.shape[0], x0:x0 + box.shape[1]][rim]
    if not rim.any() or float(near.mean()) < CARVED_SHARE:
        return False
    labels, areas = cores()
    touched = np.unique(labels[y0:y0 + box.shape[0], x0:x0 + box.shape[1]][rim])
    return float(areas[touched[touched > 0]].sum()) >= CARVED_CORES * float(part.sum())


def lying_on_glass(compact: np.ndarray, away: np.ndarray, *, share: float = 0.5) -> np.ndarray:
    """The parts of ``compact`` (8-connected) lying on glass: at least ``share`` of the ring 4 to
    6 pixels around each is ``away`` (glass, or ink for sure). The ring leaves out the 3 pixels
    next to the part, where a smoothed stroke or dot fades into a blurred rim that is neither
    glass nor tissue.

    Parameters
    ----------
    compact : ndarray (H, W) bool
    away : ndarray (H, W) bool
        Pixels that are not tissue: glass and sure ink.
    """
    import cv2

    out = np.zeros_like(compact)
    if not compact.any():
        return out
    n, labels, stats, _ = cv2.connectedComponentsWithStats(compact.view(np.uint8), connectivity=8,
                                                           ltype=cv2.CV_32S)
    inner = cv2.getStructuringElement(cv2.MORPH_ELLIPSE, (7, 7))
    outer = cv2.getStructuringElement(cv2.MORPH_ELLIPSE, (13, 13))
    h, w = compact.shape
    for k in range(1, n):
        x, y, bw, bh, area = stats[k]
        if area < 3:
            continue
        y0, x0, y1, x1 = max(0, y - 7), max(0, x - 7), min(h, y + bh + 7), min(w, x + bw + 7)
        part = (labels[y0:y1, x0:x1] == k).view(np.uint8)
        ring = cv2.dilate(part, outer).view(bool) & ~cv2.dilate(part, inner).view(bool)
        if not ring.any() or away[y0:y1, x0:x1][ring].mean() >= share:
            out[y0:y1, x0:x1] |= part.view(bool)
    return out


def smooth_films(compact: np.ndarray, grains: np.ndarray, smooth: np.ndarray, *, min_px: float = 60.0,
                 share: float = 0.5, beside: float = 0.5) -> np.ndarray:
    """The parts of ``compact`` that are films of marker over tissue: at least ``min_px`` pixels,
    at least ``share`` of them smooth, and under ``beside`` of them within 3 pixels of red cells.

    Red cells are granular (one disc of about 7 µm each, resolved even at a thumbnail's 8 µm/px);
    where a haemorrhage's granularity fades (its rim, a gap between its cores), its smooth parts
    lie against its granular core. A smooth reddish piece within tissue and away from any red
    cells is a film of dye on the cover glass: red or pink marker drawn over the tissue.

    Parameters
    ----------
    compact : ndarray (H, W) bool
        Compact off-plane parts (not strokes, not granular), those lying on glass already taken.
    grains : ndarray (H, W) bool
        Granular cores (red cells).
    smooth : ndarray (H, W) bool
        Smooth pixels (:attr:`GrainMap.smooth`, valid over the box of ``compact``).
    min_px, share, beside : float
        See above (``min_px``: a pen tap is larger; a lone capillary smaller).
    """
    import cv2

    out = np.zeros_like(compact)
    if not compact.any():
        return out
    n, labels, stats, _ = cv2.connectedComponentsWithStats(compact.view(np.uint8), connectivity=8, ltype=cv2.CV_32S)
    near = cv2.dilate(grains.view(np.uint8), np.ones((7, 7), np.uint8)).view(bool) if grains.any() else grains
    for k in np.flatnonzero(stats[1:, cv2.CC_STAT_AREA] >= min_px) + 1:
        x, y, bw, bh, area = stats[k]
        part = labels[y:y + bh, x:x + bw] == k
        if (smooth[y:y + bh, x:x + bw][part].mean() >= share
                and near[y:y + bh, x:x + bw][part].mean() < beside):
            out[y:y + bh, x:x + bw] |= part
    return out


def ink_over_cells(grains: np.ndarray, strokes: np.ndarray, rgb: np.ndarray, tables: np.ndarray, normal,
                   sigma_px: float) -> np.ndarray:
    """The red cells that a marker stroke runs across: they lie under ink.

    Optical densities add (Beer–Lambert), so a marker over red cells lifts their distance from
    the H&E plane (the residual) by the marker's own, measured where the stroke touches them.
    In each granular region touching a stroke, pixels whose residual exceeds the region's own
    level (its 30th percentile: most of a haemorrhage is not under the stroke) by half the
    stroke's are under ink.

    Parameters
    ----------
    grains, strokes : ndarray (H, W) bool
        Granular cores (red cells) and strokes of the same (reddish) class.
    rgb : ndarray (H, W, 3) uint8
    tables : ndarray (3, 256)
        Optical-density tables of the glass.
    normal : array_like (3,)
        H&E plane normal.
    sigma_px : float
        Gaussian smoothing of the optical density (as the classes were made), pixels.

    Returns
    -------
    ndarray (H, W) bool
    """
    import cv2

    out = np.zeros_like(grains)
    if not (grains.any() and strokes.any()):
        return out
    n, labels, stats, _ = cv2.connectedComponentsWithStats(grains.view(np.uint8), connectivity=8, ltype=cv2.CV_32S)
    touch = cv2.dilate(strokes.view(np.uint8), np.ones((5, 5), np.uint8)).view(bool)
    normal = np.asarray(normal, np.float32)
    halo = int(np.ceil(4 * sigma_px)) + 8
    h, w = grains.shape
    for k in np.unique(labels[touch & grains]):
        x, y, bw, bh, _ = stats[k]
        y0, x0, y1, x1 = max(0, y - halo), max(0, x - halo), min(h, y + bh + halo), min(w, x + bw + halo)
        region = labels[y0:y1, x0:x1] == k
        od = od_lookup(np.ascontiguousarray(rgb[y0:y1, x0:x1]), tables)
        if sigma_px > 0:
            od = cv2.GaussianBlur(od, (0, 0), sigma_px)
        residual = od @ normal
        contact = strokes[y0:y1, x0:x1] & cv2.dilate(region.view(np.uint8), np.ones((9, 9), np.uint8)).view(bool)
        marker = float(np.median(residual[contact]))
        level = float(np.quantile(residual[region], 0.3))
        if marker <= 0:
            continue
        under = region & (residual > level + 0.5 * marker)
        out[y0:y1, x0:x1] |= cv2.morphologyEx(under.view(np.uint8), cv2.MORPH_OPEN, np.ones((3, 3), np.uint8)).view(bool)
    return out
