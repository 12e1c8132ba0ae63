"""Progress on a terminal (a redrawn bar) or plain log lines when output is not a terminal."""

from __future__ import annotations

import logging
import sys
import time

__all__ = ["SlideProgress", "setup_logging"]

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


class SlideProgress:
    """Counts finished slides; draws a bar on a terminal, logs a line per slide otherwise."""

    def __init__(self, total: int, *, stream=None, enabled: bool = True):
        self.total = total
        self.done = 0
        self.failed = 0
        self.tiles = 0
        self.t0 = time.perf_counter()
        self.stream = stream or sys.stderr
        self.bar = enabled and self.stream.isatty()

    def __call__(self, row: dict) -> None:
        self.done += 1
        self.failed += row["status"] == "failed"
        self.tiles += int(row.get("n_tiles") or 0)
        from tilewright.cli.row_text import row_progress

        msg = f"[{self.done}/{self.total}] {row['slide_id']}: {row_progress(row)}"
        (log.warning if row["status"] == "failed" else log.info)(msg)
        if self.bar:
            self._draw(row["slide_id"])

    def _draw(self, last: str) -> None:
        width = 30
        frac = self.done / max(self.total, 1)
        filled = int(round(frac * width))
        elapsed = time.perf_counter() - self.t0
        eta = elapsed / self.done * (self.total - self.done) if self.done else 0
        line = (f"\r{'#' * filled}{'.' * (width - filled)} {self.done}/{self.total} slides, "
                f"{self.tiles} tiles, {self.failed} failed, {elapsed:5.0f} s elapsed, ~{eta:4.0f} s left  ")
        self.stream.write(line[:160])
        if self.done == self.total:
            self.stream.write("\n")
        self.stream.flush()
