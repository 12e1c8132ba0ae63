"""How one slide's manifest row reads on the console: its note and its time, never cut mid-word.

A failure's reason ends with the fix a user needs ("...; pass --overwrite"), so a summary never
shortens it: it is wrapped at word boundaries (paths and options are never split) under its own
column. A store kept from an earlier run reads "complete, kept", with no time of this run.
"""

from __future__ import annotations

import shutil
import textwrap

__all__ = ["KEPT", "row_note", "row_seconds", "row_progress", "wrapped"]

KEPT = "complete, kept"


def row_note(row: dict) -> str:
    """The note of a row: the reason of a failed or skipped slide, ``"complete, kept"`` (and the
    skip reason, if any) for a store an earlier run made, else empty."""
    reason = " ".join(str(row.get("error") or "").split())
    if row.get("kept"):
        return f"{KEPT}; {reason}" if reason else KEPT
    return reason


def row_seconds(row: dict, width: int = 7) -> str:
    """This run's seconds on the slide, right-aligned; ``-`` for a kept store (none spent here)."""
    if row.get("kept"):
        return f"{'-':>{width}}"
    return f"{float(row.get('seconds') or 0):>{width}.1f}"


def row_progress(row: dict) -> str:
    """The per-slide progress text after ``<slide id>:``."""
    if row.get("kept"):
        return f"{KEPT} ({int(row.get('n_tiles') or 0)} tiles)"
    if row.get("status") == "failed":
        return f"failed - {row_note(row)}"
    return f"{row.get('status')}, {int(row.get('n_tiles') or 0)} tiles in {float(row.get('seconds') or 0):.1f} s"


def wrapped(text: str, indent: int, width: int | None = None) -> str:
    """``text`` wrapped at word boundaries to ``width`` columns (the terminal's, at least 40 for
    the text itself), continuation lines indented by ``indent`` spaces; nothing is dropped."""
    if not text:
        return ""
    width = width or shutil.get_terminal_size((120, 24)).columns
    lines = textwrap.wrap(text, width=max(40, width - indent), break_long_words=False, break_on_hyphens=False)
    return ("\n" + " " * indent).join(lines)
