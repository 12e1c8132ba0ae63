"""Metadata factors of a cohort audit: read, join on ``slide_id``, and make categorical.

Every metadata column other than ``slide_id`` is a factor. Text columns are taken as they are;
numeric columns with at most ``max_levels`` distinct values (for example the source µm/px, 0.25
and 0.5) are categories too; numeric columns with more values are cut into quartile bins so that
a contingency table against the colour clusters still makes sense.
"""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np
import pandas as pd

from tilewright.errors import ConfigError

__all__ = ["read_metadata", "as_factors", "cohort_factors"]

#: Numeric columns with at most this many distinct values are treated as categories.
MAX_NUMERIC_LEVELS = 10


def read_metadata(metadata) -> pd.DataFrame:
    """Load a metadata table and index it by slide id.

    Parameters
    ----------
    metadata : DataFrame, str or os.PathLike
        A table with a ``slide_id`` column (or index named ``slide_id``), or the path of a CSV,
        TSV or Parquet file holding one.

    Returns
    -------
    DataFrame
        Indexed by ``slide_id`` (as str), every other column kept.

    Raises
    ------
    ConfigError
        When the file is missing or unreadable, has no ``slide_id`` column, or repeats a slide id.
    """
    path = None
    if isinstance(metadata, (str, os.PathLike)):
        path = Path(metadata)
        if not path.is_file():
            raise ConfigError("metadata file not found; give a CSV with a slide_id column", path)
        try:
            if path.suffix.lower() == ".parquet":
                table = pd.read_parquet(path)
            else:
                sep = "\t" if path.suffix.lower() in (".tsv", ".tab") else ","
                table = pd.read_csv(path, sep=sep, dtype={"slide_id": str})
        except (ValueError, OSError, UnicodeDecodeError) as exc:
            raise ConfigError(f"cannot read the metadata table ({exc}); save it as CSV", path) from exc
    elif isinstance(metadata, pd.DataFrame):
        table = metadata.copy()
    else:
        raise ConfigError(f"metadata must be a DataFrame or a CSV path, got {type(metadata).__name__}")
    if "slide_id" not in table.columns:
        if table.index.name == "slide_id":
            table = table.reset_index()
        else:
            raise ConfigError(
                f"metadata has no 'slide_id' column (columns: {', '.join(map(str, table.columns))}); "
                "add one holding the store names without '.zarr'",
                path,
            )
    table["slide_id"] = table["slide_id"].astype(str).str.strip()
    duplicated = table["slide_id"][table["slide_id"].duplicated()].unique()
    if len(duplicated):
        shown = ", ".join(duplicated[:5])
        raise ConfigError(f"metadata repeats slide ids ({shown}); keep one row per slide", path)
    return table.set_index("slide_id")


def as_factors(table: pd.DataFrame, max_levels: int = MAX_NUMERIC_LEVELS) -> tuple[pd.DataFrame, dict]:
    """Turn every column into a categorical factor.

    Parameters
    ----------
    table : DataFrame
        Columns to use as factors.
    max_levels : int
        Numeric columns with at most this many distinct values stay as their values; others are
        cut into quartile bins.

    Returns
    -------
    factors : DataFrame
        Object columns of level names (missing values stay missing).
    notes : dict
        Column name -> short note on how it was treated (``"categories"``, ``"quartile bins"``).
    """
    factors = {}
    notes = {}
    for name in table.columns:
        column = table[name]
        if pd.api.types.is_bool_dtype(column) or not pd.api.types.is_numeric_dtype(column):
            factors[str(name)] = column.map(lambda v: v if pd.isna(v) else str(v)).astype(object)
            notes[str(name)] = "categories"
            continue
        values = pd.to_numeric(column, errors="coerce")
        if values.dropna().nunique() <= max_levels:
            factors[str(name)] = values.map(_number_label).astype(object)
            notes[str(name)] = "categories"
        else:
            bins = pd.qcut(values, q=4, duplicates="drop")
            factors[str(name)] = bins.map(lambda iv: iv if pd.isna(iv) else f"{iv.left:.3g}–{iv.right:.3g}").astype(
                object
            )
            notes[str(name)] = "quartile bins"
    return pd.DataFrame(factors, index=table.index), notes


def _number_label(value) -> object:
    if pd.isna(value):
        return np.nan
    value = float(value)
    return str(int(value)) if value.is_integer() else f"{value:.4g}"


def cohort_factors(manifest: pd.DataFrame, metadata=None) -> tuple[pd.DataFrame, dict]:
    """Factors for every audited slide: the metadata columns plus the manifest's source µm/px.

    Parameters
    ----------
    manifest : DataFrame
        Cohort manifest indexed by slide id (``mpp_source`` is used when present).
    metadata : DataFrame, str, os.PathLike or None
        Extra per-slide factors; a metadata column named like a manifest one wins.

    Returns
    -------
    factors : DataFrame
        Indexed like ``manifest``; columns with a single level among these slides are dropped.
    notes : dict
        Column -> how it was treated, plus ``"_unmatched"``: metadata slide ids not in the cohort,
        ``"_missing"``: cohort slides without a metadata row, and ``"_dropped"``: factor names
        left out because they have one level.
    """
    parts = []
    if "mpp_source" in manifest.columns:
        mpp = pd.to_numeric(manifest["mpp_source"], errors="coerce").round(3)
        parts.append(mpp.rename("mpp_source").to_frame())
    unmatched: list[str] = []
    missing: list[str] = []
    if metadata is not None:
        meta = read_metadata(metadata)
        unmatched = sorted(set(meta.index) - set(manifest.index))
        missing = sorted(set(manifest.index) - set(meta.index))
        meta = meta.reindex(manifest.index)
        parts = [p.drop(columns=[c for c in p.columns if c in meta.columns]) for p in parts]
        parts.append(meta)
    table = pd.concat(parts, axis=1) if parts else pd.DataFrame(index=manifest.index)
    factors, notes = as_factors(table)
    dropped = [c for c in factors.columns if factors[c].dropna().nunique() < 2]
    factors = factors.drop(columns=dropped)
    notes = {k: v for k, v in notes.items() if k not in dropped}
    notes["_unmatched"] = unmatched
    notes["_dropped"] = dropped
    notes["_missing"] = missing
    return factors, notes
