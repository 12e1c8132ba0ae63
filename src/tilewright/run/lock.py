"""An exclusive lock on an output folder, so two runs never write one cohort at once."""

from __future__ import annotations

import contextlib
import os
from pathlib import Path

from tilewright.errors import OutputLockedError

__all__ = ["output_lock"]

LOCK_NAME = ".tilewright.lock"


@contextlib.contextmanager
def output_lock(out_dir):
    """Hold ``out_dir/.tilewright.lock`` (POSIX ``flock``) for the duration of a run.

    The kernel releases the lock when the holder dies, even by SIGKILL, so a killed run never
    leaves a stale lock behind.
    """
    import fcntl

    path = Path(out_dir) / LOCK_NAME
    fd = os.open(path, os.O_RDWR | os.O_CREAT, 0o644)
    try:
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            holder = os.pread(fd, 64, 0).decode(errors="replace").strip() or "another process"
            raise OutputLockedError(f"another tile-out run (pid {holder}) is writing here; wait for it "
                                    "to finish or choose another output folder", out_dir) from None
        os.ftruncate(fd, 0)
        os.pwrite(fd, str(os.getpid()).encode(), 0)
        yield path
    finally:
        os.close(fd)
