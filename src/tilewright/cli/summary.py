"""The closing summary of a run: counts first, then only what needs attention."""

from __future__ import annotations

import sys

from tilewright.location.objpath import as_path
from tilewright.run.row_text import row_note, row_seconds, wrapped

__all__ = ["print_summary", "FULL_TABLE_UP_TO"]

#: Runs of at most this many slides list every slide; larger ones list only the failures.
FULL_TABLE_UP_TO = 20


def _bytes(rows) -> int:
    """Bytes of the stores this run wrote, as each slide measured its own store when it finished
    (a kept store was written by an earlier run; nothing is read from disk here)."""
    return sum(int(r.get("bytes") or 0) for r in rows if r.get("status") == "ok" and not r.get("kept"))


def _size(n: float) -> str:
    for unit in ("B", "kB", "MB", "GB", "TB"):
        if n < 1000 or unit == "TB":
            return f"{n:.0f} {unit}" if unit == "B" else f"{n:.1f} {unit}"
        n /= 1000.0
    return f"{n} B"  # pragma: no cover


def print_summary(rows, out, *, seconds: float = 0.0, megapixels: float = 0.0, verbose: bool = False,
                  stream=None) -> None:
    """Counts (ok / skipped / failed), tiles, bytes written, wall time and MP/s; then the failed
    slides with their one-line reasons, or every slide with ``verbose`` or for small runs."""
    stream = stream or sys.stdout
    ok = sum(r["status"] == "ok" for r in rows)
    failed = [r for r in rows if r["status"] == "failed"]
    inked = [r for r in rows if r["status"] == "all-ink"]
    tiles = sum(int(r.get("n_tiles") or 0) for r in rows)
    rate = f", {megapixels / seconds:.0f} MP/s" if seconds > 0 and megapixels > 0 else ""
    all_ink = f", {len(inked)} ALL INK" if inked else ""
    stream.write(f"\n{ok} ok, {len(rows) - ok - len(failed) - len(inked)} skipped{all_ink}, {len(failed)} failed; "
                 f"{tiles} tiles, {_size(_bytes(rows))} written in {seconds:.1f} s{rate}\n")
    if inked:  # not blank slides: their tissue (or what was taken for it) went to the ink filter
        stream.write(f"{len(inked)} slide(s) lost all their tissue to marker ink or the dark-region filter (status "
                     f"all-ink: {', '.join(str(r['slide_id']) for r in inked[:5])}{', ...' if len(inked) > 5 else ''}): "
                     "look at their QC pictures in qc/\n")
    warned = sum(bool(r.get("warnings")) for r in rows)
    if warned:
        stream.write(f"{warned} slide(s) with warnings (no glass, much ink, little tissue, stain estimate "
                     f"replaced, ...): see the warnings column of manifest.csv and tile-out.log\n")
    short = not (verbose or len(rows) <= FULL_TABLE_UP_TO)
    listed = failed + inked if short else rows
    if listed:
        w = max([len("slide")] + [len(str(r["slide_id"])) for r in listed])
        stream.write(f"\n{'slide':<{w}}  {'status':<7}  {'tiles':>7}  {'seconds':>7}  note\n")
        for r in listed:  # the note is never cut: wrapped at word boundaries under its column
            head = f"{r['slide_id']:<{w}}  {r['status']:<7}  {int(r.get('n_tiles') or 0):>7}  {row_seconds(r)}  "
            stream.write(head + wrapped(row_note(r), len(head)) + "\n")
    where = f"{as_path(out) / 'manifest.csv'}"
    if short and listed:
        stream.write(f"\nOnly failures and all-ink slides are listed; every slide is in {where} (--verbose lists "
                     "all).\n")
    else:
        stream.write(f"\nStores and the manifest ({where}) are in {out}\n")
