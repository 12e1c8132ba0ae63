"""Slide-level labels from a metadata table, joined on ``slide_id`` (ids compared as strings)."""

from __future__ import annotations

import math
import numbers
import os
from pathlib import Path

from tilewright.errors import ConfigError

__all__ = ["SlideLabels", "read_labels"]


def read_labels(labels, label_column: str = "label") -> dict:
    """slide_id (str) → label, from a table file, a DataFrame, a Series or a dict.

    Parameters
    ----------
    labels : path, DataFrame, Series or dict
        A CSV/TSV/Parquet file or DataFrame with a ``slide_id`` column and ``label_column``; a
        Series indexed by slide id; or a dict. Slide ids are read as text (``"007"`` stays
        ``"007"``). Rows whose label is empty are left out.
    label_column : str
        The column holding the label.

    Raises
    ------
    ConfigError
        The file is missing or unreadable, a column is missing, or one slide has two labels.
    """
    import pandas as pd

    path = None
    if isinstance(labels, (str, os.PathLike)):
        path = Path(labels)
        try:
            if path.suffix.lower() in (".parquet", ".pq"):
                labels = pd.read_parquet(path)
            else:
                labels = pd.read_csv(path, sep="\t" if path.suffix.lower() == ".tsv" else ",",
                                     dtype={"slide_id": str}, keep_default_na=False, na_values=[""])
        except FileNotFoundError:
            raise ConfigError("label table not found", path) from None
        except Exception as exc:  # parser errors of every kind: one typed error naming the file
            raise ConfigError(f"cannot read the label table ({exc})", path) from None
    if isinstance(labels, pd.Series):
        pairs = zip(labels.index, labels.to_numpy())
    elif isinstance(labels, pd.DataFrame):
        for col in ("slide_id", label_column):
            if col not in labels.columns:
                raise ConfigError(f"the label table has no {col!r} column (columns: {', '.join(map(str, labels.columns))});"
                                  f" pass label_column= to name the label column", path)
        pairs = zip(labels["slide_id"], labels[label_column])
    elif isinstance(labels, dict):
        pairs = labels.items()
    else:
        raise ConfigError(f"labels must be a table file, a DataFrame, a Series or a dict, not {type(labels).__name__}")
    out: dict = {}
    for sid, value in pairs:
        if value is None or (isinstance(value, float) and math.isnan(value)):
            continue
        sid = str(sid)
        value = value.item() if hasattr(value, "item") else value  # numpy scalars: plain Python
        if sid in out and out[sid] != value:
            raise ConfigError(f"slide {sid!r} has two labels ({out[sid]!r} and {value!r})", path)
        out[sid] = value
    return out


class SlideLabels:
    """Labels of a list of slides, as the values a model trains on.

    Numeric labels (ints, floats, bools) are returned as they are; any other labels (text) are
    returned as the index of the label in :attr:`classes` (sorted), so a DataLoader collates
    them into an integer tensor.

    Parameters
    ----------
    labels, label_column
        See :func:`read_labels`.
    slide_ids : list of str
        The slides that need a label.
    missing : {"error", "drop"}
        A slide without a label raises :class:`ConfigError` (default), or is left out.

    Attributes
    ----------
    classes : list
        Sorted distinct labels of the slides kept.
    keep : list of bool
        Whether each slide of ``slide_ids`` has a label (always all True with ``missing="error"``).
    values : list
        The label of each kept slide, as given in the table.
    """

    def __init__(self, labels, slide_ids, *, label_column: str = "label", missing: str = "error"):
        if missing not in ("error", "drop"):
            raise ConfigError(f"missing must be 'error' or 'drop', got {missing!r}")
        table = read_labels(labels, label_column)
        absent = [s for s in slide_ids if str(s) not in table]
        if absent and missing == "error":
            shown = ", ".join(absent[:5]) + (f" and {len(absent) - 5} more" if len(absent) > 5 else "")
            where = f" {os.fspath(labels)}" if isinstance(labels, (str, os.PathLike)) else ""
            raise ConfigError(f"no label for slide(s) {shown} in the label table{where}; add them, or pass "
                              "missing='drop' to leave those slides out")
        self.keep = [str(s) in table for s in slide_ids]
        self.values = [table[str(s)] for s in slide_ids if str(s) in table]
        self.numeric = all(isinstance(v, numbers.Number) for v in self.values)
        self.classes = sorted(set(self.values), key=lambda v: (str(type(v)), v))

    def encoded(self) -> list:
        """The kept slides' labels as a model sees them (numbers as given, else class indices)."""
        if self.numeric:
            return list(self.values)
        index = {c: i for i, c in enumerate(self.classes)}
        return [index[v] for v in self.values]
