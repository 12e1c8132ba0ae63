"""Provenance of a store's source: file size and a sampled content digest."""

from __future__ import annotations

import hashlib
import os

from tilewright.location.byte_source import open_binary
from tilewright.location.url import is_url

__all__ = ["source_digest", "source_size"]

_SAMPLE = 1 << 20  # bytes read at each sampled position
_POSITIONS = 16


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


def source_digest(path: str | os.PathLike) -> str:
    """Digest of a source: :func:`file_digest` of a file; of a folder (a DICOM series), SHA-256 over
    each file's name and digest, in name order (prefix ``sha256f:``)."""
    if not _is_folder(path):
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
