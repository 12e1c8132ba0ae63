"""Slides sent to dask workers in batches that take about a second each.

A dask task costs the scheduler and the run's own process about two milliseconds of CPU whatever
it does (submitting, state changes, the result's transfer, releasing it). Against a 40x resection
slide of minutes that is nothing; against 10,000 small slides of 70 ms each it is a core's worth
of bookkeeping. So slides go in batches, sized from how long the slides of this run take:
:class:`BatchSizer` aims at :data:`TASK_SECONDS` a task (one slide a task for slides that long or
longer, at most :data:`MAX_BATCH`), and keeps the last batches small enough that every worker
thread still has work at the end of the run.

A batch's slides are tiled one after the other by :func:`run_batch` (rows in order). The run's
stop event is checked across the batch (a stopped batch gives "interrupted" rows for the slides it
did not finish). A batch whose worker died (:func:`lost_rows`) gives each of its slides the row of
its store when that store is complete (it was finished before the worker died), else a failure.
"""

from __future__ import annotations

import math

__all__ = ["run_batch", "BatchSizer", "lost_rows", "TASK_SECONDS", "MAX_BATCH"]

#: Seconds of slide work a task aims at.
TASK_SECONDS = 1.0

#: Most slides in one task.
MAX_BATCH = 32


def run_batch(items, out_dir: str, config: dict, target: dict | None, overwrite: bool,
              stop_name: str | None = None, report=None) -> list[dict]:
    """Tile the slides ``items`` (``(path, slide_id, mpp)`` tuples) one after the other and return
    their manifest rows in order (:func:`tilewright.run.slide_task.run_one` each)."""
    from tilewright.run.slide_task import run_one, stop_check

    stop = stop_check(stop_name)  # polled at most once a second for the whole batch
    return [run_one(path, out_dir, config, slide_id, mpp, target, overwrite, stop_name, report, stop=stop)
            for path, slide_id, mpp in items]


class BatchSizer:
    """How many slides the next task takes.

    Parameters
    ----------
    threads : int
        Worker threads of the cluster (0: slides run in this process, always one a task).
    task_seconds, max_batch :
        See :data:`TASK_SECONDS`, :data:`MAX_BATCH`.
    """

    def __init__(self, threads: int, *, task_seconds: float = TASK_SECONDS, max_batch: int = MAX_BATCH):
        self.threads = int(threads)
        self.task_seconds = float(task_seconds)
        self.max_batch = int(max_batch)
        self.mean = None  # seconds a slide of this run takes (moving mean of the tiled ones)

    def note(self, row: dict) -> None:
        """A finished slide's row (slides kept from an earlier run took no time here)."""
        seconds = row.get("seconds")
        if row.get("kept") or not isinstance(seconds, (int, float)) or not seconds > 0:
            return
        self.mean = float(seconds) if self.mean is None else 0.9 * self.mean + 0.1 * float(seconds)

    def size(self, remaining: int) -> int:
        """Slides for the next task, ``remaining`` slides being left to send."""
        if self.threads <= 0 or self.mean is None or remaining <= 0:
            return 1  # in this process, or nothing measured yet
        k = min(self.max_batch, max(1, int(self.task_seconds / self.mean)))
        # the tail: at least two tasks a worker thread among the slides left, so none idles early
        return max(1, min(k, math.ceil(remaining / (2 * self.threads))))

    def batches(self, items: list):
        """Yield consecutive slices of ``items``, each sized when it is taken."""
        i = 0
        while i < len(items):
            k = self.size(len(items) - i)
            yield items[i:i + k]
            i += k


def lost_rows(items, out_dir, exc, overwrite: bool = False) -> list[dict]:
    """Rows of a batch whose task raised outside :func:`run_batch` (its worker died): a slide whose
    store is complete keeps that store's row (unless ``overwrite``: then that store may be the one
    the run meant to replace), the others fail with the reason."""
    from tilewright.run.slide_task import failure_row
    from tilewright.store.manifest_row import kept_row
    from tilewright.store.layout import store_path
    from tilewright.store.metadata import store_attrs

    rows = []
    for path, slide_id, _ in items:
        final = store_path(out_dir, slide_id)
        attrs = None if overwrite else store_attrs(final)
        rows.append(kept_row(final, slide_id, path, attrs) if attrs is not None
                    else failure_row(path, slide_id, exc))
    return rows
