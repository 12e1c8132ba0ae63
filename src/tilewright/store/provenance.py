"""Provenance of a store's source: file size, a sampled content digest, and a stat stamp."""

from __future__ import annotations

import hashlib
import os

__all__ = ["source_digest", "source_size", "source_stamp"]

_SAMPLE = 1 << 20  # bytes read at each sampled position
_POSITIONS = 16


def _files(path) -> list[str]:
    """The files a source consists of: itself, or a folder's files (a DICOM series), sorted."""
    if not os.path.isdir(path):
        return [os.fspath(path)]
    return sorted(os.path.join(path, f) for f in os.listdir(path)
                  if os.path.isfile(os.path.join(path, f)) and not f.startswith("."))


def source_size(path: str | os.PathLike) -> int:
    """Bytes of a source file, or of all files of a source folder."""
    return sum(os.path.getsize(f) for f in _files(path))


def source_stamp(path: str | os.PathLike) -> dict:
    """What ``stat`` says of a source, to tell it unchanged without reading it: its bytes and the
    latest modification time (ns) of its file, or of a folder's files and how many there are.

    A resumed run trusts a store's recorded digest when the source's stamp is unchanged (the
    quick check file-synchronization tools make by default), so re-checking 10,000 slides reads
    no slide; a changed stamp has the digest computed again.
    """
    files = _files(path)
    stats = [os.stat(f) for f in files]
    return {"size": sum(st.st_size for st in stats), "mtime_ns": max((st.st_mtime_ns for st in stats), default=0),
            "files": len(files)}


def source_digest(path: str | os.PathLike) -> str:
    """Digest of a source: :func:`file_digest` of a file; of a folder (a DICOM series), SHA-256 over
    each file's name and digest, in name order (prefix ``sha256f:``)."""
    if not os.path.isdir(path):
        return file_digest(path)
    h = hashlib.sha256()
    for f in _files(path):
        h.update(os.path.basename(f).encode("utf-8") + b"\0" + file_digest(f).encode() + b"\0")
    return "sha256f:" + h.hexdigest()


def file_digest(path: str | os.PathLike) -> str:
    """SHA-256 over the size and 1 MiB samples at 16 evenly spaced offsets of a file.

    Reading every byte of hundreds of gigapixel files would cost more than tiling them; sampling
    the head, tail and interior still tells a changed or swapped file from the original. Files up
    to 16 MiB are hashed whole. The result is prefixed ``sha256s:`` (sampled) or ``sha256:``.
    """
    size = os.path.getsize(path)
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        if size <= _SAMPLE * _POSITIONS:
            for block in iter(lambda: fh.read(1 << 22), b""):
                h.update(block)
            return "sha256:" + h.hexdigest()
        h.update(str(size).encode())
        for i in range(_POSITIONS):
            fh.seek((size - _SAMPLE) * i // (_POSITIONS - 1))
            h.update(fh.read(_SAMPLE))
    return "sha256s:" + h.hexdigest()
