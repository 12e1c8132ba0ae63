"""How stored tiles are compressed: the ``compression`` / ``quality`` settings and their zarr codecs.

| name | kind | zarr v3 chunk chain |
|---|---|---|
| ``"lz4"`` (default) | lossless | ``bytes`` + Blosc lz4 level 1, bit shuffle |
| ``"zstd"`` | lossless | ``bytes`` + Blosc zstd level 1, bit shuffle |
| ``"zlib"`` | lossless | ``bytes`` + gzip level 5 |
| ``"none"`` | lossless | ``bytes`` |
| ``"webp"`` | lossless | ``tilewright.webp`` (lossless WebP, fastest setting) |
| ``"jpeg"`` | lossy | ``tilewright.jpeg`` (``quality`` 1-100, default 90; 4:4:4, no chroma subsampling) |

Figures behind the choices are in ``benchmarks/PERFORMANCE.md`` (``benchmarks/compression.py``).
Lossless codecs give the same pixels, so a cohort may mix them; a lossy codec changes the tiles,
so its name and quality are part of what a store contains (:func:`tile_identity`).
"""

from __future__ import annotations

from tilewright.errors import StoreError

__all__ = ["COMPRESSIONS", "LOSSY", "compressor", "tile_codecs", "tile_identity", "describe"]

COMPRESSIONS = ("lz4", "zstd", "zlib", "none", "webp", "jpeg")
LOSSY = ("jpeg",)
DEFAULT_QUALITY = 90


def compressor(name: str):
    """zarr v3 bytes-to-bytes codec for a lossless byte codec name ("lz4", "zstd", "zlib", "none").

    "lz4" (the default) is Blosc-lz4 with bit shuffling: on H&E tiles about 2.8x faster than
    "zstd" both to encode (written once) and to decode (read every training epoch), for about 12 %
    more bytes. Its level 1 encodes about 17 % faster than level 5 for 1.5 % more bytes and
    decodes at the same speed (levels 1-9 span 87.6-83.6 % of the raw bytes on H&E tiles; without
    the bit shuffle lz4 keeps 97-98 %, so it saves nothing). "zstd" is Blosc-zstd level 1 with bit shuffling, for when disk space matters
    more: within 2 % of the bytes of level 3 at about a third of its CPU time. (Measured by
    ``benchmarks/compression.py``.)
    """
    from zarr.codecs import BloscCodec, GzipCodec

    name = (name or "none").lower()
    if name == "zstd":
        return BloscCodec(cname="zstd", clevel=1, shuffle="bitshuffle")
    if name == "lz4":
        return BloscCodec(cname="lz4", clevel=1, shuffle="bitshuffle")
    if name == "zlib":
        return GzipCodec(level=5)
    if name == "none":
        return None
    raise StoreError(f"unknown compression {name!r}; use {', '.join(COMPRESSIONS)}")


def tile_codecs(name: str, quality: int | None = None) -> dict:
    """``serializer`` and ``compressors`` for ``zarr.create_array`` of a tile array (one tile a chunk).

    Parameters
    ----------
    name : str
        One of :data:`COMPRESSIONS`.
    quality : int, optional
        JPEG quality 1-100 (default 90); ignored by the other codecs.
    """
    from zarr.codecs import BytesCodec

    name = (name or "none").lower()
    if name == "jpeg":
        from tilewright.store.image_codecs import JpegCodec

        try:
            return {"serializer": JpegCodec(quality=DEFAULT_QUALITY if quality is None else quality),
                    "compressors": None}
        except ValueError as exc:
            raise StoreError(str(exc)) from None
    if name == "webp":
        from tilewright.store.image_codecs import WebpCodec

        return {"serializer": WebpCodec(), "compressors": None}
    return {"serializer": BytesCodec(), "compressors": compressor(name)}


def describe(name: str, quality: int | None = None) -> dict:
    """What a store records about its tile codec: ``{"codec", "lossless"[, "quality"]}``."""
    name = (name or "none").lower()
    out = {"codec": name, "lossless": name not in LOSSY}
    if name in LOSSY:
        out["quality"] = int(DEFAULT_QUALITY if quality is None else quality)
    return out


def tile_identity(config: dict) -> str:
    """The part of a configuration's compression that changes tile pixels, as text.

    ``"lossless"`` for every lossless codec (the same pixels whichever codec), ``"jpeg quality
    90"`` for a lossy one; two stores whose identities differ hold different tiles.
    """
    name = str(config.get("compression") or "lz4").lower()
    if name not in LOSSY:
        return "lossless"
    q = config.get("quality")
    return f"{name} quality {int(DEFAULT_QUALITY if q is None else q)}"
