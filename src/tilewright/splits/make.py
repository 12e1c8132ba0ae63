"""Patient-level, label-stratified folds, and site-preserved folds after Howard et al. (2021).

A model validated on slides from patients it was trained on, or from the sites it was trained on,
looks better than it is: tiles of one patient are alike, and a site's staining and scanner leave a
signature a network learns (Howard et al. 2021). So every patient's slides fall in one fold, and
with a site column every site's slides fall in one fold: each fold's test set is then a set of
sites the model never saw in training. Folds are balanced for the label as evenly as whole
patients (or whole sites) allow (:mod:`tilewright.splits.folds`), and the balance reached is
reported.

References
----------
Howard FM, Dolezal J, Kochanny S, et al. (2021). The impact of site-specific digital histology
signatures on deep learning model accuracy and bias. Nature Communications 12:4423.
"""

from __future__ import annotations

import os
import tempfile
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from tilewright.errors import ConfigError
from tilewright.splits.folds import assign_groups
from tilewright.splits.table import check_table, read_table

__all__ = ["Splits", "make_splits"]

COLUMNS = ["slide_id", "patient", "site", "label", "fold"]


@dataclass
class Splits:
    """Folds of a cohort.

    Attributes
    ----------
    table : DataFrame
        ``slide_id, patient, site, label, fold`` (text ids; ``site`` empty without a site
        column; folds 0 .. K - 1), one row a slide, in the input's order.
    balance : DataFrame
        One row a fold plus a row ``all``: ``fold, sites, patients, slides`` and the slides of
        every label, with each label's share of the fold's slides.
    max_deviation : float
        Largest difference, in percentage points, between a fold's share of a label and the
        cohort's share of it.
    by_site : bool
        Site-preserved folds (each site's slides in one fold).
    folds : int
    seed : int
    """

    table: pd.DataFrame
    balance: pd.DataFrame
    max_deviation: float
    by_site: bool
    folds: int
    seed: int

    def to_csv(self, path) -> Path:
        """Write :attr:`table` as CSV (temporary file, then rename: never half-written; into a bucket,
        one request writes the object whole)."""
        from tilewright.location.objpath import ObjectPath, as_path, replace_bytes

        if isinstance(as_path(path), ObjectPath):
            replace_bytes(path, self.table.to_csv(index=False).encode("utf-8"))
            return as_path(path)
        path = Path(path)
        path.parent.mkdir(parents=True, exist_ok=True)
        handle, tmp = tempfile.mkstemp(prefix=".splits-", suffix=".csv", dir=path.parent)
        try:
            with os.fdopen(handle, "w", encoding="utf-8", newline="") as out:
                self.table.to_csv(out, index=False)
            os.replace(tmp, path)
        except BaseException:
            Path(tmp).unlink(missing_ok=True)
            raise
        return path

    def format(self) -> str:
        """The balance table as text, with the balance reached."""
        labels = [c for c in self.balance.columns if c not in ("fold", "sites", "patients", "slides")]
        head = ["fold"] + (["sites"] if self.by_site else []) + ["patients", "slides"] + labels
        rows = []
        for _, r in self.balance.iterrows():
            cells = [str(r["fold"])] + ([str(r["sites"])] if self.by_site else []) + [str(r["patients"]), str(r["slides"])]
            cells += [f"{r[label]} ({100 * r[label] / max(r['slides'], 1):.0f} %)" for label in labels]
            rows.append(cells)
        widths = [max(len(h), *(len(row[i]) for row in rows)) for i, h in enumerate(head)]
        lines = ["  ".join(h.ljust(w) for h, w in zip(head, widths)).rstrip()]
        lines += ["  ".join(c.ljust(w) for c, w in zip(row, widths)).rstrip() for row in rows]
        kind = "site-preserved" if self.by_site else "patient-level"
        lines.append(f"{self.folds} {kind} folds (seed {self.seed}); label balance: a fold's share of a label is at "
                     f"most {self.max_deviation:.1f} percentage points from the cohort's.")
        return "\n".join(lines)


def make_splits(metadata, *, patient: str, label: str, site: str | None = None, folds: int = 5, seed: int = 0,
                slide_id: str = "slide_id") -> Splits:
    """Cross-validation folds that keep every patient, and optionally every site, in one fold.

    Without ``site``: patient-level folds stratified by label (a patient's slides never in two
    folds; each fold near ``1/folds`` of every label's slides). With ``site``: site-preserved
    folds after Howard et al. (2021): every site's slides lie in one fold, so each fold's test
    set holds whole sites, assigned to keep the label balance across folds as even as possible
    (the best assignment when there are few sites, a local search otherwise).

    Parameters
    ----------
    metadata : DataFrame, str or os.PathLike
        One row a slide (CSV, TSV or Parquet file, or a table); every column is read as text, so
        ids such as ``007`` keep their zeros.
    patient, label : str
        Columns holding the patient and the label.
    site : str, optional
        Column holding the site (hospital, scanner batch).
    folds : int
        Number of folds (at least 2, at most the number of patients, or of sites).
    seed : int
        Seed of the order groups are placed in and of ties; the same seed gives the same folds
        whatever the row order of the table.
    slide_id : str
        Column holding the slide id.

    Returns
    -------
    Splits

    Raises
    ------
    ConfigError
        For a missing column, empty cells, a repeated slide id, a patient at two sites, or
        fewer patients (or sites) than folds.

    References
    ----------
    Howard FM, Dolezal J, Kochanny S, et al. (2021). The impact of site-specific digital
    histology signatures on deep learning model accuracy and bias. Nature Communications
    12:4423.

    Examples
    --------
    >>> splits = make_splits("meta.csv", patient="patient_id", label="label", site="site",
    ...                      folds=3)                                  # doctest: +SKIP
    >>> splits.to_csv("splits.csv")                                    # doctest: +SKIP
    """
    try:
        folds = int(folds)
    except (TypeError, ValueError):
        raise ConfigError(f"folds must be a whole number, got {folds!r}") from None
    table, path = read_table(metadata)
    roles = {"slide_id": slide_id, "patient": patient, "label": label}
    if site is not None:
        roles["site"] = site
    frame = check_table(table, roles, folds, path)
    group_key = "site" if site is not None else "patient"
    # groups in a fixed order (sorted ids), so the result does not depend on the table's row order
    groups = sorted(frame[group_key].unique())
    labels = sorted(frame["label"].unique())
    counts = pd.crosstab(frame[group_key], frame["label"]).reindex(index=groups, columns=labels, fill_value=0)
    fold_of = dict(zip(groups, assign_groups(counts.to_numpy(), folds, seed=seed, exhaustive=site is not None)))
    out = frame.assign(fold=frame[group_key].map(fold_of).astype(np.int64))
    if "site" not in out:
        out["site"] = ""
    out = out[COLUMNS]
    balance, deviation = _balance(out, labels, folds)
    return Splits(out, balance, deviation, site is not None, folds, int(seed))


def _balance(table: pd.DataFrame, labels: list, folds: int) -> tuple[pd.DataFrame, float]:
    rows = []
    for fold in list(range(folds)) + ["all"]:
        part = table if fold == "all" else table[table["fold"] == fold]
        row = {"fold": fold, "sites": ", ".join(sorted(s for s in part["site"].unique() if s)),
               "patients": int(part["patient"].nunique()), "slides": int(len(part))}
        row.update({label: int((part["label"] == label).sum()) for label in labels})
        rows.append(row)
    balance = pd.DataFrame(rows, columns=["fold", "sites", "patients", "slides", *labels])
    share = balance[labels].to_numpy(dtype=np.float64) / np.maximum(balance["slides"].to_numpy()[:, None], 1)
    deviation = float(np.abs(share[:-1] - share[-1]).max() * 100) if labels else 0.0
    return balance, deviation
