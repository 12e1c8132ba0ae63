"""Putting local test files into a bucket (the tests' own client calls, independent of tilewright's)."""

from __future__ import annotations

import os
from pathlib import Path


def _store(url: str):
    from obstore.store import S3Store

    bucket, _, key = url.split("://", 1)[1].partition("/")
    store = S3Store(bucket, endpoint=os.environ["AWS_ENDPOINT_URL"], access_key_id=os.environ["AWS_ACCESS_KEY_ID"],
                    secret_access_key=os.environ["AWS_SECRET_ACCESS_KEY"], region="us-east-1",
                    client_options={"allow_http": True})
    return store, key.strip("/")


def upload(local, url: str) -> list[str]:
    """Put a file at ``url``, or every file under a folder below the prefix ``url``; the URLs written."""
    import obstore

    local = Path(local)
    store, key = _store(url)
    files = [local] if local.is_file() else sorted(p for p in local.rglob("*") if p.is_file())
    out = []
    for f in files:
        k = key if local.is_file() else f"{key}/{f.relative_to(local).as_posix()}"
        obstore.put(store, k, f.read_bytes())
        out.append(url if local.is_file() else f"{url.rstrip('/')}/{f.relative_to(local).as_posix()}")
    return out


def listing(url: str) -> dict[str, bytes]:
    """Every object under the prefix ``url``: relative key -> bytes."""
    import obstore

    store, key = _store(url)
    out = {}
    for batch in obstore.list(store, key or None):
        for meta in batch:
            rel = meta["path"][len(key) + 1:] if key else meta["path"]
            out[rel] = bytes(obstore.get(store, meta["path"]).bytes())
    return out


def fetch(url: str) -> bytes:
    """One object's bytes."""
    import obstore

    store, key = _store(url)
    return bytes(obstore.get(store, key).bytes())
