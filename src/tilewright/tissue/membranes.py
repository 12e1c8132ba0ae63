"""Fat found as what it is at a thumbnail's µm/px: a mesh of thin membranes round empty cells.

A fat cell is 50-150 µm of empty space walled by a membrane a few µm thick. At 5-11 µm/px the
wall is a line about one pixel wide and a few grey levels dark, so the smoothed density finds it
only in part, and a glass level set right (on unevenly lit glass) finds it not at all: fat is
then lost with the glass. What tells fat from glass is its pattern, not its density:

1. **Line pixels.** The mean optical density (against the glass colour, not smoothed) is
   filtered with oriented line masks (a line of :data:`LINE_PX` pixels less the two parallel
   lines :data:`OFFSET_PX` pixels to its sides, :data:`ORIENTATIONS` directions; line detection
   with oriented masks, Gonzalez & Woods); a pixel is on a line where the best of them exceeds
   :data:`LINE_SIGMAS` times the masks' own noise on the slide's glass (their robust standard
   deviation over the glass candidates, never under half a grey level). Pixels within
   :data:`CLEAR_UM` of the solid part of what the density threshold found (what survives an
   opening by :data:`SOLID_PX`: not the walls it found in part) are left out: the rims of
   tissue and ink are edges in every direction.
2. **A mesh, not a line.** Lines in many directions: the density of line pixels (a Gaussian of
   :data:`WINDOW_UM`) less the length of their mean doubled-angle vector (the orientation
   coherence of Kass & Witkin) is zero along a single line however it curves slowly (a fibre's
   stretch, a bubble's or a coverslip's rim) and high in a mesh. Where it exceeds
   :data:`MESH_DENSITY` a region of mesh is kept ...
3. **... of closed cells.** ... when at least :data:`MIN_CELLS` empty cells (the pieces left
   between the line pixels, closed over one-pixel gaps, each :data:`MIN_CELL_UM` to
   :data:`MAX_CELL_UM` across and lying in the region) lie in it: a fibre's loop or a bubble is one cell, fat dozens.

References
----------
.. [1] R. C. Gonzalez and R. E. Woods, *Digital Image Processing*, 3rd ed., Prentice Hall, 2008,
       section 10.2.3 (line detection with oriented masks).
.. [2] M. Kass and A. Witkin, "Analyzing oriented patterns", Computer Vision, Graphics, and
       Image Processing 37(3):362-385, 1987 (orientation coherence from doubled angles).
"""

from __future__ import annotations

import math

import numpy as np

from .density import channel_mean, od_lookup
from .exclusions import BAND_ROWS, bands, smooth

__all__ = ["line_masks", "line_pixels", "fat_mesh", "LINE_PX", "OFFSET_PX", "ORIENTATIONS", "LINE_SIGMAS",
           "CLEAR_UM", "SOLID_PX", "WINDOW_UM", "MESH_DENSITY", "MIN_CELLS", "MIN_CELL_UM", "MAX_CELL_UM"]

#: Length (pixels) of the oriented line masks, and the offset (pixels) of their two side lines: a
#: membrane is about a pixel wide at 5-11 µm/px, and fat cells are 5 or more pixels across.
LINE_PX = 5
OFFSET_PX = 2
ORIENTATIONS = 8
#: A line pixel clears the masks' noise on glass by this many robust standard deviations.
LINE_SIGMAS = 4.0
#: Line pixels this close (µm) to what the density threshold found are not counted.
CLEAR_UM = 24.0
#: Gaussian window (µm) of the density of line pixels and of their orientation.
WINDOW_UM = 30.0
#: Density of line pixels in many directions (see the module's text) over which there is mesh.
MESH_DENSITY = 0.1
#: A region of mesh holds at least this many closed cells, each MIN_CELL_UM to MAX_CELL_UM across
#: (the area of a square of that side: fat cells are 50-150 µm; the slivers between the two edges
#: of a thick line are smaller).
MIN_CELLS = 4
MIN_CELL_UM = 15.0
MAX_CELL_UM = 150.0
#: What the density threshold found is solid where it survives an opening by a disc of this radius
#: (pixels): membranes found in part are a pixel or two wide.
SOLID_PX = 2
_HALO = 6  # the masks reach 4 pixels


def line_masks(length: int = LINE_PX, offset: int = OFFSET_PX, n: int = ORIENTATIONS) -> list[np.ndarray]:
    """Oriented line masks: +1/|line| on the pixels within half a pixel of a line of ``length``
    through the centre at angle ``pi k / n``, -1/|side| on those of the two parallel lines
    ``offset`` pixels away (each sums to zero: flat glass and light gradients give nothing)."""
    r = int(math.ceil(max(length / 2.0, offset + 0.5))) + 1
    yy, xx = np.mgrid[-r:r + 1, -r:r + 1].astype(np.float64)
    out = []
    for k in range(n):
        t = math.pi * k / n
        along = xx * math.cos(t) + yy * math.sin(t)
        across = np.abs(-xx * math.sin(t) + yy * math.cos(t))
        inside = np.abs(along) <= length / 2.0
        line = inside & (across < 0.5)
        side = inside & (across >= offset - 0.5) & (across < offset + 0.5)
        out.append((line / line.sum() - side / side.sum()).astype(np.float32))
    return out


def line_pixels(rgb: np.ndarray, tables: np.ndarray, glass: np.ndarray, min_noise: float) -> tuple[np.ndarray, np.ndarray]:
    """Pixels on thin lines and the direction of each (see the module's text, step 1).

    Parameters
    ----------
    rgb : ndarray (H, W, 3) uint8
    tables : ndarray (3, 256)
        Optical-density tables of the glass (:func:`.density.od_tables`).
    glass : ndarray (H, W) bool
        Blank-glass candidates: the masks' noise is measured there.
    min_noise : float
        Floor of that noise (mean OD).

    Returns
    -------
    (ndarray (H, W) bool, ndarray (H, W) uint8)
        Line pixels, and the index ``k`` of the best mask (angle ``pi k / ORIENTATIONS``).
    """
    import cv2

    h, w = rgb.shape[:2]
    masks = line_masks()
    best = np.empty((h, w), np.float32)
    which = np.zeros((h, w), np.uint8)
    # an evenly strided sample of the glass (at most 50,000 pixels) is plenty for a spread
    at = np.flatnonzero(glass.reshape(-1))
    at = at[:: max(1, at.size // 50_000)]
    samples = [[] for _ in masks]
    for r0 in range(0, h, BAND_ROWS):
        r1 = min(h, r0 + BAND_ROWS)
        a0, a1 = max(0, r0 - _HALO), min(h, r1 + _HALO)
        f = channel_mean(od_lookup(np.ascontiguousarray(rgb[a0:a1]), tables))  # mean OD, not smoothed
        here = at[(at >= r0 * w) & (at < r1 * w)] - r0 * w
        top, idx = best[r0:r1], which[r0:r1]
        for k, m in enumerate(masks):
            resp = cv2.filter2D(f, -1, m, borderType=cv2.BORDER_REFLECT)[r0 - a0:r1 - a0]
            samples[k].append(resp.reshape(-1)[here])
            if k == 0:
                top[...] = resp
            else:
                up = resp > top
                np.maximum(top, resp, out=top)
                np.copyto(idx, np.uint8(k), where=up)
    noise = min_noise
    if at.size >= 100:  # the masks' noise on glass: robust, the mean over directions
        noise = max(noise, float(np.mean([1.4826 * np.median(np.abs(np.concatenate(s))) for s in samples])))
    return best > LINE_SIGMAS * noise, which


def fat_mesh(rgb: np.ndarray, tables: np.ndarray, mpp: float, found: np.ndarray, glass: np.ndarray,
             min_noise: float) -> np.ndarray:
    """Regions of fat: meshes of thin lines in many directions round closed cells, beside what
    the density threshold ``found`` (see the module's text).

    Parameters
    ----------
    rgb, tables, glass, min_noise
        As in :func:`line_pixels`.
    mpp : float
        µm per pixel.
    found : ndarray (H, W) bool
        What the density threshold found (its rims are not counted).

    Returns
    -------
    ndarray (H, W) bool
    """
    import cv2

    lines, which = line_pixels(rgb, tables, glass, min_noise)
    clear = max(1, int(round(CLEAR_UM / mpp)))
    disc = cv2.getStructuringElement(cv2.MORPH_ELLIPSE, (2 * clear + 1, 2 * clear + 1))
    # the rims of solid pieces only: walls the threshold found in part are thinner than the opening
    solid = cv2.morphologyEx(np.ascontiguousarray(found).view(np.uint8), cv2.MORPH_OPEN,
                             cv2.getStructuringElement(cv2.MORPH_ELLIPSE, (2 * SOLID_PX + 1, 2 * SOLID_PX + 1)))
    lines &= ~cv2.dilate(solid, disc).view(bool)
    if not lines.any():
        return np.zeros_like(lines)
    # line pixels in many directions: their density less the length of their mean doubled angle
    angle = (2.0 * np.pi / ORIENTATIONS) * np.arange(ORIENTATIONS)
    cos, sin = np.cos(angle).astype(np.float32), np.sin(angle).astype(np.float32)
    sigma = WINDOW_UM / mpp
    h = lines.shape[0]
    mesh = np.zeros_like(lines)
    for r0, r1, a0, a1 in bands(h, sigma):
        hit = lines[a0:a1].astype(np.float32)
        k = which[a0:a1]
        d = smooth(hit, sigma)
        c = smooth(hit * cos[k], sigma)
        s = smooth(hit * sin[k], sigma)
        mesh[r0:r1] = (d - np.sqrt(c * c + s * s))[r0 - a0:r1 - a0] > MESH_DENSITY
    if not mesh.any():
        return mesh
    # closed cells: pieces between the line pixels (one-pixel gaps closed), small, inside the region
    walls = cv2.morphologyEx(lines.view(np.uint8), cv2.MORPH_CLOSE, np.ones((3, 3), np.uint8)).view(bool)
    n, cells, stats, _ = cv2.connectedComponentsWithStats((~walls).view(np.uint8), connectivity=4, ltype=cv2.CV_32S)
    area = stats[:, cv2.CC_STAT_AREA]
    inside = np.bincount(cells[mesh], minlength=n)
    cell = (area >= (MIN_CELL_UM / mpp) ** 2) & (area <= (MAX_CELL_UM / mpp) ** 2) & (inside >= 0.8 * area)
    m, regions, _, _ = cv2.connectedComponentsWithStats(mesh.view(np.uint8), connectivity=8, ltype=cv2.CV_32S)
    at = cell[cells] & mesh
    pairs = np.unique(regions[at].astype(np.int64) * n + cells[at])  # (region, cell) pairs, once each
    count = np.bincount(pairs // n, minlength=m)
    keep = count >= MIN_CELLS
    keep[0] = False
    return keep[regions]
