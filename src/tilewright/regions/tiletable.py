"""First-pass tile tables: read them, check them, and paint them into per-class coverage rasters.

A tile table has one row per first-pass tile: ``y``, ``x`` (top-left corner in pixels at the
table's µm/px) and either a ``class`` column (one class name or integer id per tile) or one
probability column per class. ``tile`` and ``mpp`` may be given as arguments or as constant
columns of the table (so a saved table is self-describing). Columns named ``tissue``,
``slide_id``, ``slide``, ``tile`` and ``mpp`` are never taken as class probabilities.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass

import numpy as np

from tilewright.errors import RegionError
from tilewright.regions.classnames import ClassNames

__all__ = ["TileTable", "read_tile_table", "read_table_file", "check_table", "RESERVED_COLUMNS"]

#: Columns that describe tiles rather than classes.
RESERVED_COLUMNS = ("y", "x", "tile", "mpp", "tissue", "slide_id", "slide", "class")
_TEXT_COLUMNS = ("slide_id", "slide", "class")  # read from CSV as text, never as numbers
_MAX_CELLS = 200_000_000  # refuse absurd extents (corners far beyond any slide)
_MAX_SPLIT = 8  # at most 8 x 8 raster cells a tile; coarser grids fall back to the tile pitch
#: Column names a saved pandas index takes (``to_csv`` with its default ``index=True``, or
#: ``reset_index``); never class probabilities.
INDEX_COLUMNS = ("Unnamed: 0", "index", "__index_level_0__", "level_0")


@dataclass(frozen=True)
class TileTable:
    """A checked first-pass table: corners, tile size, µm/px, classes and per-tile scores.

    ``scores`` is (N, K) float32: one-hot for hard classes, probabilities otherwise.
    """

    yx: np.ndarray
    tile: int
    mpp: float
    classes: tuple
    scores: np.ndarray
    soft: bool
    path: str | None = None
    notes: tuple = ()  # what reading changed (class spellings merged)

    def provenance(self, kind: str, path, **more) -> dict:
        """The region map's provenance record of this table (JSON-safe): ``kind``, ``path``, tile,
        µm/px, tile count, soft, the entries of ``more``, and the table's content digest."""
        from tilewright.regions.digest import table_digest

        return {"kind": kind, "path": path, "tile": self.tile, "mpp": self.mpp, "n_tiles": int(len(self.yx)),
                "soft": self.soft, **more, "digest": table_digest(self)}

    def warn_notes(self, path=None, stacklevel: int = 4) -> None:
        """Issue each of :attr:`notes` as a :class:`~tilewright.regions.geojson.RegionRepairWarning`."""
        import warnings

        from tilewright.regions.geojson import RegionRepairWarning

        for note in self.notes:
            warnings.warn(f"{path or self.path or 'tile table'}: {note}", RegionRepairWarning, stacklevel=stacklevel)

    def frame(self):
        """The table as a pandas DataFrame: y, x, tile, mpp, then ``class`` (hard) or one
        probability column per class (soft), so that it reads back the same way."""
        import pandas as pd

        frame = pd.DataFrame({"y": self.yx[:, 0], "x": self.yx[:, 1], "tile": self.tile, "mpp": self.mpp})
        if self.soft:
            for k, name in enumerate(self.classes):
                frame[name] = self.scores[:, k]
        else:
            names = np.asarray(self.classes + (None,), dtype=object)
            best = np.where(self.scores.any(axis=1), np.argmax(self.scores, axis=1), len(self.classes))
            frame["class"] = names[best]
        return frame

    def coverage(self):
        """Per-class coverage rasters at the table's tile pitch, with exact footprint weights.

        The raster starts at the table's smallest corner (``origin``) and its cell is the pitch
        of the table's grid: the greatest common divisor of the tile size and the corners'
        offsets from ``origin`` (a 37-px offset of the whole grid does not shrink it), or the
        tile size itself when that divisor would cut a tile into more than 8 x 8 cells
        (irregular corners). Each tile adds its scores to the cells it covers, weighted by the
        exact share of each cell's area it covers. A cell's value is the weighted sum divided by
        ``max(1, covered weight)``: where tiles overlap, their covered-area-weighted mean (on a
        regular grid at its stride, exactly the mean of the overlapping tiles); where tiles
        cover a cell partly, the exact mean of the scores over the cell (uncovered area counts
        as no class). Memory: at most 64 cells a tile, or one cell a tile-sized square of the
        table's extent.

        Returns
        -------
        coverage : ndarray (K, H, W) float32
        cell_mpp : float
            µm/px of one raster cell.
        origin_um : ndarray (2,) float64
            (y, x) of the raster's top-left corner in µm from the slide origin.
        """
        yx, tile, k = self.yx, self.tile, len(self.classes)
        if not len(yx):
            return np.zeros((k, 1, 1), dtype=np.float32), self.mpp * tile, np.zeros(2)
        origin = yx.min(axis=0)
        rel = yx - origin
        pitch = int(np.gcd.reduce(np.concatenate([[tile], rel.ravel()])))
        if tile // pitch > _MAX_SPLIT:
            pitch = tile
        span = rel.max(axis=0) + tile
        h, w = (int(-(-int(v) // pitch)) for v in span)
        if h * w * (k + 1) > _MAX_CELLS:
            raise RegionError(f"tile corners span {int(span[0])} x {int(span[1])} px at {self.mpp:g} µm/px, far "
                              "more than a slide; check the y and x columns and the table's mpp", self.path)
        m = -(-tile // pitch) + (0 if not (rel % pitch).any() else 1)  # +1: tiles straddle cells
        iy, wy = _axis_weights(rel[:, 0], tile, pitch, m)
        ix, wx = _axis_weights(rel[:, 1], tile, pitch, m)
        sums = np.zeros((k, h * w), dtype=np.float64)
        cover = np.zeros(h * w, dtype=np.float64)
        scores = self.scores.astype(np.float64)
        for a in range(m):
            for b in range(m):
                weight = wy[:, a] * wx[:, b]
                hit = weight > 0
                if not hit.any():
                    continue
                flat = iy[hit, a] * w + ix[hit, b]
                cover += np.bincount(flat, weight[hit], minlength=h * w)
                for j in range(k):
                    sums[j] += np.bincount(flat, weight[hit] * scores[hit, j], minlength=h * w)
        sums /= np.maximum(cover, 1.0)
        return sums.reshape(k, h, w).astype(np.float32), self.mpp * pitch, origin.astype(np.float64) * self.mpp


def _axis_weights(start, tile, pitch, m):
    """Cells ``(N, m)`` a run ``[start, start + tile)`` touches and the share of each it covers."""
    cells = (start // pitch)[:, None] + np.arange(m)
    lo = np.maximum(start[:, None], cells * pitch)
    hi = np.minimum(start[:, None] + tile, (cells + 1) * pitch)
    return cells, np.clip(hi - lo, 0, None) / pitch


def read_tile_table(table, tile=None, mpp=None, *, classes=None, soft=False) -> TileTable:
    """Check a first-pass tile table and bring it to a :class:`TileTable`.

    Parameters
    ----------
    table : pandas.DataFrame or str or os.PathLike
        The table, or a ``.csv`` / ``.parquet`` (``.pq``) file.
    tile : int, optional
        First-pass tile size in pixels at ``mpp``; default: the table's constant ``tile`` column.
    mpp : float, optional
        µm/px of ``y``, ``x`` and ``tile``; default: the table's constant ``mpp`` column.
    classes : sequence of str, optional
        With a ``class`` column: the class names in order (integer ids index into it; string
        classes must be among them). With probability columns: the columns to use, in order.
        Default: classes in order of first appearance / every non-reserved numeric column.
    soft : bool
        Keep probabilities (fractions become expected covered fractions) instead of taking each
        tile's most probable class. Ignored for a ``class`` column.

    Returns
    -------
    TileTable

    Raises
    ------
    RegionError
        Unreadable file, missing columns, negative or non-integer corners, bad probabilities,
        classes not among ``classes``.
    """
    from tilewright.regions.source import parse_source

    checked = parse_source(table, read_table_file,
                           lambda frame, path: check_table(frame, tile, mpp, classes, soft, path, api=True))
    checked.warn_notes()
    return checked


def read_table_file(path):
    """Read a ``.csv`` or ``.parquet``/``.pq`` table; RegionError when missing, damaged or unknown."""
    import pandas as pd

    ext = os.path.splitext(path)[1].lower()
    if not os.path.exists(path):
        raise RegionError("tile table not found; check the path", path)
    try:
        if ext == ".csv":  # ids and class names as written: "00123" stays "00123"
            return pd.read_csv(path, dtype={c: str for c in _TEXT_COLUMNS})
        if ext in (".parquet", ".pq"):
            return pd.read_parquet(path)
    except Exception as exc:  # pandas/pyarrow raise many types for damaged files
        raise RegionError(f"cannot read the tile table ({type(exc).__name__}: {exc}); "
                          "write it again as CSV or Parquet", path) from None
    raise RegionError(f"unknown tile table extension {ext!r}; use .csv or .parquet", path)


def _constant(frame, column, given, kind, api):
    if given is not None:
        return given
    if column not in frame.columns:
        fix = (f"pass {column}= or add a constant {column!r} column" if api else
               f"add a {column!r} column holding the first-pass {kind} on every row (a table saved from "
               "RegionMap.table has it)")
        raise RegionError(f"the tile table has no {column!r} column (the first-pass {kind}); {fix}")
    values = np.unique(np.asarray(frame[column], dtype=np.float64))
    if len(values) != 1:
        raise RegionError(f"column {column!r} must hold one value for every row, found {values[:5].tolist()}")
    return values[0]


def check_table(frame, tile, mpp, classes, soft, path, *, api) -> TileTable:
    """:func:`read_tile_table` of a DataFrame; ``api=False`` words errors for a file-only user."""
    import pandas as pd

    if not isinstance(frame, pd.DataFrame):
        raise RegionError(f"expected a pandas DataFrame or a CSV/Parquet path, got {type(frame).__name__}")
    missing = [c for c in ("y", "x") if c not in frame.columns]
    if missing:
        raise RegionError(f"tile table lacks column(s) {missing}; it needs y, x (top-left corners in "
                          "pixels) and a class column or one probability column per class")
    if len(frame) == 0:
        raise RegionError("tile table has no rows; the first pass found no tissue tiles")
    tile = _constant(frame, "tile", tile, "tile size in pixels", api)
    mpp = _constant(frame, "mpp", mpp, "µm/px", api)
    if not (float(tile) > 0 and float(tile).is_integer()):
        raise RegionError(f"tile must be a positive whole number of pixels, got {tile!r}")
    if not (math.isfinite(float(mpp)) and float(mpp) > 0):
        raise RegionError(f"mpp must be a positive number of µm/px, got {mpp!r}")
    yx = frame[["y", "x"]].to_numpy(dtype=np.float64, na_value=np.nan)
    if not np.isfinite(yx).all() or (yx < 0).any() or (yx != np.round(yx)).any():
        raise RegionError("y and x must be non-negative whole pixel corners (no blanks)")
    yx = yx.astype(np.int64)
    notes = []
    if "class" in frame.columns:
        names, scores, notes = _hard_classes(frame["class"], classes)
        soft = False
    else:
        names, scores = _probabilities(frame, classes, soft)
    return TileTable(yx, int(tile), float(mpp), names, scores, bool(soft), path, tuple(notes))


def _hard_classes(column, classes):
    given = None if classes is None else [" ".join(str(c).split()) for c in classes]
    spellings = ClassNames(given or ())
    labels = []
    for v in column:
        if v is None or (isinstance(v, float) and math.isnan(v)):
            labels.append(None)
        elif isinstance(v, (int, np.integer)) or (isinstance(v, (float, np.floating)) and float(v).is_integer()):
            labels.append(_by_id(int(v), given))
        elif given is not None and spellings.lookup(v) is None and str(v).strip().isdigit():
            labels.append(_by_id(int(str(v)), given))  # an id column read from CSV as text
        elif str(v).strip():
            labels.append(spellings.add(v))
        else:
            labels.append(None)
    names = given if given is not None else list(dict.fromkeys(v for v in labels if v is not None))
    unknown = sorted({v for v in labels if v is not None} - set(names))
    if unknown:
        raise RegionError(f"classes {unknown} are not among the classes given ({', '.join(names)}); "
                          "add them to classes= or fix the table")
    index = {name: k for k, name in enumerate(names)}
    scores = np.zeros((len(labels), len(names)), dtype=np.float32)
    for i, v in enumerate(labels):
        if v is not None:
            scores[i, index[v]] = 1.0
    return tuple(names), scores, spellings.notes()


def _by_id(value, given):
    if given is None:
        return str(value)
    if not 0 <= value < len(given):
        raise RegionError(f"class id {value} is outside classes= ({len(given)} names)")
    return given[value]


def _probabilities(frame, classes, soft):
    if classes is not None:
        names = [str(c) for c in classes]
        missing = [c for c in names if c not in frame.columns]
        if missing:
            raise RegionError(f"tile table lacks probability column(s) {missing}")
    else:
        from pandas.api.types import is_bool_dtype, is_numeric_dtype

        names = [str(c) for c in frame.columns if str(c) not in RESERVED_COLUMNS + INDEX_COLUMNS
                 and is_numeric_dtype(frame[c].dtype) and not is_bool_dtype(frame[c].dtype)]
    if not names:
        raise RegionError("tile table has neither a 'class' column nor probability columns; add a "
                          "'class' column or one numeric column per class")
    probs = frame[names].to_numpy(dtype=np.float64, na_value=np.nan)
    if not np.isfinite(probs).all() or (probs < 0).any() or (probs > 1 + 1e-6).any():
        raise RegionError(f"probability columns {names} must hold numbers in [0, 1] (no blanks)")
    if soft:
        scores = np.clip(probs, 0.0, 1.0).astype(np.float32)
    else:  # most probable class; a row of zeros says "no class" (not class 0)
        scores = np.zeros(probs.shape, dtype=np.float32)
        rows = np.flatnonzero(probs.max(axis=1) > 0)
        scores[rows, np.argmax(probs[rows], axis=1)] = 1.0
    return tuple(names), scores
