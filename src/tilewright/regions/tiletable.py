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

__all__ = ["TileTable", "read_tile_table", "read_table_file", "RESERVED_COLUMNS"]

#: Columns that describe tiles rather than classes.
RESERVED_COLUMNS = ("y", "x", "tile", "mpp", "tissue", "slide_id", "slide", "class")
_MAX_CELLS = 400_000_000  # refuse to paint absurd rasters (tiles not on a common grid)


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
        """Per-class coverage rasters ``(K, H, W) float32`` and their µm/px.

        The raster cell is the greatest common divisor of the tile size and every corner, so
        each tile covers whole cells. Where tiles overlap, a cell takes the mean of their
        scores; cells no tile covers belong to no class.
        """
        yx = self.yx
        g = int(np.gcd.reduce(np.concatenate([[self.tile], yx.ravel()]))) if len(yx) else self.tile
        n = self.tile // g
        h = int((yx[:, 0].max() + self.tile) // g) if len(yx) else 1
        w = int((yx[:, 1].max() + self.tile) // g) if len(yx) else 1
        k = len(self.classes)
        if h * w * max(k, 1) > _MAX_CELLS:
            raise RegionError(
                f"tile corners are not on a common grid (cell {g} px for tiles of {self.tile} px would "
                f"need a {h} x {w} raster); give corners that are multiples of the stride", self.path)
        sums = np.zeros((k, h, w), dtype=np.float32)
        counts = np.zeros((h, w), dtype=np.float32)
        cy = yx[:, 0] // g
        cx = yx[:, 1] // g
        for dy in range(n):
            for dx in range(n):
                np.add.at(counts, (cy + dy, cx + dx), 1.0)
                for j in range(k):
                    np.add.at(sums[j], (cy + dy, cx + dx), self.scores[:, j])
        np.divide(sums, counts, out=sums, where=counts > 0)
        return sums, self.mpp * g


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

    return parse_source(table, read_table_file, lambda frame, path: _check(frame, tile, mpp, classes, soft, path))


def read_table_file(path):
    """Read a ``.csv`` or ``.parquet``/``.pq`` table; RegionError when missing, damaged or unknown."""
    import pandas as pd

    ext = os.path.splitext(path)[1].lower()
    if not os.path.exists(path):
        raise RegionError("tile table not found; check the path", path)
    try:
        if ext == ".csv":
            return pd.read_csv(path)
        if ext in (".parquet", ".pq"):
            return pd.read_parquet(path)
    except Exception as exc:  # pandas/pyarrow raise many types for damaged files
        raise RegionError(f"cannot read the tile table ({type(exc).__name__}: {exc}); "
                          "write it again as CSV or Parquet", path) from None
    raise RegionError(f"unknown tile table extension {ext!r}; use .csv or .parquet", path)


def _constant(frame, column, given, kind):
    if given is not None:
        return given
    if column not in frame.columns:
        raise RegionError(f"no {column}= given and the table has no {column!r} column; pass {column}= "
                          f"(the first-pass {kind})")
    values = np.unique(np.asarray(frame[column], dtype=np.float64))
    if len(values) != 1:
        raise RegionError(f"column {column!r} must hold one value for every row, found {values[:5].tolist()}")
    return values[0]


def _check(frame, tile, mpp, classes, soft, path):
    import pandas as pd

    if not isinstance(frame, pd.DataFrame):
        raise RegionError(f"expected a pandas DataFrame or a CSV/Parquet path, got {type(frame).__name__}")
    missing = [c for c in ("y", "x") if c not in frame.columns]
    if missing:
        raise RegionError(f"tile table lacks column(s) {missing}; it needs y, x (top-left corners in "
                          "pixels) and a class column or one probability column per class")
    if len(frame) == 0:
        raise RegionError("tile table has no rows; the first pass found no tissue tiles")
    tile = _constant(frame, "tile", tile, "tile size in pixels")
    mpp = _constant(frame, "mpp", mpp, "µm/px")
    if not (float(tile) > 0 and float(tile).is_integer()):
        raise RegionError(f"tile must be a positive whole number of pixels, got {tile!r}")
    if not (math.isfinite(float(mpp)) and float(mpp) > 0):
        raise RegionError(f"mpp must be a positive number of µm/px, got {mpp!r}")
    yx = frame[["y", "x"]].to_numpy(dtype=np.float64, na_value=np.nan)
    if not np.isfinite(yx).all() or (yx < 0).any() or (yx != np.round(yx)).any():
        raise RegionError("y and x must be non-negative whole pixel corners (no blanks)")
    yx = yx.astype(np.int64)
    if "class" in frame.columns:
        names, scores = _hard_classes(frame["class"], classes)
        soft = False
    else:
        names, scores = _probabilities(frame, classes, soft)
    return TileTable(yx, int(tile), float(mpp), names, scores, bool(soft), path)


def _hard_classes(column, classes):
    values = list(column)
    given = None if classes is None else [str(c) for c in classes]
    labels = []
    for v in values:
        if v is None or (isinstance(v, float) and math.isnan(v)):
            labels.append(None)
        elif isinstance(v, (int, np.integer)) or (isinstance(v, (float, np.floating)) and float(v).is_integer()):
            if given is not None:
                if not 0 <= int(v) < len(given):
                    raise RegionError(f"class id {int(v)} is outside classes= ({len(given)} names)")
                labels.append(given[int(v)])
            else:
                labels.append(str(int(v)))
        else:
            labels.append(str(v))
    names = given if given is not None else list(dict.fromkeys(v for v in labels if v is not None))
    unknown = sorted({v for v in labels if v is not None} - set(names))
    if unknown:
        raise RegionError(f"classes {unknown} are not among the classes given ({', '.join(names)}); "
                          "add them to classes= or fix the table")
    index = {name: k for k, name in enumerate(names)}
    scores = np.zeros((len(values), len(names)), dtype=np.float32)
    for i, v in enumerate(labels):
        if v is not None:
            scores[i, index[v]] = 1.0
    return tuple(names), scores


def _probabilities(frame, classes, soft):
    if classes is not None:
        names = [str(c) for c in classes]
        missing = [c for c in names if c not in frame.columns]
        if missing:
            raise RegionError(f"tile table lacks probability column(s) {missing}")
    else:
        from pandas.api.types import is_bool_dtype, is_numeric_dtype

        names = [str(c) for c in frame.columns if str(c) not in RESERVED_COLUMNS
                 and is_numeric_dtype(frame[c].dtype) and not is_bool_dtype(frame[c].dtype)]
    if not names:
        raise RegionError("tile table has neither a 'class' column nor probability columns; add a "
                          "'class' column or one numeric column per class")
    probs = frame[names].to_numpy(dtype=np.float64, na_value=np.nan)
    if not np.isfinite(probs).all() or (probs < 0).any() or (probs > 1 + 1e-6).any():
        raise RegionError(f"probability columns {names} must hold numbers in [0, 1] (no blanks)")
    if soft:
        scores = np.clip(probs, 0.0, 1.0).astype(np.float32)
    else:
        scores = np.zeros(probs.shape, dtype=np.float32)
        scores[np.arange(len(probs)), np.argmax(probs, axis=1)] = 1.0
    return tuple(names), scores
