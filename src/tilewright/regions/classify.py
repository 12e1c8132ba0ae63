"""First pass of two-stage tiling: run a tissue-type classifier over a slide's tissue tiles.

The slide is cut into a grid of small tiles at one µm/px; tiles with enough tissue are read in
blocks, handed to the user's callable in batches of bounded size, and the per-tile answers
become a :class:`~tilewright.regions.regionmap.RegionMap` that a second pass can query at any
tile size and µm/px.
"""

from __future__ import annotations

import numpy as np

from tilewright.errors import RegionError

__all__ = ["classify_regions"]

_BLOCK_PX = 2048  # tiles are read in blocks of about this many pixels per side


def classify_regions(slide, fn, *, mpp=0.5, tile=128, batch=64, min_tissue=0.5, mask=None,
                     classes=None, soft=False, mask_mpp=8.0):
    """Classify a slide's tissue tiles with a user callable and return the regions it found.

    Parameters
    ----------
    slide : WholeSlide
        An open slide; only ``slide.at_mpp(mpp)`` (a view with ``.shape``, ``.mpp`` and
        ``.read(y, x, h, w)``) is used, plus :func:`tilewright.tissue_mask` when ``mask`` is None.
    fn : callable
        ``fn(tiles) -> out`` where ``tiles`` is a uint8 array ``(B, tile, tile, 3)`` (RGB, white
        past the slide edge, ``B <= batch``) and ``out`` is either integer class ids ``(B,)`` or
        class probabilities ``(B, K)`` in [0, 1] (apply softmax to logits first). NumPy arrays,
        lists and CPU tensors are accepted.
    mpp : float
        µm/px of the first pass (0.5 µm/px is "20x", common practice).
    tile : int
        First-pass tile size in pixels; the grid starts at the slide origin with stride ``tile``
        and includes the partial tiles at the right and bottom edges.
    batch : int
        Largest number of tiles handed to ``fn`` at once. Memory held at any time is one batch
        of tiles plus one read block (about 2048 x 2048 px).
    min_tissue : float
        Tiles whose tissue fraction is below this are not classified (they belong to no class).
    mask : object, optional
        Tissue selection: any object with ``.fractions(yx, h, w, mpp) -> (N,)`` (tissue fraction
        of boxes given in pixels at ``mpp``, top-left corners ``yx``) or, failing that,
        ``.fraction(y, x, h, w, mpp) -> float``. Default: ``tilewright.tissue_mask(slide,
        mpp=mask_mpp)``.
    classes : sequence of str, optional
        Names of class ids ``0 .. K-1`` (or of the probability columns). Default: ``"0"``,
        ``"1"``, ...
    soft : bool
        With probabilities: keep them (fractions become expected fractions) instead of taking
        each tile's most probable class.
    mask_mpp : float
        µm/px of the default tissue mask.

    Returns
    -------
    RegionMap
        A tile-table map (``.table`` holds y, x, tile, mpp, class per classified tile) whose
        ``.to_dict()`` records kind ``"classifier"``, the callable's name, tile and µm/px.

    Raises
    ------
    RegionError
        Bad arguments, no tile with enough tissue, or ``fn`` returning the wrong shape, ids
        outside ``classes`` or probabilities outside [0, 1].
    """
    from tilewright.regions.regionmap import RegionMap
    from tilewright.regions.tiletable import read_tile_table

    if not callable(fn):
        raise RegionError(f"fn must be callable (tiles -> class ids or probabilities), got {type(fn).__name__}")
    tile = _positive_int(tile, "tile")
    batch = _positive_int(batch, "batch")
    if not (0.0 <= float(min_tissue) <= 1.0):
        raise RegionError(f"min_tissue must lie in [0, 1], got {min_tissue!r}")
    path = getattr(slide, "path", None)
    view = slide.at_mpp(mpp)
    height, width = (int(v) for v in view.shape)
    gy, gx = np.meshgrid(np.arange(0, height, tile), np.arange(0, width, tile), indexing="ij")
    grid = np.stack([gy.ravel(), gx.ravel()], axis=1).astype(np.int64)
    if mask is None:
        from tilewright.tissue.mask import tissue_mask

        mask = tissue_mask(slide, mpp=mask_mpp)
    tissue = _mask_fractions(mask, grid, tile, float(view.mpp))
    chosen = tissue >= float(min_tissue)
    if not chosen.any():
        raise RegionError(f"no first-pass tile of {tile} px at {view.mpp:g} µm/px has a tissue fraction "
                          f">= {min_tissue}; lower min_tissue or check the tissue mask", path)
    yx = grid[chosen]
    outputs = _run(view, fn, yx, tile, batch)
    frame, names = _table(outputs, yx, tissue[chosen], classes, fn)
    checked = read_tile_table(frame, tile, float(view.mpp), classes=names, soft=soft)
    provenance = checked.provenance("classifier", None if path is None else str(path),
                                    fn=getattr(fn, "__qualname__", None) or type(fn).__name__,
                                    min_tissue=float(min_tissue))
    return RegionMap._from_checked_table(checked, provenance)


def _positive_int(value, name):
    try:
        ok = not isinstance(value, bool) and float(value).is_integer() and value > 0
    except (TypeError, ValueError):
        ok = False
    if not ok:
        raise RegionError(f"{name} must be a positive whole number, got {value!r}")
    return int(value)


def _mask_fractions(mask, yx, tile, mpp):
    if hasattr(mask, "fractions"):
        out = np.asarray(mask.fractions(yx, tile, tile, mpp), dtype=np.float64).ravel()
    elif hasattr(mask, "fraction"):
        out = np.array([mask.fraction(int(y), int(x), tile, tile, mpp) for y, x in yx], dtype=np.float64)
    else:
        raise RegionError("mask must have .fractions(yx, h, w, mpp) or .fraction(y, x, h, w, mpp)")
    if out.shape != (len(yx),):
        raise RegionError(f"mask.fractions returned shape {out.shape} for {len(yx)} tiles")
    return out


def _blocks(yx, tile):
    """Group tile indices by the read block they fall in, in raster order."""
    per = max(1, _BLOCK_PX // tile)
    key = (yx[:, 0] // (tile * per)) * (1 << 32) + yx[:, 1] // (tile * per)
    order = np.argsort(key, kind="stable")
    cuts = np.flatnonzero(np.diff(key[order])) + 1
    return np.split(order, cuts)


def _run(view, fn, yx, tile, batch):
    """Read tiles block by block, call ``fn`` on full batches; outputs in the order of ``yx``."""
    buffer = np.empty((batch, tile, tile, 3), dtype=np.uint8)
    owners = np.empty(batch, dtype=np.int64)
    results = [None] * len(yx)
    filled = 0

    def flush(n):
        out = _as_array(fn(buffer[:n]))
        if out.ndim not in (1, 2) or out.shape[0] != n:
            raise RegionError(f"fn returned shape {out.shape} for {n} tiles; return class ids (B,) or "
                              "probabilities (B, K)")
        for j in range(n):
            results[owners[j]] = out[j]

    for block in _blocks(yx, tile):
        y0, x0 = yx[block].min(axis=0)
        y1, x1 = yx[block].max(axis=0) + tile
        pixels = np.asarray(view.read(int(y0), int(x0), int(y1 - y0), int(x1 - x0)))
        for i in block:
            oy, ox = yx[i, 0] - y0, yx[i, 1] - x0
            buffer[filled] = pixels[oy:oy + tile, ox:ox + tile, :3]
            owners[filled] = i
            filled += 1
            if filled == batch:
                flush(filled)
                filled = 0
        del pixels
    if filled:
        flush(filled)
    return results


def _as_array(out):
    if hasattr(out, "detach"):  # a torch tensor
        out = out.detach().cpu().numpy()
    return np.asarray(out)


def _table(outputs, yx, tissue, classes, fn):
    import pandas as pd

    shapes = {np.shape(o) for o in outputs}
    if len(shapes) != 1:
        raise RegionError(f"fn returned outputs of differing shapes {sorted(shapes)} across batches")
    values = np.stack(outputs)
    frame = pd.DataFrame({"y": yx[:, 0], "x": yx[:, 1], "tissue": tissue.astype(np.float32)})
    if values.ndim == 1:
        if not np.issubdtype(values.dtype, np.number) or not np.all(np.isfinite(values)) \
                or not np.all(values == np.round(values)) or (values < 0).any():
            raise RegionError("fn returned a 1-D output that is not non-negative integer class ids; return "
                              "ids (B,) or probabilities (B, K)")
        ids = values.astype(np.int64)
        names = [str(c) for c in classes] if classes is not None else [str(k) for k in range(int(ids.max()) + 1)]
        if ids.max() >= len(names):
            raise RegionError(f"fn returned class id {int(ids.max())} but classes= names only {len(names)}")
        frame["class"] = ids
        return frame, names
    k = values.shape[1]
    names = [str(c) for c in classes] if classes is not None else [str(j) for j in range(k)]
    if len(names) != k:
        raise RegionError(f"fn returned {k} probabilities per tile but classes= names {len(names)}")
    from tilewright.regions.tiletable import RESERVED_COLUMNS

    clash = [n for n in names if n in RESERVED_COLUMNS]
    if clash:
        raise RegionError(f"class names {clash} are reserved table columns; rename them in classes=")
    values = values.astype(np.float64)
    if not np.all(np.isfinite(values)) or (values < 0).any() or (values > 1 + 1e-6).any():
        raise RegionError("fn returned probabilities outside [0, 1]; apply softmax to logits first")
    for j, name in enumerate(names):
        frame[name] = values[:, j]
    return frame, names
