"""Progress on a terminal (a rich bar) or plain log lines when output is not a terminal.

Both are listeners of the run's :class:`tilewright.run.events.ProgressEvent` values; the plain
lines come from :class:`tilewright.run.events.LogProgress`.
"""

from __future__ import annotations

import logging
import sys
import time

__all__ = ["RichProgress", "setup_logging"]

log = logging.getLogger("tilewright")


def setup_logging(log_file=None, *, quiet: bool = False, tty: bool | None = None) -> None:
    """Log lines to stderr (unless a bar is drawn there) and, when given, to ``log_file``."""
    log.setLevel(logging.INFO)
    for h in list(log.handlers):
        log.removeHandler(h)
        h.close()
    fmt = logging.Formatter("%(asctime)s %(levelname)s %(message)s", "%Y-%m-%d %H:%M:%S")
    tty = sys.stderr.isatty() if tty is None else tty
    if not quiet and not tty:
        h = logging.StreamHandler(sys.stderr)
        h.setFormatter(fmt)
        log.addHandler(h)
    if log_file is not None:
        fh = logging.FileHandler(log_file, encoding="utf-8")
        fh.setFormatter(fmt)
        log.addHandler(fh)
    log.propagate = False


class RichProgress:
    """The terminal display of a run (rich): one bar of tiles read across the cohort, moving with
    every block of tiles, with slides done/total, failures so far, source MP/s and the time left
    estimated from planned tiles; each failure is printed above the bar as it happens.

    A listener for :class:`tilewright.run.events.ProgressEvent` (pass it as ``on_progress``).
    Use as a context manager (the bar is drawn between enter and exit).
    """

    def __init__(self, total: int, *, console=None):
        from rich.console import Console
        from rich.progress import BarColumn, Progress, TextColumn

        from tilewright.run.events import ProgressTracker

        self.counts = ProgressTracker(None, total)
        self.console = console or Console(stderr=True)
        self.bar = Progress(TextColumn("[bold]{task.description}"), BarColumn(),
                            TextColumn("{task.fields[tiles]}"), TextColumn("{task.fields[info]}"),
                            console=self.console, transient=False, refresh_per_second=2)
        self.task = self.bar.add_task("tiling", total=None, tiles="", info="")

    def __enter__(self):
        self.bar.start()
        return self

    def __exit__(self, *exc):
        self._update()
        self.bar.stop()
        return False

    def __call__(self, event) -> None:
        self.counts(event)
        if event.kind == "slide" and (event.row or {}).get("status") == "failed":
            row = event.row
            self.console.print(f"[red]failed[/red] {row.get('slide_id')}: {row.get('error')}", highlight=False,
                               soft_wrap=True)
        self._update()

    def _update(self) -> None:
        c = self.counts
        read = c.read_total + c.settled
        planned = max(c.planned_estimate(), read)
        elapsed = max(1e-9, time.time() - c.started)
        eta = c.eta_seconds()
        left = "" if eta is None else f", ~{_clock(eta)} left"
        self.bar.update(self.task, completed=read, total=planned or None,
                        description=f"{c.done}/{c.total} slides",
                        tiles=f"{read}/{planned} tiles",
                        info=f"{c.failed} failed, {c.megapixels / elapsed:.0f} MP/s{left}")


def _clock(seconds: float) -> str:
    seconds = int(round(seconds))
    h, rest = divmod(seconds, 3600)
    m, s = divmod(rest, 60)
    return f"{h}:{m:02d}:{s:02d}" if h else f"{m}:{s:02d}"
