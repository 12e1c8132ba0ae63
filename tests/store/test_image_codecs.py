"""The jpeg and webp tile codecs: standard files, read by plain zarr-python through the entry point."""

import io
import subprocess
import sys
import textwrap

import numpy as np
import pytest
import zarr
from PIL import Image
from skimage.metrics import peak_signal_noise_ratio

from tilewright.errors import ConfigError, StoreError
from tilewright.store.image_codecs import JpegCodec, WebpCodec
from tilewright.store.reader import open_store
from tilewright.store.shards import ShardEncoder
from tilewright.store.writer import StoreWriter

from .fakes import smooth_tiles as _tiles
from .fakes import write_store as _write


def _chunk_bytes(path, shard=0):
    """Chunks of one shard file, cut by its index (zarr v3 sharding: uint64 offset/length + CRC-32C)."""
    raw = (path / "tiles" / "c" / str(shard) / "0" / "0" / "0").read_bytes()
    index = np.frombuffer(raw[-(16 * 4 + 4):-4], "<u8").reshape(-1, 2)
    return [raw[o:o + n] for o, n in index if o != 2**64 - 1]


def test_chunks_are_standard_jpeg_and_webp_files(tmp_path):
    tiles = _tiles(4, t=48)
    jpeg = _write(tmp_path / "j.zarr", tiles, compression="jpeg", quality=90)
    webp = _write(tmp_path / "w.zarr", tiles, compression="webp")
    for tile, chunk in zip(tiles, _chunk_bytes(webp)):
        img = Image.open(io.BytesIO(chunk))  # reference: Pillow's own WebP decoder
        assert img.format == "WEBP"
        np.testing.assert_array_equal(np.asarray(img.convert("RGB")), tile)  # lossless: exact
    store = open_store(jpeg)
    for i, (tile, chunk) in enumerate(zip(tiles, _chunk_bytes(jpeg))):
        img = Image.open(io.BytesIO(chunk))  # reference: Pillow's own JPEG decoder (libjpeg)
        assert img.format == "JPEG" and img.size == (48, 48)
        ours = store[i].astype(int)
        assert np.abs(ours - np.asarray(img.convert("RGB"), int)).max() <= 2  # the same stream, two decoders
        assert peak_signal_noise_ratio(tile, store[i], data_range=255) > 35  # q90 keeps the tile (scikit-image)
    assert store.attrs["compression"] == {"codec": "jpeg", "lossless": False, "quality": 90}
    import json

    meta = json.loads((jpeg / "tiles" / "zarr.json").read_text())["codecs"][0]  # the metadata as written
    assert meta["configuration"]["codecs"] == [
        {"name": "tilewright.jpeg", "configuration": {"quality": 90, "subsampling": "444"}}]


def test_quality_changes_bytes_and_error(tmp_path):
    tiles = _tiles(8, t=64, seed=3)
    size, err = {}, {}
    for q in (50, 95):
        path = _write(tmp_path / f"q{q}.zarr", tiles, compression="jpeg", quality=q)
        size[q] = sum(len(c) for s in (0, 1) for c in _chunk_bytes(path, s))
        err[q] = np.abs(open_store(path)[:].astype(int) - tiles).mean()
    assert size[50] < size[95] and err[50] > err[95]  # ground truth: JPEG quantization tables scale with quality


@pytest.mark.parametrize("compression", ["jpeg", "webp"])
def test_shard_files_equal_zarrs_own(tmp_path, compression):
    from tilewright.store.compression import tile_codecs

    tiles = _tiles(6, t=32)
    arrays = {}
    for name in ("ref", "ours"):
        arrays[name] = zarr.create_array(str(tmp_path / f"{name}.zarr"), shape=tiles.shape, chunks=(1, 32, 32, 3),
                                         shards=(4, 32, 32, 3), dtype="uint8", fill_value=255,
                                         **tile_codecs(compression, 80))
    arrays["ref"][...] = tiles  # reference: zarr-python's sharding codec with our codec inside
    enc = ShardEncoder.for_array(arrays["ours"])
    assert enc is not None
    enc.write(0, tiles[:4])
    enc.write(1, tiles[4:])
    for s in (0, 1):
        a = (tmp_path / "ref.zarr" / "c" / str(s) / "0" / "0" / "0").read_bytes()
        b = (tmp_path / "ours.zarr" / "c" / str(s) / "0" / "0" / "0").read_bytes()
        assert a == b  # byte for byte what zarr writes


def test_plain_zarr_reads_the_store_without_importing_tilewright(tmp_path):
    tiles = _tiles(7, t=32)
    paths = [_write(tmp_path / f"{c}.zarr", tiles, compression=c, quality=85) for c in ("jpeg", "webp")]
    expected = [open_store(p)[:] for p in paths]
    for p, e in zip(paths, expected):
        np.save(p.with_suffix(".npy"), e)
    code = textwrap.dedent(f"""
        import sys
        import numpy as np
        import zarr
        assert "tilewright" not in sys.modules
        for name in {[str(p) for p in paths]!r}:
            g = zarr.open_group(name, mode="r")
            assert g.attrs["complete"]
            np.testing.assert_array_equal(g["tiles"][...], np.load(name[:-5] + ".npy"))
        print("read", sorted(m for m in sys.modules if m.startswith("tilewright")))
    """)
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert out.returncode == 0, out.stderr
    assert "tilewright.store.image_codecs" in out.stdout  # found through the zarr.codecs entry point
    np.testing.assert_array_equal(expected[1], tiles)  # webp is lossless (ground truth: the tiles written)


def test_bad_settings_are_typed_errors(tmp_path):
    import tilewright as tw

    for q in (0, 101, 90.5, True):
        with pytest.raises(ConfigError, match="quality"):
            tw.TilingConfig(compression="jpeg", quality=q)
    with pytest.raises(ConfigError, match="compression"):
        tw.TilingConfig(compression="jpeg2000")
    with pytest.raises(StoreError, match="quality"):
        StoreWriter(tmp_path / "s.zarr", 4, 16, compression="jpeg", quality=0)
    assert not (tmp_path / "s.zarr").exists() and not list(tmp_path.iterdir())  # nothing left behind
    with pytest.raises(ValueError):
        JpegCodec(quality=90, subsampling="411")
    with pytest.raises(ValueError):
        WebpCodec.from_dict({"name": "tilewright.webp", "configuration": {"lossless": False}})
    with pytest.raises(ValueError, match="one RGB tile"):
        zarr.create_array(str(tmp_path / "two.zarr"), shape=(4, 16, 16, 3), chunks=(2, 16, 16, 3), dtype="uint8",
                          serializer=JpegCodec(), compressors=None)
