"""``ObjectPath``: the part of :class:`pathlib.Path` tilewright uses, for object-store URLs.

Object stores have no folders: a "folder" is a key prefix (``s3://b/out/`` holds
``s3://b/out/a.zarr/zarr.json``), it exists while some object lies under it, and making one is
a no-op. Writes are whole objects, atomic by themselves (a reader sees the old object or the new
one), so :func:`replace_bytes` needs no temporary name there, while on a local disk it writes a
temporary file and renames it. :func:`as_path` gives a ``Path`` or an ``ObjectPath``, so the run
and store code read the same either way.
"""

from __future__ import annotations

import fnmatch
import os
from pathlib import Path, PurePosixPath
from types import SimpleNamespace

from tilewright.location import objects
from tilewright.location.url import is_url, split_url, url_join, url_name, url_parent

__all__ = ["ObjectPath", "as_path", "replace_bytes", "replace_text"]


class ObjectPath:
    """An object or key prefix in a bucket, named by its URL, with ``Path``-like methods.

    Parameters
    ----------
    url : str
        ``s3://bucket/key`` (``gs://``, ``az://``, ``https://`` alike); a trailing ``/`` is dropped.
    """

    __slots__ = ("url",)

    def __init__(self, url):
        url = url.url if isinstance(url, ObjectPath) else str(url)
        split_url(url)  # raises ValueError when it is not a URL
        self.url = url.rstrip("/")

    # -- names -----------------------------------------------------------------------------
    def __str__(self) -> str:
        return self.url

    def __repr__(self) -> str:
        return f"ObjectPath({self.url!r})"

    def __eq__(self, other) -> bool:
        return isinstance(other, ObjectPath) and other.url == self.url

    def __hash__(self) -> int:
        return hash(("ObjectPath", self.url))

    def __lt__(self, other) -> bool:
        return str(self) < str(other)

    def __truediv__(self, name) -> "ObjectPath":
        return ObjectPath(url_join(self.url, str(name)))

    @property
    def name(self) -> str:
        return url_name(self.url) if split_url(self.url)[2] else ""

    @property
    def suffix(self) -> str:
        return PurePosixPath(self.name).suffix

    @property
    def suffixes(self) -> list[str]:
        return PurePosixPath(self.name).suffixes

    @property
    def stem(self) -> str:
        return PurePosixPath(self.name).stem

    @property
    def parent(self) -> "ObjectPath":
        return ObjectPath(url_parent(self.url))

    @property
    def parts(self) -> tuple[str, ...]:
        scheme, bucket, key = split_url(self.url)
        return (f"{scheme}://{bucket}",) + tuple(p for p in key.split("/") if p)

    def with_name(self, name: str) -> "ObjectPath":
        return self.parent / name

    def with_suffix(self, suffix: str) -> "ObjectPath":
        return self.with_name(str(PurePosixPath(self.name).with_suffix(suffix)))

    def is_absolute(self) -> bool:
        return True

    def absolute(self) -> "ObjectPath":
        return self

    def resolve(self) -> "ObjectPath":
        return self

    def expanduser(self) -> "ObjectPath":
        return self

    # -- what is there ---------------------------------------------------------------------
    def is_file(self) -> bool:
        """Whether an object has exactly this key."""
        return bool(split_url(self.url)[2]) and objects.exists(self.url)

    def is_dir(self) -> bool:
        """Whether some object lies under this key taken as a folder."""
        return objects.is_prefix(self.url)

    def exists(self) -> bool:
        return self.is_file() or self.is_dir()

    def stat(self):
        return SimpleNamespace(st_size=objects.head(self.url)["size"])

    def iterdir(self):
        """Objects and sub-prefixes one level under this one."""
        files, folders = objects.list_children(self.url)
        return iter(sorted([ObjectPath(u) for u, _ in files] + [ObjectPath(u) for u in folders]))

    def glob(self, pattern: str):
        """Children whose name matches ``pattern`` (one level; no ``**``)."""
        if "/" in pattern:
            raise ValueError("ObjectPath.glob matches one level only")
        return iter(p for p in self.iterdir() if fnmatch.fnmatchcase(p.name, pattern))

    def walk(self):
        """``(folder, folder names, file names)`` for this prefix and every prefix under it, like
        :func:`os.walk` (top-down, from one listing)."""
        tree: dict[str, tuple[set, list]] = {"": (set(), [])}
        base_len = len(self.url) + 1
        for url, _ in objects.list_prefix(self.url):
            rel = url[base_len:].split("/")
            for depth in range(len(rel) - 1):
                parent = "/".join(rel[:depth])
                tree.setdefault(parent, (set(), []))[0].add(rel[depth])
                tree.setdefault("/".join(rel[:depth + 1]), (set(), []))
            tree.setdefault("/".join(rel[:-1]), (set(), []))[1].append(rel[-1])
        for rel in sorted(tree):
            dirs, files = tree[rel]
            yield (self / rel if rel else self), sorted(dirs), sorted(files)

    # -- reading and writing ---------------------------------------------------------------
    def open(self, mode: str = "rb"):
        if mode != "rb":
            raise ValueError("objects are opened for reading ('rb') only; write them whole")
        from tilewright.location.byte_source import open_binary

        return open_binary(self.url)

    def read_bytes(self) -> bytes:
        return objects.get_bytes(self.url)

    def read_text(self, encoding: str = "utf-8", errors: str = "strict") -> str:
        return self.read_bytes().decode(encoding, errors)

    def write_bytes(self, data) -> int:
        objects.put(self.url, bytes(data))
        return len(data)

    def write_text(self, text: str, encoding: str = "utf-8") -> int:
        return self.write_bytes(text.encode(encoding))

    def unlink(self, missing_ok: bool = False) -> None:
        if not missing_ok and not self.is_file():
            raise FileNotFoundError(self.url)
        objects.delete(self.url)

    def mkdir(self, mode: int = 0o777, parents: bool = False, exist_ok: bool = False) -> None:
        """Nothing to do: a prefix exists once an object is written under it."""


def as_path(path) -> Path | ObjectPath:
    """An :class:`ObjectPath` for a URL, else a :class:`pathlib.Path`."""
    if isinstance(path, (Path, ObjectPath)):
        return path
    return ObjectPath(path) if is_url(path) else Path(path)


def replace_bytes(path, data: bytes) -> None:
    """Write ``path`` whole so a reader sees the old content or the new, never a part: a local file
    through a temporary name and a rename, an object in one request."""
    path = as_path(path)
    if isinstance(path, ObjectPath):
        path.write_bytes(data)
        return
    tmp = path.with_name(f".{path.name}.{os.getpid()}.tmp")
    tmp.write_bytes(data)
    os.replace(tmp, path)


def replace_text(path, text: str) -> None:
    """:func:`replace_bytes` of UTF-8 text."""
    replace_bytes(path, text.encode("utf-8"))
