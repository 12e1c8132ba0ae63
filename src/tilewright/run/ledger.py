"""The cohort manifest, kept current while a run goes on and never clobbered by one that stops.

- Rows are written (atomically: temporary files, then renames) each time a slide finishes, so a
  run stopped by SIGKILL, SIGTERM or Ctrl-C leaves a manifest naming every slide done so far.
- A run that stops before tiling (a bad ``--reference``, an unreachable scheduler, Ctrl-C during
  the stain-target pass) writes neither the manifest nor ``config.toml``.
- Rows of slides this run did not reach, and of slides of earlier runs into the same folder, are
  kept: from the previous manifest, else from their complete stores; a slide of this run with
  neither gets an "interrupted" row.
"""

from __future__ import annotations

import math
from pathlib import Path

from tilewright.errors import StoreError
from tilewright.location.objpath import as_path

__all__ = ["Ledger", "INTERRUPTED", "store_row"]

INTERRUPTED = "interrupted before this slide finished; run again to resume"


def _clean(row: dict) -> dict:
    return {k: (None if isinstance(v, float) and math.isnan(v) else v) for k, v in row.items()}


class Ledger:
    """Manifest rows of one run over ``paths`` (ids ``ids``) into ``out_dir``.

    Parameters
    ----------
    out_dir : path
    paths, ids : list of str
        This run's slides and their ids.
    config_toml : str
        The run's settings, written to ``config.toml`` with the first finished slide.
    """

    def __init__(self, out_dir, paths, ids, config_toml: str):
        from tilewright.store.cohort import read_manifest

        self.out_dir = as_path(out_dir)
        self.paths, self.ids = list(paths), list(ids)
        self.config_toml = config_toml
        self.finished: dict[str, dict] = {}
        self._config_done = False
        self.started = False  # set when the tiling pass begins (after the stain-target pass)
        try:
            df = read_manifest(self.out_dir)
            self.previous = {str(r["slide_id"]): _clean(r) for r in df.to_dict("records")}
        except (StoreError, OSError, ValueError):
            self.previous = {}

    def record(self, row: dict) -> None:
        """A slide finished (ok, skipped or failed): remember its row and rewrite the manifest.

        A store kept from an earlier run keeps that run's timing (this run spent none on it)."""
        if row.get("kept"):
            before = self.previous.get(str(row["slide_id"])) or {}
            row = {**row, "seconds": before.get("seconds") if before.get("status") in ("ok", "skipped", "all-ink") else None}
        self.finished[str(row["slide_id"])] = row
        self.write()

    def rows(self) -> list[dict]:
        """This run's rows in input order: finished, else kept, else interrupted."""
        from tilewright.run.slide import SlideResult

        out = []
        for path, sid in zip(self.paths, self.ids):
            row = self.finished.get(sid) or self.previous.get(sid) or store_row(self.out_dir, sid, path)
            out.append(row or SlideResult(sid, path, "failed", INTERRUPTED).to_row())
        return out

    def write(self) -> None:
        """Write the manifest (and ``config.toml`` the first time), once tiling has begun."""
        from tilewright.store.cohort import write_manifest

        if not (self.finished or self.started):
            return  # stopped before tiling: the folder's manifest stays as it was
        mine = set(self.ids)
        rows = [r for sid, r in self.previous.items() if sid not in mine] + self.rows()
        if not self._config_done:
            _replace_text(self.out_dir / "config.toml", self.config_toml)
            self._config_done = True
        write_manifest(self.out_dir, rows)


def store_row(out_dir: Path, slide_id: str, path: str) -> dict | None:
    """The row of a complete store already in the folder (a slide this run did not reach)."""
    from tilewright.store.layout import store_path
    from tilewright.store.reader import is_complete, open_store

    final = store_path(out_dir, slide_id)
    if not is_complete(final):
        return None
    try:
        a = open_store(final).attrs
    except Exception:  # noqa: BLE001 - an unreadable store is not a row to keep
        return None
    return kept_row(final, slide_id, path, a)


def kept_row(final, slide_id: str, path: str, a: dict) -> dict:
    """The manifest row of the complete store ``final`` kept from an earlier run (``a``: its attributes)."""
    from tilewright.run.skip_reason import skip_status
    from tilewright.run.slide import SlideResult
    from tilewright.run.stain_bind import stain_columns

    n = int(a.get("n_tiles") or 0)
    from tilewright.slide.colour import colour_label

    status, reason = ("ok", "") if n else skip_status(a)
    return SlideResult(slide_id, path, status, reason, n, a.get("mpp_source"), a.get("objective"), a.get("source_level"), None,
                       str(final), colour_label(a.get("colour_profile")), "; ".join(a.get("warnings") or ()),
                       source_sha256=(a.get("source") or {}).get("sha256") or "", mpp_origin=a.get("mpp_origin") or "",
                       kept=True, **stain_columns(a)).to_row()


def _replace_text(path, text: str) -> None:
    from tilewright.location.objpath import replace_text

    replace_text(path, text)
