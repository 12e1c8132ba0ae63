"""The closing summary table of a run."""

from __future__ import annotations

import sys

from tilewright.cli.row_text import row_note, row_seconds, wrapped

__all__ = ["print_summary"]


def print_summary(rows, out, stream=None) -> None:
    stream = stream or sys.stdout
    w = max([len("slide")] + [len(str(r["slide_id"])) for r in rows])
    stream.write(f"\n{'slide':<{w}}  {'status':<7}  {'tiles':>7}  {'seconds':>7}  note\n")
    for r in rows:  # the note is never cut: wrapped at word boundaries under its column
        head = f"{r['slide_id']:<{w}}  {r['status']:<7}  {int(r.get('n_tiles') or 0):>7}  {row_seconds(r)}  "
        stream.write(head + wrapped(row_note(r), len(head)) + "\n")
    ok = sum(r["status"] == "ok" for r in rows)
    failed = sum(r["status"] == "failed" for r in rows)
    stream.write(f"\n{ok} ok, {len(rows) - ok - failed} skipped, {failed} failed. "
                 f"Stores and manifest.csv are in {out}\n")
