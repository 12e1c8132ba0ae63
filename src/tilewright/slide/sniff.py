"""First look at a slide path: does it exist, is it empty, is it an image at all.

Done before any decoder touches the file so that the common mistakes (a wrong path, a
zero-byte copy, a text file named ``.tif``) get a clear typed error instead of a decoder
message.
"""

from __future__ import annotations

import os

from tilewright.errors import EmptyFileError, NotAnImageError, SlideNotFoundError

__all__ = ["sniff", "TIFF_SUFFIXES", "MAX_SIDE", "MAX_PIXELS"]

#: Suffixes whose files must start with a TIFF header.
TIFF_SUFFIXES = (".tif", ".tiff", ".svs", ".ndpi", ".scn", ".bif", ".ome.tif", ".ome.tiff",
                 ".tf2", ".tf8", ".btf")

#: Declared level-0 sizes above these are refused before allocating anything.
MAX_SIDE = 2**20
MAX_PIXELS = 1e11

_MAGIC = (
    (b"II*\x00", "tiff"), (b"MM\x00*", "tiff"), (b"II+\x00", "tiff"), (b"MM\x00+", "tiff"),
    (b"\xff\xd8\xff", "jpeg"), (b"\x89PNG", "png"), (b"\x00\x00\x00\x0cjP  ", "jp2"),
    (b"BM", "bmp"),
)


def sniff(path: str | os.PathLike) -> str:
    """Classify a slide file by its first bytes.

    Parameters
    ----------
    path : str or os.PathLike
        A local path or an object-store URL.

    Returns
    -------
    str
        ``"tiff"``, ``"jpeg"``, ``"png"``, ``"jp2"``, ``"bmp"``, ``"dicom"`` or ``"other"``
        (formats OpenSlide reads from text index files, e.g. MIRAX ``.mrxs``, are "other").

    Raises
    ------
    SlideNotFoundError
        The path does not exist (or is a folder).
    EmptyFileError
        The file has zero bytes.
    NotAnImageError
        A TIFF-family suffix on a file that does not start with a TIFF header, or a file
        whose first bytes are plain text with no image format of its own.
    """
    from tilewright.location.url import is_url

    if is_url(path):
        p = str(path)
        head = _url_head(p)
    else:
        p = os.fspath(path)
        head = _local_head(p)
    kind = "other"
    for magic, name in _MAGIC:
        if head.startswith(magic):
            kind = name
            break
    if kind == "other" and len(head) >= 132 and head[128:132] == b"DICM":
        kind = "dicom"
    lower = p.lower()
    if kind != "tiff" and lower.endswith(TIFF_SUFFIXES):
        raise NotAnImageError(
            "named like a TIFF but does not start with a TIFF header; it is not an image "
            "(or was saved under the wrong name)", p)
    if kind == "other" and _looks_like_text(head) and not lower.endswith((".mrxs", ".vms",
                                                                          ".vmu")):
        raise NotAnImageError("the file holds text, not image data", p)
    return kind


def _local_head(p: str) -> bytes:
    if not os.path.exists(p):
        raise SlideNotFoundError("no such file; check the path (and the folder you run in)", p)
    if os.path.isdir(p):
        raise SlideNotFoundError("is a folder, not a slide file; give the slide file itself", p)
    if os.path.getsize(p) == 0:
        raise EmptyFileError("the file is empty (0 bytes); copy the slide again", p)
    with open(p, "rb") as fh:
        return fh.read(512)


def _url_head(url: str) -> bytes:
    """The first 512 bytes of an object (a HEAD request for its size, then one range request)."""
    from tilewright.errors import ObjectNotFoundError
    from tilewright.location import objects

    try:
        size = objects.head(url)["size"]
    except ObjectNotFoundError:
        raise SlideNotFoundError("no such object; check the URL (bucket, prefix and name)", url) from None
    if size == 0:
        raise EmptyFileError("the object is empty (0 bytes); upload the slide again", url)
    return objects.get_range(url, 0, min(512, size))


def _looks_like_text(head: bytes) -> bool:
    if not head:
        return False
    try:
        head.decode("utf-8")
    except UnicodeDecodeError:
        return False
    return all(b >= 32 or b in (9, 10, 13) for b in head)
