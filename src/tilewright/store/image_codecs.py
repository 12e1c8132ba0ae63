"""Image codecs for stored tiles, as zarr v3 codecs any zarr-python reads once tilewright is installed.

Two array-to-bytes codecs (they take the place of the ``bytes`` codec inside the shard's chunk
chain; a chunk is one tile, ``(1, T, T, 3)`` uint8):

``tilewright.jpeg``
    Lossy baseline JPEG (ITU-T T.81) through libjpeg-turbo (simplejpeg), ``quality`` 1-100 and
    chroma ``subsampling`` "444" (default) / "422" / "420" recorded in the codec configuration.
    On the demo tiles quality 90 keeps about 14 % of the raw bytes at a PSNR of about 42 dB
    against the lossless tile. Chroma is kept at full resolution: the stain colour is what the
    tiles were normalized for, and 4:2:0 (11 % of the bytes) stays below 40 dB whatever the
    quality (``benchmarks/compression.py``).
``tilewright.webp``
    Lossless WebP (libwebp through imagecodecs) at its fastest setting (``quality`` 0, ``method``
    0): about half the raw bytes on the demo tiles, pixels exact. Chosen over lossless JPEG XL by
    measurement: equal bytes at their fast settings, and WebP decodes about twice as fast, which
    a training loop pays every epoch (JPEG XL encodes faster, paid once).

Both are registered through the ``zarr.codecs`` entry point in tilewright's package metadata, so
``zarr.open_group(...)`` reads a store written with them in any process where tilewright is
installed, without importing tilewright first.

References
----------
.. [1] ITU-T Recommendation T.81 | ISO/IEC 10918-1 (1992), "Information technology - Digital
   compression and coding of continuous-tone still images".
.. [2] J. Zern, P. Massimino and J. Alakuijala (2024), "WebP Image Format", RFC 9649 (section 5:
   the lossless bitstream); from memory.
.. [3] Zarr specification v3, "Codecs" (array-to-bytes codecs), version 3.0.
"""

from __future__ import annotations

import asyncio
from dataclasses import dataclass

import numpy as np
from zarr.abc.codec import ArrayBytesCodec

__all__ = ["JpegCodec", "WebpCodec", "JPEG_NAME", "WEBP_NAME", "jpeg_encode", "jpeg_decode_into",
           "webp_encode", "webp_decode_into"]

JPEG_NAME = "tilewright.jpeg"
WEBP_NAME = "tilewright.webp"
_SUBSAMPLING = ("444", "422", "420")


def jpeg_encode(tile: np.ndarray, quality: int, subsampling: str) -> bytes:
    """One (T, T, 3) uint8 tile as baseline JPEG (JFIF, YCbCr)."""
    import simplejpeg

    return simplejpeg.encode_jpeg(np.ascontiguousarray(tile), quality=int(quality), colorspace="RGB",
                                  colorsubsampling=subsampling)


def jpeg_decode_into(data, out: np.ndarray) -> np.ndarray:
    """Decode a JPEG chunk into ``out`` ((T, T, 3) uint8, C-contiguous). Damaged data raises
    ValueError (libjpeg warnings count as errors)."""
    import simplejpeg

    img = simplejpeg.decode_jpeg(data, colorspace="RGB", buffer=out, strict=True)
    if img.shape != out.shape:
        raise ValueError(f"JPEG chunk of shape {img.shape}, expected {out.shape}")
    return out


def webp_encode(tile: np.ndarray, quality: int = 0, method: int = 0) -> bytes:
    """One (T, T, 3) uint8 tile as lossless WebP."""
    import imagecodecs

    return bytes(imagecodecs.webp_encode(np.ascontiguousarray(tile), level=int(quality), lossless=True,
                                         method=int(method)))


def webp_decode_into(data, out: np.ndarray) -> np.ndarray:
    """Decode a lossless WebP chunk into ``out`` ((T, T, 3) uint8, C-contiguous)."""
    import imagecodecs

    img = imagecodecs.webp_decode(data, hasalpha=False, out=out)
    if img.shape != out.shape:
        raise ValueError(f"WebP chunk of shape {img.shape}, expected {out.shape}")
    return out


def _tile_shape(shape) -> tuple[int, int, int]:
    """(T, T, 3) of a chunk shape (1, ..., 1, T, T, 3)."""
    shape = tuple(int(s) for s in shape)
    if len(shape) < 3 or shape[-1] != 3 or any(s != 1 for s in shape[:-3]):
        raise ValueError(f"an image codec needs chunks of one RGB tile (1, T, T, 3), got {shape}")
    return shape[-3:]


class _TileCodec(ArrayBytesCodec):
    """Common part: one RGB uint8 tile a chunk, encoded and decoded whole."""

    is_fixed_size = False

    def validate(self, *, shape, dtype, chunk_grid) -> None:
        if np.dtype(dtype.to_native_dtype()) != np.uint8:
            raise ValueError(f"{self.to_dict()['name']} stores uint8 tiles, not {dtype}")
        chunk_shape = getattr(chunk_grid, "chunk_shape", None)
        if chunk_shape is not None:
            _tile_shape(chunk_shape)

    def compute_encoded_size(self, input_byte_length: int, chunk_spec) -> int:
        raise NotImplementedError  # variable-size output

    def encode_tile(self, tile: np.ndarray) -> bytes:  # pragma: no cover - overridden
        raise NotImplementedError

    def decode_into(self, data, out: np.ndarray) -> np.ndarray:  # pragma: no cover - overridden
        raise NotImplementedError

    def _encode_sync(self, chunk_array, chunk_spec):
        tile = chunk_array.as_numpy_array().reshape(_tile_shape(chunk_spec.shape))
        return chunk_spec.prototype.buffer.from_bytes(self.encode_tile(tile))

    def _decode_sync(self, chunk_bytes, chunk_spec):
        out = np.empty(_tile_shape(chunk_spec.shape), np.uint8)
        self.decode_into(chunk_bytes.as_numpy_array(), out)
        return chunk_spec.prototype.nd_buffer.from_ndarray_like(out.reshape(chunk_spec.shape))

    async def _encode_single(self, chunk_array, chunk_spec):
        return await asyncio.to_thread(self._encode_sync, chunk_array, chunk_spec)

    async def _decode_single(self, chunk_bytes, chunk_spec):
        return await asyncio.to_thread(self._decode_sync, chunk_bytes, chunk_spec)


def _config(data: dict, name: str) -> dict:
    if not isinstance(data, dict) or data.get("name") != name:
        raise ValueError(f"expected a {name!r} codec, got {data!r}")
    return dict(data.get("configuration") or {})


@dataclass(frozen=True)
class JpegCodec(_TileCodec):
    """Lossy JPEG of one RGB tile a chunk (zarr v3 codec ``tilewright.jpeg``).

    Parameters
    ----------
    quality : int
        libjpeg quality, 1-100 (default 90).
    subsampling : {"444", "422", "420"}
        Chroma subsampling (default "444": none).

    References
    ----------
    .. [1] ITU-T Recommendation T.81 | ISO/IEC 10918-1 (1992).
    """

    quality: int = 90
    subsampling: str = "444"

    def __post_init__(self):
        q = self.quality
        if isinstance(q, bool) or not isinstance(q, (int, np.integer)) or not 1 <= int(q) <= 100:
            raise ValueError(f"JPEG quality must be a whole number from 1 to 100, got {q!r}")
        object.__setattr__(self, "quality", int(q))
        if self.subsampling not in _SUBSAMPLING:
            raise ValueError(f"JPEG subsampling must be one of {', '.join(_SUBSAMPLING)}, got {self.subsampling!r}")

    @classmethod
    def from_dict(cls, data: dict) -> "JpegCodec":
        return cls(**_config(data, JPEG_NAME))

    def to_dict(self) -> dict:
        return {"name": JPEG_NAME, "configuration": {"quality": self.quality, "subsampling": self.subsampling}}

    def encode_tile(self, tile: np.ndarray) -> bytes:
        return jpeg_encode(tile, self.quality, self.subsampling)

    def decode_into(self, data, out: np.ndarray) -> np.ndarray:
        return jpeg_decode_into(data, out)


@dataclass(frozen=True)
class WebpCodec(_TileCodec):
    """Lossless WebP of one RGB tile a chunk (zarr v3 codec ``tilewright.webp``).

    Parameters
    ----------
    quality : int
        libwebp's effort for lossless coding, 0-100 (default 0, the fastest).
    method : int
        libwebp's method, 0-6 (default 0, the fastest).

    References
    ----------
    .. [1] J. Zern, P. Massimino and J. Alakuijala (2024), "WebP Image Format", RFC 9649.
    """

    quality: int = 0
    method: int = 0

    def __post_init__(self):
        for name, hi in (("quality", 100), ("method", 6)):
            v = getattr(self, name)
            if isinstance(v, bool) or not isinstance(v, (int, np.integer)) or not 0 <= int(v) <= hi:
                raise ValueError(f"WebP {name} must be a whole number from 0 to {hi}, got {v!r}")
            object.__setattr__(self, name, int(v))

    @classmethod
    def from_dict(cls, data: dict) -> "WebpCodec":
        cfg = _config(data, WEBP_NAME)
        if cfg.pop("lossless", True) is not True:
            raise ValueError("only lossless WebP is a tilewright codec")
        return cls(**cfg)

    def to_dict(self) -> dict:
        return {"name": WEBP_NAME, "configuration": {"lossless": True, "quality": self.quality, "method": self.method}}

    def encode_tile(self, tile: np.ndarray) -> bytes:
        return webp_encode(tile, self.quality, self.method)

    def decode_into(self, data, out: np.ndarray) -> np.ndarray:
        return webp_decode_into(data, out)
