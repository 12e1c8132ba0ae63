"""Positional reads of one file, local or in an object store: what the slide readers stand on.

A :class:`ByteSource` has a ``size``, a ``name`` (path or URL, for messages) and two reads:

- :meth:`~ByteSource.pread` ``(n, offset)``: exactly those bytes. Tile and frame data go this
  way: locally one ``os.pread`` (no shared file position, so threads need no lock); remotely one
  range request (a row of adjacent tiles is one read, hence one request, see
  :class:`tilewright.slide.tile_grid.GridReader`).
- :meth:`~ByteSource.read_cached` ``(n, offset)``: the same bytes through a small block cache
  (remotely: aligned blocks of :data:`BLOCK` bytes, the :data:`CACHED_BLOCKS` most recent kept,
  missing neighbours fetched in one request). Structure is read this way: TIFF IFDs and tag
  arrays, DICOM headers and item headers, which are many small reads close together.

:class:`SourceFile` is a read-only binary file object over :meth:`read_cached`, for parsers that
want one (tifffile, pydicom). :func:`open_source` picks the kind from the name.
"""

from __future__ import annotations

import io
import os
import threading
from collections import OrderedDict

from tilewright.location.url import is_url

__all__ = ["ByteSource", "LocalSource", "ObjectSource", "SourceFile", "open_source", "open_binary", "BLOCK",
           "CACHED_BLOCKS"]

#: Block size of the remote read cache (bytes).
BLOCK = 1 << 18
#: Blocks a remote source keeps (8 MiB at the default block size).
CACHED_BLOCKS = 32


class ByteSource:
    """A file read by position; see the module docstring."""

    name: str
    size: int
    requests: int = 0  # range requests made (remote sources)
    remote: bool = False  # each read is a request: structure readers avoid many small ones

    def pread(self, n: int, offset: int) -> bytes:
        raise NotImplementedError

    def read_cached(self, n: int, offset: int) -> bytes:
        return self.pread(n, offset)

    def close(self) -> None:
        """Release the source (idempotent)."""

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()
        return False


class LocalSource(ByteSource):
    """A local file, read with ``os.pread`` on a private descriptor."""

    def __init__(self, path: str | os.PathLike):
        self.name = os.fspath(path)
        self.fd = os.open(self.name, os.O_RDONLY | getattr(os, "O_BINARY", 0))
        self._lock = threading.Lock()  # only used where os.pread is unavailable

    @property
    def size(self) -> int:
        return os.fstat(self.fd).st_size

    def pread(self, n: int, offset: int) -> bytes:
        """``n`` bytes at ``offset`` (fewer only at the end of the file).

        One ``pread`` returns at most about 2 GiB on Linux (and may return less anywhere), so
        reads are repeated until all bytes arrived or the file ends.
        """
        fd = self.fd
        if hasattr(os, "pread"):
            data = os.pread(fd, n, offset)
            if len(data) == n or not data:
                return data
            parts, got = [data], len(data)
            while got < n:
                more = os.pread(fd, n - got, offset + got)
                if not more:
                    break
                parts.append(more)
                got += len(more)
            return b"".join(parts)
        with self._lock:  # pragma: no cover - platforms without pread
            os.lseek(fd, offset, 0)
            return os.read(fd, n)

    def close(self) -> None:
        fd, self.fd = getattr(self, "fd", None), None
        if fd is not None:
            os.close(fd)


class ObjectSource(ByteSource):
    """An object in a bucket (or a file on a web server), read by range requests.

    Parameters
    ----------
    url : str
    size : int, optional
        The object's size when already known (saves the ``HEAD`` request).

    Raises
    ------
    ObjectNotFoundError, ObjectStoreError
        See :func:`tilewright.location.objects.head`.
    """

    remote = True

    def __init__(self, url: str, size: int | None = None):
        from tilewright.location.objects import head

        self.name = url
        self.size = int(head(url)["size"]) if size is None else int(size)
        self.requests = 0 if size is not None else 1
        self._blocks: OrderedDict[int, bytes] = OrderedDict()
        self._lock = threading.Lock()

    def pread(self, n: int, offset: int) -> bytes:
        """``n`` bytes at ``offset`` in one range request (fewer only at the end of the object)."""
        from tilewright.location.objects import get_range

        n = min(int(n), self.size - int(offset))
        if n <= 0:
            return b""
        with self._lock:
            self.requests += 1
        return get_range(self.name, offset, n)

    def pread_many(self, offsets, lengths) -> list:
        """Several ranges at once: requested concurrently, ranges close together in one request
        (obstore's coalescing); one buffer a range, in the order asked."""
        from tilewright.location.objects import get_ranges

        with self._lock:
            self.requests += _requests_for(offsets, lengths)
        return get_ranges(self.name, offsets, lengths)

    def read_cached(self, n: int, offset: int) -> bytes:
        """``n`` bytes at ``offset`` through the block cache (large reads go straight through)."""
        n = min(int(n), self.size - int(offset))
        if n <= 0:
            return b""
        if n > 4 * BLOCK:
            return self.pread(n, offset)
        first, last = offset // BLOCK, (offset + n - 1) // BLOCK
        with self._lock:
            have = {b: self._blocks[b] for b in range(first, last + 1) if b in self._blocks}
            for b in have:
                self._blocks.move_to_end(b)
        missing = [b for b in range(first, last + 1) if b not in have]
        if missing:  # one request for the missing run (blocks are consecutive, gaps filled)
            lo, hi = missing[0] * BLOCK, min(self.size, (missing[-1] + 1) * BLOCK)
            data = self.pread(hi - lo, lo)
            with self._lock:
                for b in range(missing[0], missing[-1] + 1):
                    block = data[(b - missing[0]) * BLOCK:(b - missing[0] + 1) * BLOCK]
                    have[b] = self._blocks[b] = block
                    self._blocks.move_to_end(b)
                while len(self._blocks) > CACHED_BLOCKS:
                    self._blocks.popitem(last=False)
        joined = b"".join(have[b] for b in range(first, last + 1))
        start = offset - first * BLOCK
        return joined[start:start + n]

    def close(self) -> None:
        with self._lock:
            self._blocks.clear()


#: Ranges less than this far apart are fetched in one request (obstore's default coalescing).
COALESCE = 1 << 20


def _requests_for(offsets, lengths) -> int:
    """How many requests obstore's ``get_ranges`` makes for these ranges (its coalescing rule)."""
    spans = sorted(zip(offsets, lengths))
    count, end = 0, None
    for start, n in spans:
        if end is None or start - end > COALESCE:
            count += 1
            end = start + n
        else:
            end = max(end, start + n)
    return count


class SourceFile(io.RawIOBase):
    """A read-only, seekable binary file over a :class:`ByteSource` (reads go through its cache)."""

    def __init__(self, source: ByteSource, *, own: bool = True):
        super().__init__()
        self.source, self.own, self._pos = source, own, 0
        self.name = source.name

    def readable(self) -> bool:
        return True

    def seekable(self) -> bool:
        return True

    def tell(self) -> int:
        return self._pos

    def seek(self, offset: int, whence: int = 0) -> int:
        base = {0: 0, 1: self._pos, 2: self.source.size}[whence]
        self._pos = max(0, base + int(offset))
        return self._pos

    def readinto(self, buffer) -> int:
        view = memoryview(buffer).cast("B")
        data = self.source.read_cached(len(view), self._pos)
        view[:len(data)] = data
        self._pos += len(data)
        return len(data)

    def read(self, size: int = -1) -> bytes:
        if size is None or size < 0:
            size = max(0, self.source.size - self._pos)
        data = self.source.read_cached(size, self._pos)
        self._pos += len(data)
        return data

    def readall(self) -> bytes:
        return self.read(-1)

    def close(self) -> None:
        if not self.closed and self.own:
            self.source.close()
        super().close()


def open_source(path) -> ByteSource:
    """The :class:`ByteSource` of a local path or an object URL.

    Raises
    ------
    OSError
        A local file that cannot be opened.
    ObjectNotFoundError, ObjectStoreError
        An object that cannot be found or read.
    """
    if is_url(path):
        return ObjectSource(str(path))
    return LocalSource(path)


def open_binary(path):
    """A binary file object for reading: ``open(path, "rb")`` locally, a :class:`SourceFile` for a URL."""
    if is_url(path):
        return SourceFile(ObjectSource(str(path)))
    return open(path, "rb")
