"""``tilewright split META --patient COL --label COL [--site COL] --folds K --seed S``.

Writes ``splits.csv`` (slide_id, patient, site, label, fold) and prints the folds' label
balance. Exit codes: 0 written; 2 bad input (missing column, empty cells, a patient at two sites,
fewer patients or sites than folds), with the reason.
"""

from __future__ import annotations

import argparse
import sys

__all__ = ["register", "run"]

DESCRIPTION = (
    "Cross-validation folds from a slide table: every patient's slides in one fold, stratified by "
    "label; with --site, site-preserved folds (each site's slides in one fold's test set, after "
    "Howard et al. 2021, Nature Communications 12:4423). Writes splits.csv and prints the label "
    "balance reached. Research use only."
)


def register(subparsers) -> argparse.ArgumentParser:
    """Add the ``split`` sub-command (its ``func`` is :func:`run`)."""
    p = subparsers.add_parser("split", help="patient- or site-preserved cross-validation folds", description=DESCRIPTION)
    p.add_argument("meta", metavar="META", help="slide table (CSV, TSV or Parquet) with a slide_id column")
    p.add_argument("--patient", required=True, metavar="COL", help="column holding the patient")
    p.add_argument("--label", required=True, metavar="COL", help="column holding the label to stratify by")
    p.add_argument("--site", metavar="COL", help="column holding the site: keep each site's slides in one fold")
    p.add_argument("--folds", type=int, default=5, metavar="K", help="number of folds (default 5)")
    p.add_argument("--seed", type=int, default=0, metavar="S", help="seed (default 0)")
    p.add_argument("--slide-id", default="slide_id", metavar="COL", help="column holding the slide id (default slide_id)")
    p.add_argument("--out", default="splits.csv", metavar="CSV", help="file to write (default splits.csv)")
    p.set_defaults(func=run)
    return p


def run(args: argparse.Namespace) -> int:
    """Make the folds, write them, print the balance; 2 for bad input."""
    from tilewright.errors import ConfigError, TilewrightError
    from tilewright.splits.make import make_splits

    try:
        splits = make_splits(args.meta, patient=args.patient, label=args.label, site=args.site, folds=args.folds,
                             seed=args.seed, slide_id=args.slide_id)
    except ConfigError as exc:
        print(f"tilewright split: error: {exc.one_line()}", file=sys.stderr)
        return 2
    try:
        path = splits.to_csv(args.out)
    except OSError as exc:
        print(f"tilewright split: error: {args.out}: cannot write ({exc}); choose another --out", file=sys.stderr)
        return 2
    except TilewrightError as exc:  # pragma: no cover - to_csv raises OSError only
        print(f"tilewright split: error: {exc.one_line()}", file=sys.stderr)
        return 1
    print(splits.format())
    print(f"wrote {path} ({len(splits.table)} slides)")
    return 0
