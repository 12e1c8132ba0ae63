"""``tilewright plan SOURCE [OUT] [tile-out options]``: what tiling a cohort would give, before tiling it.

Takes the same SOURCE, OUT and options as ``tile-out`` (so the plan is of the very run you are about
to start), reads every slide's header and thumbnail only, and prints a short table: slides, formats,
level-0 µm/px, tissue area, planned tiles and estimated bytes for each codec, with per-site rows
when ``--metadata`` names each slide's site. With OUT, writes ``OUT/plan.csv`` and
``OUT/plan.parquet`` (one row a slide; ``plan_sites.*`` per site) and uses the ids a run into OUT
would give.
"""

from __future__ import annotations

import sys
import time

__all__ = ["main", "build_parser"]


def build_parser():
    from tilewright.cli.tile_out import build_parser as tile_out_parser

    p = tile_out_parser()
    p.prog = "tilewright plan"
    p.usage = "%(prog)s SOURCE [OUT] [tile-out options] [--metadata META] [--sample-tiles N]"
    p.description = ("Survey a cohort before tiling it: every slide's format, level-0 µm/px and its origin, "
                     "levels, colour profile, tissue area, planned tiles and estimated bytes for each codec, at "
                     "the tile-out options given. Reads headers and thumbnails only. Research use only.")
    p.epilog = "Exit codes: 0 every slide read, 3 some slides could not be read (see the status column), 2 bad arguments."
    g = p.add_argument_group("plan")
    g.add_argument("--metadata", help="CSV/TSV/Parquet with slide_id and a site column: per-site summaries")
    g.add_argument("--site-column", default="site", help="the metadata column naming each slide's site (default site)")
    g.add_argument("--sample-tiles", type=int, default=0,
                   help="read this many tiles a slide to measure codec bytes on them (default 0: no tile read; "
                        "bytes from ratios measured on H&E tiles)")
    return p


def main(argv=None) -> int:
    from tilewright.cli.tile_out import EXIT_BAD_ARGS, EXIT_OK, EXIT_SOME_FAILED, config_from_args
    from tilewright.errors import ConfigError

    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        config = config_from_args(args)
        if not args.source:
            parser.error("SOURCE is required")
        if args.sample_tiles < 0:
            raise ConfigError("--sample-tiles must be 0 or more")
        plan = _plan(args, config)
    except ConfigError as exc:
        print(f"tilewright plan: error: {exc}", file=sys.stderr)
        return EXIT_BAD_ARGS
    except KeyboardInterrupt:
        print("\ntilewright plan: interrupted; nothing was written", file=sys.stderr)
        return 130
    print(plan.summary())
    if args.out:
        written = plan.write(args.out)
        print(f"\nwritten: {', '.join(str(p) for p in written)}")
    return EXIT_SOME_FAILED if plan.totals["failed"] else EXIT_OK


def _plan(args, config):
    from tilewright.run.inventory import plan_cohort
    from tilewright.run.sources import read_mpp_table

    mpp = args.source_mpp
    if args.mpp_table:
        mpp = dict(read_mpp_table(args.mpp_table))
    last = [0.0]

    def progress(done, total):
        now = time.monotonic()
        if not args.quiet and (now - last[0] >= 5 or done == total):
            last[0] = now
            print(f"surveyed {done}/{total} slides", file=sys.stderr, flush=True)

    return plan_cohort(args.source, config, out_dir=args.out, sites=args.metadata, site_column=args.site_column,
                       mpp=mpp, sample_tiles=args.sample_tiles, scheduler=args.scheduler, workers=args.workers,
                       on_progress=progress)
