"""Tile codecs: bytes a tile, fidelity against the lossless tile, encode and decode speed, one thread.

Tiles: the demo cohort's (``make demo``: 0.5 µm/px, 256 px, Macenko-normalized; generated once
and cached in ``bench-out/``, see ``fixtures.demo_tiles``). Every codec is encoded and decoded
exactly as a store does it (the chunk chain of ``tilewright.store.chunk_codec``), one tile a
call, one thread. PSNR and SSIM (scikit-image ``peak_signal_noise_ratio``,
``structural_similarity`` with ``channel_axis=2``, ``data_range=255``) compare each decoded tile
with the lossless one; means over the tiles. Candidates that were measured but not chosen are
marked.

Usage: ``.venv/bin/python benchmarks/compression.py [--all]`` (``--all``: also the Blosc and zstd
variants behind the lossless default)
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from pathlib import Path

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")
sys.path.insert(0, str(Path(__file__).resolve().parent))

import numpy as np  # noqa: E402


def _store_chain(name, quality=None):
    """The chunk codec a store made with ``compression=name`` uses."""
    from tilewright.store.chunk_codec import ChunkCodec
    from tilewright.store.compression import tile_codecs

    codecs = tile_codecs(name, quality)
    chain = [codecs["serializer"].to_dict()] + ([codecs["compressors"].to_dict()] if codecs["compressors"] else [])
    return ChunkCodec.for_chain(chain)


def _numcodec(codec):
    from tilewright.store.chunk_codec import ChunkCodec

    return ChunkCodec("numcodecs", lambda t: bytes(codec.encode(np.ascontiguousarray(t))),
                      lambda data, out: out.reshape(-1).__setitem__(slice(None), np.frombuffer(codec.decode(data), np.uint8)))


def _jxl(effort):
    import imagecodecs

    from tilewright.store.chunk_codec import ChunkCodec

    return ChunkCodec("jpegxl", lambda t: bytes(imagecodecs.jpegxl_encode(t, lossless=True, effort=effort, numthreads=1)),
                      lambda data, out: imagecodecs.jpegxl_decode(data, numthreads=1, out=out))


def _webp(quality, method):
    from tilewright.store.chunk_codec import ChunkCodec
    from tilewright.store.image_codecs import webp_decode_into, webp_encode

    return ChunkCodec("webp", lambda t: webp_encode(t, quality, method), webp_decode_into)


def _jpeg(quality, subsampling):
    from tilewright.store.chunk_codec import ChunkCodec
    from tilewright.store.image_codecs import jpeg_decode_into, jpeg_encode

    return ChunkCodec("jpeg", lambda t: jpeg_encode(t, quality, subsampling), jpeg_decode_into)


def store_codecs():
    """(label, ChunkCodec, chosen) of the settings ``compression`` offers."""
    return [('"lz4" (default): Blosc lz4 1, bit shuffle', _store_chain("lz4"), True),
            ('"zstd": Blosc zstd 1, bit shuffle', _store_chain("zstd"), True),
            ('"zlib": gzip 5', _store_chain("zlib"), True),
            ('"webp": lossless WebP, quality 0, method 0', _store_chain("webp"), True),
            ('"jpeg", quality 90 (default), 4:4:4', _store_chain("jpeg", 90), True),
            ('"jpeg", quality 80, 4:4:4', _store_chain("jpeg", 80), True),
            ('"jpeg", quality 95, 4:4:4', _store_chain("jpeg", 95), True)]


def candidates():
    """Settings measured to choose between, not offered."""
    return [("JPEG XL lossless, effort 1", _jxl(1), False), ("JPEG XL lossless, effort 3", _jxl(3), False),
            ("WebP lossless, quality 25, method 1", _webp(25, 1), False),
            ("WebP lossless, method 4 (libwebp default)", _webp(75, 4), False),
            ("JPEG quality 90, 4:2:0", _jpeg(90, "420"), False),
            ("JPEG quality 95, 4:2:0", _jpeg(95, "420"), False),
            ("JPEG quality 90, 4:2:2", _jpeg(90, "422"), False)]


def blosc_variants():
    import numcodecs

    out = []
    for cname, level in (("zstd", 1), ("zstd", 3), ("zstd", 5), ("lz4", 1), ("lz4", 5), ("lz4", 9)):
        for shuffle, sname in ((0, "noshuffle"), (2, "bitshuffle")):
            out.append((f"Blosc {cname} {level} {sname}", _numcodec(numcodecs.Blosc(cname=cname, clevel=level,
                                                                                  shuffle=shuffle)), False))
    out.append(("zstd 3 (no Blosc)", _numcodec(numcodecs.Zstd(level=3)), False))
    return out


def measure(tiles, codecs, ssim_tiles=64):
    """One dict a codec: bytes, % raw, psnr, ssim, encode and decode tiles/s (CPU time, one thread)."""
    import numcodecs.blosc
    from skimage.metrics import peak_signal_noise_ratio, structural_similarity

    numcodecs.blosc.use_threads = False
    raw = tiles[0].nbytes
    rows = []
    for label, codec, chosen in codecs:
        codec.encode(tiles[0])
        t0 = time.process_time()
        enc = [codec.encode(t) for t in tiles]
        te = time.process_time() - t0
        dec = np.empty_like(tiles)
        t0 = time.process_time()
        for e, out in zip(enc, dec):
            codec.decode_into(e, out)
        td = time.process_time() - t0
        exact = np.array_equal(dec, tiles)
        psnr = float("inf") if exact else float(np.mean(
            [peak_signal_noise_ratio(a, b, data_range=255) for a, b in zip(tiles, dec)]))
        ssim = 1.0 if exact else float(np.mean(
            [structural_similarity(a, b, channel_axis=2, data_range=255) for a, b in zip(tiles[:ssim_tiles], dec)]))
        size = float(np.mean([len(e) for e in enc]))
        rows.append(dict(label=label, chosen=chosen, bytes=size, pct=100 * size / raw, psnr=psnr, ssim=ssim,
                         encode=len(tiles) / te, decode=len(tiles) / td))
    return rows


def print_rows(rows, n_tiles):
    print(f"codec table: {n_tiles} demo tiles of 256 px (196,608 raw bytes); one thread, CPU time")
    print(f"{'codec':<46}{'bytes/tile':>11}{'% raw':>7}{'PSNR dB':>9}{'SSIM':>8}{'enc t/s':>9}{'dec t/s':>9}")
    for r in rows:
        psnr = "lossless" if r["psnr"] == float("inf") else f"{r['psnr']:.1f}"
        mark = "" if r["chosen"] else " (candidate)"
        print(f"{r['label'] + mark:<46}{r['bytes']:>11,.0f}{r['pct']:>7.1f}{psnr:>9}{r['ssim']:>8.4f}"
              f"{r['encode']:>9.0f}{r['decode']:>9.0f}")


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--all", action="store_true", help="also the Blosc/zstd variants behind the default")
    args = ap.parse_args(argv)
    from fixtures import demo_tiles

    tiles = demo_tiles()
    codecs = store_codecs() + candidates() + (blosc_variants() if args.all else [])
    print_rows(measure(tiles, codecs), len(tiles))
    jpeg = measure(tiles, [c for c in store_codecs() if "quality 90" in c[0]])[0]
    print(f'aim: "jpeg" quality 90 <= 15 % of raw at PSNR >= 40 dB: {jpeg["pct"]:.1f} %, {jpeg["psnr"]:.1f} dB '
          f'({"met" if jpeg["pct"] <= 15 and jpeg["psnr"] >= 40 else "MISSED"})')
    return 0


if __name__ == "__main__":
    sys.exit(main())
