"""The pixels an audit measures on one slide, split into tissue and background by the shared
tissue-pixel rule.

A pixel is tissue when the Euclidean norm of its optical-density vector, measured against the
slide's glass colour, reaches 0.15 (:func:`tilewright.stain.tissue_pixels.tissue_mask`): the rule
stain estimation uses, so the audit and the normalizer look at the same pixels. Raw pixels are
measured against the glass colour the run recorded (or, for a run without normalization, the
glass estimated from the stored thumbnail's background like the run would); normalized tiles
against the glass the normalizer rendered them on (white unless set).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["SlidePixels", "tile_pixels", "tissue_pick", "thumbnail_pixels", "raw_glass", "stored_glass", "PREVIEW_SIDE",
           "MAX_PIXELS"]

#: At most this many tissue pixels per slide enter the colour metrics (seeded subsample). At
#: 50,000 a 10,000-slide audit costs about 30 ms of CPU a slide (200,000: 165 ms); against the
#: 200,000-pixel sample of the same tiles the metrics moved by at most 0.12 L*, 0.3 degrees of a
#: stain vector's angle and 0.006 of a maximum stain concentration (64 synthetic slides,
#: ``benchmarks/scale.py``), far below the site differences an audit looks for (several CIELAB units,
#: several degrees).
MAX_PIXELS = 50_000
PREVIEW_SIDE = 96


@dataclass
class SlidePixels:
    """What the metrics of one slide are computed from.

    Attributes
    ----------
    slide_id : str
    tissue : ndarray, uint8, (M, 3)
        Tissue pixels (subsampled to at most ``MAX_PIXELS``).
    background : ndarray, uint8, (K, 3)
        Non-tissue pixels (may be empty).
    gray : list of (ndarray, ndarray)
        Grey-level images (float32) with their tissue masks (bool), for the sharpness measure:
        the sampled tiles, or the thumbnail with its mask shrunk by 2 px.
    tissue_fraction : float
        Fraction of the slide thumbnail covered by the tissue mask.
    preview : ndarray, uint8, (h, w, 3)
        Small picture for the cluster grid (thumbnail, or a 2 x 2 mosaic of sampled tiles).
    n_tiles : int
        Tiles in the store.
    attrs : dict
        Group attributes of the store.
    tiles : ndarray, uint8, (T, h, w, 3), optional
        The sampled tiles themselves, for the stain estimate (which reads tiles the way the
        normalizer reads a slide's sample: :mod:`tilewright.stain.estimate_od`); None for a
        thumbnail.
    glass : ndarray (3,) or None
        Glass colour the tiles' optical density is measured against (None: white).
    """

    slide_id: str
    tissue: np.ndarray
    background: np.ndarray
    gray: list
    tissue_fraction: float
    preview: np.ndarray
    n_tiles: int
    attrs: dict
    tiles: np.ndarray | None = None
    glass: np.ndarray | None = None


def raw_glass(attrs: dict, thumbnail: np.ndarray, background: np.ndarray):
    """Glass colour of a slide's raw pixels: the one its run measured, else estimated.

    Parameters
    ----------
    attrs : dict
        Store attributes (``normalizer.glass`` is the glass the run measured).
    thumbnail : ndarray, uint8, (H, W, 3)
    background : ndarray of bool, (H, W)
        Thumbnail pixels that are neither tissue nor ink.

    Returns
    -------
    ndarray (3,) or None
        None for white glass.
    """
    from tilewright.stain.density import check_glass, estimate_glass

    recorded = (attrs.get("normalizer") or {}).get("glass")
    if recorded is not None:
        return check_glass(recorded)
    return estimate_glass(thumbnail, background)


def stored_glass(attrs: dict, thumbnail: np.ndarray, background: np.ndarray):
    """Glass colour of the stored tiles: the normalizer's output glass (None: white) when the
    run normalized, the raw glass otherwise."""
    from tilewright.stain.density import check_glass

    normalizer = attrs.get("normalizer")
    if normalizer:
        return check_glass(normalizer.get("output_glass"))
    return raw_glass(attrs, thumbnail, background)


def tile_pixels(slide_id: str, tiles: np.ndarray, masks: np.ndarray, *, pick: np.ndarray | None,
                tissue_fraction: float, n_tiles: int, attrs: dict, glass=None) -> SlidePixels:
    """Pixels of sampled tiles, split by per-tile tissue masks.

    Parameters
    ----------
    tiles : ndarray, uint8, (T, h, w, 3)
    masks : ndarray of bool, (T, h, w)
        Tissue pixels (the same masks for the raw and the stored side of a before/after pair).
    pick : ndarray of int or None
        Flat indices into the tissue pixels to keep (a seeded subsample shared by both sides);
        None keeps all.
    glass : array_like (3,), optional
        Glass colour of ``tiles`` (for their stain estimate); None is white.
    """
    tissue = tiles[masks]
    if pick is not None:
        tissue = tissue[pick]
    background = tiles[~masks]
    if background.shape[0] > MAX_PIXELS // 4:
        background = background[np.linspace(0, background.shape[0] - 1, MAX_PIXELS // 4).astype(np.int64)]
    gray = [(_gray(t), m) for t, m in zip(tiles, masks)]
    preview = _mosaic(tiles, PREVIEW_SIDE) if tiles.shape[0] else np.full((8, 8, 3), 255, np.uint8)
    return SlidePixels(slide_id, tissue, background, gray, tissue_fraction, preview, n_tiles, attrs, tiles, glass)


def tissue_pick(masks: np.ndarray, rng: np.random.Generator, limit: int = MAX_PIXELS) -> np.ndarray | None:
    """Sorted flat indices of at most ``limit`` tissue pixels (None when all fit)."""
    count = int(np.count_nonzero(masks))
    if count <= limit:
        return None
    return np.sort(rng.choice(count, size=limit, replace=False))


def thumbnail_pixels(slide_id: str, thumbnail: np.ndarray, mask: np.ndarray, glass, *, n_tiles: int, attrs: dict,
                     rng: np.random.Generator) -> SlidePixels:
    """Pixels of the raw thumbnail: tissue where the stored mask and the tissue-pixel rule agree."""
    from scipy import ndimage

    from tilewright.stain.tissue_pixels import tissue_mask

    tissue_here = mask & tissue_mask(thumbnail, glass=glass)
    tissue = thumbnail[tissue_here]
    pick = tissue_pick(tissue_here, rng)
    if pick is not None:
        tissue = tissue[pick]
    background = thumbnail[~mask]
    gray = [(_gray(thumbnail), ndimage.binary_erosion(mask, iterations=2))]
    fraction = float(mask.mean()) if mask.size else float("nan")
    return SlidePixels(slide_id, tissue, background, gray, fraction, _shrink(thumbnail, PREVIEW_SIDE), n_tiles,
                       attrs)


def _gray(rgb: np.ndarray) -> np.ndarray:
    """ITU-R BT.601 luma, float32 in 0..255."""
    rgb = rgb.astype(np.float32)
    return rgb[..., 0] * 0.299 + rgb[..., 1] * 0.587 + rgb[..., 2] * 0.114


def _shrink(rgb: np.ndarray, side: int) -> np.ndarray:
    import cv2

    h, w = rgb.shape[:2]
    scale = side / max(h, w, 1)
    if scale >= 1:
        return rgb.copy()
    size = (max(1, round(w * scale)), max(1, round(h * scale)))
    return cv2.resize(rgb, size, interpolation=cv2.INTER_AREA)


def _mosaic(tiles: np.ndarray, side: int) -> np.ndarray:
    """A 2 x 2 mosaic of the first sampled tiles, shrunk to ``side`` px."""
    picks = list(tiles[:4]) + [np.full_like(tiles[0], 255)] * max(0, 4 - len(tiles))
    grid = np.concatenate([np.concatenate(picks[:2], axis=1), np.concatenate(picks[2:4], axis=1)], axis=0)
    return _shrink(grid, side)
