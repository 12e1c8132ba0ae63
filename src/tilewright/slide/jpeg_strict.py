"""Decoding a JPEG tile with libjpeg's warnings treated as errors, in the decode that reads it.

A baseline JPEG has no checksum. A damaged byte usually desynchronizes the Huffman decoder, and
libjpeg(-turbo) reports what follows only as *warnings* (T.81 F.2.2: a code that is no valid
Huffman code; a marker met before the last MCU, "premature end of data segment"; entropy-coded
bytes left before the EOI marker, "extraneous bytes before marker") while it returns garbage
pixels. Decoders that discard warnings (imagecodecs, OpenCV) cannot tell; OpenSlide fails the
read on them. The TurboJPEG API stops on the first warning when asked (``TJFLAG_STOPONWARNING``),
which simplejpeg exposes as ``strict=True``: one decode gives both the pixels and the verdict.

TIFF JPEG tiles (TIFF Technical Note 2) are often abbreviated streams whose tables live in the
``JPEGTables`` tag; :func:`complete_stream` splices them into one interchange stream. libjpeg infers
the colour space of the compressed data from its markers (JFIF APP0, Adobe APP14 and its transform
flag, component identifiers), whereas TIFF readers take it from the Photometric tag; so a tile
decoded here is trusted only where the two were seen to agree (see :func:`colour_signature`).

A strict failure is not proof of damage (an unusual but harmless warning also stops the decode);
the caller settles every failure with its other checks, so a failure costs time, never a false
alarm.

References
----------
.. [1] ITU-T Recommendation T.81 (1992) | ISO/IEC 10918-1, Annex B (syntax, markers) and F.2.2
   (decoding of Huffman codes).
.. [2] Adobe, TIFF Technical Note 2: Replacement TIFF/JPEG specification (1995).
.. [3] libjpeg-turbo, TurboJPEG API documentation: ``TJFLAG_STOPONWARNING``.
"""

from __future__ import annotations

import numpy as np

from tilewright.slide.jpeg_sentinel import marker_segments

__all__ = ["agrees", "available", "colour_signature", "complete_stream", "decode_strict"]

try:  # an install without it falls back to the slower checks of the tiff backend
    import simplejpeg as _simplejpeg
except ImportError:  # pragma: no cover - simplejpeg is a dependency
    _simplejpeg = None


def available() -> bool:
    """Whether strict decoding is possible here (simplejpeg is importable)."""
    return _simplejpeg is not None


def complete_stream(data, tables) -> bytes:
    """An interchange JPEG stream: the abbreviated tile ``data`` with ``tables`` spliced in.

    ``tables`` (TIFF ``JPEGTables``: SOI, tables, EOI) lose their EOI and ``data`` its SOI;
    without tables ``data`` is returned as bytes.
    """
    if not tables:
        return bytes(data)
    return b"".join((memoryview(tables)[:-2], memoryview(data)[2:]))  # one copy of the tile


def colour_signature(stream: bytes) -> tuple | None:
    """What libjpeg infers the colour space from, in the header of an interchange stream.

    Returns ``(jfif, adobe_transform, components)``: whether a JFIF APP0 segment is present, the
    transform flag of an Adobe APP14 segment (None without one) and the ``(id, h, v)`` of each
    frame component; None if the header cannot be parsed. Streams with equal signatures are
    interpreted alike by libjpeg, so one comparison with the TIFF reader's decode covers them.
    """
    data = memoryview(stream)
    jfif, adobe, comps = False, None, None
    for marker, start, stop in marker_segments(stream):
        body = data[start:stop]
        if marker == 0xE0 and bytes(body[:5]) == b"JFIF\0":
            jfif = True
        elif marker == 0xEE and bytes(body[:5]) == b"Adobe" and len(body) >= 12:
            adobe = body[11]
        elif marker in (0xC0, 0xC1, 0xC2) and len(body) >= 6:
            k = body[5]
            comps = tuple((body[6 + 3 * j], body[7 + 3 * j] >> 4, body[7 + 3 * j] & 15) for j in range(k)
                          if 8 + 3 * j < len(body))
        elif marker == 0xDA:
            return (jfif, adobe, comps) if comps else None
    return None


def decode_strict(stream: bytes, out: np.ndarray) -> np.ndarray | None:
    """Decode an interchange stream to RGB into ``out``, or None on any warning or error.

    Parameters
    ----------
    stream : bytes
        See :func:`complete_stream`.
    out : ndarray
        C-contiguous uint8 buffer of exactly the image's (height, width, 3).

    Returns
    -------
    ndarray or None
        ``out`` filled (the pixels libjpeg-turbo decodes, fancy upsampling and the accurate
        integer IDCT, as a plain decode), or None when libjpeg raised a warning or an error or the
        image is not ``out``'s size.
    """
    try:
        img = _simplejpeg.decode_jpeg(stream, colorspace="RGB", strict=True, buffer=out)
    except (ValueError, TypeError, OSError):
        return None
    if img.shape != out.shape:
        return None
    return img


def agrees(cache: dict, stream: bytes, header: bytes | None, shape, plain, limit: int = 1024) -> bool:
    """Whether strict decodes of streams with ``stream``'s colour signature equal the reader's own.

    libjpeg infers the colour space from markers the reader may interpret otherwise (see the
    module notes), so the first tile of each :func:`colour_signature` that decodes cleanly is
    decoded both ways and compared; the verdict is kept in ``cache`` under the signature and under
    the tile's ``header`` bytes (tiles sharing a header then skip parsing it; the cache is emptied
    when it holds ``limit`` entries, for levels whose tiles each carry their own tables).

    Parameters
    ----------
    cache : dict
        The level's verdicts.
    stream : bytes
        The tile's interchange stream (:func:`complete_stream`).
    header : bytes or None
        The tile's header bytes, when known.
    shape : (int, int)
        The tile's (height, width).
    plain : callable
        ``plain()`` returns the reader's own decode of the tile (or None).

    Returns
    -------
    bool
        False also while undecided (the tile may be damaged: the next clean tile decides).
    """
    ok = cache.get(header) if header is not None else None
    if ok is not None:
        return ok
    sig = colour_signature(stream)
    if sig is None:
        return False
    ok = cache.get(sig)
    if ok is None:
        got = decode_strict(stream, np.empty((*shape, 3), np.uint8))
        if got is None:
            return False
        want = plain()
        ok = cache[sig] = want is not None and np.array_equal(want, got)
    if header is not None:
        if len(cache) >= limit:
            cache.clear()
        cache[header] = ok
    return ok
