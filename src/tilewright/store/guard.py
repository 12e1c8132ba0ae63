"""A temporary store's writes, counted so that removing the store waits for them.

zarr-python runs every write on its own event-loop thread and the caller waits for it. When that
wait is cut short (Ctrl-C, SIGTERM, an exception in another thread), the write itself goes on; if
the temporary folder was removed meanwhile, the write re-creates its folders, and a half-written
store is left behind (or, worse, committed). :class:`WriteGuard` closes that gap:

- every write into the temporary folder (zarr's and the shard files the writer writes itself)
  runs inside :meth:`WriteGuard.writing`, which refuses to start once the guard is closed, or when
  the temporary folder has vanished (someone else removed it: the store can no longer be whole);
- :meth:`WriteGuard.close` refuses new writes and waits for the ones in flight, so the folder can
  then be removed with nothing left to write into it.
"""

from __future__ import annotations

import contextlib
import threading

from zarr.storage import LocalStore

from tilewright.errors import StoreError
from tilewright.store.backing import UrlObjectStore

__all__ = ["WriteGuard", "GuardedLocalStore", "GuardedObjectStore"]


class WriteGuard:
    """Counts writes in flight into ``root``; see the module docstring."""

    def __init__(self, root, final=None):
        from tilewright.location.objpath import as_path

        self.root = as_path(root)
        self.final = as_path(final) if final is not None else self.root
        self._cond = threading.Condition()
        self._busy = 0
        self._closed = False
        # set by the owner once a local folder is made: from then on it must stay (a store in a bucket
        # has no folder to vanish, and asking would cost a request a write)
        self.created = False

    @contextlib.contextmanager
    def writing(self):
        """Run one write; raises :class:`StoreError` when the store was aborted or vanished."""
        with self._cond:
            if self._closed:
                raise StoreError("the store was aborted; nothing more is written to it", self.final)
            if self.created and not self.root.is_dir():
                raise StoreError(f"its temporary folder {self.root.name} vanished while it was being "
                                 "written (removed by another process?); run again", self.final)
            self._busy += 1
        try:
            yield
        finally:
            with self._cond:
                self._busy -= 1
                self._cond.notify_all()

    def close(self) -> None:
        """Refuse new writes and wait until the writes in flight have finished."""
        with self._cond:
            self._closed = True
            while self._busy:
                self._cond.wait(0.5)


class GuardedLocalStore(LocalStore):
    """A zarr ``LocalStore`` whose every change goes through a :class:`WriteGuard`."""

    def __init__(self, root, *, read_only: bool = False, guard: WriteGuard | None = None):
        super().__init__(root, read_only=read_only)
        self.guard = guard if guard is not None else WriteGuard(root)

    def with_read_only(self, read_only: bool = False):
        return type(self)(self.root, read_only=read_only, guard=self.guard)

    async def _open(self, *args, **kwargs):
        with self.guard.writing():
            return await super()._open(*args, **kwargs)

    def _ensure_open_sync(self) -> None:
        if self._is_open:
            return
        with self.guard.writing():
            super()._ensure_open_sync()

    async def _set(self, key, value, exclusive: bool = False):
        with self.guard.writing():
            return await super()._set(key, value, exclusive=exclusive)

    def set_sync(self, key, value) -> None:
        with self.guard.writing():
            super().set_sync(key, value)

    async def delete(self, key) -> None:
        with self.guard.writing():
            await super().delete(key)

    def delete_sync(self, key) -> None:
        with self.guard.writing():
            super().delete_sync(key)

    async def delete_dir(self, prefix) -> None:
        with self.guard.writing():
            await super().delete_dir(prefix)

    async def clear(self) -> None:
        with self.guard.writing():
            await super().clear()


class GuardedObjectStore(UrlObjectStore):
    """zarr's object store for a store being written in a bucket; every change goes through a
    :class:`WriteGuard`, so an aborted store is removed with nothing left writing into it."""

    def __init__(self, url: str, *, read_only: bool = False, guard: WriteGuard | None = None):
        super().__init__(url, read_only=read_only)
        self.guard = guard if guard is not None else WriteGuard(url)

    def with_read_only(self, read_only: bool = False):
        return type(self)(self.url, read_only=read_only, guard=self.guard)

    async def set(self, key, value) -> None:
        with self.guard.writing():
            return await super().set(key, value)

    async def set_if_not_exists(self, key, value) -> None:
        with self.guard.writing():
            return await super().set_if_not_exists(key, value)

    async def delete(self, key) -> None:
        with self.guard.writing():
            await super().delete(key)

    async def delete_dir(self, prefix) -> None:
        with self.guard.writing():
            await super().delete_dir(prefix)
