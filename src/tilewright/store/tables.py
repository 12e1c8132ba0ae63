"""The cohort's metadata tables: CSV, TSV or Parquet files, local or in a bucket, joined to the
stores on ``slide_id`` (read as text: ``007`` stays ``007``). The audit (:mod:`tilewright.audit.factors`,
:mod:`tilewright.audit.metadata_match`) and the splits (:mod:`tilewright.splits.table`) read them here."""

from __future__ import annotations

import io
import os
from pathlib import Path

import pandas as pd

from tilewright.errors import ConfigError
from tilewright.location.objpath import as_path

__all__ = ["read_metadata", "read_table_file"]


def read_table_file(path: Path, *, text: bool, need: str) -> pd.DataFrame:
    """A CSV, TSV or Parquet table; ``slide_id`` read as text, or every column when ``text``
    (empty cells then stay empty strings).

    Raises
    ------
    ConfigError
        When the file is missing or unreadable; ``need`` says what the table should hold.
    """
    from tilewright.location.objpath import ObjectPath

    path = as_path(path)
    if not path.is_file():
        raise ConfigError(f"metadata file not found; give a CSV with {need}", path)
    try:
        source = io.BytesIO(path.read_bytes()) if isinstance(path, ObjectPath) else path  # a bucket: its bytes
        if path.suffix.lower() == ".parquet":
            return pd.read_parquet(source)
        sep = "\t" if path.suffix.lower() in (".tsv", ".tab") else ","
        if text:
            return pd.read_csv(source, sep=sep, dtype=str, keep_default_na=False)
        return pd.read_csv(source, sep=sep, dtype={"slide_id": str})
    except (ValueError, OSError, UnicodeDecodeError) as exc:
        raise ConfigError(f"cannot read the metadata table ({exc}); save it as CSV", path) from exc


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
        path = as_path(metadata)  # a local file, or an object in a bucket
        table = read_table_file(path, text=False, need="a slide_id column")
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
