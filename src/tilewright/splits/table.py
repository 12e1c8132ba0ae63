"""Read and check the slide table a split is made from: one row a slide, ids as text."""

from __future__ import annotations

import os
from pathlib import Path

import pandas as pd

from tilewright.errors import ConfigError
from tilewright.location.objpath import as_path

__all__ = ["read_table", "check_table"]


def read_table(metadata) -> tuple[pd.DataFrame, Path | None]:
    """Load a slide table with every column as text (ids such as ``007`` keep their zeros).

    Parameters
    ----------
    metadata : DataFrame, str or os.PathLike
        A table, or a CSV / TSV / Parquet file holding one.

    Returns
    -------
    (DataFrame, Path or None)
        Text columns (surrounding blanks removed; empty cells missing) and the file, if any.

    Raises
    ------
    ConfigError
        When the file is missing or unreadable.
    """
    from tilewright.store.tables import read_table_file

    path = None
    if isinstance(metadata, (str, os.PathLike)):
        path = as_path(metadata)  # a local file, or an object in a bucket
        table = read_table_file(path, text=True, need="one row a slide")
    elif isinstance(metadata, pd.DataFrame):
        table = metadata.reset_index() if metadata.index.name == "slide_id" else metadata.copy()
    else:
        raise ConfigError(f"metadata must be a DataFrame or a CSV path, got {type(metadata).__name__}")
    table.columns = [str(c) for c in table.columns]
    text = table.apply(lambda column: column.map(lambda v: None if _missing(v) else str(v).strip()))
    return text.mask(text == ""), path


def _missing(value) -> bool:
    try:
        return bool(pd.isna(value))
    except (TypeError, ValueError):
        return False


def check_table(table: pd.DataFrame, columns: dict, folds: int, path=None) -> pd.DataFrame:
    """The columns a split needs, checked: present, filled, one row a slide, enough patients.

    Parameters
    ----------
    table : DataFrame
        Text columns (from :func:`read_table`).
    columns : dict
        Role (``slide_id``, ``patient``, ``label``, optionally ``site``) -> column name.
    folds : int
        Number of folds asked for.
    path : Path, optional
        The table's file, for messages.

    Returns
    -------
    DataFrame
        Columns named by role, one row a slide.

    Raises
    ------
    ConfigError
        With the reason: a missing column, empty cells, a repeated slide id, a patient at two
        sites, fewer patients (or sites) than folds, fewer than two folds.
    """
    if int(folds) < 2:
        raise ConfigError(f"--folds must be at least 2, got {folds}", path)
    absent = [name for name in columns.values() if name not in table.columns]
    if absent:
        raise ConfigError(f"no column {', '.join(map(repr, absent))} in the metadata (columns: "
                          f"{', '.join(table.columns)}); name the right one with --patient / --label / --site", path)
    frame = pd.DataFrame({role: table[name] for role, name in columns.items()})
    for role, name in columns.items():
        empty = frame[role].isna()
        if empty.any():
            rows = [str(i + 1) for i in frame.index[empty][:5]]  # data rows counted from 1
            raise ConfigError(f"{int(empty.sum())} rows have no {role} (column {name!r}; rows {', '.join(rows)}"
                              f"{', ...' if empty.sum() > 5 else ''}); fill them in or drop those slides", path)
    repeated = frame["slide_id"][frame["slide_id"].duplicated()].unique()
    if len(repeated):
        raise ConfigError(f"slide ids repeat ({', '.join(repeated[:5])}); keep one row a slide", path)
    if "site" in frame:
        sites_of = frame.groupby("patient")["site"].unique()
        spread = sites_of[sites_of.map(len) > 1]
        if len(spread):
            patient = spread.index[0]
            raise ConfigError(f"patient {patient!r} has slides at two or more sites ({', '.join(sorted(spread.iloc[0]))}); "
                              "a site-preserved split keeps every patient at one site: check the patient and site "
                              "columns", path)
    n_patients = frame["patient"].nunique()
    if n_patients < folds:
        raise ConfigError(f"{n_patients} patients cannot fill {folds} folds; ask for at most {n_patients} folds", path)
    if "site" in frame and frame["site"].nunique() < folds:
        n_sites = frame["site"].nunique()
        raise ConfigError(f"{n_sites} sites cannot fill {folds} site-preserved folds (each site's slides are one "
                          f"fold's test set); ask for at most {n_sites} folds", path)
    return frame.reset_index(drop=True)
