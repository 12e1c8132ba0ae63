"""Recognizing object-store URLs and taking them apart.

``s3://bucket/key``, ``gs://bucket/key``, ``az://container/key`` (also ``azure://``) name objects
in a bucket; ``https://host/path`` (and ``http://``) name files a web server serves (read only,
no listing). Anything else is a local path.
"""

from __future__ import annotations

import os
import re

__all__ = ["is_url", "split_url", "url_join", "url_name", "url_parent", "WRITABLE", "LISTABLE"]

_SCHEME = re.compile(r"^([a-zA-Z][a-zA-Z0-9+.-]*)://")
_ALIASES = {"s3": "s3", "s3a": "s3", "gs": "gs", "gcs": "gs", "az": "az", "azure": "az",
            "http": "http", "https": "https"}

#: Schemes whose URLs can be written to and listed (web servers are read only).
WRITABLE = ("s3", "gs", "az")
LISTABLE = WRITABLE


def is_url(path) -> bool:
    """True when ``path`` is a URL of a scheme tilewright reads (``s3``, ``gs``, ``az``, ``http(s)``)."""
    if not isinstance(path, str):
        path = getattr(path, "url", None)
        if not isinstance(path, str):
            return False
    m = _SCHEME.match(path)
    return m is not None and m.group(1).lower() in _ALIASES


def split_url(url: str) -> tuple[str, str, str]:
    """``(scheme, bucket, key)`` of a URL; the scheme normalized (``gcs`` → ``gs``, ``azure`` → ``az``),
    the key without leading or trailing ``/``. For ``http(s)`` the "bucket" is the host (and port).

    Raises
    ------
    ValueError
        Not a URL of a known scheme, or no bucket.
    """
    m = _SCHEME.match(url)
    scheme = _ALIASES.get(m.group(1).lower()) if m else None
    if scheme is None:
        raise ValueError(f"not an object-store URL: {url!r}")
    rest = url[m.end():]
    bucket, _, key = rest.partition("/")
    if not bucket:
        raise ValueError(f"no bucket in {url!r}")
    return scheme, bucket, key.strip("/")


def url_join(url: str, *names: str) -> str:
    """``url`` with ``names`` appended as path parts (``s3://b/out`` + ``a.zarr`` → ``s3://b/out/a.zarr``)."""
    out = url.rstrip("/")
    for name in names:
        name = os.fspath(name).strip("/")
        if name:
            out += "/" + name
    return out


def url_name(url: str) -> str:
    """Last part of a URL's path (``s3://b/x/a.svs`` → ``a.svs``; a bucket's URL → the bucket)."""
    scheme, bucket, key = split_url(url)
    return key.rsplit("/", 1)[-1] if key else bucket


def url_parent(url: str) -> str:
    """The URL one level up (the bucket's URL is its own parent)."""
    scheme, bucket, key = split_url(url)
    head = url[: _SCHEME.match(url).end()] + bucket
    return url_join(head, key.rsplit("/", 1)[0]) if "/" in key else head
