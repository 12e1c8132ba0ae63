"""ResampledView: a whole slide seen at one physical resolution, read lazily."""

from __future__ import annotations

import math
import threading
from collections.abc import Iterator

import numpy as np

from tilewright.slide.downsample import area_downsample, integer_factor, source_span

__all__ = ["ResampledView"]

# Source pixels decoded per internal step of a read (bounds memory of huge reads).
_STEP_SOURCE_PX = 1 << 24
_STEP_SOURCE_PX_FRACTIONAL = 1 << 22  # the float32 path holds ~4 float copies
# Source rows per strip of a read (one or two rows of stored tiles).
_STRIP_SOURCE_ROWS = 256
# Largest source strip kept for reuse by a reading thread.
_SCRATCH_BYTES = 16 << 20


class ResampledView:
    """A slide at one µm/px. Create with :meth:`WholeSlide.at_mpp`.

    Attributes
    ----------
    slide : WholeSlide
    mpp : float
        True µm/px of the pixels this view returns: the µm/px of a pyramid level used as is
        because it lies within the tolerance, else the requested value (the level is then
        area-averaged down to it). It may differ from ``requested_mpp`` by the tolerance.
    requested_mpp : float
        The µm/px asked for.
    source_level : int
        Pyramid level the pixels are computed from.
    scale : float
        Level-0 pixels per view pixel (``mpp / slide.mpp``); a view pixel ``(y, x)``
        covers level-0 ``[y*scale, (y+1)*scale)``.
    shape : (int, int)
        (height, width) in view pixels: the whole view pixels that lie inside the scanned
        area, ``floor(H0 / scale)`` (likewise W), also bounded by the source level's own size
        (``floor(H_level / level_scale)``; the two differ only when a level's size is not its
        downsample's floor or ceiling division of level 0's). At least 1.
    level_scale : float
        Source-level pixels per view pixel (1.0 when the level is used as is).

    Notes
    -----
    Downsampling is area averaging from the source level with weights fixed by global
    coordinates (see :mod:`tilewright.slide.downsample`), so reads tile seamlessly. Outside
    the slide the view is white. Reads are thread-safe.
    """

    def __init__(self, slide, mpp: float, *, tolerance: float = 0.005, from_level0: bool = False):
        self.slide = slide
        self.tolerance = float(tolerance)
        self.requested_mpp = float(mpp)
        self.source_level = slide.choose_level(mpp, self.tolerance, from_level0=from_level0)
        level = slide.levels[self.source_level]
        if abs(level.mpp / mpp - 1.0) <= self.tolerance:
            self.level_scale = 1.0
        else:
            s = float(mpp) / level.mpp
            k = integer_factor(s, 1e-6)
            self.level_scale = float(k) if k is not None else s
        self.mpp = level.mpp * self.level_scale  # the true µm/px of the pixels returned
        self.scale = self.level_scale * level.downsample
        h0, w0 = slide.dimensions
        # round down: a view pixel past the last scanned row/column would be partly blank; the
        # epsilon keeps exact quotients (1536 / 2.0) from losing a pixel to floating point
        eps = 1e-9
        self.shape = (max(1, math.floor(min(h0 / self.scale, level.height / self.level_scale) + eps)),
                      max(1, math.floor(min(w0 / self.scale, level.width / self.level_scale) + eps)))
        self._scratch = threading.local()  # per-thread source strip buffer, reused across reads

    def __repr__(self) -> str:
        return (f"ResampledView(mpp={self.mpp:.4g}, shape={self.shape}, "
                f"source_level={self.source_level}, scale={self.scale:.6g})")

    def __reduce__(self):
        return _view_from, (self.slide, self.requested_mpp, self.tolerance)

    # -- reading ------------------------------------------------------------------------
    def read(self, y: int, x: int, h: int, w: int, *, out: np.ndarray | None = None) -> np.ndarray:
        """View pixels ``[y, y+h) x [x, x+w)``; white outside the slide.

        Parameters
        ----------
        y, x, h, w : int
            Box in view pixels (may extend past the edges or start below zero).
        out : ndarray, optional
            C-contiguous uint8 (h, w, 3) array to fill and return (saves an allocation when
            many boxes are read in a loop).

        Returns
        -------
        ndarray
            uint8 (h, w, 3).

        Raises
        ------
        DamagedSlideError
            Source tiles in the box cannot be decoded.
        """
        y, x, h, w = int(y), int(x), int(h), int(w)
        if h < 0 or w < 0:
            raise ValueError("h and w must be >= 0")
        s = self.level_scale
        level = self.source_level
        if out is not None and (out.shape != (h, w, 3) or out.dtype != np.uint8 or not out.flags.c_contiguous):
            raise ValueError(f"out must be C-contiguous uint8 of shape {(h, w, 3)}")
        if s == 1.0:
            return self.slide.read_level(level, y, x, h, w, out=out)
        if out is None:
            out = np.empty((h, w, 3), np.uint8)
        if h == 0 or w == 0:
            return out
        k = integer_factor(s)
        if k and self.slide.reduces(level, k, y * k, x * k, h * k, w * k):
            # each source tile is reduced as it is decoded: no source strip is made at all
            self.slide.read_level(level, y * k, x * k, h * k, w * k, out=out, raw=True, factor=k)
            return self.slide.to_srgb(out)
        limit = _STEP_SOURCE_PX if k else _STEP_SOURCE_PX_FRACTIONAL
        # Work in strips of view rows whose source rows start on stored tile rows: the
        # decoded strip stays in cache while it is resampled (and each tile is decoded once).
        tile_h = self.slide.tile_shape(level)[0]
        unit = tile_h // math.gcd(tile_h, k) if k else max(1, round(tile_h / s))
        rows = unit * max(1, round(_STRIP_SOURCE_ROWS / (unit * s)))
        cols = w if w * s * rows * s <= limit else max(1, int(limit // (rows * s * s)))
        weights: dict = {}
        sy0, sy1 = source_span(y, h, s)
        sx0, sx1 = source_span(x, w, s)
        prefetch = getattr(self.slide, "prefetch", None)
        if prefetch is not None:  # a slide in a bucket: one wait for the region, not one a strip
            prefetch(level, sy0, sx0, sy1 - sy0, sx1 - sx0)
        by = 0
        while by < h:
            bh = min(h - by, rows - (y + by) % rows)
            sy0, sy1 = source_span(y + by, bh, s)
            for bx in range(0, w, cols):
                bw = min(cols, w - bx)
                sx0, sx1 = source_span(x + bx, bw, s)
                src = self.slide.read_level(level, sy0, sx0, sy1 - sy0, sx1 - sx0,
                                            out=self._strip(sy1 - sy0, sx1 - sx0), raw=True)
                dst = out[by : by + bh, bx : bx + bw]
                area_downsample(src, y + by, x + bx, bh, bw, s, sy0, sx0, out=dst,
                                weights=weights)
            by += bh
        return self.slide.to_srgb(out)  # device RGB averaged, then converted (as the file's own levels)

    def _strip(self, h: int, w: int) -> np.ndarray:
        """A (h, w, 3) uint8 work array of this thread, reused from read to read."""
        need = h * w * 3
        if need > _SCRATCH_BYTES:  # a rare huge read: do not keep its memory for the view's life
            return np.empty((h, w, 3), np.uint8)
        buf = getattr(self._scratch, "buf", None)
        if buf is None or buf.size < need:
            buf = np.empty(need, np.uint8)
            self._scratch.buf = buf
        return buf[:need].reshape(h, w, 3)

    def block_size(self, target: int = 2048) -> int:
        """A block side near ``target`` whose source footprint starts on stored tile edges.

        For an integer level scale ``k`` and stored tiles of side ``T``, blocks that are a
        multiple of ``T / gcd(T, k)`` view pixels decode every source tile exactly once.
        """
        k = integer_factor(self.level_scale)
        th, tw = self.slide.tile_shape(self.source_level)
        if k is None:
            return max(1, int(target))
        unit = math.lcm(th // math.gcd(th, k), tw // math.gcd(tw, k))
        return max(unit, int(round(target / unit)) * unit)

    def iter_blocks(self, size: int = 2048) -> Iterator[tuple[int, int, np.ndarray]]:
        """Read the whole view in row-major blocks.

        Parameters
        ----------
        size : int
            Approximate block side in view pixels; rounded by :meth:`block_size` so that
            each source tile is decoded once. Edge blocks are cut at the view's edge.

        Yields
        ------
        (int, int, ndarray)
            Top-left ``(y, x)`` of the block in view pixels, and its uint8 pixels.
        """
        b = self.block_size(size)
        H, W = self.shape
        for y in range(0, H, b):
            for x in range(0, W, b):
                yield y, x, self.read(y, x, min(b, H - y), min(b, W - x))

    def __getitem__(self, key) -> np.ndarray:
        """``view[y0:y1, x0:x1]`` (unit step) reads that box (no padding beyond the shape)."""
        if not isinstance(key, tuple):
            key = (key,)
        key = key + (slice(None),) * (2 - len(key))
        bounds = []
        for sl, n in zip(key[:2], self.shape):
            if not isinstance(sl, slice) or sl.step not in (None, 1):
                raise IndexError("ResampledView supports only unit-step slices")
            start, stop, _ = sl.indices(n)
            bounds.append((start, max(start, stop)))
        (y0, y1), (x0, x1) = bounds
        arr = self.read(y0, x0, y1 - y0, x1 - x0)
        return arr[(slice(None), slice(None)) + key[2:]] if len(key) > 2 else arr

    def to_dask(self, chunk: int = 1024):
        """The view as a lazy dask array (H, W, 3) uint8 with ``chunk`` x ``chunk`` chunks.

        Nothing is read until a chunk is computed; the graph pickles by path, so it runs
        on threads, processes or a distributed cluster.
        """
        import dask.array as da
        from dask.base import tokenize

        adapter = _DaskAdapter(self)
        name = "tilewright-view-" + tokenize(self.slide.path, self.mpp, self.source_level,
                                             self.scale, chunk, self.slide.colour.applied)
        return da.from_array(adapter, chunks=(chunk, chunk, 3), name=name, lock=False,
                             asarray=False, fancy=False,
                             meta=np.empty((0, 0, 0), np.uint8))


class _DaskAdapter:
    """Array-like (H, W, 3) face of a view for :func:`dask.array.from_array`."""

    dtype = np.dtype(np.uint8)
    ndim = 3

    def __init__(self, view: ResampledView):
        self.view = view
        self.shape = tuple(view.shape) + (3,)

    def __getitem__(self, key):
        return self.view[key]


def _view_from(slide, mpp, tolerance):
    return ResampledView(slide, mpp, tolerance=tolerance)
