"""Stain-normalization targets: from a reference image, a fitted dictionary, or a slide sample."""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np

from tilewright.errors import ConfigError

__all__ = ["load_image", "make_target", "sample_tiles"]


def load_image(path: str | os.PathLike) -> np.ndarray:
    """Read an RGB reference image (PNG, JPEG, TIFF) as uint8 (H, W, 3)."""
    path = Path(path)
    if not path.is_file():
        raise ConfigError("reference image not found; give an RGB image file (PNG, JPEG or TIFF)", path)
    if path.suffix.lower() in (".tif", ".tiff"):
        import tifffile

        img = tifffile.imread(str(path))
    else:
        import cv2

        img = cv2.imread(str(path), cv2.IMREAD_COLOR)
        if img is None:
            raise ConfigError("cannot read the reference image; give a PNG, JPEG or TIFF file", path)
        img = img[..., ::-1]
    img = np.asarray(img)
    if img.ndim == 3 and img.shape[-1] == 4:
        img = img[..., :3]
    if img.ndim != 3 or img.shape[-1] != 3 or img.dtype != np.uint8:
        raise ConfigError(f"reference must be an 8-bit RGB image, got shape {img.shape} {img.dtype}", path)
    return np.ascontiguousarray(img)


def make_target(method: str, reference):
    """A fitted normalizer: ``reference`` is an image path, a fitted dict, or an RGB array."""
    from tilewright.stain.registry import make_normalizer, normalizer_from_dict

    if isinstance(reference, dict):
        norm = normalizer_from_dict(reference)
        if norm.to_dict().get("method") != method:
            raise ConfigError(f"the reference was fitted for {reference.get('method')!r}, not {method!r}")
        return norm
    image = load_image(reference) if isinstance(reference, (str, os.PathLike)) else np.asarray(reference)
    return make_normalizer(method).fit(image)


def sample_tiles(view, yx: np.ndarray, tile: int, count: int, seed: int, *, threads: int = 1) -> np.ndarray:
    """Read a reproducible sample of ``count`` planned tiles (all of them when fewer), on
    ``threads`` threads (view reads are thread-safe and release the GIL while decoding)."""
    yx = np.asarray(yx)
    if len(yx) > count:
        pick = np.sort(np.random.default_rng(seed).choice(len(yx), size=count, replace=False))
        yx = yx[pick]
    out = np.empty((len(yx), tile, tile, 3), np.uint8)
    if len(yx) == 0:
        return out

    def read(i):
        view.read(int(yx[i, 0]), int(yx[i, 1]), tile, tile, out=out[i])

    if threads <= 1:
        for i in range(len(yx)):
            read(i)
    else:
        from concurrent.futures import ThreadPoolExecutor

        with ThreadPoolExecutor(threads, thread_name_prefix="tilewright-sample") as pool:
            list(pool.map(read, range(len(yx))))
    return out
