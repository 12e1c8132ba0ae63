"""The table of every option (docs/guide/tiling.md, "Every option and its default") lists every tile-out option and TilingConfig key with the
default the code has (ground truth: argparse's actions and the dataclass's fields)."""

import argparse
import re
from pathlib import Path

from tilewright.cli.tile_out import _FIELDS, build_parser
from tilewright.run.config import TilingConfig
from tilewright.store.settings import RUN_ONLY

PAGE = Path(__file__).resolve().parents[2] / "docs" / "guide" / "tiling.md"


def _table() -> list[list[str]]:
    text = PAGE.read_text(encoding="utf-8")
    start = text.index("**Every option and its default**")
    rows = []
    for line in text[start:].splitlines()[5:]:  # after the header and its rule
        if not line.startswith("|"):
            break
        rows.append([c.strip() for c in line.strip("|").split("|")])
    return rows


def _shown(value) -> str:
    if value is None:
        return "none"
    if isinstance(value, bool):
        return "true" if value else "false"
    return str(value)


def test_every_option_and_key_is_listed_with_its_default():
    rows = _table()

    def plain(option):  # --no-verify-jpeg and --verify-jpeg are one option
        return option.strip("`").replace("--no-", "--")

    listed = {plain(r[0]) for r in rows if r[0] != "-"}
    parsed = {plain(s) for a in build_parser()._actions for s in a.option_strings
              if s.startswith("--") and a.help != argparse.SUPPRESS}  # an old spelling (--object-types) is not listed
    assert parsed - {"--help"} == listed, parsed ^ listed
    keys = {r[1].strip("`"): r for r in rows if r[1] != "-"}
    defaults = TilingConfig().to_dict()
    assert set(defaults) == set(keys), set(defaults) ^ set(keys)  # every key, nothing else
    for key, row in keys.items():
        assert row[2].split(" (")[0] == _shown(defaults[key]) or (key == "normalizer" and row[2] == "none"), (key, row)
        if key in RUN_ONLY and key not in ("compression", "quality"):
            assert row[4] == "no", key  # run-only settings do not count on resume
    for opt, field in _FIELDS.items():  # each option sits on the row of the key it sets
        row = keys[field]
        assert plain(row[0]) == "--" + opt.replace("_", "-") or (opt, field) == ("mpp_tolerance", "tolerance"), (opt, row)
