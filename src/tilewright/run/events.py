"""Progress of a cohort run as events, for library callers, the command line and ``progress.json``.

A run emits :class:`ProgressEvent` values: ``"start"`` (slides to do), ``"plan"`` (a slide's
planned tiles, before any is read), ``"tiles"`` (tiles read in a slide since its last event, sent
per block of tiles, so progress moves within a slide), ``"slide"`` (a slide finished: its manifest
row) and ``"end"``. ``tile_cohort(..., on_progress=callable)`` receives every event; the events
come from this process, from local worker processes and from a remote cluster alike (workers send
them as dask worker events, see :mod:`tilewright.run.reporting`; a slide on a worker that
finishes within half a second sends no "plan" or "tiles" event: its "slide" event carries its
counts).

:class:`ProgressTracker` folds the events into counts (slides done/failed, tiles written/planned,
source megapixels, slides in flight, an end estimated from planned tiles and finished slides),
each event at a cost that does not grow with the cohort, and rewrites
``OUT/progress.json`` atomically (temporary name, then rename) at most every
:data:`WRITE_EVERY` seconds, and once at the end. ``tilewright status OUT`` reads that file.
"""

from __future__ import annotations

import json
import os
import threading
import time
from dataclasses import dataclass, field
from datetime import datetime, timezone

from tilewright.errors import TilewrightError
from tilewright.location.objpath import as_path, replace_text

__all__ = ["ProgressEvent", "ProgressTracker", "LogProgress", "PROGRESS_FILE", "read_progress", "WRITE_EVERY"]

PROGRESS_FILE = "progress.json"

#: Seconds between two rewrites of ``progress.json``.
WRITE_EVERY = 3.0


@dataclass(frozen=True)
class ProgressEvent:
    """One step of a cohort run.

    Attributes
    ----------
    kind : {"start", "plan", "tiles", "slide", "end"}
        What happened (see the module docstring).
    slide_id : str or None
        The slide concerned ("plan", "tiles", "slide").
    count : int
        "start": slides in the run; "plan": tiles planned for the slide; "tiles": tiles read
        since the slide's previous event; "slide": tiles the slide read that no "tiles" event
        reported (a slide on a worker that finished within a moment sends no event of its own).
    megapixels : float
        "tiles" and "slide": source megapixels those tiles cover (level-0 pixels read, in
        millions).
    row : dict or None
        "slide": the slide's manifest row (``status`` ok/skipped/failed, ``error``, ``n_tiles``, ...).
    time : float
        ``time.time()`` when the event was made.
    """

    kind: str
    slide_id: str | None = None
    count: int = 0
    megapixels: float = 0.0
    row: dict | None = None
    time: float = field(default_factory=time.time)

    def to_dict(self) -> dict:
        return {"kind": self.kind, "slide_id": self.slide_id, "count": int(self.count),
                "megapixels": float(self.megapixels), "row": self.row, "time": float(self.time)}

    @classmethod
    def from_dict(cls, d: dict) -> "ProgressEvent":
        return cls(d["kind"], d.get("slide_id"), int(d.get("count") or 0), float(d.get("megapixels") or 0.0),
                   d.get("row"), float(d.get("time") or time.time()))


class ProgressTracker:
    """Counts of a run, kept from its events; writes ``progress.json`` (see the module docstring).

    Every event costs the same whatever the cohort's size: totals are kept as running sums, and
    per-slide counts only for the slides in flight (planned or being read, not yet finished).

    Parameters
    ----------
    out_dir : path or None
        Where ``progress.json`` goes (None: not written).
    total : int
        Slides in the run.
    listeners : list of callable
        Each gets every event, after the counts are updated.
    """

    def __init__(self, out_dir, total: int, listeners=()):
        self.path = None if out_dir is None else as_path(out_dir) / PROGRESS_FILE
        self.total = int(total)
        self.listeners = [f for f in listeners if f is not None]
        self.lock = threading.Lock()
        self.started = time.time()
        self.working = None  # time.time() of the first plan: when tiling began (after any resume check)
        self.done = self.failed = self.skipped = 0
        self.tiled = 0  # finished slides this run planned (not kept from an earlier run)
        self.written = 0  # tiles stored by finished slides
        self.megapixels = 0.0
        self.planned_total = 0  # tiles planned by every slide planned so far
        self.planned_slides = 0
        self.unplanned_done = 0  # slides finished without a plan (kept, or failed before planning)
        self.read_total = 0  # tiles read so far
        self.in_flight: dict[str, list] = {}  # slide -> [planned tiles or None, tiles read]
        self.finished: set[str] = set()
        self.settled = 0  # planned tiles that will not be read (their slide failed)
        self.state = "running"
        self._last_write = 0.0

    def __call__(self, event: ProgressEvent) -> None:
        with self.lock:
            self._fold(event)
            if self.path is not None and (event.kind in ("start", "end")
                                          or time.monotonic() - self._last_write >= WRITE_EVERY):
                self._write()
        for listener in self.listeners:
            listener(event)

    def _fold(self, e: ProgressEvent) -> None:
        sid = e.slide_id
        if e.kind == "start":
            self.total = int(e.count)
        elif e.kind == "plan":
            if sid in self.finished:
                return  # a late message of a slide already recorded
            entry = self.in_flight.setdefault(sid, [None, 0])
            if entry[0] is None:
                self.planned_slides += 1
            else:
                self.planned_total -= entry[0]
            entry[0] = int(e.count)
            self.planned_total += entry[0]
            self.working = self.working or e.time
        elif e.kind == "tiles":
            n = int(e.count)
            self.read_total += n
            self.megapixels += float(e.megapixels)
            if sid in self.finished:  # sent before the slide finished, arrived after its row
                self.settled -= min(n, self.settled)
                return
            self.in_flight.setdefault(sid, [None, 0])[1] += n
        elif e.kind == "slide":
            row = e.row or {}
            self.done += 1
            status = row.get("status")
            self.failed += status == "failed"
            self.skipped += status in ("skipped", "all-ink")
            self.written += int(row.get("n_tiles") or 0)
            self.finished.add(sid)
            planned, read = self.in_flight.pop(sid, [None, 0])
            if e.count:  # read by a slide too short to send events of its own
                self.read_total += int(e.count)
                self.megapixels += float(e.megapixels)
                read += int(e.count)
                if planned is None:
                    planned = read
                    self.planned_slides += 1
                    self.planned_total += planned
            if planned is None:
                self.unplanned_done += 1
            else:
                self.tiled += 1
                self.settled += max(0, planned - read)  # a failed slide reads no more
        elif e.kind == "end":
            self.state = e.row.get("state", "finished") if e.row else "finished"
            self.in_flight.clear()

    # -- derived figures ------------------------------------------------------------------
    @property
    def read(self) -> dict:
        """Tiles read so far by each slide in flight."""
        return {sid: v[1] for sid, v in self.in_flight.items()}

    def planned_estimate(self) -> int:
        """Tiles the whole run will read: planned so far, plus the mean of the planned slides for
        each slide neither planned nor finished yet."""
        rest = max(0, self.total - self.planned_slides - self.unplanned_done)
        mean = self.planned_total / self.planned_slides if self.planned_slides else 0.0
        return int(round(self.planned_total + rest * mean))

    def eta_seconds(self) -> float | None:
        """Seconds left (None before any tile was read): the larger of two estimates at the rate
        since tiling began, one from the tiles still to read, one from the slides still to finish.
        The second counts what a slide costs besides its tiles (opening, mask, store), which
        dominates on small slides, and the last slides' commit once all their tiles are read."""
        now = time.time()
        elapsed = now - (self.working or self.started)
        if self.read_total <= 0 or elapsed <= 0:
            return None
        left = max(0, self.planned_estimate() - self.read_total - self.settled)
        by_tiles = left * elapsed / self.read_total
        slides_left = max(0, self.total - self.done)
        by_slides = slides_left * elapsed / self.tiled if self.tiled else 0.0
        return max(by_tiles, by_slides)

    def snapshot(self) -> dict:
        eta = self.eta_seconds()
        now = time.time()
        return {
            "state": self.state, "slides_total": self.total, "slides_done": self.done,
            "slides_failed": self.failed, "slides_skipped": self.skipped,
            "tiles_read": int(self.read_total), "tiles_written": int(self.written),
            "tiles_planned_estimate": self.planned_estimate(), "source_megapixels": round(self.megapixels, 3),
            "started": _iso(self.started), "updated": _iso(now),
            "estimated_end": None if eta is None or self.state != "running" else _iso(now + eta),
            "in_flight": sorted(self.in_flight), "pid": os.getpid(),
        }

    def _write(self) -> None:
        self._last_write = time.monotonic()
        data = json.dumps(self.snapshot(), indent=1)
        try:
            replace_text(self.path, data)  # whole: a temporary name and a rename, or one object write
        except (OSError, TilewrightError):
            pass  # a status file must never stop the run

    def close(self, state: str = "finished") -> None:
        """The last event: the run ended (``state``: finished, interrupted or failed)."""
        self(ProgressEvent("end", row={"state": state}))


def _iso(t: float) -> str:
    return datetime.fromtimestamp(t, timezone.utc).isoformat(timespec="seconds")


def read_progress(out_dir) -> dict | None:
    """The run status in ``OUT/progress.json`` (None when there is none)."""
    path = as_path(out_dir) / PROGRESS_FILE
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        return None


class LogProgress:
    """Progress as plain log lines (logger ``tilewright``): one a finished slide, and one a
    minute (``every`` seconds) on a slide still being read. For output that is not a terminal."""

    def __init__(self, every: float = 60.0, logger=None):
        import logging

        self.log = logger or logging.getLogger("tilewright")
        self.every = float(every)
        self.total = 0
        self.done = 0
        self.planned: dict[str, int] = {}
        self.read: dict[str, int] = {}
        self.last: dict[str, float] = {}

    def __call__(self, e: ProgressEvent) -> None:
        if e.kind == "start":
            self.total = e.count
        elif e.kind == "plan":
            self.planned[e.slide_id], self.read[e.slide_id] = e.count, 0
            self.last[e.slide_id] = time.monotonic()
        elif e.kind == "tiles":
            if e.slide_id not in self.planned:
                return  # a late message of a slide already finished
            self.read[e.slide_id] = self.read.get(e.slide_id, 0) + e.count
            now = time.monotonic()
            if now - self.last.setdefault(e.slide_id, now) >= self.every:
                self.last[e.slide_id] = now
                self.log.info("%s: %d of %d tiles read", e.slide_id, self.read[e.slide_id],
                              self.planned.get(e.slide_id, 0))
        elif e.kind == "slide":
            self.done += 1
            for seen in (self.planned, self.read, self.last):  # only slides in flight are kept
                seen.pop(e.slide_id, None)
            row = e.row or {}
            from tilewright.run.row_text import row_progress  # "complete, kept" for a kept store

            msg = f"[{self.done}/{self.total}] {row.get('slide_id')}: {row_progress(row)}"
            (self.log.warning if row.get("status") == "failed" else self.log.info)("%s", msg)
