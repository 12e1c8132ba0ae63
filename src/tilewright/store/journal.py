"""The manifest's journal: rows of slides finished since the manifest was last written.

A cohort run appends each finished slide's manifest row to ``OUT/manifest.journal.jsonl`` (one
JSON object a line) at once, and folds the journal into ``manifest.csv``/``.parquet`` every few
seconds and at the end (:mod:`tilewright.run.ledger`), then empties it. Recording a slide thus
costs one short append, whatever the cohort's size; rewriting the whole manifest after every
slide cost time that grew with the cohort.

Readers take the manifest and the journal together (:func:`tilewright.store.cohort.read_manifest`):
a run killed between two foldings leaves its last rows in the journal, never lost. A line cut short
by a kill is skipped. The journal is read before the manifest, so a folding that happens between
the two reads loses nothing (its rows are then in the manifest read second).

File access goes through four small functions (:func:`append_lines`, :func:`read_lines`,
:func:`remove`, :func:`replace_bytes`): open, append, whole-file replacement. An object store has
no appends: there the journal object is read and written back whole with the new lines (it holds
only the rows since the last folding, a few seconds' worth, and one run writes it: the lock of
:mod:`tilewright.run.lock_object`).
"""

from __future__ import annotations

import json
import math
from pathlib import Path

from tilewright.location.objpath import ObjectPath, as_path
from tilewright.location.objpath import replace_bytes as _replace_bytes

__all__ = ["JOURNAL_NAME", "journal_path", "append_rows", "read_rows", "clear", "append_lines",
           "read_lines", "remove", "replace_bytes"]

JOURNAL_NAME = "manifest.journal.jsonl"


def journal_path(out_dir) -> Path | ObjectPath:
    return as_path(out_dir) / JOURNAL_NAME


# -- file access ---------------------------------------------------------------------------------

def append_lines(path, lines: list[str]) -> None:
    """Append text lines to ``path`` (created when missing) in one write."""
    path = as_path(path)
    if isinstance(path, ObjectPath):
        try:
            before = path.read_bytes()
        except FileNotFoundError:
            before = b""
        path.write_bytes(before + "".join(line + "\n" for line in lines).encode("utf-8"))
        return
    with open(path, "a", encoding="utf-8") as fh:
        fh.write("".join(line + "\n" for line in lines))


def read_lines(path) -> list[str]:
    """The complete lines of ``path`` (a last line without its newline, cut by a kill, is left
    out); no file: no lines."""
    try:
        path = as_path(path)
        if isinstance(path, ObjectPath):
            text = path.read_bytes().decode("utf-8", "replace")
        else:
            with open(path, encoding="utf-8", errors="replace") as fh:
                text = fh.read()
    except FileNotFoundError:
        return []
    lines = text.split("\n")
    return lines[:-1]  # the part after the last newline is empty or a line cut short


def remove(path) -> None:
    as_path(path).unlink(missing_ok=True)


def replace_bytes(path, data: bytes) -> None:
    """Replace ``path`` with ``data`` atomically (a temporary file beside it, then a rename; an
    object: one request)."""
    _replace_bytes(path, data)


# -- rows ----------------------------------------------------------------------------------------

def _plain(value):
    if isinstance(value, float) and math.isnan(value):
        return None
    if hasattr(value, "item") and not isinstance(value, (str, bytes)):  # numpy scalars
        return value.item()
    return value


def append_rows(out_dir, rows: list[dict]) -> None:
    """Append manifest rows (dicts of plain values) to the folder's journal."""
    append_lines(journal_path(out_dir), [json.dumps({str(k): _plain(v) for k, v in row.items()},
                                                    ensure_ascii=False, default=str) for row in rows])


def read_rows(out_dir) -> list[dict]:
    """The journal's rows in the order they were appended (unreadable lines skipped)."""
    rows = []
    for line in read_lines(journal_path(out_dir)):
        try:
            row = json.loads(line)
        except ValueError:
            continue
        if isinstance(row, dict) and "slide_id" in row:
            rows.append(row)
    return rows


def clear(out_dir) -> None:
    """Empty the journal (after its rows were folded into the manifest)."""
    remove(journal_path(out_dir))
