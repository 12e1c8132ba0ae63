"""The object-store operations tilewright uses, each failing with one typed, one-line error.

Every function takes a full URL (``s3://bucket/key``). Reads: :func:`head`, :func:`get_bytes`,
:func:`get_range`, :func:`get_ranges` (several ranges of one object, adjacent ones coalesced
into one request and the rest fetched concurrently). Writes: :func:`put` (whole object, atomic:
a reader sees the old object or the new one, never a mix), :func:`put_new` (only if absent: the
conditional write behind the output lock), :func:`put_if_unchanged` (only if the object still has
the entity tag read before), :func:`delete`, :func:`delete_prefix`. Listing: :func:`list_prefix`
(every object under a prefix) and :func:`list_children` (one level, like a folder).
"""

from __future__ import annotations

from tilewright.errors import ObjectNotFoundError, ObjectStoreError
from tilewright.location.client import object_error, store_for
from tilewright.location.url import split_url, url_join

__all__ = ["head", "get_bytes", "get_range", "get_tail", "get_ranges", "put", "put_new", "put_if_unchanged", "delete",
           "delete_prefix", "list_prefix", "list_children", "exists", "is_prefix"]


def _fail(exc, url, doing):
    if isinstance(exc, ObjectStoreError):
        return exc
    return object_error(exc, url, doing)


def head(url: str) -> dict:
    """``{"size": int, "e_tag": str or None}`` of an object.

    Raises
    ------
    ObjectNotFoundError
        No such object.
    ObjectStoreError
        Any other failure (credentials, access, bucket, connection).
    """
    import obstore

    store, key = store_for(url)
    try:
        meta = obstore.head(store, key)
    except Exception as exc:  # noqa: BLE001 - mapped to a typed error
        raise _explained(_fail(exc, url, "reading"), store, key, url) from None
    return {"size": int(meta["size"]), "e_tag": meta.get("e_tag")}


def _explained(err: ObjectStoreError, store, key: str, url: str) -> ObjectStoreError:
    """A HEAD answer has no body, so a 403 or 404 does not say why (refused credentials or a
    missing permission; a missing object or a missing bucket): ask with a one-byte GET, whose
    answer does."""
    import obstore

    if err.cause not in ("denied", "missing"):
        return err
    try:
        obstore.get_range(store, key, start=0, length=1)
    except Exception as exc:  # noqa: BLE001
        better = _fail(exc, url, "reading")
        return better if better.cause not in ("other",) else err
    return err


def exists(url: str) -> bool:
    """Whether the object exists (other failures raise)."""
    try:
        head(url)
    except ObjectNotFoundError:
        return False
    return True


def get_bytes(url: str) -> bytes:
    """The whole object."""
    import obstore

    store, key = store_for(url)
    try:
        return bytes(obstore.get(store, key).bytes())
    except Exception as exc:  # noqa: BLE001
        raise _fail(exc, url, "reading") from None


def get_range(url: str, start: int, length: int) -> bytes:
    """``length`` bytes from ``start`` (one range request)."""
    import obstore

    store, key = store_for(url)
    try:
        return bytes(obstore.get_range(store, key, start=int(start), length=int(length)))
    except Exception as exc:  # noqa: BLE001
        raise _fail(exc, url, "reading") from None


def get_tail(url: str, n: int) -> tuple[bytes, int]:
    """The last ``n`` bytes of the object (all of it when it is shorter) and the object's size, in
    one request."""
    import obstore

    store, key = store_for(url)
    try:
        got = obstore.get(store, key, options={"range": {"suffix": int(n)}})
        return bytes(got.bytes()), int(got.meta["size"])
    except Exception as exc:  # noqa: BLE001
        raise _fail(exc, url, "reading") from None


def get_ranges(url: str, starts, lengths) -> list:
    """Several ranges of one object (buffers supporting the buffer protocol), in the order asked."""
    import obstore

    store, key = store_for(url)
    try:
        return obstore.get_ranges(store, key, starts=[int(s) for s in starts], lengths=[int(n) for n in lengths])
    except Exception as exc:  # noqa: BLE001
        raise _fail(exc, url, "reading") from None


def put(url: str, data) -> None:
    """Write (or replace) the whole object in one request."""
    import obstore

    store, key = store_for(url)
    try:
        obstore.put(store, key, data)
    except Exception as exc:  # noqa: BLE001
        raise _fail(exc, url, "writing") from None


def put_new(url: str, data) -> str | None:
    """Create the object only if it does not exist; its entity tag, or None when it existed."""
    import obstore
    from obstore.exceptions import AlreadyExistsError, PreconditionError

    store, key = store_for(url)
    try:
        return obstore.put(store, key, data, mode="create").get("e_tag") or ""
    except (AlreadyExistsError, PreconditionError):
        return None
    except Exception as exc:  # noqa: BLE001
        raise _fail(exc, url, "writing") from None


def put_if_unchanged(url: str, data, e_tag: str) -> str | None:
    """Replace the object only if its entity tag is still ``e_tag``; the new tag, or None when the
    object changed (or vanished) meanwhile."""
    import obstore
    from obstore.exceptions import NotFoundError, PreconditionError

    store, key = store_for(url)
    try:
        return obstore.put(store, key, data, mode={"e_tag": e_tag}).get("e_tag") or ""
    except (PreconditionError, NotFoundError, FileNotFoundError):
        return None
    except Exception as exc:  # noqa: BLE001
        raise _fail(exc, url, "writing") from None


def delete(url: str) -> None:
    """Remove the object (no error when it is absent)."""
    import obstore

    store, key = store_for(url)
    try:
        obstore.delete(store, key)
    except FileNotFoundError:
        return
    except Exception as exc:  # noqa: BLE001
        err = _fail(exc, url, "deleting")
        if err.cause != "missing":
            raise err from None


def _prefix_key(url: str) -> str:
    key = split_url(url)[2]
    return key + "/" if key else ""


def _base(url: str) -> str:
    scheme, bucket, _ = split_url(url)
    return url[: url.index("://") + 3] + bucket


def _list_keys(url: str) -> list[tuple[str, int]]:
    import obstore

    store, _ = store_for(url)
    prefix = _prefix_key(url).rstrip("/")
    out = []
    try:
        for batch in obstore.list(store, prefix or None, chunk_size=1000):
            out.extend((m["path"], int(m["size"])) for m in batch)
    except Exception as exc:  # noqa: BLE001
        raise _fail(exc, url, "listing") from None
    return sorted(out)


def list_prefix(url: str) -> list[tuple[str, int]]:
    """``(url, size)`` of every object under ``url`` taken as a folder (recursive), sorted by URL."""
    base = _base(url)
    return [(url_join(base, key), size) for key, size in _list_keys(url)]


def list_children(url: str) -> tuple[list[tuple[str, int]], list[str]]:
    """One level under ``url`` taken as a folder: ``([(object url, size)], [sub-folder urls])``."""
    import obstore

    store, _ = store_for(url)
    prefix = _prefix_key(url)
    base = _base(url)
    try:
        found = obstore.list_with_delimiter(store, prefix.rstrip("/") or None)
    except Exception as exc:  # noqa: BLE001
        raise _fail(exc, url, "listing") from None
    files = sorted((url_join(base, m["path"]), int(m["size"])) for m in found["objects"])
    folders = sorted(url_join(base, p) for p in found["common_prefixes"])
    return files, folders


def is_prefix(url: str) -> bool:
    """Whether some object lies under ``url`` taken as a folder."""
    import obstore

    store, _ = store_for(url)
    prefix = _prefix_key(url)
    try:
        for batch in obstore.list(store, prefix.rstrip("/") or None, chunk_size=1):
            return bool(batch)
    except Exception as exc:  # noqa: BLE001
        raise _fail(exc, url, "listing") from None
    return False


def delete_prefix(url: str) -> int:
    """Remove every object under ``url`` taken as a folder; the number removed."""
    import obstore

    store, _ = store_for(url)
    paths = [key for key, _ in _list_keys(url)]
    try:
        for i in range(0, len(paths), 1000):
            obstore.delete(store, paths[i:i + 1000])
    except Exception as exc:  # noqa: BLE001
        raise _fail(exc, url, "deleting") from None
    return len(paths)
