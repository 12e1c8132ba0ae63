"""Slide ids that stay put: what an output folder already holds keeps its id on every later run.

:func:`tilewright.store.layout.slide_ids` derives an id from a slide's own path; this module adds
what a cohort folder remembers. A source the folder already names (a manifest row, or a complete
store's ``source.path``) keeps that id, so adding slides to a finished cohort never renames a store
nor stores a slide a second time under a new id; ids a user gives (a ``slide_id`` column of a list
CSV) are taken as written, and refused when they would rename a store or share one.
"""

from __future__ import annotations

import os
from pathlib import Path

from tilewright.errors import ConfigError

__all__ = ["cohort_ids", "given_ids", "recorded_sources", "source_key", "check_given_id"]

#: Characters a given id may not hold: separators, control characters, glob/shell specials (the
#: ones :func:`tilewright.store.layout.slide_ids` replaces in derived ids).
_ID_RULE = "letters, digits, spaces and - _ . + = , @ % ~ ^"


def source_key(path) -> str:
    """The form in which two spellings of one source compare equal (its real absolute path; a URL
    as written)."""
    text = os.fspath(path)
    if "://" in text:
        return text
    return os.path.realpath(text)


def recorded_sources(out_dir) -> dict[str, list[str]]:
    """The ids an output folder already gives its sources: ``{slide id: source path}`` as a dict of
    lists keyed by :func:`source_key` (``{key: [ids]}``; a folder written by an older version may
    hold one source under two ids).

    Read from the manifest (rows of every status), and from the complete stores it does not name
    (a folder written by ``tile_slide``, or a run stopped before its manifest named them).
    """
    from tilewright.errors import StoreError
    from tilewright.location.objpath import as_path
    from tilewright.store.cohort import read_manifest

    out_dir = as_path(out_dir)
    by_source: dict[str, list[str]] = {}
    named = set()
    if not out_dir.is_dir():
        return by_source
    try:
        df = read_manifest(out_dir)
        pairs = list(zip(df["slide_id"].astype(str), df["source"].astype(str)))
    except (StoreError, OSError, ValueError, KeyError):
        pairs = []
    for sid, source in pairs:
        named.add(sid)
        if source and source != "nan":
            by_source.setdefault(source_key(source), []).append(sid)
    for store in out_dir.glob("*.zarr"):
        sid = store.name[: -len(".zarr")]
        if sid in named:
            continue
        source = _store_source(store)
        if source:
            by_source.setdefault(source_key(source), []).append(sid)
    return by_source


def _store_source(store: Path) -> str | None:
    """The source path a complete store records, or None (incomplete or unreadable)."""
    from tilewright.store.reader import is_complete, open_store

    if not is_complete(store):
        return None
    try:
        return (open_store(store).attrs.get("source") or {}).get("path")
    except Exception:  # noqa: BLE001 - an unreadable store names no source
        return None


def check_given_id(sid: str, where) -> str:
    """A user-given id as written, or a :class:`ConfigError` when it cannot name a store folder."""
    from tilewright.store.layout import MAX_ID_BYTES, _UNSAFE

    text = str(sid)
    if text != text.strip() or not text or text in (".", "..") or _UNSAFE.search(text):
        raise ConfigError(f"slide_id {text!r} cannot name a store folder: use {_ID_RULE}, no leading or "
                          "trailing space", where)
    if len(text.encode("utf-8")) > MAX_ID_BYTES:
        raise ConfigError(f"slide_id {text[:40]!r}... is longer than {MAX_ID_BYTES} bytes; give a shorter id", where)
    return text


def cohort_ids(paths, out_dir=None, *, root=None, given=None, where=None) -> list[str]:
    """The id of each slide of a run into ``out_dir``.

    1. A slide the folder already holds (same source file) keeps the id it was stored under.
    2. A given id (``given[i]``, e.g. a list CSV's ``slide_id``) is used as written.
    3. Otherwise :func:`tilewright.store.layout.slide_ids`: the file name, or the path relative to
       ``root`` when the name is shared with another slide or with an id the folder holds.

    Parameters
    ----------
    paths : list of path
        The run's slides, each once.
    out_dir : path, optional
        The output folder (its manifest and stores); None: a fresh folder.
    root : path, optional
        Where relative paths start (SOURCE's folder; default: the deepest folder holding every path).
    given : list of (str or None), optional
        Ids chosen by the user, aligned with ``paths``.
    where : path, optional
        What to name in errors about given ids (the list file).

    Raises
    ------
    ConfigError
        A given id that would rename a stored slide, name two slides, take another source's store,
        or cannot be a folder name; the message names both slides.
    """
    from tilewright.store.layout import _key, slide_ids

    paths = [os.fspath(p) for p in paths]
    given = list(given) if given is not None else [None] * len(paths)
    recorded = recorded_sources(out_dir) if out_dir is not None else {}
    holder = {_key(sid): key for key, sids in recorded.items() for sid in sids}  # id -> the source it holds
    keys = [source_key(p) for p in paths]
    ids: list[str | None] = [None] * len(paths)
    for i, (p, key, g) in enumerate(zip(paths, keys, given)):
        kept = _kept_id(recorded.get(key), out_dir)
        g = None if g is None or (isinstance(g, float) and g != g) or str(g) == "" else check_given_id(g, where or p)
        if kept is not None and g is not None and g != kept:
            raise ConfigError(f"{p} is stored as {kept!r} in {out_dir}, but the list names it {g!r}; a stored "
                              f"slide is never renamed: use {kept!r} in the list, or another output folder", where or p)
        ids[i] = kept if kept is not None else g
        if g is not None and kept is None and holder.get(_key(g), key) != key:
            raise ConfigError(f"slide_id {g!r} given to {p} is the id of another source stored in {out_dir} "
                              f"({_source_of(recorded, holder[_key(g)])}); choose another id", where or p)
    chosen: dict[str, int] = {}
    for i, sid in enumerate(ids):
        if sid is None:
            continue
        j = chosen.setdefault(_key(sid), i)
        if j != i:
            raise ConfigError(f"{paths[j]} and {paths[i]} would both be stored as {sid!r} (ids equal ignoring "
                              "case name one folder on some file systems); give them different slide_id values",
                              where or paths[i])
    free = [i for i, sid in enumerate(ids) if sid is None]
    if free:
        reserved = list(chosen) + [k for k, src in holder.items() if _source_exists(src)]
        for i, sid in zip(free, slide_ids([paths[i] for i in free], root=root, reserved=reserved)):
            ids[i] = sid
    return ids


def _kept_id(sids: list[str] | None, out_dir) -> str | None:
    """The id a stored source keeps: its only id, or (a folder where an older version stored it
    twice) the id of its most recently completed store."""
    if not sids:
        return None
    if len(sids) == 1:
        return sids[0]
    from tilewright.store.selection import newest_store

    return newest_store(out_dir, sids) or sorted(sids)[0]


def _source_exists(key: str) -> bool:
    """Whether a recorded source is still there: an id of a source gone (a file moved or deleted)
    does not hold its name against a new slide, whose store is then checked like any resumed one
    (size and digest, :mod:`tilewright.run.identity`)."""
    return "://" in key or os.path.exists(key)


def _source_of(recorded: dict, key: str) -> str:
    return f"{key}, stored as {', '.join(map(repr, recorded.get(key) or []))}"


def given_ids(paths, ids):
    """Caller-given ids (``ids``: a list aligned with ``paths``, or a dict path → id) as a function
    of a path list returning the id of each path (None where none was given)."""
    if ids is None:
        return lambda ps: None
    if isinstance(ids, dict):
        by_file = {source_key(k): v for k, v in ids.items()}
    else:
        paths, ids = list(paths), list(ids)
        if len(ids) != len(paths):
            raise ConfigError(f"ids= gives {len(ids)} ids for {len(paths)} paths; give one a path (None: derived)")
        by_file = {source_key(p): v for p, v in zip(paths, ids)}
    return lambda ps: [by_file.get(source_key(p)) for p in ps]
