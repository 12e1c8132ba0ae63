"""The closing summary table of a run."""

from __future__ import annotations

import sys

__all__ = ["print_summary"]


def print_summary(rows, out, stream=None) -> None:
    stream = stream or sys.stdout
    w = max([len("slide")] + [len(str(r["slide_id"])) for r in rows])
    stream.write(f"\n{'slide':<{w}}  {'status':<7}  {'tiles':>7}  {'seconds':>7}  note\n")
    for r in rows:
        note = str(r.get("error") or "")
        if len(note) > 90:
            note = note[:87] + "..."
        stream.write(f"{r['slide_id']:<{w}}  {r['status']:<7}  {int(r.get('n_tiles') or 0):>7}  "
                     f"{float(r.get('seconds') or 0):>7.1f}  {note}\n")
    ok = sum(r["status"] == "ok" for r in rows)
    failed = sum(r["status"] == "failed" for r in rows)
    warned = sum(bool(r.get("warnings")) for r in rows)
    stream.write(f"\n{ok} ok, {len(rows) - ok - failed} skipped, {failed} failed. "
                 f"Stores and manifest.csv are in {out}\n")
    if warned:
        stream.write(f"{warned} slide(s) with warnings (no glass, much ink, little tissue, stain estimate "
                     f"replaced, ...): see the warnings column of manifest.csv and tile-out.log\n")
