"""``tilewright audit OUT``: audit a tiled cohort for colour batch effects and write a report.

Exit codes: 0 report written; 2 bad arguments (missing folder, unreadable metadata, unknown
label); 1 any other failure.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from tilewright.location.objpath import as_path

__all__ = ["register", "run", "build_parser"]

DESCRIPTION = (
    "Audit a tile-out output folder for colour batch effects: per-slide colour, stain and "
    "quality metrics, colour clusters, and how strongly they follow each metadata column "
    "(site, scanner, label, ...). Writes audit.parquet, associations.csv, PNG plots and an "
    "offline report.html. Research use only: not for diagnosis or clinical decisions."
)


def _add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("out", metavar="OUT", help="output folder written by tile-out (holds manifest.csv)")
    parser.add_argument("--metadata", metavar="CSV", help="per-slide table with a slide_id column; every other column is a factor")
    parser.add_argument("--report", metavar="DIR", help="report folder (default: OUT/audit)")
    parser.add_argument(
        "--source", choices=("tiles", "source", "thumbnail"), default="tiles",
        help="tiles: a sample of stored (normalized) tiles; source: the same tile positions read raw from the "
             "source slides; thumbnail: raw colour at mask resolution, a rough look (default: tiles)",
    )  # fmt: skip
    parser.add_argument("--label", metavar="COLUMN", help="metadata column holding the training label (default: a column named label/class/target/...)")
    parser.add_argument("--max-tiles", type=int, default=64, metavar="N", help="tiles sampled per slide (default: 64)")
    parser.add_argument("--seed", type=int, default=0, help="seed of the tile sample, clustering and t-SNE (default: 0)")
    parser.add_argument(
        "--no-compare", action="store_true",
        help="with --source tiles on a normalized run, skip the before/after comparison (the same tiles read raw "
             "from the source slides)",
    )  # fmt: skip


def register(subparsers) -> argparse.ArgumentParser:
    """Add the ``audit`` sub-command to an ``argparse`` sub-parser collection.

    Parameters
    ----------
    subparsers : argparse._SubParsersAction
        From ``parser.add_subparsers()``.

    Returns
    -------
    argparse.ArgumentParser
        The ``audit`` parser (its ``func`` default is :func:`run`).
    """
    parser = subparsers.add_parser("audit", help="audit a tiled cohort for colour batch effects", description=DESCRIPTION)
    _add_arguments(parser)
    parser.set_defaults(func=run)
    return parser


def build_parser() -> argparse.ArgumentParser:
    """A stand-alone parser with the ``audit`` sub-command (used by tests and ``main``)."""
    parser = argparse.ArgumentParser(prog="tilewright")
    register(parser.add_subparsers(dest="command", required=True))
    return parser


def _fail(message: str, code: int) -> int:
    print(f"tilewright audit: error: {message}", file=sys.stderr)
    return code


def run(args: argparse.Namespace) -> int:
    """Run the audit described by parsed arguments and write the report.

    Parameters
    ----------
    args : argparse.Namespace
        From the ``audit`` parser.

    Returns
    -------
    int
        0 on success, 2 for bad arguments, 1 for other failures.
    """
    from tilewright.audit.cohort import audit_cohort, normalized_run
    from tilewright.audit.before_after import audit_before_after
    from tilewright.errors import ConfigError, StoreError, TilewrightError

    out = as_path(args.out)  # a folder, or a prefix in a bucket
    if not out.is_dir():
        return _fail(f"{out}: output folder not found; give the folder tile-out wrote", 2)
    if args.metadata is not None and not as_path(args.metadata).is_file():
        return _fail(f"{args.metadata}: metadata file not found; give a CSV with a slide_id column", 2)
    if args.max_tiles < 1:
        return _fail(f"--max-tiles must be at least 1, got {args.max_tiles}", 2)
    report = as_path(args.report) if args.report else out / "audit"
    if args.metadata is not None:  # checked against the manifest before any metric is computed
        code = _check_metadata(out, args.metadata, args.label)
        if code:
            return code
    options = {"metadata": args.metadata, "label": args.label, "max_tiles": args.max_tiles, "seed": args.seed}
    try:
        before = audit = None
        # a normalized run is audited raw and as stored: the stored side is the audit itself
        if args.source == "tiles" and not args.no_compare and normalized_run(out):
            try:
                before, audit = audit_before_after(out, **options)
            except StoreError as exc:  # source slides gone: the audit of the stored tiles still stands
                print(f"tilewright audit: no before/after comparison: {exc.one_line()}", file=sys.stderr)
        if audit is None:
            audit = audit_cohort(out, source=args.source, **options)
        path = audit.write_report(report, before=before)
    except ConfigError as exc:
        return _fail(exc.one_line(), 2)
    except StoreError as exc:
        code = 2 if not (out / "manifest.csv").is_file() and not (out / "manifest.parquet").is_file() else 1
        return _fail(exc.one_line(), code)
    except TilewrightError as exc:
        return _fail(exc.one_line(), 1)
    for line in audit.findings:
        print(f"  - {line}")
    print("  Tissue amount and sharpness:")
    for line in audit.quality_findings:
        print(f"  - {line}")
    if before is not None:
        print("  Before / after normalization (same tiles, same pixels):")
        for line in before.comparison_findings(audit):
            print(f"  - {line}")
    print(f"report: {path}")
    return 0


def _check_metadata(out: Path, metadata: str, label: str | None) -> int:
    """0 when the metadata table can be joined to the cohort, else exit code 2 (the reason printed).

    Refused: no ``slide_id`` column, repeated ids, ids none of which names a slide of the cohort,
    a ``--label`` that is not a column. How the ids joined (ids written as file names, rows of
    skipped slides, ids matching nothing) is said in the audit's findings
    (:func:`tilewright.audit.metadata_match.metadata_findings`).
    """
    from tilewright.audit.factors import MANIFEST_FACTORS
    from tilewright.audit.metadata_match import match_metadata
    from tilewright.audit.source import read_manifest, resolve_folder
    from tilewright.errors import ConfigError, StoreError

    try:
        match = match_metadata(metadata, read_manifest(resolve_folder(out)))
    except (ConfigError, StoreError) as exc:
        return _fail(exc.one_line(), 2)
    columns = list(match.table.columns) + [c for c in MANIFEST_FACTORS if c not in match.table.columns]
    if label is not None and label not in columns:
        return _fail(f"--label {label!r} is not a column of {metadata} (columns: {', '.join(columns)})", 2)
    return 0


def main(argv=None) -> int:
    """Entry point for ``python -m tilewright.cli.audit_cmd OUT ...``."""
    parser = argparse.ArgumentParser(prog="tilewright audit", description=DESCRIPTION)
    _add_arguments(parser)
    return run(parser.parse_args(argv))


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
