"""Metadata factors of a cohort audit: read, join on ``slide_id``, and make categorical.

Every metadata column other than ``slide_id`` is a factor. Text columns are taken as they are;
numeric columns with at most ``max_levels`` distinct values (for example the source µm/px, 0.25
and 0.5) are categories too; numeric columns with more values, or with a different value on
every slide, are cut into quartile bins so that a contingency table against the colour clusters
still makes sense.

Two kinds of column are not tested as they are:

- *identifiers* (a patient or case id: a different value on every slide) are dropped. Every
  slide forms its own level, so any clustering "follows" them perfectly (Cramér's V = 1) and
  the test says nothing. A text column is an identifier when its values are all distinct over
  more than two slides; a numeric one only when its name also says so (``patient_id``,
  ``case``, ...) and its values are whole numbers, so that measurements such as age stay
  factors (cut into quartile bins).
- *aliases* (columns that split the slides exactly like another one, such as a site that always
  uses one scanner) are kept, but :func:`alias_groups` names them together so that findings
  say it once: "site (= scanner)".
"""

from __future__ import annotations

import re

import numpy as np
import pandas as pd

from tilewright.audit.metadata_match import match_suffixed_ids
from tilewright.store.tables import read_metadata, read_table_file  # noqa: F401 - public here too (their home: the store layer)

__all__ = ["read_metadata", "read_table_file", "as_factors", "cohort_factors", "identifier_columns", "alias_groups",
           "MANIFEST_FACTORS"]

#: Manifest columns tested as factors (column -> "number" or "text"); a run's new per-slide
#: property (scanner colour profile, ...) becomes an audit factor by adding its column here.
MANIFEST_FACTORS = {"mpp_source": "number", "colour_profile": "text"}
#: Numeric columns with at most this many distinct values are treated as categories.
MAX_NUMERIC_LEVELS = 10
#: Words in a column name that mark a numeric column with one value a slide as an identifier.
ID_WORDS = frozenset({"id", "ids", "identifier", "patient", "case", "subject", "specimen",
                      "accession", "barcode", "uuid", "mrn", "slide"})


def as_factors(table: pd.DataFrame, max_levels: int = MAX_NUMERIC_LEVELS) -> tuple[pd.DataFrame, dict]:
    """Turn every column into a categorical factor.

    Parameters
    ----------
    table : DataFrame
        Columns to use as factors.
    max_levels : int
        Numeric columns with at most this many distinct values stay as their values; others,
        and those with a different value on every one of more than two slides (one level a
        slide would make any clustering "follow" them), are cut into quartile bins.

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
        present = values.dropna()
        # one distinct value a slide is a measurement, not a grouping: bin it even when few
        distinct = present.nunique() == len(present) and len(present) > 2
        if present.nunique() <= max_levels and not distinct:
            factors[str(name)] = values.map(_number_label).astype(object)
            notes[str(name)] = "categories"
        else:
            bins = pd.qcut(values, q=4, duplicates="drop")
            factors[str(name)] = bins.map(lambda iv: iv if pd.isna(iv) else f"{iv.left:.3g}–{iv.right:.3g}").astype(
                object
            )
            notes[str(name)] = "quartile bins"
    return pd.DataFrame(factors, index=table.index), notes


def _id_like_name(name) -> bool:
    text = str(name)
    words = re.split(r"[^a-z0-9]+", re.sub(r"([a-z0-9])([A-Z])", r"\1_\2", text).lower())
    return any(w in ID_WORDS for w in words)


def identifier_columns(table: pd.DataFrame) -> list[str]:
    """Columns that hold a different value on every slide (patient or case identifiers).

    Parameters
    ----------
    table : DataFrame
        Metadata of the audited slides, one row a slide.

    Returns
    -------
    list of str
        Columns whose present values are all distinct over more than two slides: every text
        column like that, and numeric ones whose values are whole numbers and whose name marks
        an identifier (a word such as ``id``, ``patient``, ``case``; see :data:`ID_WORDS`).
    """
    out = []
    for name in table.columns:
        column = table[name]
        present = column.dropna()
        if len(present) <= 2 or present.nunique() != len(present):
            continue
        if pd.api.types.is_bool_dtype(column) or not pd.api.types.is_numeric_dtype(column):
            out.append(str(name))
            continue
        values = pd.to_numeric(present, errors="coerce")
        if _id_like_name(name) and bool(np.all(np.isfinite(values) & (values == np.round(values)))):
            out.append(str(name))
    return out


def alias_groups(factors: pd.DataFrame, exclude=()) -> dict[str, list[str]]:
    """Factors that split the slides in exactly the same way, grouped.

    Two factors are aliases when their levels correspond one to one on every slide (a missing
    value counts as a level of its own), for example a site that always used one scanner.

    Parameters
    ----------
    factors : DataFrame
        Categorical factors, one row a slide; column order decides which name leads a group.
    exclude : iterable of str
        Factors never grouped (for example the training label, which must stay visible).

    Returns
    -------
    dict
        First factor of each group of two or more -> the other factors of the group, in column
        order. Factors without an alias do not appear.
    """
    skip = {str(e) for e in exclude if e is not None}
    names = [str(c) for c in factors.columns if str(c) not in skip]
    codes = {n: pd.factorize(factors[n].astype(object).where(factors[n].notna(), "\0missing"))[0]
             for n in names}
    groups: dict[str, list[str]] = {}
    taken: set[str] = set()
    for i, lead in enumerate(names):
        if lead in taken:
            continue
        for other in names[i + 1:]:
            if other in taken:
                continue
            a, b = codes[lead], codes[other]
            pairs = len(set(zip(a.tolist(), b.tolist())))
            if pairs == len(set(a.tolist())) == len(set(b.tolist())):
                groups.setdefault(lead, []).append(other)
                taken.add(other)
    return groups


def _number_label(value) -> object:
    if pd.isna(value):
        return np.nan
    value = float(value)
    return str(int(value)) if value.is_integer() else f"{value:.4g}"


def cohort_factors(manifest: pd.DataFrame, metadata=None) -> tuple[pd.DataFrame, dict]:
    """Factors for every audited slide: the metadata columns plus the manifest's source µm/px and
    embedded colour profile (``colour_profile``: ``none``, the profile's description, or the
    description followed by ``(ignored)``), so that colour clusters following a scanner's
    profile show up.

    Parameters
    ----------
    manifest : DataFrame
        Cohort manifest indexed by slide id; its columns named in :data:`MANIFEST_FACTORS`
        (``mpp_source``, ...) are factors when present.
    metadata : DataFrame, str, os.PathLike or None
        Extra per-slide factors; a metadata column named like a manifest one wins.

    Returns
    -------
    factors : DataFrame
        Indexed like ``manifest``; metadata columns first, then the manifest's. Columns with a
        single level among these slides, and identifiers (:func:`identifier_columns`), are
        dropped.
    notes : dict
        Column -> how it was treated, plus ``"_unmatched"``: metadata slide ids not in the cohort,
        ``"_missing"``: cohort slides without a metadata row, ``"_dropped"``: factor names
        left out because they have one level, ``"_identifiers"``: columns left out because
        they hold one value a slide, and ``"_renamed"``: metadata ids written as slide file
        names (``N01.svs``) -> the slide ids they were matched to (``N01``).
    """
    parts = []
    for name, kind in MANIFEST_FACTORS.items():
        if name in manifest.columns:
            column = manifest[name]
            if kind == "number":  # recorded floats: round so 0.2527 and 0.25270001 are one level
                column = pd.to_numeric(column, errors="coerce").round(3)
            parts.append(column.rename(name).to_frame())
    unmatched: list[str] = []
    missing: list[str] = []
    renamed: dict = {}
    if metadata is not None:
        meta, renamed = match_suffixed_ids(read_metadata(metadata), manifest.index)  # "N01.svs" is N01
        unmatched = sorted(set(meta.index) - set(manifest.index))
        missing = sorted(set(manifest.index) - set(meta.index))
        meta = meta.reindex(manifest.index)
        parts = [p.drop(columns=[c for c in p.columns if c in meta.columns]) for p in parts]
        parts.insert(0, meta)
    table = pd.concat(parts, axis=1) if parts else pd.DataFrame(index=manifest.index)
    identifiers = identifier_columns(table)
    factors, notes = as_factors(table.drop(columns=identifiers))
    dropped = [c for c in factors.columns if factors[c].dropna().nunique() < 2]
    factors = factors.drop(columns=dropped)
    notes = {k: v for k, v in notes.items() if k not in dropped}
    notes["_unmatched"] = unmatched
    notes["_dropped"] = dropped
    notes["_identifiers"] = identifiers
    notes["_missing"] = missing
    notes["_renamed"] = renamed
    return factors, notes
