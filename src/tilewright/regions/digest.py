"""Content digests of region sources, so that a store knows which annotations made it.

A store made with regions records the digest of the region content its slide used; a resumed run
compares it with the file as it is now, so that edited annotations are re-tiled instead of being
reported done (see :func:`tilewright.regions.load.region_change`). GeoJSON is digested as the
file's bytes (or, given as data, as canonical JSON); a tile table as its checked content (corners,
tile size, µm/px, classes and scores), so that only the rows of the slide asked for count in a
table holding many slides.
"""

from __future__ import annotations

import hashlib
import json

import numpy as np

__all__ = ["file_digest", "json_digest", "table_digest"]

_CHUNK = 1 << 20


def file_digest(path) -> str:
    """``"sha256:<hex>"`` of a file's bytes."""
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(_CHUNK), b""):
            h.update(block)
    return "sha256:" + h.hexdigest()


def json_digest(obj) -> str:
    """``"sha256:<hex>"`` of decoded JSON written canonically (sorted keys, no spaces)."""
    text = json.dumps(obj, sort_keys=True, separators=(",", ":"), default=str)
    return "sha256:" + hashlib.sha256(text.encode("utf-8")).hexdigest()


def table_digest(checked) -> str:
    """``"sha256:<hex>"`` of a checked :class:`~tilewright.regions.tiletable.TileTable`'s content."""
    h = hashlib.sha256()
    h.update(json.dumps([int(checked.tile), float(checked.mpp), list(checked.classes), bool(checked.soft)]).encode())
    h.update(np.ascontiguousarray(checked.yx, dtype="<i8").tobytes())
    h.update(np.ascontiguousarray(checked.scores, dtype="<f4").tobytes())
    return "sha256:" + h.hexdigest()
