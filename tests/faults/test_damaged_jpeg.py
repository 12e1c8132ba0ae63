"""A JPEG tile with flipped bytes inside a slide: reported with its region, never stored.

Policy (see RELIABILITY.md): the slide fails; the reason names the damaged tile (level, row,
column, pixel box) and the region being read; no store is written. JPEG has no checksum and the
decoders we use (imagecodecs, like Pillow) return garbage pixels without an error for most byte
flips, so the tiff backend checks every JPEG tile's entropy-coded stream for loss of sync
(tilewright.slide.jpeg_check), by default: a strict decode (libjpeg warnings as errors,
jpeg_strict); a tile it refuses goes to a sentinel MCU row decoded with the tile, confirmed by
the two probe decodes when it fails. Reference verdicts: OpenSlide, which turns libjpeg's
"corrupt data" warnings into errors, and the probe check itself.
"""

from __future__ import annotations

import imagecodecs
import numpy as np
import pytest
import tifffile

import tilewright as tw
from tilewright.errors import DamagedSlideError
from tilewright.run.cohort import run_one
from tilewright.slide.jpeg_check import entropy_bounds, jpeg_in_sync
from tilewright.slide.jpeg_sentinel import (
    header_length,
    reduced_sentinel_intact,
    sentinel_intact,
    sentinel_plan,
    sentinel_stream,
)

pytestmark = pytest.mark.timeout(120)


def _tiles(path, level):
    with tifffile.TiffFile(path) as tf:
        page = tf.series[0].levels[level].keyframe
        return (list(page.dataoffsets), list(page.databytecounts), page.chunked[1],
                page.chunks[0], page.jpegtables)


def _flip(path, out, offset, count, rel, mask=0xFF):
    """Copy ``path`` to ``out`` with one byte of a tile's entropy data XOR-ed."""
    raw = bytearray(path.read_bytes())
    tile = bytes(raw[offset:offset + count])
    start, end = entropy_bounds(tile)
    k = offset + start + int(rel * (end - start - 4))
    raw[k] ^= mask
    out.write_bytes(bytes(raw))
    return out


def _busiest_tile(path, level):
    """Index of the tile of ``level`` that differs most from white (surely inside tissue)."""
    with tifffile.TiffFile(path) as tf:
        img = tf.series[0].levels[level].asarray()
    offs, _, gw, th, _ = _tiles(path, level)
    best, best_ink = 0, -1.0
    for i in range(len(offs)):
        r, c = divmod(i, gw)
        ink = float((255 - img[r * th:(r + 1) * th, c * th:(c + 1) * th]).mean())
        if ink > best_ink:
            best, best_ink = i, ink
    return best


def _openslide_refuses(path, level, index, gw, th):
    import openslide

    s = openslide.OpenSlide(str(path))
    try:
        r, c = divmod(index, gw)
        ds = s.level_downsamples[level]
        s.read_region((int(c * th * ds), int(r * th * ds)), level, (th, th))
        return False
    except openslide.OpenSlideError:
        return True
    finally:
        s.close()


def test_flipped_bytes_fail_the_slide_and_name_the_tile(slide, tmp_path, fast_config):
    good = slide("good.tif")
    cfg = fast_config.replace(mpp=0.5)  # the default configuration checks JPEG tiles
    with tw.open(good) as s:
        level = s.at_mpp(cfg.mpp).source_level
    idx = _busiest_tile(good, level)
    offs, cnts, gw, th, _ = _tiles(good, level)
    r, c = divmod(idx, gw)
    # choose a flip that breaks the stream's sync (selected with the detector under test; the
    # ground-truth check below confirms the tile really decodes to garbage)
    truth = tifffile.TiffFile(good).series[0].levels[level].asarray()
    box = (slice(r * th, (r + 1) * th), slice(c * th, (c + 1) * th))
    raw = good.read_bytes()[offs[idx]:offs[idx] + cnts[idx]]
    for rel, mask in [(x, m) for m in (0xFF, 0x0F, 0x80) for x in np.linspace(0.1, 0.9, 9)]:
        bad = _flip(good, tmp_path / "bad.tif", offs[idx], cnts[idx], rel, mask)
        tile = bad.read_bytes()[offs[idx]:offs[idx] + cnts[idx]]
        dec = imagecodecs.jpeg8_decode(tile)
        if tile != raw and not jpeg_in_sync(tile, dec, imagecodecs.jpeg8_decode):
            break
    else:
        pytest.fail("no flip position broke the stream")
    # ground truth: the damaged tile decodes "successfully" (no error) to garbage
    assert np.abs(dec.astype(int) - truth[box]).max() > 50
    # the direct reader refuses the tile by default, naming level, row and column
    with tw.open(bad, backend="tiff") as s:
        lv = s.levels[level]
        with pytest.raises(DamagedSlideError) as e:
            s.read_level(level, 0, 0, lv.height, lv.width)
    # with the check switched off the garbage decodes like the decoders return it
    with tw.open(bad, backend="tiff", verify=False) as s:
        assert np.array_equal(s.read_level(level, r * th, c * th, th, th), dec[..., :3])
    assert f"tile ({r}, {c}) of level {level}" in str(e.value)
    assert f"y={r * th}-{(r + 1) * th}" in str(e.value)
    assert str(bad) in str(e.value)
    # the same read of the good file works and equals tifffile's decode (reference)
    with tw.open(good, backend="tiff") as s:
        lv = s.levels[level]
        assert np.array_equal(s.read_level(level, 0, 0, lv.height, lv.width), truth)
    # a cohort run records the slide as failed with the tile named and writes no store
    out = tmp_path / "out"
    row = run_one(str(bad), str(out), cfg.to_dict(), "bad", None, None, False)
    assert row["status"] == "failed"
    assert f"tile ({r}, {c}) of level {level}" in row["error"] and "\n" not in row["error"]
    assert not (out / "bad.zarr").exists()
    assert not list(out.glob("bad.zarr*")) if out.exists() else True  # no partial left
    row = run_one(str(good), str(out), cfg.to_dict(), "good", None, None, False)
    assert row["status"] == "ok" and row["n_tiles"] > 0


@pytest.fixture(params=["strict", "sentinel"])
def checker(request, monkeypatch):
    """Both routes of the default check: a strict decode first (libjpeg warnings as errors,
    jpeg_strict), or (strict decoding unavailable) the sentinel with the probes behind it."""
    if request.param == "sentinel":
        monkeypatch.setattr("tilewright.slide.jpeg_strict.available", lambda: False)
    return request.param


def test_detection_agrees_with_openslide(slide, tmp_path, checker):
    """Seeded byte damage in many tiles: every tile OpenSlide refuses, tilewright refuses, and
    every tile tilewright refuses really decodes to garbage. What neither refuses is damage after
    which the Huffman decoder falls back into step (Huffman codes self-synchronize) or that
    changes only coefficient values: the stream ends in sync, so no decoder can see it (JPEG has
    no checksum); RELIABILITY.md says so."""
    good = slide("good.tif", seed=4)
    level = 1
    offs, cnts, gw, th, _ = _tiles(good, level)
    with tifffile.TiffFile(good) as tf:
        truth = tf.series[0].levels[level].asarray()  # ground truth: the undamaged decode
    rng = np.random.default_rng(2024)
    outcomes = {"both": 0, "ours_only": 0, "neither": 0}
    for trial in range(36):
        idx = int(rng.integers(len(offs)))
        mask = [0xFF, 1 << int(rng.integers(8)), int(rng.integers(1, 255))][trial % 3]
        bad = _flip(good, tmp_path / "bad.tif", offs[idx], cnts[idx], float(rng.uniform(0, 1)), mask)
        r, c = divmod(idx, gw)
        box = (slice(r * th, (r + 1) * th), slice(c * th, (c + 1) * th))
        ref_refuses = _openslide_refuses(bad, level, idx, gw, th)
        with tw.open(bad, backend="tiff") as s:  # default: sentinel check, probes confirm
            lv = s.levels[level]
            y0, x0 = r * th, c * th
            h, w = min(th, lv.height - y0), min(th, lv.width - x0)
            try:
                got = s.read_level(level, y0, x0, h, w)
                ours = False
            except DamagedSlideError:
                ours, got = True, None
        if ref_refuses:
            assert ours, f"trial {trial}: OpenSlide refuses tile {idx} but tilewright read it"
        if ours:
            # reference: decode of the damaged tile by tifffile differs strongly from the truth
            damaged = tifffile.TiffFile(bad).series[0].levels[level].asarray()[box]
            assert np.abs(damaged.astype(int) - truth[box]).max() > 20
            outcomes["both" if ref_refuses else "ours_only"] += 1
        else:
            outcomes["neither"] += 1
            assert got.shape == (h, w, 3)
    assert outcomes["both"] >= 10, outcomes  # the damage model does break streams


def _noise(seed=5):
    """Strong independent noise in every channel: chroma full of high frequencies, so the last
    block of a tile often does not end with an end-of-block code."""
    rng = np.random.default_rng(seed)
    ramp = np.linspace(60, 230, 640)[None, :, None] + np.linspace(0, 20, 3)[None, None, :]
    return np.clip(ramp + rng.normal(0, 25, (512, 640, 3)), 0, 255).astype(np.uint8)


def _tifffile_slide(path, img, **kw):
    """A 2-level JPEG TIFF of ``img`` written by tifffile directly (other colour layouts)."""
    with tifffile.TiffWriter(path) as tw_:
        for k, im in enumerate((img, img[::2, ::2])):
            tw_.write(im, tile=(256, 256), photometric="rgb", compression="jpeg",
                      resolution=(40000.0 / (k + 1), 40000.0 / (k + 1)), resolutionunit="CENTIMETER",
                      subfiletype=1 if k else 0, **kw)
    return path


@pytest.mark.parametrize("layout", ["ifd", "svs", "ome", "ycbcr444", "ycbcr422", "rgb"])
def test_intact_jpeg_slides_never_flagged(slide, tmp_path, layout, monkeypatch, checker):
    """No false alarm: every tile of every level of intact JPEG slides reads, equal to tifffile,
    and the strict decode or the sentinel alone accepts every tile (the probe fallback is never
    needed)."""
    if layout in ("ifd", "svs", "ome"):  # the demo writer: YCbCr 4:2:0
        path = slide(f"ok_{layout}.tif", layout=layout, seed=7)
    else:  # the demo's pixels stored in other JPEG colour layouts
        kw = {"ycbcr444": {"subsampling": (1, 1)}, "ycbcr422": {"subsampling": (2, 1)},
              "rgb": {"compressionargs": {"level": 90, "outcolorspace": "rgb"}}}[layout]
        with tifffile.TiffFile(slide("demo.tif", seed=7)) as tf:
            pixels = tf.series[0].levels[0].asarray()
        path = _tifffile_slide(tmp_path / f"ok_{layout}.tif", pixels, **kw)

    def no_fallback(*args):
        raise AssertionError("the sentinel rejected an intact tile")

    monkeypatch.setattr("tilewright.slide.tile_grid._jpeg_intact", no_fallback)
    import tilewright.slide.jpeg_strict as strict

    refused, decode = [], strict.decode_strict

    def spy(*args):
        img = decode(*args)
        if img is None:
            refused.append(1)
        return img

    monkeypatch.setattr(strict, "decode_strict", spy)
    with tw.open(path, backend="tiff", mpp=0.25) as s, tifffile.TiffFile(path) as tf:
        for i, lv in enumerate(s.levels):
            got = s.read_level(i, 0, 0, lv.height, lv.width)
            ref = tf.series[0].levels[i].asarray() if len(tf.series[0].levels) > 1 else tf.pages[i].asarray()
            assert np.array_equal(got, ref[..., :3])  # reference decoder: tifffile
    assert not refused  # the strict decoder accepted every intact tile too (when in use)


@pytest.mark.parametrize("subsampling", [(2, 2), (1, 1)])
def test_sentinel_agrees_with_probes(slide, tmp_path, subsampling):
    """Seeded single-byte damage in the tiles of a slide: whenever the probe check (the reference,
    two extra decodes) finds the stream out of sync, the sentinel fails too; an intact stream's
    sentinel always passes (ground truth: the undamaged tile)."""
    with tifffile.TiffFile(slide("demo.tif", seed=9)) as tf:
        pixels = tf.series[0].levels[0].asarray()
    path = _tifffile_slide(tmp_path / "s.tif", pixels, subsampling=subsampling)
    with tifffile.TiffFile(path) as tf:
        page = tf.pages[0]
        tiles = [tf.filehandle.read_segments([o], [n]).__next__()[0]
                 for o, n in zip(page.dataoffsets, page.databytecounts)]
    decode = imagecodecs.jpeg8_decode
    rng = np.random.default_rng(11)
    counts = {"both": 0, "sentinel_only": 0, "neither": 0}
    for trial in range(150):
        raw = tiles[trial % len(tiles)]
        start, end = entropy_bounds(raw)
        plan = sentinel_plan(raw[:header_length(raw)])
        assert plan is not None and plan.vertical == (subsampling == (2, 2))
        if trial < len(tiles):  # intact tiles: the sentinel passes
            assert _sentinel_ok(sentinel_stream(raw, plan), plan, decode)
        data = bytearray(raw)
        k = start + int(rng.integers(end - start))
        data[k] ^= [0xFF, 1 << int(rng.integers(8)), int(rng.integers(1, 255))][trial % 3]
        data = bytes(data)
        try:
            plain = decode(data)
        except Exception:  # noqa: BLE001 - an error is a refusal by the decoder itself
            continue
        probes_ok = jpeg_in_sync(data, plain, decode)
        ext = sentinel_stream(data, plan)
        ours_ok = ext is not None and _sentinel_ok(ext, plan, decode)
        if not probes_ok:
            assert not ours_ok, f"trial {trial}: the probes find a desync the sentinel passed"
        counts["both" if not ours_ok and not probes_ok else "sentinel_only" if not ours_ok else "neither"] += 1
    assert counts["both"] >= 20, counts  # the damage model does break streams


def _sentinel_ok(ext, plan, decode):
    if plan.vertical:
        return reduced_sentinel_intact(ext, None, plan)
    try:
        out = decode(ext)
    except Exception:  # noqa: BLE001
        return False
    return sentinel_intact(out[plan.real_rows:], 8, plan.grey_step)


def test_noisy_tiles_settled_by_probes(tmp_path, monkeypatch):
    """Tiles whose last block ends with a coefficient instead of an end-of-block code (strong
    chroma noise, constructed): the sentinel cannot place its bits and fails; the probe check
    then accepts the intact tiles and the read equals tifffile's decode (reference)."""
    import tilewright.slide.tile_grid as backend

    path = _tifffile_slide(tmp_path / "noisy.tif", _noise(), subsampling=(1, 1))
    settled = []
    probe = backend._jpeg_intact
    monkeypatch.setattr(backend, "_jpeg_intact", lambda *a: settled.append(1) or probe(*a))
    with tw.open(path, backend="tiff", mpp=0.25) as s, tifffile.TiffFile(path) as tf:
        got = s.read_level(0, 0, 0, s.levels[0].height, s.levels[0].width)
        assert np.array_equal(got, tf.pages[0].asarray())  # reference decoder: tifffile
    assert settled  # the fallback did run


def test_sentinel_not_planned_for_restart_intervals(slide):
    """Restart markers resynchronize the decoder, which would hide a desync from the sentinel:
    such streams get no plan (the probe check serves them). Constructed: a DRI segment added."""
    path = slide("dri.tif")
    with tifffile.TiffFile(path) as tf:
        page = tf.series[0].levels[0].keyframe
        raw = next(tf.filehandle.read_segments([page.dataoffsets[0]], [page.databytecounts[0]]))[0]
    n = header_length(raw)
    assert sentinel_plan(raw[:n]) is not None
    with_dri = raw[:2] + b"\xff\xdd\x00\x04\x00\x10" + raw[2:n]
    assert sentinel_plan(with_dri) is None


def test_cli_switch(tmp_path):
    """``tile-out`` checks by default; ``--no-verify-jpeg`` switches the check off."""
    from tilewright.cli.tile_out import build_parser, config_from_args

    parser = build_parser()
    assert config_from_args(parser.parse_args(["a", "b"])).verify_jpeg is True
    assert config_from_args(parser.parse_args(["a", "b", "--no-verify-jpeg"])).verify_jpeg is False
    assert tw.TilingConfig().verify_jpeg is True
