"""Which complete stores a cohort serves, and why the others are left out.

A cohort folder can hold stores a reader should not mix in: two stores of one source file (a
folder written by a version whose ids changed when slides were added), or stores kept from an
earlier run with other settings. :func:`select_stores` keeps one store a source and, by default,
only the stores made with the cohort's settings; every store left out is named with its reason.
"""

from __future__ import annotations

import os
from pathlib import Path

from tilewright.location.objpath import as_path
from tilewright.store.settings import expected_target, read_settings_toml, settings_mismatch

__all__ = ["select_stores", "newest_store", "cohort_settings", "check_stores", "LEFT_OUT_COLUMNS"]

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


def select_stores(path: Path, manifest, settings="cohort") -> tuple[dict, list[tuple[str, str]], dict | None]:
    """The stores a cohort folder serves: the complete stores of its manifest's slides that hold
    tiles or were kept, one a source file, made with the cohort's settings.

    Parameters
    ----------
    path : Path
        The cohort folder.
    manifest : DataFrame
    settings : "cohort", None, dict, TilingConfig or path
        What the stores must have been made with: ``"cohort"`` the folder's ``config.toml`` (the
        settings of its latest run; without one, the settings the stores share, which must be
        one set), a ``TilingConfig``, its dict or a TOML file; None serves every complete store.

    Returns
    -------
    stores : dict
        id → TileStore.
    left_out : list of (id, reason)
    settings : dict or None
        The settings checked.

    Raises
    ------
    StoreError
        ``"cohort"`` on a folder without ``config.toml`` whose stores were made with different
        settings (the message names the differences and how to choose).
    """
    from tilewright.store.layout import store_path
    from tilewright.store.metadata import stores_attrs
    from tilewright.store.reader import TileStore

    ids = [str(sid) for sid, status in zip(manifest["slide_id"], manifest["status"])
           if status not in ("skipped", "all-ink")]  # stores holding tiles
    paths = [store_path(path, sid) for sid in ids]
    # one metadata read a store, on a few threads; the stores open nothing more until used
    stores = {sid: TileStore(p, attrs) for sid, p, attrs in zip(ids, paths, stores_attrs(paths)) if attrs is not None}
    stores, left = one_store_a_source(stores)
    if settings is None or not stores:
        return stores, left, None
    expected, where = cohort_settings(path, settings)
    if expected is None:  # no config.toml: the stores' own settings, which must agree
        first = next(iter(stores.values()))
        expected, where = dict(first.attrs.get("config") or {}), None
        target = first.attrs.get("stain_target")
    else:
        target = _target_for(path, expected, stores)
    for sid, store in list(stores.items()):
        diff = settings_mismatch(store.attrs, expected, target)
        if diff:
            if where is None:
                _refuse_mixed(path, stores, expected, target)
            left.append((sid, f"made with other settings than {where}: {', '.join(diff)}"))
            del stores[sid]
    return stores, left, expected


def cohort_settings(path: Path, settings) -> tuple[dict | None, str | None]:
    """The settings a cohort's stores must match and where they come from (for messages):
    ``(dict, "config.toml")``, or ``(None, None)`` for a folder without ``config.toml``."""
    from tilewright.errors import ConfigError

    if settings == "cohort":
        file = as_path(path) / "config.toml"
        if not file.exists():
            return None, None
        return read_settings_toml(file), "the cohort's config.toml"
    if isinstance(settings, dict):
        return dict(settings), "the settings given"
    if hasattr(settings, "to_dict"):
        return settings.to_dict(), "the settings given"
    if isinstance(settings, (str, os.PathLike)):
        return read_settings_toml(as_path(settings)), str(settings)
    raise ConfigError(f"settings= must be 'cohort', None, a TilingConfig, a dict or a TOML file, got {settings!r}")


def _target_for(path: Path, expected: dict, stores: dict):
    """The stain target digest the stores must record (see :func:`expected_target`); for a
    reference image, the target most stores made with the cohort's other settings record."""
    import json
    from collections import Counter

    method = expected.get("normalizer")
    saved = None
    if method and expected.get("reference") is None:
        for name in (f"stain_target.{method}.json", "stain_target.json"):
            f = as_path(path) / name
            if f.exists():
                d = json.loads(f.read_text())
                if d.get("method") == method:
                    saved = d
                    break
    target = expected_target(expected, saved)
    if target is not ...:
        return target
    votes = Counter(s.attrs.get("stain_target") for s in stores.values() if not settings_mismatch(s.attrs, expected, ...))
    return votes.most_common(1)[0][0] if votes else None


def _refuse_mixed(path, stores, expected, target):
    from tilewright.errors import StoreError

    odd = [(sid, settings_mismatch(s.attrs, expected, target)) for sid, s in stores.items()]
    odd = [(sid, d) for sid, d in odd if d]
    first = next(iter(stores))
    raise StoreError(f"no config.toml, and the stores were made with different settings: {len(odd)} of {len(stores)} "
                     f"differ from {first!r} ({odd[0][0]}: {', '.join(odd[0][1])}); pass settings= (a TilingConfig, "
                     "its dict or a TOML file) to choose, or settings=None to serve them all", path)


def check_stores(stores: list, settings="cohort") -> None:
    """Refuse a list of stores (TileStore) made with different settings.

    ``settings="cohort"``: they must agree with the first store; a ``TilingConfig``, dict or
    TOML path: with those settings; None: no check.

    Raises
    ------
    StoreError
        Naming the first store that differs and how.
    """
    from tilewright.errors import StoreError

    if settings is None or not stores:
        return
    if settings == "cohort":
        expected, where = dict(stores[0].attrs.get("config") or {}), f"the first store ({stores[0].slide_id})"
        target = stores[0].attrs.get("stain_target")
    else:
        expected, where = cohort_settings(Path("."), settings)
        target = expected_target(expected, None)
    for store in stores:
        diff = settings_mismatch(store.attrs, expected, target)
        if diff:
            raise StoreError(f"made with other settings than {where}: {', '.join(diff)}; serve stores of one "
                             "set of settings, or pass settings=None to mix them", store.path)
