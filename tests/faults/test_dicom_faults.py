"""Damaged DICOM WSI series on the direct frame path: refused with the frame named, as tiff tiles are.

Faults constructed here: a JPEG frame whose entropy-coded bytes are flipped (the decoders return
garbage without an error; the frame check of the tiff path refuses it), a JPEG 2000 frame cut
short, frames missing from TILED_FULL and TILED_SPARSE levels, and instance files cut short (with
a Basic, Extended or no offset table, and uncompressed frames). References: the probe check
(tilewright.slide.jpeg_check, two extra decodes), OpenSlide's verdict on the same damaged file,
and the pixels written. OpenSlide's DICOM reader refuses only frames libjpeg cannot decode at all:
it passes libjpeg's corrupt-data warnings (a desynchronized stream) as its TIFF readers do not, so
it reads most damaged frames as garbage; the frame path refuses those too.
"""

from __future__ import annotations

import shutil

import imagecodecs
import numpy as np
import pytest

import tilewright as tw
from tilewright.demo.dicom_series import write_dicom_series
from tilewright.errors import DamagedSlideError
from tilewright.run.cohort import run_one
from tilewright.slide.jpeg_check import entropy_bounds, jpeg_in_sync

import vendor_corpus as vc

pytestmark = pytest.mark.timeout(180)

def _demo_pixels():
    """The synthetic H&E slide of the fault suite (tissue islands on glass), 1024 x 1280 px."""
    from tilewright.demo.synth import random_layout

    lay = random_layout(512.0, 640.0, seed=4, n_islands=2)
    return lay.render(0.5, 0, 0, *lay.shape_at(0.5))


IMG = _demo_pixels()
LEVELS = [IMG, vc.reduce_to(IMG, 4)]
H, W = IMG.shape[:2]


def _series(folder, **kw):
    files = write_dicom_series(folder, LEVELS, mpp=0.4991, tile=256, **kw)
    return folder, files


def _frames(folder):
    """The level-0 frame table the backend reads (offsets, counts), from a fresh open."""
    with tw.open(folder, backend="dicom") as s:
        lv = s._reader._levels[0]
        return lv.offsets.copy(), lv.counts.copy(), lv.grid_w


def _flip(src, dst, offset, count, rel, mask):
    """Copy the series folder ``src`` to ``dst`` with one byte of a level-0 frame's entropy data XOR-ed."""
    shutil.rmtree(dst, ignore_errors=True)
    shutil.copytree(src, dst)
    path = dst / "volume_01.dcm"
    raw = bytearray(path.read_bytes())
    start, end = entropy_bounds(bytes(raw[offset:offset + count]))
    raw[offset + start + int(rel * (end - start - 4))] ^= mask
    path.write_bytes(bytes(raw))
    return dst


def _openslide_refuses(folder, r, c):
    import openslide

    s = openslide.OpenSlide(str(folder / "volume_01.dcm"))
    try:
        s.read_region((c * 256, r * 256), 0, (256, 256))
        return False
    except openslide.OpenSlideError:
        return True
    finally:
        s.close()


@pytest.mark.parametrize("photometric", ["YBR_FULL_422", "RGB"])  # 4:2:0: strict decode; RGB 4:4:4: sentinel
def test_damaged_jpeg_frame_fails_the_slide_and_names_the_frame(tmp_path, photometric):
    good, _ = _series(tmp_path / "good", photometric=photometric)
    offs, cnts, gw = _frames(good)
    idx = int(np.argmax(cnts))  # the frame with the most bytes: surely tissue
    r, c = divmod(idx, gw)
    raw = (good / "volume_01.dcm").read_bytes()[offs[idx]:offs[idx] + cnts[idx]]
    colour = 2 if photometric == "RGB" else None  # the frames' stream markers say so too

    def decode(b):
        return imagecodecs.jpeg8_decode(b, colorspace=colour, outcolorspace=2)

    for rel, mask in [(x, m) for m in (0xFF, 0x0F, 0x80) for x in np.linspace(0.1, 0.9, 9)]:
        bad = _flip(good, tmp_path / "bad", int(offs[idx]), int(cnts[idx]), rel, mask)
        frame = (bad / "volume_01.dcm").read_bytes()[offs[idx]:offs[idx] + cnts[idx]]
        dec = decode(frame)
        if frame != raw and not jpeg_in_sync(frame, dec, decode):  # reference: the probe check
            break
    else:
        pytest.fail("no flip position broke the stream")
    box = (slice(r * 256, (r + 1) * 256), slice(c * 256, (c + 1) * 256))
    assert np.abs(dec.astype(int) - IMG[box]).max() > 50  # ground truth: garbage, decoded without an error
    with tw.open(bad) as s:
        assert s.backend == "dicom"
        with pytest.raises(DamagedSlideError) as e:
            s.read_level(0, 0, 0, H, W)
    msg = str(e.value)
    assert f"frame {idx + 1} (tile row {r}, column {c}) of volume_01.dcm" in msg and "level 0" in msg
    assert f"y={r * 256}-{(r + 1) * 256}" in msg and str(bad) in msg
    with tw.open(bad, verify=False) as s:  # the check off: the garbage as the decoder returns it
        assert np.array_equal(s.read_level(0, r * 256, c * 256, 256, 256), dec)
    cfg = tw.TilingConfig(mpp=0.4991, tile=128, min_tissue=0.0, qc_overlay=False)
    out = tmp_path / "out"
    row = run_one(str(bad), str(out), cfg.to_dict(), "bad", None, None, False)
    assert row["status"] == "failed" and f"frame {idx + 1}" in row["error"] and "\n" not in row["error"]
    assert not list(out.glob("bad.zarr*"))  # no store, not even a partial one


def _probe_refuses(frame) -> bool:
    """The reference verdict: the frame does not decode, or its stream is out of sync (probes)."""
    try:
        dec = imagecodecs.jpeg8_decode(frame)
    except Exception:  # noqa: BLE001 - libjpeg's own error: damage beyond doubt
        return True
    return not jpeg_in_sync(frame, dec, imagecodecs.jpeg8_decode)


def _relabelled(folder, files, label):
    """The series with the photometric label of its levels replaced (converters do this)."""
    import pydicom

    for path in files if label else ():
        ds = pydicom.dcmread(path)
        if "VOLUME" in ds.ImageType:
            ds.PhotometricInterpretation = label
            ds.save_as(path)
    return folder


# 4:2:0 streams (strict decode); 4:4:4 streams as YBR_FULL and mislabelled YBR_FULL_422 (sentinel)
STREAMS = [("YBR_FULL_422", None), ("YBR_FULL", None), ("YBR_FULL", "YBR_FULL_422")]


@pytest.mark.parametrize("stored, label", STREAMS)
def test_intact_padded_frames_need_no_probe_check(tmp_path, monkeypatch, stored, label):
    """JPEG frames are padded to an even length after their EOI (DICOM PS3.5 A.4: a trailing 00H);
    the in-decode check must read through the padding, so an intact frame costs one decode: the
    probe check (two more decodes) is never reached, and the pixels equal a plain decode."""
    import tilewright.slide.tile_grid as tile_grid

    folder = _relabelled(*_series(tmp_path / "s", photometric=stored), label)
    offs, cnts, _ = _frames(folder)
    raw = (folder / "volume_01.dcm").read_bytes()
    padded = [raw[o:o + n] for o, n in zip(offs.tolist(), cnts.tolist()) if n and raw[o + n - 1] == 0]
    assert padded and all(f[-3:-1] == b"\xff\xd9" for f in padded)  # the case checked: EOI then one pad byte

    def probes(*_):
        raise AssertionError("the probe check ran on an intact frame")

    monkeypatch.setattr(tile_grid, "_jpeg_intact", probes)
    with tw.open(folder) as s:
        assert s.backend == "dicom"
        got = s.read_level(0, 0, 0, H, W)
    with tw.open(folder, verify=False) as s:  # reference: the same frames decoded without any check
        assert np.array_equal(got, s.read_level(0, 0, 0, H, W))


@pytest.mark.parametrize("stored, label", [STREAMS[0], STREAMS[2]])  # OpenSlide opens no JPEG YBR_FULL
def test_detection_agrees_with_the_probes_and_openslide(tmp_path, stored, label):
    """Seeded byte damage in tissue frames: the frame path refuses what the probe check refuses
    (the strict 4:2:0 decode may miss a desync ending within libjpeg's buffered bytes, ~2 % on the
    tiff path), never an intact stream, and every frame OpenSlide refuses; a refused frame really
    decodes to garbage."""
    good = _relabelled(*_series(tmp_path / "good", photometric=stored), label)
    offs, cnts, gw = _frames(good)
    tissue = np.flatnonzero(cnts > np.median(cnts))
    rng = np.random.default_rng(21)
    counts = {"probes": 0, "ours": 0, "openslide": 0}
    for trial in range(30):
        idx = int(rng.choice(tissue))
        mask = [0xFF, 1 << int(rng.integers(8)), int(rng.integers(1, 255))][trial % 3]
        bad = _flip(good, tmp_path / "bad", int(offs[idx]), int(cnts[idx]), float(rng.uniform(0, 1)), mask)
        frame = (bad / "volume_01.dcm").read_bytes()[offs[idx]:offs[idx] + cnts[idx]]
        r, c = divmod(idx, gw)
        h, w = min(256, H - r * 256), min(256, W - c * 256)
        with tw.open(bad) as s:
            try:
                s.read_level(0, r * 256, c * 256, h, w)
                ours = False
            except DamagedSlideError:
                ours = True
        probes, ref = _probe_refuses(frame), _openslide_refuses(bad, r, c)
        if ref:
            assert ours, f"trial {trial}: OpenSlide refuses frame {idx + 1} but the frame path read it"
        if ours:
            assert probes, f"trial {trial}: frame {idx + 1} refused though its stream is in sync"
            try:  # reference: the damaged frame decodes (imagecodecs) far from the pixels written
                assert np.abs(imagecodecs.jpeg8_decode(frame)[:h, :w].astype(int)
                              - IMG[r * 256:r * 256 + h, c * 256:c * 256 + w]).max() > 20
            except imagecodecs.Jpeg8Error:
                pass
        counts["probes"] += probes
        counts["ours"] += ours
        counts["openslide"] += ref
    assert counts["ours"] >= 6 and counts["ours"] >= counts["probes"] - 1, counts  # the damage breaks streams


def test_jpeg2000_frame_cut_short_is_refused(tmp_path):
    import pydicom
    from pydicom.encaps import encapsulate, generate_frames

    folder, files = _series(tmp_path / "j2k", codec="jpeg2000")
    ds = pydicom.dcmread(files[0])
    frames = list(generate_frames(ds.PixelData, number_of_frames=ds.NumberOfFrames))
    frames[6] = frames[6][: len(frames[6]) // 2]  # the codestream stops halfway
    ds.PixelData = encapsulate(frames)
    ds.save_as(files[0])
    with tw.open(folder) as s:
        np.testing.assert_array_equal(s.read_level(0, 0, 0, 256, 256), IMG[:256, :256])  # other frames intact
        with pytest.raises(DamagedSlideError, match=r"frame 7 \(tile row 1, column 1\) of volume_01.dcm"):
            s.read_level(0, 256, 256, 10, 10)


def test_missing_frames(tmp_path):
    import pydicom

    # TILED_SPARSE: a frame never stored is glass, not damage (ground truth constructed)
    folder, _ = _series(tmp_path / "sparse", organization="TILED_SPARSE", omit=lambda k, r, c: (k, r, c) == (0, 1, 2))
    with tw.open(folder) as s:
        assert (s.read_level(0, 256, 512, 256, 256) == 255).all()
        assert np.abs(s.read_level(0, 0, 0, 256, 256).astype(int) - IMG[:256, :256]).mean() < 6
    # TILED_FULL with fewer frames than its grid: the file is damaged
    folder, files = _series(tmp_path / "full")
    ds = pydicom.dcmread(files[0])
    ds.NumberOfFrames = int(ds.NumberOfFrames) - 1
    ds.save_as(files[0])
    with pytest.raises(DamagedSlideError, match="holds 19 frames where its TILED_FULL grid needs 20"):
        tw.open(folder)


@pytest.mark.parametrize("kw", [dict(), dict(offset_table="extended"), dict(offset_table="none"),
                                dict(codec="none"), dict(codec="jpeg2000")],
                         ids=["basic-table", "extended-table", "no-table", "uncompressed", "jpeg2000"])
def test_truncated_instance_is_refused_at_open(tmp_path, kw):
    folder, files = _series(tmp_path / "cut", **kw)
    data = files[0].read_bytes()
    files[0].write_bytes(data[: int(len(data) * 0.7)])  # a copy that stopped at 70 %
    with pytest.raises(DamagedSlideError, match="truncated") as e:
        tw.open(folder)
    assert str(folder) in str(e.value)
    cfg = tw.TilingConfig(mpp=0.5, tile=128, qc_overlay=False)
    row = run_one(str(folder), str(tmp_path / "out"), cfg.to_dict(), "cut", None, None, False)
    assert row["status"] == "failed" and "truncated" in row["error"]
