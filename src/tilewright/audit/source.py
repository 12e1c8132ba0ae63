"""Read the pixels an audit looks at from a tilewright output folder, with plain zarr and pandas.

Two views of each slide:

``"thumbnail"``
    the slide at mask resolution: the raw (un-normalized) thumbnail pixels under the stored tissue
    mask, and the pixels outside it as background. Shows scanner/site colour as it came.
``"tiles"``
    a reproducible sample of stored tiles (seeded, at most ``max_tiles`` per slide) at the target
    µm/px, normalized when the run normalized. Shows the colour a model will be trained on.

Inside tiles, a pixel counts as tissue when its optical density reaches 0.15 in at least one
channel (the blank-glass threshold of Macenko et al. 2009).
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
from scipy import ndimage

from tilewright.errors import IncompleteStoreError, StoreError

__all__ = ["SlidePixels", "resolve_folder", "read_manifest", "read_slide", "SOURCES"]

SOURCES = ("tiles", "thumbnail")
#: Intensity at or below which a channel has OD >= 0.15 (255 * 10**-0.15 = 180.5).
TISSUE_MAX_INTENSITY = 180
#: At most this many tissue pixels per slide enter the colour metrics (seeded subsample).
MAX_PIXELS = 200_000
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
    attrs : dict
        Group attributes of the store.
    """

    slide_id: str
    tissue: np.ndarray
    background: np.ndarray
    gray: list
    tissue_fraction: float
    preview: np.ndarray
    n_tiles: int
    attrs: dict


def resolve_folder(cohort_or_dir) -> Path:
    """The output folder of a cohort given as a path or as an object that knows its folder.

    Parameters
    ----------
    cohort_or_dir : str, os.PathLike or object
        A folder written by ``tile-out`` / ``tile_cohort``, or an object (such as
        :class:`tilewright.Cohort`) with a ``path``, ``root``, ``out_dir`` or ``folder`` attribute.

    Returns
    -------
    Path

    Raises
    ------
    StoreError
        When the folder does not exist or holds no manifest.
    """
    if isinstance(cohort_or_dir, (str, os.PathLike)):
        folder = Path(cohort_or_dir)
    else:
        for name in ("path", "root", "out_dir", "folder", "directory"):
            value = getattr(cohort_or_dir, name, None)
            if isinstance(value, (str, os.PathLike)):
                folder = Path(value)
                break
        else:
            raise StoreError(
                f"cannot tell the output folder of a {type(cohort_or_dir).__name__}; pass the folder path"
            )
    if not folder.is_dir():
        raise StoreError("output folder not found; give the folder tile-out wrote", folder)
    if not (folder / "manifest.csv").is_file() and not (folder / "manifest.parquet").is_file():
        raise StoreError("no manifest.csv here; is this a tile-out output folder? run tile-out first", folder)
    return folder


def read_manifest(folder: Path) -> pd.DataFrame:
    """The cohort manifest, indexed by slide id (every status kept).

    Raises
    ------
    StoreError
        When the manifest cannot be read or lacks the ``slide_id`` / ``status`` columns.
    """
    csv = folder / "manifest.csv"
    try:
        if csv.is_file():
            manifest = pd.read_csv(csv, dtype={"slide_id": str, "status": str, "error": str})
        else:
            manifest = pd.read_parquet(folder / "manifest.parquet")
    except (ValueError, OSError) as exc:
        raise StoreError(f"cannot read the manifest ({exc}); re-run tile-out to rewrite it", csv) from exc
    missing = {"slide_id", "status"} - set(manifest.columns)
    if missing:
        raise StoreError(f"manifest lacks column(s) {sorted(missing)}; re-run tile-out to rewrite it", csv)
    manifest["slide_id"] = manifest["slide_id"].astype(str)
    return manifest.drop_duplicates("slide_id", keep="last").set_index("slide_id")


def read_slide(folder: Path, slide_id: str, source: str, *, max_tiles: int = 64, seed: int = 0) -> SlidePixels:
    """Read the pixels of one slide store for the audit.

    Parameters
    ----------
    folder : Path
        Cohort output folder.
    slide_id : str
        Store name without ``.zarr``.
    source : {"tiles", "thumbnail"}
        Which view of the slide to read (see the module notes).
    max_tiles : int
        Tiles sampled per slide for ``source="tiles"``.
    seed : int
        Seed of the tile and pixel sample; the slide id is mixed in so slides differ.

    Returns
    -------
    SlidePixels

    Raises
    ------
    StoreError
        When the store is missing or lacks the arrays this source needs.
    IncompleteStoreError
        When the store was never marked complete.
    """
    import zarr

    path = folder / f"{slide_id}.zarr"
    if not path.is_dir():
        raise StoreError("store listed as ok in the manifest is missing; re-run tile-out", path)
    try:
        group = zarr.open_group(str(path), mode="r")
    except Exception as exc:  # zarr raises several types for a damaged group
        raise StoreError(f"cannot open the store ({exc}); re-run tile-out with --overwrite", path) from exc
    attrs = dict(group.attrs)
    if not attrs.get("complete", False):
        raise IncompleteStoreError("store was never marked complete (interrupted run); re-run tile-out", path)
    names = set(group.array_keys())
    needed = {"thumbnail", "mask"} | ({"tiles"} if source == "tiles" else set())
    if needed - names:
        raise StoreError(f"store lacks array(s) {sorted(needed - names)}; re-run tile-out", path)
    thumbnail = np.asarray(group["thumbnail"][...], dtype=np.uint8)
    mask = np.asarray(group["mask"][...], dtype=bool)
    if thumbnail.ndim != 3 or thumbnail.shape[-1] != 3 or mask.shape != thumbnail.shape[:2]:
        raise StoreError(
            f"thumbnail {thumbnail.shape} and mask {mask.shape} do not match; re-run tile-out", path
        )
    rng = np.random.default_rng([seed, _stable_hash(slide_id)])
    tissue_fraction = float(mask.mean()) if mask.size else float("nan")
    n_tiles = int(group["tiles"].shape[0]) if "tiles" in names else 0
    if source == "thumbnail":
        tissue = thumbnail[mask]
        background = thumbnail[~mask]
        gray = [(_gray(thumbnail), ndimage.binary_erosion(mask, iterations=2))]
        preview = _shrink(thumbnail, PREVIEW_SIDE)
    else:
        tiles = _sample_tiles(group["tiles"], max_tiles, rng)
        if tiles.shape[0]:
            is_tissue = (tiles <= TISSUE_MAX_INTENSITY).any(axis=-1)
            tissue = tiles[is_tissue]
            background = tiles[~is_tissue]
        else:
            is_tissue = np.zeros(tiles.shape[:3], bool)
            tissue = background = np.zeros((0, 3), np.uint8)
        gray = [(_gray(t), m) for t, m in zip(tiles, is_tissue)]
        preview = _mosaic(tiles, PREVIEW_SIDE) if tiles.shape[0] else _shrink(thumbnail, PREVIEW_SIDE)
    return SlidePixels(
        slide_id=slide_id,
        tissue=_subsample(tissue, MAX_PIXELS, rng),
        background=_subsample(background, MAX_PIXELS // 4, rng),
        gray=gray,
        tissue_fraction=tissue_fraction,
        preview=preview,
        n_tiles=n_tiles,
        attrs=attrs,
    )


def _stable_hash(text: str) -> int:
    """A process-independent integer from a string (Python's ``hash`` is salted)."""
    value = 0
    for byte in text.encode("utf-8"):
        value = (value * 131 + byte) % (2**61 - 1)
    return value


def _sample_tiles(tiles, max_tiles: int, rng: np.random.Generator) -> np.ndarray:
    n = int(tiles.shape[0])
    if n == 0 or max_tiles <= 0:
        return np.zeros((0,) + tuple(tiles.shape[1:]), np.uint8)
    if n <= max_tiles:
        return np.asarray(tiles[...], dtype=np.uint8)
    index = np.sort(rng.choice(n, size=max_tiles, replace=False))
    return np.asarray(tiles.get_orthogonal_selection((index,)), dtype=np.uint8)


def _subsample(pixels: np.ndarray, limit: int, rng: np.random.Generator) -> np.ndarray:
    pixels = pixels.reshape(-1, 3)
    if pixels.shape[0] <= limit:
        return pixels
    return pixels[np.sort(rng.choice(pixels.shape[0], size=limit, replace=False))]


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
