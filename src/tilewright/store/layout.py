"""On-disk layout of a tile store: names, version, and slide ids.

A store is one zarr v3 group a slide, ``<slide_id>.zarr``::

    tiles       (N, T, T, 3) uint8   one tile a chunk, ``shard_tiles`` tiles a shard file
    yx          (N, 2) int64         top-left corner of each tile, target pixels (at ``mpp``)
    yx_level0   (N, 2) int64         the same corner in level-0 pixels of the source
    tissue      (N,) float32         tissue fraction of each tile footprint
    sharpness   (N,) float32         variance of the Laplacian of each stored tile
    region      (N,) float32         kept-class fraction (only when regions were used)
    thumbnail   (h, w, 3) uint8      raw slide colour at ``mask_mpp`` (true µm/px of its pixels)
    mask        (h, w) bool          tissue mask at ``mask_mpp`` (the same pixels' grid)

Group attributes carry the provenance (see :data:`REQUIRED_ATTRS`); ``complete`` is written last.
Any zarr v3 reader can open a store; tilewright is not needed to read it.
"""

from __future__ import annotations

import os
import re
from collections import Counter
from pathlib import Path

__all__ = [
    "FORMAT_NAME",
    "FORMAT_VERSION",
    "REQUIRED_ATTRS",
    "SLIDE_SUFFIXES",
    "slide_stem",
    "slide_ids",
    "store_path",
    "MAX_ID_BYTES",
]

FORMAT_NAME = "tilewright.tiles"
FORMAT_VERSION = 1

#: Attributes every complete store carries.
REQUIRED_ATTRS = (
    "format", "format_version", "complete", "slide_id", "source", "mpp", "mpp_source",
    "objective", "source_level", "scale", "tile", "stride", "mask_mpp", "n_tiles", "normalizer",
    "config", "library_version", "created",
)

#: File suffixes searched for in a folder (lower case; compound suffixes first).
SLIDE_SUFFIXES = (
    ".ome.tiff", ".ome.tif", ".tiff", ".tif", ".svs", ".ndpi", ".scn", ".mrxs", ".vms", ".vmu",
    ".bif", ".svslide", ".qptiff", ".dcm",
)

_COMPOUND = (".ome.tiff", ".ome.tif", ".ome.zarr")


def slide_stem(path: str | os.PathLike) -> str:
    """File name without its extension(s): ``b.ome.tif`` → ``b``, ``a.svs`` → ``a``.

    A folder (a DICOM whole-slide series) keeps its whole name: ``case.07/`` → ``case.07``; a key
    prefix in a bucket is named with a trailing ``/`` (``s3://b/case.07/``).
    """
    from tilewright.location.url import is_url

    if is_url(path):
        text = str(path)
        name = text.rstrip("/").rsplit("/", 1)[-1]
        if text.endswith("/"):
            return name
    else:
        name = Path(path).name
        if os.path.isdir(path):
            return name
    lower = name.lower()
    for suffix in _COMPOUND:
        if lower.endswith(suffix):
            return name[: -len(suffix)]
    stem = Path(name).stem
    return stem or name


#: Characters replaced by ``_`` in ids: path separators, control characters, and characters that
#: glob patterns or shells treat specially (``a[1]`` would match ``a1`` as a pattern).
_UNSAFE = re.compile(r"[\\/:*?\"<>|\[\]{}!$`'&;()#\x00-\x1f\x7f]")

#: Longest id in UTF-8 bytes: the store's longest temporary name (``<id>.zarr.partial-old-`` and 8
#: hex digits, 26 bytes more) must stay within the 255-byte file-name limit of common file systems.
MAX_ID_BYTES = 200


def _safe(text: str) -> str:
    """A file-system safe id (keeps unicode letters and spaces; replaces separators, control
    characters and glob/shell-special characters)."""
    text = _UNSAFE.sub("_", text).strip()
    return _shorten(text) if text else "slide"


def _shorten(text: str) -> str:
    """``text`` itself when it fits :data:`MAX_ID_BYTES`; otherwise its head and a stable hash of
    the whole (``<head>_<8 hex digits of SHA-1>``), so long names stay distinct and reproducible."""
    import hashlib

    raw = text.encode("utf-8")
    if len(raw) <= MAX_ID_BYTES:
        return text
    head = raw[: MAX_ID_BYTES - 9].decode("utf-8", errors="ignore").rstrip()
    return f"{head}_{hashlib.sha1(raw).hexdigest()[:8]}"


def slide_ids(paths) -> list[str]:
    """Unique slide ids for a list of paths.

    The id is the file name without extension(s). When several files share one, each gets its
    parent folder's name as a prefix (``sub_b``); if that still collides, more parent folders are
    added, then a counter that skips ids already taken. Glob/shell-special characters
    (``[ ] * ? { } ! $ ; & ( ) #`` ...) and separators become ``_``; ids longer than
    :data:`MAX_ID_BYTES` keep their head and gain a stable hash suffix. Pass each slide once
    (:func:`tilewright.run.sources.unique_paths` drops repeats).
    """
    given = list(paths)
    paths = [_as_pure(g) for g in given]
    stems = [slide_stem(g) for g in given]
    ids = [_safe(stem) for stem in stems]
    counts = Counter(ids)
    out = []
    for p, sid in zip(paths, ids):
        if counts[sid] > 1:
            parts = [_safe(x) for x in p.parent.parts[-1:]]
            sid = _shorten("_".join(parts + [sid])) if parts else sid
        out.append(sid)
    depth = 2
    while len(set(out)) < len(out) and depth < 6:
        counts = Counter(out)
        out = [
            _shorten("_".join([_safe(x) for x in p.parent.parts[-depth:]] + [_safe(stem)]))
            if counts[o] > 1 else o
            for p, o, stem in zip(paths, out, stems)
        ]
        depth += 1
    return _numbered(out)


def _as_pure(path) -> Path:
    """The path whose parent folders name colliding ids (a URL's key parts, its bucket first)."""
    from tilewright.location.url import is_url, split_url

    if is_url(path):
        scheme, bucket, key = split_url(str(path))
        return Path(bucket, *[k for k in key.split("/") if k])
    return Path(path)


def _numbered(ids: list[str]) -> list[str]:
    """Ids made unique by a counter (``b``, ``b_2``, ...), skipping counters that would hit another
    id of the list (``b_2`` when a slide is already called ``b_2``)."""
    taken = set(ids)
    seen: set = set()
    final = []
    for o in ids:
        if o not in seen:
            seen.add(o)
            final.append(o)
            continue
        k = 2
        while _shorten(f"{o}_{k}") in taken or _shorten(f"{o}_{k}") in seen:
            k += 1
        new = _shorten(f"{o}_{k}")
        seen.add(new)
        final.append(new)
    return final


def store_path(out_dir: str | os.PathLike, slide_id: str):
    """Path of a slide's store inside a cohort folder (an ``ObjectPath`` when the folder is a URL)."""
    from tilewright.location.objpath import as_path

    return as_path(out_dir) / f"{slide_id}.zarr"
