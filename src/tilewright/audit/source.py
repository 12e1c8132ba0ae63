"""Read the pixels an audit looks at from a tilewright output folder, with plain zarr and pandas.

Three views of each slide:

``"tiles"``
    a reproducible sample of stored tiles (seeded, at most ``max_tiles`` per slide) at the target
    µm/px, normalized when the run normalized. Shows the colour a model will be trained on.
``"source"``
    the same sampled tile positions read raw from the source slide
    (:mod:`tilewright.audit.source_tiles`): the colour before normalization, at the same
    resolution and on the same pixels as ``"tiles"``.
``"thumbnail"``
    the raw thumbnail at mask resolution under the stored tissue mask: a rough look at colour as
    scanned when the source slides are gone (other resolution and pixels than the tiles, so not
    for before/after comparisons).

Tissue pixels are chosen by the rule stain estimation uses (:mod:`tilewright.audit.pixels`).
:func:`read_pair` reads both sides of a before/after comparison from the same tiles with the
same tissue pixels.
"""

from __future__ import annotations

import os
from pathlib import Path

from tilewright.location.objpath import ObjectPath, as_path

import numpy as np
import pandas as pd

from tilewright.audit.pixels import (SlidePixels, raw_glass, stored_glass, thumbnail_pixels, tile_pixels,
                                     tissue_pick)
from tilewright.audit.permutation import stable_seed
from tilewright.errors import IncompleteStoreError, StoreError
from tilewright.store.journal import JOURNAL_NAME

__all__ = ["SlidePixels", "resolve_folder", "read_manifest", "read_slide", "read_pair", "SOURCES"]

SOURCES = ("tiles", "source", "thumbnail")


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
    if isinstance(cohort_or_dir, (str, os.PathLike, ObjectPath)):
        folder = as_path(cohort_or_dir)
    else:
        for name in ("path", "root", "out_dir", "folder", "directory"):
            value = getattr(cohort_or_dir, name, None)
            if isinstance(value, (str, os.PathLike, ObjectPath)):
                folder = as_path(value)
                break
        else:
            raise StoreError(
                f"cannot tell the output folder of a {type(cohort_or_dir).__name__}; pass the folder path"
            )
    if not folder.is_dir():
        raise StoreError("output folder not found; give the folder tile-out wrote", folder)
    if not any((folder / name).is_file() for name in ("manifest.csv", "manifest.parquet", JOURNAL_NAME)):
        raise StoreError("no manifest.csv here; is this a tile-out output folder? run tile-out first", folder)
    return folder


def read_manifest(folder: Path) -> pd.DataFrame:
    """The cohort manifest, indexed by slide id (every status kept).

    Raises
    ------
    StoreError
        When the manifest cannot be read or lacks the ``slide_id`` / ``status`` columns.
    """
    from tilewright.store.cohort import read_manifest as manifest_with_journal

    csv = folder / "manifest.csv"
    try:  # with the rows a running (or killed) run has not folded into it yet
        manifest = manifest_with_journal(folder)
    except (ValueError, OSError) as exc:
        raise StoreError(f"cannot read the manifest ({exc}); re-run tile-out to rewrite it", csv) from exc
    missing = {"slide_id", "status"} - set(manifest.columns)
    if missing:
        raise StoreError(f"manifest lacks column(s) {sorted(missing)}; re-run tile-out to rewrite it", csv)
    manifest["slide_id"] = manifest["slide_id"].astype(str)
    return manifest.drop_duplicates("slide_id", keep="last").set_index("slide_id")


def _open(folder: Path, slide_id: str, needs_tiles: bool):
    """Store, attributes, thumbnail, mask and background of a complete store.

    The store's metadata is one read of its ``zarr.json`` and its small arrays are read straight
    from their chunk files (:mod:`tilewright.store.metadata`); tiles are read through the store's
    shard reader. At 10,000 slides zarr's own opens cost more than the metrics."""
    from tilewright.store.metadata import read_json
    from tilewright.store.reader import TileStore

    path = folder / f"{slide_id}.zarr"
    if not path.is_dir():
        raise StoreError("store listed as ok in the manifest is missing; re-run tile-out", path)
    try:
        meta = read_json(path / "zarr.json")
        if meta.get("zarr_format") != 3 or meta.get("node_type") != "group":
            raise ValueError("zarr.json is not a zarr v3 group's")
        attrs = dict(meta.get("attributes") or {})
    except (OSError, ValueError, TypeError, AttributeError) as exc:
        raise StoreError(f"cannot open the store ({exc}); re-run tile-out with --overwrite", path) from exc
    if not attrs.get("complete", False):
        raise IncompleteStoreError("store was never marked complete (interrupted run); re-run tile-out", path)
    store = TileStore(path, attrs)
    names = {n for n in ("thumbnail", "mask", "ink", "tiles", "yx") if (path / n / "zarr.json").is_file()}
    needed = {"thumbnail", "mask"} | ({"tiles", "yx"} if needs_tiles else set())
    if needed - names:
        raise StoreError(f"store lacks array(s) {sorted(needed - names)}; re-run tile-out", path)
    thumbnail = np.asarray(store.thumbnail, dtype=np.uint8)
    mask = np.asarray(store.mask, dtype=bool)
    if thumbnail.ndim != 3 or thumbnail.shape[-1] != 3 or mask.shape != thumbnail.shape[:2]:
        raise StoreError(f"thumbnail {thumbnail.shape} and mask {mask.shape} do not match; re-run tile-out", path)
    ink = np.asarray(store._small("ink"), dtype=bool) if "ink" in names else np.zeros_like(mask)
    background = ~mask & (~ink if ink.shape == mask.shape else True)
    return path, store, attrs, thumbnail, mask, background


def _sample(store, max_tiles: int, rng: np.random.Generator) -> np.ndarray:
    """Sorted indices of at most ``max_tiles`` stored tiles (all when fewer)."""
    n = len(store)
    if n <= max_tiles:
        return np.arange(n)
    return np.sort(rng.choice(n, size=max_tiles, replace=False))


def _stored(store, index: np.ndarray) -> np.ndarray:
    if index.size == 0:
        return np.zeros((0,) + tuple(store.shape[1:]), np.uint8)
    return np.asarray(store[index], dtype=np.uint8)


def _source(store, attrs, index: np.ndarray, path: Path) -> np.ndarray:
    from tilewright.audit.source_tiles import read_source_tiles

    yx = np.asarray(store.yx, dtype=np.int64)[index]
    return read_source_tiles(attrs, yx, store.tile_size, path)


def read_slide(folder: Path, slide_id: str, source: str, *, max_tiles: int = 64, seed: int = 0) -> SlidePixels:
    """Read the pixels of one slide store for the audit.

    Parameters
    ----------
    folder : Path
        Cohort output folder.
    slide_id : str
        Store name without ``.zarr``.
    source : {"tiles", "source", "thumbnail"}
        Which view of the slide to read (see the module notes).
    max_tiles : int
        Tiles sampled per slide for ``"tiles"`` and ``"source"`` (the same positions for both).
    seed : int
        Seed of the tile and pixel sample; the slide id is mixed in so slides differ.

    Returns
    -------
    SlidePixels

    Raises
    ------
    StoreError
        When the store is missing or lacks the arrays this source needs, or (``"source"``) the
        source slide cannot be re-read.
    IncompleteStoreError
        When the store was never marked complete.
    """
    path, store, attrs, thumbnail, mask, background = _open(folder, slide_id, source != "thumbnail")
    rng = np.random.default_rng(stable_seed(seed, slide_id))
    n_tiles = len(store) if (path / "tiles" / "zarr.json").is_file() else 0
    fraction = float(mask.mean()) if mask.size else float("nan")
    if source == "thumbnail":
        glass = raw_glass(attrs, thumbnail, background)
        return thumbnail_pixels(slide_id, thumbnail, mask, glass, n_tiles=n_tiles, attrs=attrs, rng=rng)
    from tilewright.stain.tissue_pixels import tissue_mask

    index = _sample(store, max_tiles, rng)
    if source == "source":
        tiles, glass = _source(store, attrs, index, path), raw_glass(attrs, thumbnail, background)
    else:
        tiles, glass = _stored(store, index), stored_glass(attrs, thumbnail, background)
    masks = tissue_mask(tiles, glass=glass) if tiles.size else np.zeros(tiles.shape[:3], bool)
    return tile_pixels(slide_id, tiles, masks, pick=tissue_pick(masks, rng), tissue_fraction=fraction,
                       n_tiles=n_tiles, attrs=attrs, glass=glass)


def read_pair(folder: Path, slide_id: str, *, max_tiles: int = 64, seed: int = 0) -> tuple[SlidePixels, SlidePixels]:
    """Both sides of a before/after comparison of one slide: the sampled tiles read raw from the
    source slide (before) and as stored (after), split by the same tissue masks (from the raw
    tiles, against the slide's glass) and subsampled at the same pixels.

    Parameters
    ----------
    folder, slide_id, max_tiles, seed :
        As for :func:`read_slide` (the tile sample is the one ``read_slide`` draws).

    Returns
    -------
    (SlidePixels, SlidePixels)
        Before and after.

    Raises
    ------
    StoreError
        As for :func:`read_slide` with ``source="source"``.
    """
    from tilewright.stain.tissue_pixels import tissue_mask

    path, store, attrs, thumbnail, mask, background = _open(folder, slide_id, True)
    rng = np.random.default_rng(stable_seed(seed, slide_id))
    index = _sample(store, max_tiles, rng)
    raw, stored = _source(store, attrs, index, path), _stored(store, index)
    glass = raw_glass(attrs, thumbnail, background)
    masks = tissue_mask(raw, glass=glass) if raw.size else np.zeros(raw.shape[:3], bool)
    pick = tissue_pick(masks, rng)
    common = dict(pick=pick, tissue_fraction=float(mask.mean()) if mask.size else float("nan"),
                  n_tiles=len(store), attrs=attrs)
    return (tile_pixels(slide_id, raw, masks, glass=glass, **common),
            tile_pixels(slide_id, stored, masks, glass=stored_glass(attrs, thumbnail, background), **common))
