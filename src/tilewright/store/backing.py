"""Where a tile store's bytes live: a local folder, or a key prefix in a bucket.

zarr reads and writes a local store through its ``LocalStore`` (given the folder's path) and a
store in a bucket through :class:`UrlObjectStore`, zarr's own ``ObjectStore`` over an obstore
client whose keys are relative to the store's prefix (``s3://bucket/out/a.zarr``), which also
remembers that URL so the direct shard reader and writer find the shard objects. Plain
zarr-python reads such a store with ``zarr.storage.ObjectStore`` (or ``FsspecStore``) the way it
reads a folder on disk.
"""

from __future__ import annotations

from zarr.storage import ObjectStore

from tilewright.location.objpath import ObjectPath, as_path
from tilewright.location.url import is_url

__all__ = ["UrlObjectStore", "zarr_store", "has_store"]


class UrlObjectStore(ObjectStore):
    """zarr's ``ObjectStore`` for the store at ``url`` (keys relative to it)."""

    def __init__(self, url: str, *, read_only: bool = False):
        from tilewright.location.client import prefixed_store

        super().__init__(prefixed_store(url), read_only=read_only)
        self.url = str(url).rstrip("/")

    def with_read_only(self, read_only: bool = False) -> "UrlObjectStore":
        return type(self)(self.url, read_only=read_only)

    # obstore's exceptions become tilewright's one-line errors naming the object's URL
    async def get(self, key, prototype, byte_range=None):
        try:
            return await super().get(key, prototype, byte_range)
        except Exception as exc:
            raise _mapped(exc, self.url, key, "reading") from None

    async def exists(self, key) -> bool:
        try:
            return await super().exists(key)
        except Exception as exc:
            raise _mapped(exc, self.url, key, "reading") from None

    async def set(self, key, value) -> None:
        try:
            return await super().set(key, value)
        except Exception as exc:
            raise _mapped(exc, self.url, key, "writing") from None

    async def delete(self, key) -> None:
        try:
            return await super().delete(key)
        except Exception as exc:
            raise _mapped(exc, self.url, key, "deleting") from None

    def __reduce__(self):
        # re-made from the URL where it is unpickled: credentials come from that process's
        # environment, never travel in a pickle
        return _url_object_store, (self.url, self.read_only)


def _mapped(exc: Exception, url: str, key: str, doing: str) -> Exception:
    """An obstore exception as :class:`~tilewright.errors.ObjectStoreError`; others unchanged."""
    if type(exc).__module__.split(".")[0] != "obstore":
        return exc  # not found (a FileNotFoundError zarr handles), or not the client's
    from tilewright.location.client import object_error

    return object_error(exc, f"{url}/{key}", doing)


def _url_object_store(url: str, read_only: bool) -> UrlObjectStore:
    return UrlObjectStore(url, read_only=read_only)


def zarr_store(path, *, read_only: bool = True):
    """What ``zarr.open_group`` takes for the store at ``path``: its folder's path as text, or a
    :class:`UrlObjectStore` for a URL."""
    if is_url(path):
        return UrlObjectStore(str(path), read_only=read_only)
    return str(path)


def has_store(path) -> bool:
    """Whether a zarr group's metadata (``zarr.json``) is at ``path`` (one request for a URL)."""
    return (as_path(path) / "zarr.json").is_file()


def is_remote(path) -> bool:
    """Whether ``path`` is a URL or an :class:`~tilewright.location.objpath.ObjectPath`."""
    return isinstance(path, ObjectPath) or is_url(path)
