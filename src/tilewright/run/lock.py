"""An exclusive lock on an output folder, so two runs never write one cohort at once.

The lock is ``OUT/.tilewright.lock``, held with POSIX ``flock``: the kernel releases it when the
holder dies, even by SIGKILL, so a killed run never leaves a stale lock. The file names the
holder (``host pid``), for the message a second run shows.

Some network file systems do not support ``flock`` (``ENOLCK``, ``EOPNOTSUPP``). There the lock
falls back to creating ``OUT/.tilewright.lock.held`` exclusively (``O_CREAT | O_EXCL``) with the
holder's host and pid, removed when the run ends. A run killed with SIGKILL leaves that file
behind: a later run on the same host removes it when that pid is gone; from another host the
message names the holder and says to delete the file once no run is active.

An output prefix in a bucket has neither: its lock is an object taken by a conditional write,
with a lease (see :mod:`tilewright.run.lock_object`).
"""

from __future__ import annotations

import contextlib
import errno
import os
import socket
from pathlib import Path

from tilewright.errors import OutputLockedError

__all__ = ["output_lock", "lock_holder", "LOCK_NAME"]

LOCK_NAME = ".tilewright.lock"
HELD_NAME = ".tilewright.lock.held"

_NO_FLOCK = {errno.ENOLCK, errno.EOPNOTSUPP, errno.ENOTSUP, errno.ENOSYS, errno.EINVAL}


def _me() -> str:
    return f"{socket.gethostname()} {os.getpid()}"


def _describe(holder: str) -> str:
    host, _, pid = holder.strip().rpartition(" ")
    return f"pid {pid} on host {host}" if host else (f"pid {pid}" if pid else "another process")


@contextlib.contextmanager
def output_lock(out_dir):
    """Hold the output folder's lock for the duration of a run (see the module docstring).

    Raises
    ------
    OutputLockedError
        Another run holds it; the message names its host and pid.
    """
    import fcntl

    from tilewright.location.url import is_url

    if is_url(out_dir):  # a bucket: an object taken by a conditional write, with a lease
        from tilewright.run.lock_object import ObjectLock

        with ObjectLock(str(out_dir), LOCK_NAME) as held:
            yield held
        return
    path = Path(out_dir) / LOCK_NAME
    fd = os.open(path, os.O_RDWR | os.O_CREAT, 0o644)
    try:
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            holder = os.pread(fd, 256, 0).decode(errors="replace")
            raise OutputLockedError(f"another tile-out run ({_describe(holder)}) is writing here; wait for it "
                                    "to finish or choose another output folder", out_dir) from None
        except OSError as exc:
            if exc.errno not in _NO_FLOCK:
                raise
            os.close(fd)
            fd = None
            with _held_file(Path(out_dir)) as held:
                yield held
            return
        os.ftruncate(fd, 0)
        os.pwrite(fd, _me().encode(), 0)
        yield path
    finally:
        if fd is not None:
            os.close(fd)


@contextlib.contextmanager
def _held_file(out_dir: Path):
    """The fallback lock: a file created exclusively, naming its holder."""
    held = out_dir / HELD_NAME
    for attempt in range(2):
        try:
            fd = os.open(held, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o644)
            break
        except FileExistsError:
            holder = lock_holder(out_dir) or ""
            host, _, pid = holder.rpartition(" ")
            if attempt == 0 and host == socket.gethostname() and pid.isdigit() and not _alive(int(pid)):
                held.unlink(missing_ok=True)  # its run died on this host: a stale lock
                continue
            raise OutputLockedError(
                f"another tile-out run ({_describe(holder)}) holds {HELD_NAME} here (this file system has "
                f"no flock, so the lock is that file); wait for it to finish, or delete {held} if no run "
                "is active", out_dir) from None
    try:
        os.write(fd, _me().encode())
        os.close(fd)
        yield held
    finally:
        held.unlink(missing_ok=True)


def lock_holder(out_dir) -> str | None:
    """``"host pid"`` of the run holding ``out_dir``'s lock, or None when no run holds it."""
    import fcntl

    from tilewright.location.url import is_url

    if is_url(out_dir):
        from tilewright.run.lock_object import object_lock_holder

        return object_lock_holder(str(out_dir), LOCK_NAME)
    out_dir = Path(out_dir)
    held = out_dir / HELD_NAME
    if held.exists():
        try:
            return held.read_text().strip() or None
        except OSError:
            return None
    path = out_dir / LOCK_NAME
    if not path.exists():
        return None
    held = _flock_held(path)
    if held is not None:  # read from the kernel's lock table, without touching the lock
        return (path.read_text(errors="replace").strip() or "another process") if held else None
    fd = os.open(path, os.O_RDONLY)
    try:
        try:
            fcntl.flock(fd, fcntl.LOCK_SH | fcntl.LOCK_NB)
        except BlockingIOError:
            return os.pread(fd, 256, 0).decode(errors="replace").strip() or "another process"
        except OSError:
            return None
        fcntl.flock(fd, fcntl.LOCK_UN)
        return None
    finally:
        os.close(fd)


def _flock_held(path: Path) -> bool | None:
    """Whether a ``flock`` is held on ``path``, from Linux's ``/proc/locks`` (None elsewhere)."""
    try:
        st = os.stat(path)
        table = Path("/proc/locks").read_text()
    except OSError:
        return None
    for line in table.splitlines():
        parts = line.split()
        if len(parts) >= 6 and parts[1] == "FLOCK":
            dev_inode = parts[5].split(":")
            try:  # "major:minor:inode", the device numbers in hex
                same = (int(dev_inode[2]) == st.st_ino and int(dev_inode[0], 16) == os.major(st.st_dev)
                        and int(dev_inode[1], 16) == os.minor(st.st_dev))
            except (IndexError, ValueError):
                continue
            if same:
                return True
    return False


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True
