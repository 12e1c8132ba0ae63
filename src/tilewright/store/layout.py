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
    "is_slide_name",
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


def is_slide_name(path) -> bool:
    """True when the file name (or a URL's last part) ends with a suffix one of the backends reads."""
    import os

    return os.path.basename(str(path).rstrip("/")).lower().endswith(SLIDE_SUFFIXES)

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


def slide_ids(paths, root: str | os.PathLike | None = None, reserved=()) -> list[str]:
    """Slide ids for a list of paths, each a function of its own path relative to ``root``.

    The id is the file name without extension(s) (a DICOM series folder: the folder's name).
    Slides whose ids would be equal (ignoring case: ``B`` and ``b`` are one folder on
    case-insensitive file systems), or equal to one of ``reserved`` (ids already taken, for
    example by the stores of an output folder), take an id from their path relative to ``root``
    instead: its folders and the name joined by ``_`` (``north/b.tif`` → ``north_b``); if that
    is still shared, the extension is added (``north_b_svs``); if that is still shared, 8 hex
    digits of the SHA-1 of the relative path. No counter and no order is involved: a slide's id
    depends on its own relative path, and on other slides only in whether its name is shared.

    Glob/shell-special characters (``[ ] * ? { } ! $ ; & ( ) #`` ...) and separators become
    ``_``; ids longer than :data:`MAX_ID_BYTES` keep their head and gain a stable hash suffix.
    Pass each slide once (:func:`tilewright.run.sources.unique_paths` drops repeats).

    Parameters
    ----------
    paths : list of path
    root : path, optional
        The folder relative paths start from (``tile-out``'s SOURCE folder, or a list file's
        folder). Default: the deepest folder holding every path.
    reserved : iterable of str
        Ids taken already; a slide named like one takes its path id.
    """
    paths = list(paths)
    rel = _relative_parts(paths, root)
    taken = Counter(_key(r) for r in reserved)
    levels = [0] * len(paths)
    ids = [_id_at(p, r, 0) for p, r in zip(paths, rel)]
    while True:
        counts = Counter(map(_key, ids)) + taken
        clash = [i for i, sid in enumerate(ids) if counts[_key(sid)] > 1 and levels[i] < 3]
        if not clash:
            return ids
        for i in clash:  # a level may give a path the same id (no folder, no extension): next round
            levels[i] += 1
            ids[i] = _id_at(paths[i], rel[i], levels[i])


def _key(sid: str) -> str:
    """The form in which two ids name one store folder on a case-insensitive file system."""
    return sid.casefold()


def _relative_parts(paths: list, root) -> list[tuple[str, ...]]:
    """Each path's parts relative to ``root`` (default: the deepest folder holding every path); a
    path outside ``root`` keeps its absolute parts without the anchor. A URL's parts are its
    bucket and key parts (:func:`_as_pure`)."""
    full = [_full(p) for p in paths]
    if root is None:
        parents = [os.path.dirname(a) for a in full]
        try:
            root = os.path.commonpath(parents) if parents else ""
        except ValueError:  # URLs mixed with local paths: no common folder
            root = ""
    else:
        root = _full(root)
    out = []
    for p, a in zip(paths, full):
        r = os.path.relpath(a, root) if root and (a == root or a.startswith(root.rstrip(os.sep) + os.sep)) else None
        parts = Path(r).parts if r not in (None, ".") else Path(a).parts[1:]
        out.append(tuple(parts) or (_as_pure(p).name,))
    return out


def _full(path) -> str:
    """A local path made absolute; a URL as ``/<bucket>/<key>`` (compared with other URLs only)."""
    from tilewright.location.url import is_url

    if is_url(path):
        return "/" + str(_as_pure(path))
    return os.path.abspath(path)


def _id_at(path, rel: tuple[str, ...], level: int) -> str:
    """The id of ``path`` (parts ``rel`` relative to the root) at collision level 0-3."""
    stem = slide_stem(path)
    path = _as_pure(path)
    if level == 0:
        return _safe(stem)
    folders = [_safe(x) for x in rel[:-1]]
    sid = "_".join(folders + [_safe(stem)])
    if level >= 2:
        ext = path.name[len(stem):].lstrip(".") if path.name.startswith(stem) else ""
        if ext:
            sid = f"{sid}_{_safe(ext.replace('.', '_'))}"
    if level >= 3:
        import hashlib

        digest = hashlib.sha1("/".join(rel).encode("utf-8")).hexdigest()[:8]
        return _shorten(f"{sid}_{digest}")
    return _shorten(sid)


def _as_pure(path) -> Path:
    """The path whose parent folders name colliding ids (a URL's key parts, its bucket first)."""
    from tilewright.location.url import is_url, split_url

    if is_url(path):
        scheme, bucket, key = split_url(str(path))
        return Path(bucket, *[k for k in key.split("/") if k])
    return Path(path)


def store_path(out_dir: str | os.PathLike, slide_id: str):
    """Path of a slide's store inside a cohort folder (an ``ObjectPath`` when the folder is a URL)."""
    from tilewright.location.objpath import as_path

    return as_path(out_dir) / f"{slide_id}.zarr"
