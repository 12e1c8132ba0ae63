"""Reading a region input given either as data or as a file path, with the path in every error."""

from __future__ import annotations

import os

from tilewright.errors import RegionError

__all__ = ["parse_source"]


def parse_source(source, load, parse):
    """``parse(data, path)`` of ``source``, loading it with ``load(path)`` when it is a path.

    A :class:`RegionError` raised without a path gets the file's path, so the user learns which
    file to fix.
    """
    path = None
    data = source
    if isinstance(source, (str, os.PathLike)):
        path = os.fspath(source)
        data = load(path)
    try:
        return parse(data, path)
    except RegionError as exc:
        if exc.path is None and path is not None:
            raise RegionError(exc.reason, path) from None
        raise
