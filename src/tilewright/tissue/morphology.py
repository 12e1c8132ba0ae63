"""Morphological cleaning of a tissue mask: discs, small pieces, holes (sizes in pixels)."""

from __future__ import annotations

import numpy as np

__all__ = ["px", "morph", "drop_small", "fill_holes", "enclosed", "touching"]


def px(um: float, mpp: float) -> int:
    """A length in µm as a whole number of pixels at ``mpp`` (0 for none)."""
    return int(round(um / mpp)) if um and um > 0 else 0


def morph(mask: np.ndarray, op: str, radius: int) -> np.ndarray:
    """Open, close, dilate or erode ``mask`` with a disc of ``radius`` pixels (0: ``mask`` itself);
    closing and erosion treat the outside of the slide as glass, opening and dilation as more of
    the edge."""
    if radius <= 0:
        return mask
    import cv2

    kernel = cv2.getStructuringElement(cv2.MORPH_ELLIPSE, (2 * radius + 1, 2 * radius + 1))
    code = {"open": cv2.MORPH_OPEN, "close": cv2.MORPH_CLOSE, "dilate": cv2.MORPH_DILATE,
            "erode": cv2.MORPH_ERODE}[op]
    # pad so closing does not glue tissue to the slide border and opening is not eroded by it
    pad = radius + 1
    # (erosion: outside the slide counts as glass, so a thin glass strip along the slide's edge
    # that smoothing filled in is in the border band of mask._edges_at_half_step)
    m = np.pad(mask.astype(np.uint8), pad, mode="constant" if op in ("close", "erode") else "edge")
    out = cv2.morphologyEx(m, code, kernel)
    return out[pad:-pad, pad:-pad].astype(bool)


def drop_small(mask: np.ndarray, min_px: float) -> np.ndarray:
    """Remove 8-connected components smaller than ``min_px`` pixels."""
    if min_px <= 1 or not mask.any():
        return mask
    import cv2

    # OpenCV labels with int32 and counts areas itself (no int64 copy of the labels)
    n, labels, stats, _ = cv2.connectedComponentsWithStats(np.ascontiguousarray(mask).view(np.uint8), connectivity=8,
                                                           ltype=cv2.CV_32S)
    small = stats[:, cv2.CC_STAT_AREA] < min_px
    small[0] = False
    return mask & ~small[labels]


def fill_holes(mask: np.ndarray, max_px: float) -> np.ndarray:
    """Fill 4-connected background regions smaller than ``max_px`` that do not touch the border."""
    if max_px <= 0 or mask.all():
        return mask
    import cv2

    background = ~mask
    n, labels, stats, _ = cv2.connectedComponentsWithStats(background.view(np.uint8), connectivity=4,
                                                           ltype=cv2.CV_32S)
    del background
    border = np.unique(np.r_[labels[0], labels[-1], labels[:, 0], labels[:, -1]])
    fill = stats[:, cv2.CC_STAT_AREA] < max_px
    fill[0] = False  # label 0 is the tissue itself
    fill[border] = False
    return mask | fill[labels]


def enclosed(mask: np.ndarray, radius: int, directions: int = 8) -> np.ndarray:
    """Pixels outside ``mask`` with a ``mask`` pixel within ``radius`` pixels along every one of
    ``directions`` rays (a sector each, so a ray is not missed between two pixels of a thin line):
    the inside of a mesh (fat: empty cells walled by membranes a pixel wide, broken here and
    there at a thumbnail's density threshold), not the glass beside a piece (open on one side)
    nor a channel between two pieces (open at its ends)."""
    if radius <= 0 or not mask.any():
        return np.zeros_like(mask)
    import cv2

    m = np.ascontiguousarray(mask).view(np.uint8)
    size = 2 * radius + 1
    yy, xx = np.mgrid[-radius:radius + 1, -radius:radius + 1]
    ang = np.arctan2(yy, xx)
    dist = np.hypot(yy, xx)
    out = ~mask
    for k in range(directions):
        a = 2 * np.pi * k / directions
        gap = np.abs(np.angle(np.exp(1j * (ang - a))))
        sector = ((gap <= np.pi / directions) & (dist <= radius) & (dist > 0)).astype(np.uint8)
        # dilation with the sector flipped: a pixel is set when a mask pixel lies in its sector
        out &= cv2.dilate(m, sector[::-1, ::-1].copy(), anchor=(radius, radius),
                          borderType=cv2.BORDER_CONSTANT, borderValue=0).view(bool)
        if not out.any():
            break
    return out


def touching(candidates: np.ndarray, seeds: np.ndarray, grow: int = 2) -> np.ndarray:
    """The connected pieces (8-connected) of ``candidates`` touching ``seeds`` grown by ``grow`` px."""
    import cv2

    n, labels, _, _ = cv2.connectedComponentsWithStats(candidates.view(np.uint8), connectivity=8, ltype=cv2.CV_32S)
    touch = cv2.dilate(seeds.view(np.uint8), np.ones((2 * grow + 1, 2 * grow + 1), np.uint8)).view(bool)
    keep = np.zeros(n, bool)
    keep[np.unique(labels[touch & candidates])] = True
    keep[0] = False
    return keep[labels]
