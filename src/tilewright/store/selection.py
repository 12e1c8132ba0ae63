"""Which complete stores a cohort serves, and why the others are left out.

A cohort folder can hold stores a reader should not mix in: two stores of one source file (a
folder written by a version whose ids changed when slides were added), or stores kept from an
earlier run with other settings. :func:`select_stores` keeps one store a source and, by default,
only the stores made with the cohort's settings; every store left out is named with its reason.
"""

from __future__ import annotations

import os
from pathlib import Path

__all__ = ["select_stores", "newest_store", "LEFT_OUT_COLUMNS"]

#: Columns of :attr:`tilewright.store.cohort.Cohort.left_out`.
LEFT_OUT_COLUMNS = ["slide_id", "reason"]


def _source_key(store) -> str | None:
    path = (store.attrs.get("source") or {}).get("path")
    if not path:
        return None
    return path if "://" in str(path) else os.path.realpath(str(path))


def newest_store(out_dir, slide_ids) -> str | None:
    """Of the complete stores ``OUT/<id>.zarr`` of ``slide_ids``, the id of the one completed last
    (its ``created`` attribute), or None when none is complete."""
    from tilewright.store.layout import store_path
    from tilewright.store.reader import TileStore, is_complete

    best = None
    for sid in slide_ids:
        p = store_path(out_dir, sid)
        if is_complete(p):
            created = str(TileStore(p).attrs.get("created") or "")
            if best is None or created > best[0]:
                best = (created, sid)
    return None if best is None else best[1]


def one_store_a_source(stores: dict) -> tuple[dict, list[tuple[str, str]]]:
    """``stores`` (id → TileStore) with one store a source file: where two stores record the same
    source path, the one completed last is served. Returns the stores kept and ``(id, reason)``
    pairs of those left out."""
    by_source: dict[str, list[str]] = {}
    for sid, store in stores.items():
        key = _source_key(store)
        if key is not None:
            by_source.setdefault(key, []).append(sid)
    left = []
    for key, sids in by_source.items():
        if len(sids) < 2:
            continue
        keep = max(sids, key=lambda s: (str(stores[s].attrs.get("created") or ""), s))
        for sid in sids:
            if sid != keep:
                left.append((sid, f"the same source file as {keep!r} ({key}), whose store is newer; "
                                  "a source is served once"))
    dropped = {sid for sid, _ in left}
    return {sid: s for sid, s in stores.items() if sid not in dropped}, left


def select_stores(path: Path, manifest) -> tuple[dict, list[tuple[str, str]]]:
    """The stores a cohort folder serves: the complete stores of its manifest's slides that hold
    tiles or were kept, one a source file. Returns ``(stores by id, [(id, reason left out)])``."""
    from tilewright.store.layout import store_path
    from tilewright.store.reader import TileStore, is_complete

    stores = {}
    for sid, status in zip(manifest["slide_id"], manifest["status"]):
        p = store_path(path, str(sid))
        if status != "skipped" and is_complete(p):
            stores[str(sid)] = TileStore(p)
    return one_store_a_source(stores)
