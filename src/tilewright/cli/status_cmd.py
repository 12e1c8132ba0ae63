"""``tilewright status OUT``: how far a run into OUT is, in words, from another terminal or node.

Reads ``OUT/progress.json`` (rewritten by the run every few seconds) and says whether a run holds
the folder's lock right now (so a stale file from a run that died is not taken for a live one).
"""

from __future__ import annotations

import sys
from datetime import datetime, timezone

__all__ = ["register", "run", "describe"]


def register(sub) -> None:
    p = sub.add_parser("status", help="how far a tile-out run into OUT is (reads OUT/progress.json)")
    p.add_argument("out", metavar="OUT", help="the run's output folder")
    p.set_defaults(func=run)


def _ago(iso: str | None, now: datetime) -> str:
    if not iso:
        return "unknown"
    seconds = int((now - datetime.fromisoformat(iso)).total_seconds())
    if abs(seconds) < 90:
        return f"{seconds} s"
    if abs(seconds) < 5400:
        return f"{seconds // 60} min"
    return f"{seconds / 3600:.1f} h"


def describe(status: dict | None, holder: str | None, now: datetime | None = None) -> str:
    """The status in words (``status``: progress.json's content; ``holder``: the lock's holder)."""
    now = now or datetime.now(timezone.utc)
    lock = (f"A run holds the folder's lock ({holder.rsplit(' ', 1)[0]}, pid {holder.rsplit(' ', 1)[-1]})."
            if holder else "No run holds the folder's lock.")
    if status is None:
        return f"No progress.json here: no run has tiled into this folder yet. {lock}\n"
    s = status
    lines = [
        f"Run started {_ago(s.get('started'), now)} ago; {s.get('state', 'running')}, last update "
        f"{_ago(s.get('updated'), now)} ago.",
        f"Slides: {s['slides_done']} of {s['slides_total']} done ({s['slides_failed']} failed, "
        f"{s.get('slides_skipped', 0)} skipped).",
        f"Tiles: {s['tiles_read']} read of about {s['tiles_planned_estimate']} planned; "
        f"{s['tiles_written']} stored by finished slides.",
    ]
    if s.get("in_flight"):
        names = ", ".join(s["in_flight"][:8]) + (" ..." if len(s["in_flight"]) > 8 else "")
        lines.append(f"In flight: {names}.")
    if s.get("state") == "running" and s.get("estimated_end"):
        end = datetime.fromisoformat(s["estimated_end"])
        lines.append(f"Estimated end: {end.strftime('%Y-%m-%d %H:%M UTC')} (in {_ago(now.isoformat(), end)}).")
    if s.get("state") == "running" and not holder:
        lines.append("The file says running but no run holds the lock: that run has stopped (killed?); "
                     "run tile-out again to resume.")
    lines.append(lock)
    return "\n".join(lines) + "\n"


def run(args) -> int:
    from tilewright.run.events import read_progress
    from tilewright.run.lock import lock_holder

    from tilewright.errors import TilewrightError

    try:
        status = read_progress(args.out)
        holder = lock_holder(args.out)
    except (OSError, ValueError) as exc:
        print(f"tilewright status: cannot read {args.out}/progress.json ({exc})", file=sys.stderr)
        return 2
    except TilewrightError as exc:  # a bucket that cannot be read: one line
        print(f"tilewright status: error: {exc.one_line()}", file=sys.stderr)
        return 2
    sys.stdout.write(describe(status, holder))
    return 0
