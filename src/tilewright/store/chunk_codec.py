"""One tile's chunk bytes, encoded and decoded without zarr's codec pipeline.

A tile store's ``tiles`` array keeps one tile a chunk inside ``sharding_indexed`` shards. The
chunk chain is one of the chains the tile writer creates: ``bytes`` alone or followed by one
bytes-to-bytes codec (``blosc``, ``zstd``, ``gzip``), or one of tilewright's image codecs
(``tilewright.jpeg``, ``tilewright.webp``) alone. :meth:`ChunkCodec.for_chain` builds the encoder
and decoder of such a chain from its zarr v3 metadata; it returns None for any other chain, and
the caller then lets zarr read or write. The shard writer and the shard reader share it, so the
bytes they handle are exactly those zarr's own codecs would.
"""

from __future__ import annotations

from typing import Callable

import numpy as np

__all__ = ["ChunkCodec", "numcodec"]

_SHUFFLE = {"noshuffle": 0, "shuffle": 1, "bitshuffle": 2}


def numcodec(spec: dict):
    """The numcodecs codec zarr uses for a zarr v3 bytes-to-bytes codec spec (KeyError if none)."""
    import numcodecs

    name, cfg = spec["name"], dict(spec.get("configuration") or {})
    if name == "blosc":
        return numcodecs.Blosc(cname=cfg["cname"], clevel=int(cfg["clevel"]),
                               shuffle=_SHUFFLE[cfg["shuffle"]], blocksize=int(cfg.get("blocksize", 0)),
                               typesize=int(cfg.get("typesize", 1)))
    if name == "zstd":
        return numcodecs.Zstd(level=int(cfg.get("level", 0)), checksum=bool(cfg.get("checksum", False)))
    if name == "gzip":
        return numcodecs.GZip(level=int(cfg.get("level", 5)))
    raise KeyError(name)


def _blosc_into(data, out: np.ndarray) -> np.ndarray:
    """Decompress a Blosc chunk straight into ``out`` (its header must declare ``out``'s size)."""
    import numcodecs.blosc

    size = int.from_bytes(bytes(memoryview(data)[4:8]), "little")  # Blosc header: nbytes, uint32 LE
    if size != out.nbytes:
        raise ValueError(f"Blosc chunk of {size} bytes, expected {out.nbytes}")
    numcodecs.blosc.decompress(data, out)
    return out


def _copy_decoded(codec):
    """``decode_into`` for a numcodecs codec without a size check of its own: decode, check, copy."""
    def run(data, out: np.ndarray) -> np.ndarray:
        return _copy_into(codec.decode(data), out)
    return run


class ChunkCodec:
    """Encoder and decoder of one tile's chunk.

    Attributes
    ----------
    name : str
        Short name of the chain (``"blosc"``, ``"zstd"``, ``"gzip"``, ``"raw"``, ``"tilewright.jpeg"``...).
    encode : callable
        ``encode(tile) -> bytes`` for a C-contiguous (T, T, 3) uint8 tile.
    decode_into : callable
        ``decode_into(data, out)``: decodes chunk bytes into the (T, T, 3) uint8 array ``out``.
    raw : bool
        True when the chunk is the tile's bytes as they are (no codec).
    """

    def __init__(self, name: str, encode: Callable, decode_into: Callable, raw: bool = False):
        self.name = name
        self.encode = encode
        self.decode_into = decode_into
        self.raw = raw

    @classmethod
    def for_chain(cls, chain: list[dict]) -> "ChunkCodec | None":
        """The codec of a chunk chain (zarr v3 codec dicts in zarr's order, the array-to-bytes codec
        first), or None when the chain is not one the tile writer creates."""
        try:
            names = [c["name"] for c in chain]
            if len(chain) == 1 and names[0] in ("tilewright.jpeg", "tilewright.webp"):
                from tilewright.store.image_codecs import JpegCodec, WebpCodec

                codec = (JpegCodec if names[0] == "tilewright.jpeg" else WebpCodec).from_dict(chain[0])
                return cls(names[0], codec.encode_tile, codec.decode_into)
            if not chain or names[0] != "bytes" or len(chain) > 2:
                return None
            if len(chain) == 1:
                return cls("raw", lambda tile: np.ascontiguousarray(tile).tobytes(), _copy_into, raw=True)
            inner = numcodec(chain[1])
        except (KeyError, TypeError, ValueError, ImportError):
            return None
        decode = _blosc_into if names[1] == "blosc" else _copy_decoded(inner)
        return cls(names[1], lambda tile: bytes(inner.encode(np.ascontiguousarray(tile))), decode)


def _copy_into(data, out: np.ndarray) -> np.ndarray:
    src = np.frombuffer(data, np.uint8)
    if src.size != out.size:
        raise ValueError(f"raw chunk of {src.size} bytes, expected {out.size}")
    out.reshape(-1)[...] = src
    return out
