"""Re-read a store's sampled tiles from its source slide, raw, for a fair before/after.

The stored tiles were read from the source slide at the target µm/px and then stain-normalized.
Reading the same tile positions from the same slide file, with the same level-0 µm/px, backend,
resampling tolerance and colour handling the run recorded in the store, gives the tiles as they
were before normalization: the two sides of the comparison then differ by normalization only.
"""

from __future__ import annotations

import inspect
from pathlib import Path

import numpy as np

from tilewright.errors import StoreError, TilewrightError
from tilewright.location.objpath import as_path

__all__ = ["read_source_tiles"]


def read_source_tiles(attrs: dict, yx: np.ndarray, tile: int, store: Path) -> np.ndarray:
    """The tiles at ``yx`` (target px) read raw from the store's source slide.

    Parameters
    ----------
    attrs : dict
        Store attributes (``source.path``, ``mpp``, ``mpp_source``, ``config``).
    yx : ndarray, int, (T, 2)
        Top-left corners in target px (the store's ``yx`` of the sampled tiles).
    tile : int
        Tile side in target px.
    store : Path
        The store, for error messages.

    Returns
    -------
    ndarray, uint8, (T, tile, tile, 3)

    Raises
    ------
    StoreError
        When the source slide is missing, changed since tiling, or cannot be read at the
        recorded resolution.
    """
    from tilewright.slide.open import open as open_slide

    source = attrs.get("source") or {}
    path = source.get("path") if isinstance(source, dict) else None
    if not path or not as_path(path).is_file():
        raise StoreError(f"source slide not found at {path!r}; the before/after comparison re-reads the sampled "
                         "tiles from it (keep the slides where tile-out read them, or audit without it)", store)
    size = source.get("size")
    if size is not None and as_path(path).stat().st_size != int(size):
        raise StoreError(f"source slide {path} changed since it was tiled (size differs); re-run tile-out", store)
    config = attrs.get("config") or {}
    options = {"mpp": attrs.get("mpp_source"), "verify": bool(config.get("verify_jpeg", True))}
    accepted = inspect.signature(open_slide).parameters
    if source.get("backend") and "backend" in accepted:
        options["backend"] = source["backend"]
    if config.get("colour_profile") is not None and "colour_profile" in accepted:
        options["colour_profile"] = config["colour_profile"]
    try:
        with open_slide(path, **options) as slide:
            view = slide.at_mpp(float(attrs["mpp"]), tolerance=float(config.get("tolerance", 0.005)),
                                from_level0=bool(config.get("from_level0", False)))
            recorded = attrs.get("source_level")
            if recorded is not None and int(view.source_level) != int(recorded):
                raise StoreError(f"source slide {path} now resamples from level {view.source_level}, the store "
                                 f"from level {recorded}; re-run tile-out", store)
            out = np.empty((len(yx), tile, tile, 3), np.uint8)
            for i, (y, x) in enumerate(np.asarray(yx, dtype=np.int64)):
                out[i] = view.read(int(y), int(x), tile, tile)
            return out
    except StoreError:
        raise
    except (TilewrightError, OSError, KeyError, ValueError) as exc:
        raise StoreError(f"cannot re-read the source slide {path} ({exc}); the before/after comparison needs it",
                         store) from exc
