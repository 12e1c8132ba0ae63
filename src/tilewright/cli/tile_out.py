"""``tile-out SOURCE OUT``: tile a slide, a folder of slides or a list of slides.

Exit codes: 0 all slides succeeded (or were skipped), 3 some slides failed (each failure is a
manifest row with a one-line reason), 2 bad arguments, 4 the output folder is in use by another
run, 130 interrupted by Ctrl-C and 143 stopped by SIGTERM (a later run resumes either).
"""

from __future__ import annotations

import argparse
import logging
import os
import sys
from pathlib import Path

from tilewright.cli.parser import CommandParser
from tilewright.errors import ConfigError, ObjectStoreError, OutputLockedError
from tilewright.slide.colour_icc import MODES
from tilewright.store.compression import COMPRESSIONS

__all__ = ["main", "build_parser"]

log = logging.getLogger("tilewright")

EXIT_OK, EXIT_BAD_ARGS, EXIT_SOME_FAILED, EXIT_LOCKED, EXIT_INTERRUPTED = 0, 2, 3, 4, 130
EXIT_TERMINATED = 143


def build_parser() -> argparse.ArgumentParser:
    p = CommandParser(
        prog="tile-out",
        usage="%(prog)s SOURCE OUT [options]   (or: %(prog)s --print-config [options]; %(prog)s --help)",
        description="Cut harmonized, tissue-only (optionally stain-normalized) tiles from H&E slides "
                    "into one zarr store a slide. Research use only; not for diagnosis.",
        epilog="Exit codes: 0 all done, 3 some slides failed (see manifest.csv), 2 bad arguments, "
               "4 output folder in use, 130 interrupted / 143 terminated (run again to resume).")
    p.add_argument("source", metavar="SOURCE", nargs="?",
                   help="a slide file, a folder (searched recursively) or a .txt/.csv list of paths")
    p.add_argument("out", metavar="OUT", nargs="?", help="output folder")
    g = p.add_argument_group("tiling")
    g.add_argument("--mpp", type=float, help="target resolution in µm/px (default 0.5)")
    g.add_argument("--mpp-tolerance", type=float,
                   help="relative difference under which a pyramid level is used as is instead of "
                        "resampled (default 0.005 = 0.5 %%; the store records the true µm/px)")
    g.add_argument("--from-level0", action="store_true", default=None,
                   help="compute every tile from level 0 (area-averaged), never from a scanner's own lower "
                        "level: tiles of every scanner made one way (default: a level within --mpp-tolerance is "
                        "used as is)")
    g.add_argument("--tile", type=int, help="tile side in pixels (default 256)")
    g.add_argument("--stride", type=int, help="grid step in pixels (default: the tile side, no overlap)")
    g.add_argument("--min-tissue", type=float, help="minimum tissue fraction of a tile (default 0.5)")
    g.add_argument("--max-tiles", type=int, help="keep at most this many tiles a slide, spread over it")
    g.add_argument("--seed", type=int, help="seed for tile sampling (default 0)")
    g.add_argument("--mask-mpp", type=float, help="tissue-mask resolution in µm/px (default 8)")
    g.add_argument("--min-sharpness", type=float, help="drop tiles blurrier than this variance of the Laplacian")
    g.add_argument("--verify-jpeg", action=argparse.BooleanOptionalAction, default=None,
                   help="check every JPEG source tile for damage decoders pass silently; a damaged "
                        "slide fails (default on; --no-verify-jpeg decodes faster and keeps garbage)")
    g.add_argument("--colour-profile", choices=MODES,
                   help="apply: convert pixels from each slide's embedded ICC profile to sRGB before anything "
                        "else sees them (default); ignore: keep the files' raw pixels")
    g = p.add_argument_group("tissue mask")
    g.add_argument("--tissue-sensitivity", type=float,
                   help="factor dividing the tissue density threshold: 2 keeps fainter tissue, 0.5 only denser (default 1)")
    g.add_argument("--min-piece-um2", type=float, help="drop tissue pieces smaller than this area in µm² (default 25000)")
    g.add_argument("--exclude-dark", action=argparse.BooleanOptionalAction, default=None,
                   help="cut out folds and dense debris denser than --dark-od (default off)")
    g.add_argument("--dark-od", type=float,
                   help="mean optical density above which --exclude-dark cuts a pixel out (default 0.9; a fold ~0.3-0.6)")
    g.add_argument("--ink-margin-um", type=float, help="grow marker ink by this many µm before cutting it out (default 8)")
    g.add_argument("--max-ink", type=float,
                   help="drop tiles more than this share marker ink (0-1; default: no cap; each store keeps every "
                        "tile's ink share)")
    g = p.add_argument_group("stain")
    g.add_argument("--normalize", choices=["macenko", "reinhard", "none"],
                   help="stain normalization (default none)")
    g.add_argument("--reference", help="reference image (PNG/JPEG/TIFF), slide (a sample of its tissue tiles is read, "
                                       "never all of it) or fitted-normalizer JSON; without it "
                                       "the cohort's own median stain is the target, saved as OUT/stain_target.<method>.json")
    g.add_argument("--estimate-stains", action="store_true", default=None,
                   help="store un-normalized tiles plus each slide's Macenko and Reinhard stain estimates, to "
                        "normalize when reading (open_store/open_cohort/datasets normalize=...) to any target")
    g.add_argument("--stain-groups", metavar="META.csv",
                   help="without --reference: build the cohort's target from an equal share of each group's slides, "
                        "groups from this CSV (slide_id and --stain-group-column; default: each folder and file format)")
    g.add_argument("--stain-group-column", metavar="COL", help="column of --stain-groups to balance over (default site)")
    g = p.add_argument_group("regions")
    g.add_argument("--regions", help="region annotations: a GeoJSON/tile-table file, or a folder with one file a slide id")
    g.add_argument("--keep", help="region classes to keep, comma separated (needed with --regions; case and "
                                  "spacing ignored; a class a slide's file lacks covers nothing there)")
    g.add_argument("--min-region", type=float, help="minimum kept-class fraction of a tile (default 0.5)")
    g.add_argument("--class-property", metavar="KEY",
                   help="GeoJSON feature property holding the class (default: classification, class, label)")
    g.add_argument("--default-class", metavar="NAME",
                   help="class of GeoJSON features that have none (default: such features are skipped, warned)")
    g.add_argument("--feature-kinds", metavar="KINDS",
                   help="kinds of GeoJSON feature to read, as their objectType property names them, comma separated "
                        "(default annotation; 'all' for every feature)")
    g.add_argument("--object-types", dest="old_feature_kinds", help=argparse.SUPPRESS)  # old name, one release
    g = p.add_argument_group("input resolution")
    g.add_argument("--source-mpp", type=float, help="level-0 µm/px for slides that lack or misstate it")
    g.add_argument("--mpp-table", help="CSV with slide_id (or path) and mpp columns: per-slide level-0 µm/px")
    g = p.add_argument_group("running")
    g.add_argument("--workers", type=int, default=1, help="local worker processes (default 1)")
    g.add_argument("--threads", type=int,
                   help="reader threads in each worker (default 2; with --workers N, the cores / N)")
    g.add_argument("--scheduler", help="dask.distributed scheduler address, e.g. tcp://10.0.0.5:8786")
    g.add_argument("--config", help="TOML file with tiling settings (options given here override it)")
    g.add_argument("--print-config", action="store_true", help="print the settings as TOML and exit")
    g.add_argument("--overwrite", action="store_true", help="re-tile slides whose store is already complete")
    g.add_argument("--compression", choices=COMPRESSIONS,
                   help="tile compression (default lz4, lossless; zstd: ~12%% fewer bytes, ~3x the CPU; webp: "
                        "lossless, ~half the bytes, slower; jpeg: lossy, ~14%% of the raw bytes at --quality 90)")
    g.add_argument("--quality", type=int, help="JPEG quality 1-100 with --compression jpeg (default 90)")
    g.add_argument("--source-digest", choices=("sampled", "full"),
                   help="sampled (default): each store records a digest of 16 MiB of its source (the resume check; "
                        "equals no archive checksum); full: also the SHA-256 of every byte (what sha256sum prints), "
                        "read once beside the tiles")
    g.add_argument("--quiet", action="store_true", help="no progress output (the log file is still written)")
    g.add_argument("--verbose", action="store_true",
                   help="the closing summary lists every slide (default: all up to 20 slides, else failures)")
    return p


_FIELDS = {"mpp": "mpp", "tile": "tile", "stride": "stride", "min_tissue": "min_tissue",
           "max_tiles": "max_tiles", "seed": "seed", "mask_mpp": "mask_mpp", "min_sharpness": "min_sharpness",
           "reference": "reference", "regions": "regions", "min_region": "min_region",
           "threads": "threads", "compression": "compression", "verify_jpeg": "verify_jpeg",
           "tissue_sensitivity": "tissue_sensitivity", "min_piece_um2": "min_piece_um2",
           "exclude_dark": "exclude_dark", "dark_od": "dark_od", "ink_margin_um": "ink_margin_um",
           "class_property": "class_property", "default_class": "default_class", "feature_kinds": "feature_kinds",
           "colour_profile": "colour_profile", "mpp_tolerance": "tolerance",
           "quality": "quality", "source_digest": "source_digest", "from_level0": "from_level0",
           "max_ink": "max_ink", "estimate_stains": "estimate_stains",
           "stain_groups": "stain_groups", "stain_group_column": "stain_group_column"}


def config_from_args(args):
    """A TilingConfig from ``--config`` plus the options given on the command line."""
    from tilewright.run.config import TilingConfig

    base = TilingConfig.from_toml(args.config) if args.config else TilingConfig()
    changes = {field: getattr(args, opt) for opt, field in _FIELDS.items() if getattr(args, opt) is not None}
    if args.normalize is not None:
        changes["normalizer"] = None if args.normalize == "none" else args.normalize
    if args.keep is not None:
        changes["keep"] = args.keep  # split on commas by TilingConfig
    if args.old_feature_kinds is not None:
        if args.feature_kinds is not None:
            raise ConfigError("--object-types is the old name of --feature-kinds; give --feature-kinds alone")
        print("tile-out: warning: --object-types is renamed --feature-kinds; the old name will be removed in the "
              "next release", file=sys.stderr)
        changes["feature_kinds"] = args.old_feature_kinds
    if isinstance(changes.get("reference"), str) and changes["reference"].lower().endswith(".json"):
        import json

        ref = Path(changes["reference"])
        try:
            changes["reference"] = json.loads(ref.read_text())
        except (OSError, ValueError) as exc:
            raise ConfigError(f"cannot read the fitted normalizer JSON ({exc})", ref) from None
    config = base.replace(**changes).validate()
    if args.min_region is not None and not config.keep:
        raise ConfigError("--min-region needs --regions and --keep (it sets how much of a tile the kept classes "
                          "must cover)")
    return config


def main(argv=None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        config = config_from_args(args)
        if args.print_config:
            sys.stdout.write(config.to_toml())
            return EXIT_OK
        if not args.source or not args.out:
            parser.error("SOURCE and OUT are required (or use --print-config)")
        if args.workers < 1:
            raise ConfigError("--workers must be at least 1")
        from tilewright.interrupts import stop_on_signals

        with stop_on_signals():  # SIGTERM (a batch scheduler's time limit) stops like Ctrl-C
            return run(args, _share_cores(config, args))
    except ConfigError as exc:
        print(f"tile-out: error: {exc}", file=sys.stderr)
        return EXIT_BAD_ARGS
    except OutputLockedError as exc:
        print(f"tile-out: {exc}", file=sys.stderr)
        return EXIT_LOCKED
    except ObjectStoreError as exc:  # credentials, bucket, access, connection: one line, before any work
        print(f"tile-out: error: {exc.one_line()}", file=sys.stderr)
        return EXIT_BAD_ARGS
    except KeyboardInterrupt as exc:
        what = "stopped (SIGTERM)" if getattr(exc, "signum", None) == EXIT_TERMINATED - 128 else "interrupted"
        print(f"\ntile-out: {what}; finished stores and the manifest are kept, run the same command again "
              "to resume", file=sys.stderr)
        return getattr(exc, "exit_code", EXIT_INTERRUPTED)


def _share_cores(config, args):
    """Local workers share this machine's cores: unless threads were chosen, each worker reads with
    ``cores // workers`` threads (so ``--workers 2`` on 2 cores runs 2 single-threaded workers)."""
    from tilewright.run.config import TilingConfig

    if args.threads is not None or args.scheduler or args.workers <= 1 or config.threads != TilingConfig().threads:
        return config
    return config.replace(threads=max(1, (os.cpu_count() or 2) // args.workers))


def _check_tiles_fit(paths, ids, config, mpp) -> None:
    from tilewright.run.sources import mpp_for
    from tilewright.run.feasible import check_tiles_fit

    check_tiles_fit(paths, config, [mpp_for(mpp, str(p), sid) for p, sid in zip(paths, ids)])


def run(args, config) -> int:
    from tilewright.cli.out_place import checked_out, run_log
    from tilewright.location.url import is_url
    from tilewright.run.naming import cohort_ids
    from tilewright.run.sources import read_mpp_table, slide_list, unique_paths

    found = slide_list(args.source)
    paths = found.paths
    if not paths:
        raise ConfigError("no slide files found (looked for .svs .tif .tiff .ndpi .mrxs .scn .bif .dcm ...)",
                          args.source)
    # the ids the run will use (tile_cohort settles them again under the output folder's lock)
    ids = cohort_ids([p if is_url(p) else Path(p).absolute() for p in unique_paths(paths)], args.out,
                     root=found.root, given=found.ids, where=args.source)
    mpp = args.source_mpp
    if args.mpp_table:
        table = read_mpp_table(args.mpp_table)
        mpp = {k: v for k, v in table.items()}
        if args.source_mpp is not None:
            for sid in ids:
                mpp.setdefault(sid, args.source_mpp)
    _check_tiles_fit(paths, ids, config, mpp)  # settings that fit no slide: exit 2, nothing written
    out = checked_out(args.out)  # a folder or a bucket prefix, written to once before any work
    with run_log(out) as log_file:
        return _run(args, config, found, mpp, out, log_file)


def _run(args, config, found, mpp, out, log_file) -> int:
    import contextlib
    import time

    from tilewright.cli.progress import RichProgress, setup_logging
    from tilewright.cli.summary import print_summary
    from tilewright.run.events import LogProgress, ProgressTracker
    from tilewright.run.cohort import tile_cohort

    paths = found.paths
    tty = sys.stderr.isatty() and not args.quiet
    setup_logging(log_file, quiet=args.quiet, tty=tty)
    log.info("tile-out: %d slide(s) from %s into %s (target %.3g µm/px, tile %d, normalize %s)",
             len(paths), args.source, out, config.mpp, config.tile, config.normalizer or "none")
    lines = LogProgress()  # the log file always; stderr too when it is not a terminal (and not --quiet)
    bar = RichProgress(len(paths)) if tty else contextlib.nullcontext()
    totals = ProgressTracker(None, len(paths), listeners=[lines, bar if tty else None])  # counts, then tells them

    t0 = time.perf_counter()
    with bar:
        results = tile_cohort(paths, out, config, scheduler=args.scheduler, workers=args.workers,
                              overwrite=args.overwrite, mpp=mpp, progress=False, on_progress=totals,
                              ids=found.ids, root=found.root)
    rows = [r.to_row() for r in results]
    del results
    if not args.quiet:
        print_summary(rows, out, seconds=time.perf_counter() - t0, megapixels=totals.megapixels,
                      verbose=args.verbose)
    failed = sum(r["status"] == "failed" for r in rows)
    log.info("done: %d ok, %d skipped, %d all ink, %d failed", sum(r["status"] == "ok" for r in rows),
             sum(r["status"] == "skipped" for r in rows), sum(r["status"] == "all-ink" for r in rows), failed)
    return EXIT_SOME_FAILED if failed else EXIT_OK


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
