"""The output lock of a cohort folder in a bucket: an object taken by a conditional write, with a lease.

Object stores have no ``flock``. A run takes ``OUT/.tilewright.lock`` by creating it only if it
does not exist (``If-None-Match: *``): of two runs starting together exactly one succeeds. The
object names its holder (host, pid, a run id) and its lease: the holder renews it every
:data:`RENEW_EVERY` seconds by replacing it only if it is still the object it wrote
(``If-Match`` on its entity tag), and removes it when the run ends.

A run that died without removing it (SIGKILL, a lost machine) leaves a lock whose lease is no
longer renewed. It is stale once :data:`LEASE_SECONDS` have passed since the object was last
written (the store's own clock, ``Last-Modified``), or at once when it names a process on this
host that no longer runs. A stale lock is taken over by replacing it only if it is unchanged, so
two runs taking over at once cannot both win. A holder whose renewal finds the object changed
has lost the lock (it was stale: the run was stalled longer than the lease) and stops before
its next slide.
"""

from __future__ import annotations

import json
import os
import socket
import threading
import uuid
from datetime import datetime, timezone

from tilewright.errors import ObjectNotFoundError, OutputLockedError
from tilewright.location import objects
from tilewright.location.url import url_join

__all__ = ["ObjectLock", "LEASE_SECONDS", "RENEW_EVERY", "object_lock_holder"]

#: A lock not renewed for this long is stale.
LEASE_SECONDS = 120
#: Seconds between renewals of a held lock.
RENEW_EVERY = 30


def _body(run: str) -> bytes:
    return json.dumps({"host": socket.gethostname(), "pid": os.getpid(), "run": run,
                       "lease_seconds": LEASE_SECONDS,
                       "written": datetime.now(timezone.utc).isoformat(timespec="seconds")}).encode()


def _read(url: str) -> tuple[dict, str, float] | None:
    """(holder, entity tag, seconds since last written) of the lock object, or None when absent."""
    import obstore

    from tilewright.location.client import object_error, store_for

    store, key = store_for(url)
    try:
        got = obstore.get(store, key)
        data = bytes(got.bytes())
    except FileNotFoundError:
        return None
    except Exception as exc:  # noqa: BLE001
        err = object_error(exc, url, "reading")
        if isinstance(err, ObjectNotFoundError):
            return None
        raise err from None
    try:
        holder = json.loads(data)
    except ValueError:
        holder = {}
    modified = got.meta.get("last_modified")
    age = (datetime.now(timezone.utc) - modified).total_seconds() if modified is not None else float("inf")
    return holder if isinstance(holder, dict) else {}, got.meta.get("e_tag") or "", age


def _stale(holder: dict, age: float) -> bool:
    if not holder.get("run"):
        return True  # not a lock this code wrote (objects are written whole, so never a half-written one)
    if age > float(holder.get("lease_seconds") or LEASE_SECONDS):
        return True
    pid = holder.get("pid")
    if holder.get("host") == socket.gethostname() and isinstance(pid, int) and pid != os.getpid():
        try:
            os.kill(pid, 0)
        except ProcessLookupError:
            return True  # its run died on this host
        except PermissionError:
            return False
    return False


def _describe(holder: dict, age: float) -> str:
    left = max(0, int(float(holder.get("lease_seconds") or LEASE_SECONDS) - age))
    return (f"pid {holder.get('pid', '?')} on host {holder.get('host', '?')}, lease renewed {int(age)} s ago, "
            f"stale in {left} s if not renewed")


class ObjectLock:
    """Hold ``OUT/.tilewright.lock`` in a bucket for a run (a context manager).

    Raises
    ------
    OutputLockedError
        Another run holds a live lease; the message names its host, pid and when the lease ends.
    ObjectStoreError
        OUT cannot be written (credentials, access, bucket), one line.
    """

    def __init__(self, out_url: str, name: str):
        self.url = url_join(out_url, name)
        self.out = out_url
        self.run = uuid.uuid4().hex
        self.e_tag: str | None = None
        self.lost = False
        self._stop = threading.Event()
        self._thread: threading.Thread | None = None

    def __enter__(self):
        self.acquire()
        self._thread = threading.Thread(target=self._renew, name="tilewright-lease", daemon=True)
        self._thread.start()
        return self

    def __exit__(self, *exc):
        self.release()
        return False

    def acquire(self) -> None:
        for _ in range(3):
            tag = objects.put_new(self.url, _body(self.run))
            if tag is not None:
                self.e_tag = tag
                return
            found = _read(self.url)
            if found is None:
                continue  # released meanwhile: try to create it again
            holder, tag, age = found
            if not _stale(holder, age):
                raise OutputLockedError(f"another tile-out run ({_describe(holder, age)}) is writing here; wait "
                                        "for it to finish, or choose another output prefix", self.out)
            new = objects.put_if_unchanged(self.url, _body(self.run), tag)  # take over a stale lease
            if new is not None:
                self.e_tag = new
                return
        raise OutputLockedError("another tile-out run took the output lock at the same moment; wait for it "
                                "to finish, or choose another output prefix", self.out)

    def _renew(self) -> None:
        while not self._stop.wait(RENEW_EVERY):
            try:
                tag = objects.put_if_unchanged(self.url, _body(self.run), self.e_tag)
            except Exception:  # noqa: BLE001 - a failed renewal is retried; the lease outlasts several
                continue
            if tag is None:
                self.lost = True
                return
            self.e_tag = tag

    def check(self) -> None:
        """Raise :class:`OutputLockedError` if another run took the lock over (this run was stalled
        longer than the lease)."""
        if self.lost:
            raise OutputLockedError(f"the output lock's lease ran out while this run was stalled and another run "
                                    f"took it over; this run stops (run again once that run finished)", self.out)

    def release(self) -> None:
        """Stop renewing and remove the lock if it is still this run's."""
        self._stop.set()
        if self._thread is not None:
            self._thread.join(timeout=5)
        if self.e_tag is None or self.lost:
            return
        try:
            found = _read(self.url)
            if found is not None and found[0].get("run") == self.run:
                objects.delete(self.url)
        except Exception:  # noqa: BLE001 - a lock left behind goes stale after its lease
            pass
        self.e_tag = None


def object_lock_holder(out_url: str, name: str) -> str | None:
    """``"host pid"`` of the run holding a live lease on ``out_url``, or None."""
    found = _read(url_join(out_url, name))
    if found is None or _stale(found[0], found[2]):
        return None
    return f"{found[0].get('host', '?')} {found[0].get('pid', '?')}"
