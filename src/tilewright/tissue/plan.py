"""Tile planning: which tiles of a resampled view to cut, given a tissue mask (and regions).

The grid is in target pixels and anchored at the slide origin: tile ``k`` along an axis starts at
``k * stride``. **Edge rule:** a tile that would extend past the slide edge is not planned, so
every planned tile is made entirely of scanned pixels (no padding). Along an axis of ``L`` px
there are ``(L - tile) // stride + 1`` tiles (none when ``L < tile``).
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["TilePlan", "plan_tiles", "grid_positions", "spread_sample", "keep_names"]


class TilePlan:
    """The tiles to cut from one view, in row-major order.

    Attributes
    ----------
    yx : ndarray (N, 2) int64
        Top-left corners in target pixels.
    tissue : ndarray (N,) float32
        Tissue fraction of each tile.
    region : ndarray (N,) float32 or None
        Fraction of each tile inside the kept region classes (None without regions).
    ink : ndarray (N,) float32
        Share of each tile's footprint that is marker ink (the mask's ``ink``; zeros without).
    classes : list of str
        The kept region classes of ``class_fractions`` (empty without regions).
    class_fractions : ndarray (N, K) float32 or None
        Each tile's fraction inside each class of ``classes`` (None without regions).
    tile, stride : int
        Tile size and grid step in target pixels.
    mpp : float
        Target µm/px.
    scale : float
        Level-0 pixels per target pixel (to map ``yx`` to level 0).
    shape : (int, int)
        (height, width) of the view in target pixels.
    params : dict
        Selection parameters and candidate counts, for provenance.
    """

    def __init__(self, yx, tissue, *, tile: int, stride: int, mpp: float, scale: float = 1.0,
                 shape=(0, 0), region=None, params: dict | None = None, ink=None, classes=(),
                 class_fractions=None):
        self.yx = np.asarray(yx, dtype=np.int64).reshape(-1, 2)
        self.tissue = np.asarray(tissue, dtype=np.float32).reshape(-1)
        self.region = None if region is None else np.asarray(region, dtype=np.float32).reshape(-1)
        n = self.yx.shape[0]
        self.ink = np.zeros(n, np.float32) if ink is None else np.asarray(ink, dtype=np.float32).reshape(-1)
        self.classes = list(classes)
        self.class_fractions = (None if class_fractions is None
                                else np.asarray(class_fractions, dtype=np.float32).reshape(n, len(self.classes)))
        if self.tissue.shape[0] != self.yx.shape[0] or (self.region is not None and self.region.shape[0] != self.yx.shape[0]):
            raise ValueError("yx, tissue and region must have one entry per tile")
        self.tile = int(tile)
        self.stride = int(stride)
        self.mpp = float(mpp)
        self.scale = float(scale)
        self.shape = tuple(int(v) for v in shape)
        self.params = dict(params or {})

    def __len__(self) -> int:
        return int(self.yx.shape[0])

    @property
    def yx_level0(self) -> np.ndarray:
        """Top-left corners in level-0 pixels, ``round(yx * scale)``, int64."""
        return np.round(self.yx * self.scale).astype(np.int64)

    def select(self, which) -> "TilePlan":
        """A plan with only some tiles (a boolean mask or indices), e.g. after a sharpness check."""
        which = np.asarray(which)
        if which.dtype == bool and which.shape != (len(self),):
            raise ValueError(f"boolean selection needs shape ({len(self)},), got {which.shape}")
        idx = np.flatnonzero(which) if which.dtype == bool else np.sort(which.astype(np.int64))
        return TilePlan(self.yx[idx], self.tissue[idx], tile=self.tile, stride=self.stride,
                        mpp=self.mpp, scale=self.scale, shape=self.shape,
                        region=None if self.region is None else self.region[idx], params=self.params,
                        ink=self.ink[idx], classes=self.classes,
                        class_fractions=None if self.class_fractions is None else self.class_fractions[idx])

    def to_dict(self) -> dict:
        """JSON-safe description of the plan (not the coordinates)."""
        return {"n_tiles": len(self), "tile": self.tile, "stride": self.stride, "mpp": self.mpp,
                "scale": self.scale, "shape": list(self.shape), **self.params}

    def __repr__(self) -> str:
        return f"TilePlan({len(self)} tiles of {self.tile} px, stride {self.stride}, {self.mpp:g} µm/px)"


def grid_positions(shape, tile: int, stride: int) -> np.ndarray:
    """Top-left corners (row-major, int64 (N, 2)) of the full tiles of a grid anchored at 0.

    Tiles that would extend past the edge are left out (see the module's edge rule).
    """
    h, w = (int(v) for v in shape)
    ys = np.arange(0, h - tile + 1, stride, dtype=np.int64)
    xs = np.arange(0, w - tile + 1, stride, dtype=np.int64)
    yy, xx = np.meshgrid(ys, xs, indexing="ij")
    return np.stack([yy.ravel(), xx.ravel()], axis=1)


def spread_sample(yx: np.ndarray, n: int, step: int, seed: int = 0) -> np.ndarray:
    """Indices of ``n`` of the points ``yx`` chosen at random but spread over their extent.

    The grid is cut into square cells of ``s`` x ``s`` grid steps, with ``s`` the largest size
    that still leaves at least ``n`` occupied cells; cells are visited in a seeded random order
    and each gives one seeded random point per round until ``n`` are chosen (stratified
    sampling, so no part of the tissue is skipped and no corner is favoured).

    Parameters
    ----------
    yx : ndarray (N, 2)
        Grid points (multiples of ``step``).
    n : int
        Number to choose; all indices when ``n >= N``.
    step : int
        Grid step of ``yx``.
    seed : int
        Seed of :func:`numpy.random.default_rng`; the same seed gives the same choice.

    Returns
    -------
    ndarray (n,) int64
        Sorted indices into ``yx``.
    """
    total = yx.shape[0]
    if n >= total:
        return np.arange(total, dtype=np.int64)
    if n <= 0:
        return np.zeros(0, dtype=np.int64)
    rng = np.random.default_rng(seed)
    g = yx // max(int(step), 1)

    def occupied(s):
        cells = g // s
        _, inverse = np.unique(cells, axis=0, return_inverse=True)
        return inverse.reshape(-1), int(inverse.max()) + 1

    s = max(1, int(math.floor(math.sqrt(total / n))))
    cell, n_cells = occupied(s)
    while s > 1 and n_cells < n:
        s -= 1
        cell, n_cells = occupied(s)
    cell_rank = rng.permutation(n_cells)[cell]          # random order of cells
    within = rng.random(total)                          # random order inside a cell
    order = np.lexsort((within, cell))                  # group by cell, shuffled inside
    round_no = np.empty(total, dtype=np.int64)
    sorted_cells = cell[order]
    starts = np.r_[0, np.flatnonzero(np.diff(sorted_cells)) + 1]
    counts = np.diff(np.r_[starts, total])
    round_no[order] = np.arange(total) - np.repeat(starts, counts)
    pick = np.lexsort((cell_rank, round_no))[:n]        # round 0 of every cell, then round 1 ...
    return np.sort(pick)


def plan_tiles(view, mask, *, tile: int = 256, stride: int | None = None, min_tissue: float = 0.5,
               regions=None, keep=None, min_region: float = 0.5, max_tiles: int | None = None,
               seed: int = 0, max_ink: float | None = None) -> TilePlan:
    """Plan the tiles of ``view`` that hold enough tissue (and lie in the wanted regions).

    Parameters
    ----------
    view : ResampledView-like
        Anything with ``.shape`` ((height, width) in target px) and ``.mpp``; ``.scale``
        (level-0 px per target px) is recorded when present.
    mask : TissueMask
        Tissue mask of the same slide (any µm/px).
    tile : int
        Tile size in target pixels.
    stride : int, optional
        Grid step in target pixels; ``None`` means ``tile``. ``stride < tile`` gives overlap.
    min_tissue : float
        Keep tiles whose tissue fraction is at least this (0 to 1).
    regions : RegionMap-like, optional
        An object with ``.fractions(keep, yx, h, w, mpp) -> (N,)``; tiles whose fraction inside
        the ``keep`` classes is below ``min_region`` are dropped. Polygons in level-0 pixels
        not yet bound to a level-0 µm/px (``RegionMap.from_geojson(path)`` without ``mpp``)
        are bound to the view's slide (``view.slide.mpp``, else ``view.mpp / view.scale``).
    keep : str or sequence of str, optional
        Region classes to keep, passed to ``regions.fractions`` (a string is split on commas).
    min_region : float
        Minimum region fraction of a kept tile.
    max_tiles : int, optional
        At most this many tiles, chosen with :func:`spread_sample` from ``seed`` (after every
        other filter).
    seed : int
        Seed of the ``max_tiles`` choice.
    max_ink : float, optional
        Drop tiles whose footprint is more than this share marker ink (``mask.ink``); every
        planned tile's share is in ``TilePlan.ink`` either way.

    Returns
    -------
    TilePlan
        Tiles in row-major order (by y, then x).

    Raises
    ------
    ValueError
        For a non-positive ``tile``/``stride``/``max_tiles`` or fractions outside [0, 1].

    Examples
    --------
    >>> import numpy as np
    >>> from types import SimpleNamespace
    >>> from tilewright.tissue.mask import TissueMask
    >>> mask = TissueMask(np.ones((64, 64), bool), mpp=8.0)
    >>> view = SimpleNamespace(shape=(1024, 1024), mpp=0.5, scale=1.0)
    >>> len(plan_tiles(view, mask, tile=256))
    16
    """
    tile = int(tile)
    stride = tile if stride is None else int(stride)
    if tile <= 0 or stride <= 0:
        raise ValueError(f"tile and stride must be positive, got tile={tile}, stride={stride}")
    for name, value in (("min_tissue", min_tissue), ("min_region", min_region), ("max_ink", max_ink)):
        if value is None:
            continue
        if not 0.0 <= value <= 1.0:
            raise ValueError(f"{name} must lie in [0, 1], got {value}")
    if max_tiles is not None and int(max_tiles) < 0:
        raise ValueError(f"max_tiles must be >= 0, got {max_tiles}")
    if isinstance(keep, str):  # "A,B" is two classes, as in RegionMap.fractions and --keep
        keep = keep_names(keep)
    mpp = float(view.mpp)
    shape = tuple(int(v) for v in view.shape[:2])
    yx = grid_positions(shape, tile, stride)
    n_grid = yx.shape[0]
    tissue = mask.fractions(yx, tile, tile, mpp) if n_grid else np.zeros(0, np.float32)
    ok = tissue >= np.float32(min_tissue)
    yx, tissue = yx[ok], tissue[ok]
    n_tissue = yx.shape[0]
    ink = _ink_shares(mask, yx, tile, mpp)
    if max_ink is not None:
        ok = ink <= np.float32(max_ink)
        yx, tissue, ink = yx[ok], tissue[ok], ink[ok]
    n_ink = yx.shape[0]
    region = fractions = None
    classes: list = []
    if regions is not None:
        regions = _bound_to_slide(regions, view)
        region = np.asarray(regions.fractions(keep, yx, tile, tile, mpp), dtype=np.float32).reshape(-1)
        ok = region >= np.float32(min_region)
        yx, tissue, ink, region = yx[ok], tissue[ok], ink[ok], region[ok]
        classes, fractions = _class_fractions(regions, keep, yx, tile, mpp)
    n_region = yx.shape[0]
    if max_tiles is not None and yx.shape[0] > int(max_tiles):
        idx = spread_sample(yx, int(max_tiles), stride, seed)
        yx, tissue, ink = yx[idx], tissue[idx], ink[idx]
        region = None if region is None else region[idx]
        fractions = None if fractions is None else fractions[idx]
    params = {"min_tissue": float(min_tissue), "min_region": float(min_region) if regions is not None else None,
              "keep": None if keep is None else list(keep), "max_tiles": None if max_tiles is None else int(max_tiles),
              "seed": int(seed), "n_grid": int(n_grid), "n_tissue": int(n_tissue), "n_region": int(n_region),
              "max_ink": None if max_ink is None else float(max_ink), "n_ink": int(n_ink),
              "edge_rule": "drop tiles past the slide edge"}
    return TilePlan(yx, tissue, tile=tile, stride=stride, mpp=mpp, scale=float(getattr(view, "scale", 1.0)),
                    shape=shape, region=region, params=params, ink=ink, classes=classes, class_fractions=fractions)


def _ink_shares(mask, yx, tile: int, mpp: float) -> np.ndarray:
    """Share of each tile's footprint under ``mask.ink`` (exact box fractions of the ink raster)."""
    ink = getattr(mask, "ink", None)
    if ink is None or not len(yx) or not np.any(ink):
        return np.zeros(len(yx), np.float32)
    from tilewright.tissue.raster import box_fractions, summed_area_table

    return box_fractions(summed_area_table(np.asarray(ink, bool)), float(mask.mpp), yx, tile, tile, mpp)


def _class_fractions(regions, keep, yx, tile: int, mpp: float) -> tuple[list, np.ndarray | None]:
    """Each tile's fraction inside each kept class (its own column), for multi-class labels."""
    if keep is None or not hasattr(regions, "resolve"):
        return [], None
    names = list(regions.resolve(keep))
    if not names:
        return [], None
    cols = [np.asarray(regions.fractions([n], yx, tile, tile, mpp), np.float32).reshape(-1) for n in names]
    return names, np.stack(cols, axis=1) if cols else np.zeros((len(yx), 0), np.float32)


def _bound_to_slide(regions, view):
    """``regions`` bound to the level-0 µm/px of ``view``'s slide when it lacks one (polygon
    maps drawn in level-0 pixels); unchanged when bound already or when the view cannot tell."""
    if getattr(regions, "level0_mpp", 0) is not None or not hasattr(regions, "with_mpp"):
        return regions
    level0 = getattr(getattr(view, "slide", None), "mpp", None)
    if level0 is None and getattr(view, "scale", None):
        level0 = float(view.mpp) / float(view.scale)
    return regions if level0 is None else regions.with_mpp(float(level0))


def keep_names(keep) -> tuple:
    """A keep list as a tuple of names (strings split on commas; blanks and repeats dropped): the
    syntax of :func:`plan_tiles`' ``keep``, which the regions (:mod:`tilewright.regions.classnames`),
    ``TilingConfig.keep`` and ``tile-out --keep`` share.

    Parameters
    ----------
    keep : str or iterable of str or None

    Returns
    -------
    tuple of str
        Empty for None or an empty selection.

    Raises
    ------
    TypeError
        ``keep`` is neither a string nor an iterable.
    """
    if keep is None:
        return ()
    items = keep.split(",") if isinstance(keep, str) else [str(k) for k in keep]
    names = [" ".join(k.split()) for k in items]
    return tuple(dict.fromkeys(n for n in names if n))
