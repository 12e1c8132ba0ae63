"""The ``tilewright`` umbrella command: ``tile`` (same as tile-out), ``plan``, ``demo``, ``inspect``,
``audit``, ``split``, ``status``."""

from __future__ import annotations

import importlib
import sys

__all__ = ["main"]

#: Sub-command modules; each has ``register(subparsers)`` setting ``func`` to ``run(args) -> int``.
SUBCOMMANDS = ("tilewright.cli.demo_cmd", "tilewright.cli.inspect_cmd", "tilewright.cli.audit_cmd",
               "tilewright.cli.split_cmd", "tilewright.cli.status_cmd")


def main(argv=None) -> int:
    argv = list(sys.argv[1:] if argv is None else argv)
    if argv[:1] == ["tile"]:
        from tilewright.cli.tile_out import main as tile_out

        return tile_out(argv[1:])
    if argv[:1] == ["plan"]:  # takes tile-out's options: its own parser
        from tilewright.cli.plan_cmd import main as plan

        return plan(argv[1:])
    from tilewright.cli.parser import CommandParser

    parser = CommandParser(
        prog="tilewright",
        description="H&E whole-slide cohorts to harmonized, stain-normalized tile stores. "
                    "Research use only; not for diagnosis.")
    from tilewright import __version__

    parser.add_argument("--version", action="version", version=f"tilewright {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    sub.add_parser("tile", help="tile slides into stores (same as the tile-out command)", add_help=False)
    sub.add_parser("plan", help="survey a cohort before tiling it: µm/px, tissue, planned tiles, bytes a codec "
                                "(takes tile-out's SOURCE, OUT and options)", add_help=False)
    for name in SUBCOMMANDS:
        importlib.import_module(name).register(sub)
    args, extra = parser.parse_known_args(argv)
    if extra:  # named by the sub-command's own parser: its options are suggested, its usage shown
        sub.choices.get(getattr(args, "command", None), parser).error("unrecognized arguments: " + " ".join(extra))
    if not getattr(args, "func", None):
        parser.print_help()
        return 2
    try:
        return int(args.func(args) or 0)
    except KeyboardInterrupt:
        print("\ntilewright: interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
