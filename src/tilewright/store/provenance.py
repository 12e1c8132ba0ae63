"""Provenance of a store's source: its size, a sampled digest, and (on request) its full SHA-256.

Two digests, for two jobs:

- **Sampled digest** (``source.digest``, always; the resume check): SHA-256 over the file's size
  and 1 MiB read at 16 evenly spaced offsets (files up to 16 MiB: the whole file). It reads 16 MiB
  of any slide, so a re-run checks thousands of slides in seconds. It tells a replaced, truncated,
  re-exported or re-scanned file from the original (any change of size, and any change inside a
  sampled MiB), but **not** a change that keeps the size and falls between the samples (a flipped
  byte in an unsampled tile), and it equals no archive checksum: a ``sha256s:`` value is not the
  SHA-256 of the file.
- **Full digest** (``source.sha256``, with ``source_digest="full"`` / ``--source-digest full``):
  the SHA-256 of every byte, the value ``sha256sum FILE`` prints, so it can be compared with an
  archive's or a transfer's checksum list and proves the tiles came from that exact file (for a
  DICOM series folder, ``source.files`` lists each file's name, size and SHA-256). It reads the
  whole file once, streamed in 8 MiB blocks by a read-ahead thread while another hashes (hashlib
  releases the GIL), beside the tile pipeline; a series' files are hashed in parallel.
"""

from __future__ import annotations

import hashlib
import os
import queue
import threading
from concurrent.futures import ThreadPoolExecutor

from tilewright.location.byte_source import open_binary
from tilewright.location.url import is_url

__all__ = ["source_digest", "source_size", "source_stamp", "sampled_digest", "file_digest", "file_sha256",
           "source_sha256", "DIGESTS"]

#: ``TilingConfig.source_digest`` values: the sampled digest only, or the full SHA-256 as well.
DIGESTS = ("sampled", "full")

_SAMPLE = 1 << 20  # bytes read at each sampled position
_POSITIONS = 16
_BLOCK = 8 << 20  # bytes a read of the full digest


def _is_folder(path) -> bool:
    """A folder (a DICOM series): on disk, or a key prefix named with a trailing ``/``."""
    return str(path).endswith("/") if is_url(path) else os.path.isdir(path)


def _files(path) -> list[str]:
    """The files a source consists of: itself, or a folder's files (a DICOM series), sorted."""
    if is_url(path):
        if not _is_folder(path):
            return [str(path)]
        from tilewright.location.objects import list_children

        return [u for u, _ in list_children(str(path))[0] if not u.rsplit("/", 1)[-1].startswith(".")]
    if not os.path.isdir(path):
        return [os.fspath(path)]
    return sorted(os.path.join(path, f) for f in os.listdir(path)
                  if os.path.isfile(os.path.join(path, f)) and not f.startswith("."))


def _size(path: str) -> int:
    if is_url(path):
        from tilewright.location.objects import head

        return head(path)["size"]
    return os.path.getsize(path)


def source_size(path: str | os.PathLike) -> int:
    """Bytes of a source file, or of all files of a source folder (a local path or a URL)."""
    return sum(_size(f) for f in _files(path))


def source_stamp(path: str | os.PathLike) -> dict:
    """What ``stat`` says of a source, to tell it unchanged without reading it: its bytes and the
    latest modification time (ns) of its file, or of a folder's files and how many there are (an
    object in a bucket: its bytes and entity tag, which changes whenever the object is replaced).

    A resumed run trusts a store's recorded digest when the source's stamp is unchanged (the
    quick check file-synchronization tools make by default), so re-checking 10,000 slides reads
    no slide; a changed stamp has the digest computed again.
    """
    files = _files(path)
    if any(is_url(f) for f in files):  # an object: its size and entity tag (one HEAD request a file)
        from tilewright.location.objects import head

        heads = [head(str(f)) for f in files]
        return {"size": sum(h["size"] for h in heads), "etags": [h["e_tag"] for h in heads], "files": len(files)}
    stats = [os.stat(f) for f in files]
    return {"size": sum(st.st_size for st in stats), "mtime_ns": max((st.st_mtime_ns for st in stats), default=0),
            "files": len(files)}


def source_digest(path: str | os.PathLike) -> str:
    """Sampled digest of a source: :func:`sampled_digest` of a file; of a folder (a DICOM series),
    SHA-256 over each file's name and sampled digest, in name order (prefix ``sha256f:``)."""
    if not _is_folder(path):
        return sampled_digest(path)
    h = hashlib.sha256()
    for f in _files(path):
        h.update(os.path.basename(f).encode("utf-8") + b"\0" + sampled_digest(f).encode() + b"\0")
    return "sha256f:" + h.hexdigest()


def sampled_digest(path: str | os.PathLike) -> str:
    """SHA-256 over the size and 1 MiB samples at 16 evenly spaced offsets of a file.

    Reading every byte of hundreds of gigapixel files would cost more than tiling them; sampling
    the head, tail and interior still tells a changed or swapped file from the original. Files up
    to 16 MiB are hashed whole. The result is prefixed ``sha256s:`` (sampled: not the file's
    SHA-256, see the module notes) or ``sha256:`` (the whole file's SHA-256).
    """
    size = _size(path)
    h = hashlib.sha256()
    with open_binary(path) as fh:  # in a bucket: one range request a sample
        if size <= _SAMPLE * _POSITIONS:
            for block in iter(lambda: fh.read(1 << 22), b""):
                h.update(block)
            return "sha256:" + h.hexdigest()
        h.update(str(size).encode())
        for i in range(_POSITIONS):
            fh.seek((size - _SAMPLE) * i // (_POSITIONS - 1))
            h.update(fh.read(_SAMPLE))
    return "sha256s:" + h.hexdigest()


#: The name earlier versions gave :func:`sampled_digest`.
file_digest = sampled_digest


def file_sha256(path: str | os.PathLike, block: int = _BLOCK) -> str:
    """SHA-256 of every byte of a file, as hex (what ``sha256sum`` prints).

    A read-ahead thread reads ``block`` bytes at a time into four reused buffers (at most two
    waiting) while this thread hashes the previous block: both release the GIL, so reading (the
    slow part on network file systems) overlaps hashing.
    """
    h = hashlib.sha256()
    buffers = [bytearray(block) for _ in range(4)]  # 2 queued + 1 being filled + 1 being hashed
    blocks: queue.Queue = queue.Queue(maxsize=2)
    stop = threading.Event()

    def read():
        try:
            with (open_binary(path) if is_url(path) else open(path, "rb", buffering=0)) as fh:
                k = 0
                while not stop.is_set():
                    buf = buffers[k % 4]
                    n = fh.readinto(buf)
                    blocks.put(memoryview(buf)[:n])
                    if not n:
                        return
                    k += 1
        except BaseException as exc:  # noqa: BLE001 - handed to the hashing thread
            blocks.put(exc)

    reader = threading.Thread(target=read, name="tilewright-sha256-read", daemon=True)
    reader.start()
    try:
        while True:
            data = blocks.get()
            if isinstance(data, BaseException):
                raise data
            if not len(data):
                return h.hexdigest()
            h.update(data)
    finally:
        stop.set()
        while reader.is_alive():  # let a reader blocked on a full queue finish
            try:
                blocks.get_nowait()
            except queue.Empty:
                reader.join(0.01)


def source_sha256(path: str | os.PathLike, threads: int = 2) -> dict:
    """Full-content digests of a source, for its store's ``source`` attribute.

    A file: ``{"sha256": hex}``. A folder (a DICOM series): ``{"sha256": hex over each file's name
    and SHA-256 in name order, "files": [{"name", "size", "sha256"}, ...]}``; each file's value
    is its own ``sha256sum``, the folder's value is not (it digests the list). Files are hashed
    ``threads`` at a time.
    """
    if not _is_folder(path):
        return {"sha256": file_sha256(path)}
    files = _files(path)
    with ThreadPoolExecutor(max(1, int(threads)), thread_name_prefix="tilewright-sha256") as pool:
        digests = list(pool.map(file_sha256, files))
    h = hashlib.sha256()
    for f, d in zip(files, digests):
        h.update(os.path.basename(f).encode("utf-8") + b"\0" + d.encode() + b"\0")
    return {"sha256": h.hexdigest(),
            "files": [{"name": os.path.basename(f), "size": _size(f), "sha256": d}
                      for f, d in zip(files, digests)]}
