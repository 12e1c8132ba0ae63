"""The cohort manifest, kept current while a run goes on and never clobbered by one that stops.

- Each finished slide's row is appended to the folder's journal at once
  (:mod:`tilewright.store.journal`: one short append, whatever the cohort's size), and the journal
  is folded into ``manifest.csv``/``.parquet`` (each replaced atomically) at most every
  :data:`FOLD_EVERY` seconds, and at the end. A run stopped by SIGKILL, SIGTERM or Ctrl-C leaves
  every slide done so far in the manifest or the journal, and readers take both.
- Folding costs time that grows with the cohort (one row a slide); it is spaced so that it never
  takes more than about :data:`FOLD_SHARE` of the run's time.
- Recording never opens a store: the rows of slides this run did not reach come from the previous
  manifest (and journal), else from the complete stores found when the run began
  (:mod:`tilewright.run.resume`, one metadata read a store) or, when the run ends, found in
  their stores then (a slide finished by a worker just before a stop), else they say
  "interrupted".
- A run that stops before tiling (a bad ``--reference``, an unreachable scheduler, Ctrl-C during
  the stain-target pass) writes neither the manifest nor ``config.toml``.
"""

from __future__ import annotations

import math
import sys
import time

from tilewright.errors import StoreError
from tilewright.location.objpath import as_path
from tilewright.store.manifest_row import kept_row

__all__ = ["Ledger", "INTERRUPTED", "FOLD_EVERY", "FOLD_SHARE"]

INTERRUPTED = "interrupted before this slide finished; run again to resume"

#: Least seconds between two foldings of the journal into the manifest.
FOLD_EVERY = 5.0

#: Largest share of the run's time spent folding: after a folding that took ``t`` seconds, the
#: next waits at least ``t / FOLD_SHARE`` seconds.
FOLD_SHARE = 0.02


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
    found : dict, optional
        Rows of complete stores already in the folder, by slide id (see
        :func:`tilewright.run.resume.scan`): the rows of slides this run does not reach when
        neither the manifest nor the journal has them.
    on_fold : callable, optional
        Called with every row of the manifest each time it is written (the QC page is drawn from
        them; its cost counts in the folding's share of the run).
    """

    def __init__(self, out_dir, paths, ids, config_toml: str, found: dict | None = None, on_fold=None):
        from tilewright.store.cohort import read_manifest

        self.out_dir = as_path(out_dir)
        self.paths, self.ids = list(paths), list(ids)
        self.config_toml = config_toml
        self.found = dict(found or {})
        self.on_fold = on_fold
        self.finished: dict[str, dict] = {}
        self._config_done = False
        self.started = False  # set when the tiling pass begins (after the stain-target pass)
        self._next_fold = 0.0  # time.monotonic() before which record() does not fold
        try:  # with the journal a killed run left: its rows are the newest
            df = read_manifest(self.out_dir)
            self.previous = {str(r["slide_id"]): _clean(r) for r in df.to_dict("records")}
        except (StoreError, OSError, ValueError):
            self.previous = {}

    def record(self, row: dict) -> None:
        """A slide finished (ok, skipped or failed): append its row to the journal, and fold the
        journal into the manifest when the last folding is old enough.

        A store kept from an earlier run keeps that run's timing (this run spent none on it)."""
        from tilewright.store.journal import append_rows

        if row.get("kept"):
            before = self.previous.get(str(row["slide_id"])) or {}
            row = {**row, "seconds": before.get("seconds") if before.get("status") in ("ok", "skipped", "all-ink") else None}
        self.finished[str(row["slide_id"])] = _compact(row)
        self._write_config()
        append_rows(self.out_dir, [row])
        if time.monotonic() >= self._next_fold:
            self.write()

    def rows(self) -> list[dict]:
        """This run's rows in input order: finished, else kept, else interrupted."""
        from tilewright.run.slide import SlideResult

        out = []
        for path, sid in zip(self.paths, self.ids):
            row = self.finished.get(sid) or self.previous.get(sid) or self.found.get(sid)
            out.append(row or SlideResult(sid, path, "failed", INTERRUPTED).to_row())
        return out

    def write(self, *, last: bool = False) -> None:
        """Fold: write the manifest from every row known, then empty the journal (and write
        ``config.toml`` the first time), once tiling has begun.

        ``last``: the run ends; slides it did not record that now have a complete store (a slide
        a worker finished just before the run was stopped) get that store's row: one metadata
        read a store, once."""
        from tilewright.store.cohort import write_manifest
        from tilewright.store.journal import clear

        if not (self.finished or self.started):
            return  # stopped before tiling: the folder's manifest stays as it was
        t0 = time.monotonic()
        if last:
            self._find_unrecorded()
        mine = set(self.ids)
        rows = [r for sid, r in self.previous.items() if sid not in mine] + self.rows()
        self._write_config()
        write_manifest(self.out_dir, rows)
        clear(self.out_dir)  # every row it held is in the manifest now
        if self.on_fold is not None:
            self.on_fold(rows)
        spent = time.monotonic() - t0
        self._next_fold = time.monotonic() + max(FOLD_EVERY, spent / FOLD_SHARE)

    def _find_unrecorded(self) -> None:
        from tilewright.store.layout import store_path
        from tilewright.store.metadata import stores_attrs

        todo = [(p, sid) for p, sid in zip(self.paths, self.ids)
                if sid not in self.finished and sid not in self.previous]
        finals = [store_path(self.out_dir, sid) for _, sid in todo]
        for final, (path, sid), attrs in zip(finals, todo, stores_attrs(finals)):
            if attrs is not None:
                self.found[sid] = kept_row(final, sid, path, attrs)

    def _write_config(self) -> None:
        if not self._config_done:
            from tilewright.store.journal import replace_bytes

            replace_bytes(self.out_dir / "config.toml", self.config_toml.encode("utf-8"))
            self._config_done = True


def _compact(row: dict) -> dict:
    """The row, its keys and short texts (status, codes, empty strings) shared with every other
    row: rows from workers arrive with their own copies of each key, ~1 KB a row held for the
    whole run."""
    return {sys.intern(str(k)): (sys.intern(v) if isinstance(v, str) and len(v) <= 16 else v)
            for k, v in row.items()}
