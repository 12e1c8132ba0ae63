"""``tile-out``'s OUT before any work: can it be written, and where the run's log goes.

OUT is a local folder or a prefix in a bucket. Either way a run checks up front that it can write
there (a throwaway file, or object, written and removed), so wrong credentials, a missing bucket or
a denied write stop the command with exit 2 and one line before any slide is read.

A log file cannot grow in a bucket: the run logs to a local temporary file, appended to
``OUT/tile-out.log`` (one write) when the run ends, however it ends.
"""

from __future__ import annotations

import contextlib
import os
import tempfile
import uuid
from pathlib import Path

from tilewright.errors import ConfigError
from tilewright.location.objpath import ObjectPath, as_path

__all__ = ["checked_out", "run_log"]


def checked_out(out) -> Path | ObjectPath:
    """OUT as a path, after writing and removing a throwaway file or object there.

    Raises
    ------
    ConfigError
        A local folder that cannot be made or written.
    ObjectStoreError
        A prefix in a bucket that cannot be written (refused credentials, missing bucket, denied
        write, unreachable store), one line naming the URL and the cause.
    """
    out = as_path(out)
    if isinstance(out, ObjectPath):
        from tilewright.location import objects
        from tilewright.location.url import WRITABLE, split_url

        if split_url(out.url)[0] not in WRITABLE:
            raise ConfigError(f"OUT cannot be a {split_url(out.url)[0]}:// URL (read only); give a local folder or "
                              "an s3://, gs:// or az:// prefix", out)
        probe = out / f".write-test-{uuid.uuid4().hex}"
        objects.put(str(probe), b"")
        objects.delete(str(probe))
        return out
    try:
        out.mkdir(parents=True, exist_ok=True)
        with tempfile.NamedTemporaryFile(dir=out, prefix=".write-test-"):  # unique: runs may race
            pass
    except OSError as exc:
        raise ConfigError(f"cannot write to the output folder ({exc.strerror or exc}); choose a writable folder",
                          out) from None
    return out


@contextlib.contextmanager
def run_log(out):
    """The log file of a run: ``OUT/tile-out.log``, or a local temporary file appended to that object
    when the run ends."""
    if not isinstance(out, ObjectPath):
        yield out / "tile-out.log"
        return
    fd, local = tempfile.mkstemp(prefix="tile-out-", suffix=".log")
    os.close(fd)
    try:
        yield Path(local)
    finally:
        _append_log(out / "tile-out.log", Path(local))
        os.unlink(local)


def _append_log(target: ObjectPath, local: Path) -> None:
    import logging

    from tilewright.errors import TilewrightError

    for h in logging.getLogger("tilewright").handlers:
        h.flush()
    try:
        new = local.read_bytes()
        if not new:
            return
        try:
            old = target.read_bytes()
        except FileNotFoundError:
            old = b""
        target.write_bytes(old + new)
    except (OSError, TilewrightError) as exc:  # the log must not hide the run's outcome
        logging.getLogger("tilewright").warning("the run's log was not written to %s (%s)", target, exc)
