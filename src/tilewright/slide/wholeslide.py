"""WholeSlide: one open slide, its pyramid levels and its physical resolution."""

from __future__ import annotations

import math
import threading
from typing import NamedTuple

import numpy as np

from tilewright.errors import ResolutionUnavailableError, SlideError  # noqa: F401 (re-exported)
from tilewright.slide.colour import ColourInfo
from tilewright.slide.resolution import Resolution, level_downsample  # noqa: F401 - also public here

__all__ = ["WholeSlide", "Level", "ResolutionUnavailableError", "level_downsample",
           "VIEW_TOLERANCE", "THUMBNAIL_TOLERANCE"]

#: Relative difference under which a pyramid level serves a view as is (0.5 %: the scale error
#: then stays under 1.3 px across a 256-px tile), so a cohort's tiles are at one resolution.
VIEW_TOLERANCE = 0.005
#: The same for thumbnails: looser, because a thumbnail carries the true µm/px of its pixels
#: (:class:`~tilewright.slide.thumbnail.Thumbnail`) and everything derived from it uses that
#: value; reusing a level 5 % off saves decoding a level 4-16 times larger.
THUMBNAIL_TOLERANCE = 0.05


class Level(NamedTuple):
    """One pyramid level: size in pixels, downsample from level 0 and µm/px."""

    height: int
    width: int
    downsample: float
    mpp: float


class WholeSlide:
    """An open whole-slide image. Create it with :func:`tilewright.open`.

    Attributes
    ----------
    path : str
        The slide file.
    backend : {"tiff", "dicom", "openslide"}
        The reader serving it.
    mpp : float
        Level-0 µm/px.
    mpp_origin : str
        Where ``mpp`` came from: "override", "ome", "aperio", "tiff-tags", "imagej", "philips", "dicom" or
        "openslide". (Called ``mpp_source`` before; that name now warns: in stores and manifests
        ``mpp_source`` is the level-0 µm/px itself.)
    objective : float or None
        Objective power recorded by the scanner.
    dimensions : (int, int)
        (height, width) of level 0.
    levels : tuple of Level
        Every pyramid level, finest first.
    colour_profile : str or None
        Description of the file's embedded ICC profile (None without one).
    colour : ColourInfo
        The profile's provenance: embedded, applied, SHA-256, ... (see
        :mod:`tilewright.slide.colour`). When applied, every pixel read is sRGB.
    colour_transform : ColourTransform or None
        The conversion reads apply (None: pixels as stored).

    Notes
    -----
    Reads are safe from several threads at once. A WholeSlide pickles as "re-open this path
    with the same options", so views and dask graphs can be sent to worker processes.
    It is a context manager; :meth:`close` releases the file.
    """

    def __init__(self, path: str, reader, resolution: Resolution, *,
                 mpp_override: float | None = None, requested_backend: str = "auto", verify: bool = True,
                 colour=None, colour_mode: str = "apply", reopen=None):
        self.path = path
        self._reader = reader
        self.backend = reader.name
        self.mpp = float(resolution.mpp)
        self.objective = resolution.objective
        self.mpp_origin = resolution.source
        self._open_args = (mpp_override, requested_backend, verify, colour_mode)
        self._reopen = reopen
        self.colour, self.colour_transform = colour if colour is not None else (ColourInfo(), None)
        self.colour_profile = self.colour.description if self.colour.embedded else None
        h0, w0 = reader.level_shapes[0]
        self.dimensions = (h0, w0)
        levels = []
        for h, w in reader.level_shapes:
            ds = level_downsample(h0, w0, h, w)
            levels.append(Level(h, w, ds, self.mpp * ds))
        self.levels = tuple(levels)
        # levels the backend reads at whole-pixel positions of the level (all, for the tiff
        # backend; OpenSlide interpolates some, see OpenSlideBackend.exact_levels)
        self._exact = tuple(getattr(reader, "exact_levels", (True,) * len(levels)))
        self._closed = False
        self._lock = threading.Lock()

    # -- life cycle ---------------------------------------------------------------------
    def close(self) -> None:
        """Release the file (idempotent)."""
        with self._lock:
            if not self._closed:
                self._closed = True
                self._reader.close()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    def __reduce__(self):
        # ``reopen`` is tilewright.slide.open's module-level function, passed in by it (pickled by
        # name), so this module needs no import of the module that builds it
        if self._reopen is None:
            raise TypeError("this WholeSlide was not made by tilewright.open and cannot be pickled")
        return self._reopen, (self.path, *self._open_args)

    def __repr__(self) -> str:
        h, w = self.dimensions
        return (f"WholeSlide({self.path!r}, backend={self.backend!r}, mpp={self.mpp:.4g}, "
                f"objective={self.objective}, dimensions=({h}, {w}), levels={len(self.levels)})")

    # -- pixels -------------------------------------------------------------------------
    def tile_shape(self, level: int = 0) -> tuple[int, int]:
        """(height, width) of the tiles stored in a level (the natural read granule)."""
        return self._reader.tile_shape(level)

    def read_level(self, level: int, y: int, x: int, h: int, w: int,
                   out: np.ndarray | None = None, *, raw: bool = False, factor: int = 1) -> np.ndarray:
        """Pixels ``[y, y+h) x [x, x+w)`` of one level, white outside the level.

        Parameters
        ----------
        level : int
            Index into :attr:`levels`.
        y, x, h, w : int
            Box in that level's pixels; may extend past the edges.
        out : ndarray, optional
            uint8 (h, w, 3) array to fill (may be a view); (h / factor, w / factor, 3) with
            ``factor``.
        raw : bool
            Return the file's device RGB even when its profile is applied (views average these
            and convert their output with :meth:`to_srgb`).
        factor : int
            Return the ``factor x factor`` block means of the box instead, computed tile by
            tile by the backend as it decodes (only where :meth:`reduces` says so; views use
            it for whole-factor downsampling).

        Returns
        -------
        ndarray
            uint8 (h, w, 3), or (h / factor, w / factor, 3).

        Raises
        ------
        DamagedSlideError
            Tile data in the box cannot be decoded.
        """
        if self._closed:
            raise ValueError(f"{self.path}: the slide is closed")
        y, x, h, w = int(y), int(x), int(h), int(w)
        if h < 0 or w < 0:
            raise ValueError("h and w must be >= 0")
        k = int(factor)
        if k != 1 and not self.reduces(level, k, y, x, h, w):
            raise ValueError(f"level {level} cannot be read {k}-fold reduced at {(y, x, h, w)}")
        lh, lw = self.levels[level].height, self.levels[level].width
        ya, yb = max(y, 0), min(y + h, lh)
        xa, xb = max(x, 0), min(x + w, lw)
        inside = ya == y and xa == x and yb == y + h and xb == x + w
        shape = (h // k, w // k, 3)
        if out is None:
            out = np.empty(shape, np.uint8) if inside else np.full(shape, 255, np.uint8)
        elif not inside:
            out[...] = 255
        if ya < yb and xa < xb:
            dst = out[(ya - y) // k : (yb - y) // k, (xa - x) // k : (xb - x) // k]
            if k == 1:
                self._reader.read(level, ya, xa, yb - ya, xb - xa, dst)
            else:
                self._reader.read(level, ya, xa, yb - ya, xb - xa, dst, k)
        return out if raw else self.to_srgb(out)

    def prefetch(self, level: int, y: int, x: int, h: int, w: int) -> None:
        """Fetch a region's stored tiles at once before it is read piece by piece (a slide in an
        object store: all its rows of tiles in flight together); a no-op for local files."""
        prefetch = getattr(self._reader, "prefetch", None)
        if prefetch is not None and not self._closed:
            prefetch(level, int(y), int(x), int(h), int(w))

    def reduces(self, level: int, factor: int, y: int, x: int, h: int, w: int) -> bool:
        """Whether :meth:`read_level` can return the ``factor``-fold block means of this box:
        the backend reduces tiles of the level (:meth:`GridReader.reduces`) and the box and its
        part inside the level start and end on multiples of ``factor``."""
        k = int(factor)
        reduces = getattr(self._reader, "reduces", None)
        if k < 2 or reduces is None or not reduces(level, k):
            return False
        lh, lw = self.levels[level].height, self.levels[level].width
        edges = (y, x, h, w, max(y, 0), max(x, 0), min(y + h, lh), min(x + w, lw))
        return all(int(v) % k == 0 for v in edges)

    def to_srgb(self, rgb: np.ndarray) -> np.ndarray:
        """Convert device RGB read with ``raw=True`` to what reads return, in place.

        sRGB when the slide's profile is applied (see :mod:`tilewright.slide.colour`); a no-op
        without a profile or with ``colour_profile="ignore"``. Returns ``rgb``.
        """
        return rgb if self.colour_transform is None else self.colour_transform.apply(rgb)

    # -- resolution ---------------------------------------------------------------------
    @property
    def mpp_source(self) -> str | None:
        """Deprecated name of :attr:`mpp_origin` (where ``mpp`` came from)."""
        import warnings

        warnings.warn("WholeSlide.mpp_source is now mpp_origin (where the µm/px came from); in stores and "
                      "manifests mpp_source is the level-0 µm/px itself", DeprecationWarning, stacklevel=2)
        return self.mpp_origin

    def choose_level(self, mpp: float, tolerance: float = VIEW_TOLERANCE, *, from_level0: bool = False) -> int:
        """Level a view at ``mpp`` reads from.

        A level whose µm/px lies within ``tolerance`` (relative) of ``mpp`` is used as is
        (the closest such level); otherwise the coarsest level finer than ``mpp``. Only levels
        the backend reads at whole-pixel positions are candidates (every level of the tiff
        backend; see :class:`~tilewright.slide.openslide_backend.OpenSlideBackend`).
        ``from_level0``: level 0 only.

        Raises
        ------
        ResolutionUnavailableError
            ``mpp`` is finer than level 0 beyond the tolerance.
        """
        mpp = float(mpp)
        if not (math.isfinite(mpp) and mpp > 0):
            raise ValueError(f"target mpp must be a positive number, got {mpp!r}")
        tolerance = float(tolerance)
        if not (0 <= tolerance < 1):
            raise ValueError(f"tolerance must lie in [0, 1), got {tolerance!r}")
        usable = [0] if from_level0 else [i for i in range(len(self.levels)) if self._exact[i]]
        near = [(abs(self.levels[i].mpp / mpp - 1.0), i) for i in usable
                if abs(self.levels[i].mpp / mpp - 1.0) <= tolerance]
        if near:
            return min(near)[1]
        finer = [i for i in usable if self.levels[i].mpp <= mpp]
        if not finer:
            raise ResolutionUnavailableError(
                f"asked for {mpp:g} µm/px but the finest level is {self.mpp:g} µm/px; "
                "choose a coarser target mpp (no upsampling is done)", self.path)
        return max(finer, key=lambda i: self.levels[i].mpp)

    def at_mpp(self, mpp: float, *, tolerance: float = VIEW_TOLERANCE, from_level0: bool = False):
        """A lazy view of the whole slide at ``mpp`` µm/px.

        Parameters
        ----------
        mpp : float
            Target µm/px.
        tolerance : float
            Relative difference under which a pyramid level is used as is (default 0.5 %);
            otherwise the view area-averages the nearest finer level down to ``mpp``. The
            view's ``mpp`` is the true µm/px of its pixels either way.
        from_level0 : bool
            Compute every pixel from level 0 (area-averaged, or level 0 as is within
            ``tolerance``), whatever other levels the pyramid offers: a cohort's tiles then come
            from one kind of source whatever each scanner stored (its own downsampled levels
            differ in filter and compression from one scanner to the next).

        Returns
        -------
        ResampledView

        Raises
        ------
        ResolutionUnavailableError
            The target is finer than level 0.
        """
        from tilewright.slide.view import ResampledView

        return ResampledView(self, float(mpp), tolerance=tolerance, from_level0=from_level0)

    def thumbnail(self, mpp: float = 8.0, *, tolerance: float = THUMBNAIL_TOLERANCE):
        """The whole slide at about ``mpp`` µm/px, read from the coarsest adequate level.

        Same pixels and shape as ``at_mpp(mpp, tolerance=tolerance)`` read in full. A level
        within ``tolerance`` (default 5 %) of ``mpp`` is used as is, so the pixels may be a
        little finer or coarser than asked: the result carries their true µm/px.

        Returns
        -------
        Thumbnail
            uint8 (H, W, 3) array with ``.mpp``, the µm/px of its pixels.
        """
        from tilewright.slide.thumbnail import Thumbnail

        view = self.at_mpp(mpp, tolerance=tolerance)
        try:
            return Thumbnail(view.read(0, 0, *view.shape), view.mpp)
        finally:
            release = getattr(self._reader, "release", None)
            if release is not None:  # a whole-level copy a backend kept for this read
                release()
