"""Progress of a cohort run as events, for library callers, the command line and ``progress.json``.

A run emits :class:`ProgressEvent` values: ``"start"`` (slides to do), ``"plan"`` (a slide's
planned tiles, before any is read), ``"tiles"`` (tiles read in a slide since its last event, sent
per block of tiles, so progress moves within a slide), ``"slide"`` (a slide finished: its manifest
row) and ``"end"``. ``tile_cohort(..., on_progress=callable)`` receives every event; the events
come from this process, from local worker processes and from a remote cluster alike (workers send
them as dask worker events, see :mod:`tilewright.run.cohort`).

:class:`ProgressTracker` folds the events into counts (slides done/failed, tiles written/planned,
source megapixels, slides in flight, an end estimated from planned tiles) and rewrites
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
        since the slide's previous event.
    megapixels : float
        "tiles": source megapixels those tiles cover (level-0 pixels read, in millions).
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
        self.done = self.failed = self.skipped = 0
        self.written = 0  # tiles stored by finished slides
        self.megapixels = 0.0
        self.planned: dict[str, int] = {}  # slide -> planned tiles (slides planned so far)
        self.read: dict[str, int] = {}  # slide -> tiles read so far
        self.in_flight: set[str] = set()
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
            self.planned[sid] = int(e.count)
            self.read.setdefault(sid, 0)
            self.in_flight.add(sid)
        elif e.kind == "tiles":
            self.read[sid] = self.read.get(sid, 0) + int(e.count)
            self.megapixels += float(e.megapixels)
            self.in_flight.add(sid)
        elif e.kind == "slide":
            row = e.row or {}
            self.done += 1
            status = row.get("status")
            self.failed += status == "failed"
            self.skipped += status in ("skipped", "all-ink")
            self.written += int(row.get("n_tiles") or 0)
            self.in_flight.discard(sid)
            # a slide kept from an earlier run was not planned here; a failed one reads no more
            read = self.read.setdefault(sid, 0)
            self.planned[sid] = read if sid not in self.planned else self.planned[sid]
            self.settled += max(0, self.planned[sid] - read)
        elif e.kind == "end":
            self.state = e.row.get("state", "finished") if e.row else "finished"
            self.in_flight.clear()

    # -- derived figures ------------------------------------------------------------------
    def planned_estimate(self) -> int:
        """Tiles the whole run will read: planned so far, plus the mean of the planned slides for
        each slide not planned yet."""
        known = sum(self.planned.values())
        n_known = len(self.planned)
        rest = max(0, self.total - max(n_known, self.done))
        mean = known / n_known if n_known else 0.0
        return int(round(known + rest * mean))

    def eta_seconds(self) -> float | None:
        """Seconds left, from the tiles still to read at the rate so far (None before any tile)."""
        elapsed = time.time() - self.started
        done = sum(self.read.values())
        if done <= 0 or elapsed <= 0:
            return None
        left = max(0, self.planned_estimate() - done - self.settled)
        return left * elapsed / done

    def snapshot(self) -> dict:
        eta = self.eta_seconds()
        now = time.time()
        return {
            "state": self.state, "slides_total": self.total, "slides_done": self.done,
            "slides_failed": self.failed, "slides_skipped": self.skipped,
            "tiles_read": int(sum(self.read.values())), "tiles_written": int(self.written),
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
            self.read[e.slide_id] = self.read.get(e.slide_id, 0) + e.count
            now = time.monotonic()
            if now - self.last.setdefault(e.slide_id, now) >= self.every:
                self.last[e.slide_id] = now
                self.log.info("%s: %d of %d tiles read", e.slide_id, self.read[e.slide_id],
                              self.planned.get(e.slide_id, 0))
        elif e.kind == "slide":
            self.done += 1
            row = e.row or {}
            from tilewright.run.row_text import row_progress  # "complete, kept" for a kept store

            msg = f"[{self.done}/{self.total}] {row.get('slide_id')}: {row_progress(row)}"
            (self.log.warning if row.get("status") == "failed" else self.log.info)("%s", msg)
