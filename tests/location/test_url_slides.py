"""Slides read straight from a bucket of a real S3-protocol server (SeaweedFS on loopback).

Each slide is written locally, uploaded, and read both ways: the URL must give the bytes the
local file gives (same levels, µm/px, pixels), with reads that fetch only the byte ranges they
touch, adjacent tiles in one request.
"""

from __future__ import annotations

import numpy as np
import pytest

import tilewright as tw
from tilewright.demo.dicom_series import write_dicom_series
from tilewright.demo.pyramid import write_pyramid
from tilewright.errors import NotAnImageError, SlideNotFoundError, UnsupportedSlideError

import vendor_corpus as vc
from object_store_files import upload

IMG = vc.image(1700, 2300, seed=29)


def _requests(slide) -> int:
    return sum(src.requests for src in slide._reader._fds)


@pytest.mark.parametrize("layout, name", [("ifd", "case-a.tif"), ("ome", "case b.ome.tif"), ("svs", "c[1].svs")])
def test_tiff_family_from_a_bucket_reads_as_the_local_file(tmp_path, bucket, layout, name):
    import tifffile

    local = tmp_path / name
    # odd scanner µm/px and a x4 step (ground truth: what is written here)
    write_pyramid(local, IMG, mpp=0.2428, tile=256, factor=4, layout=layout, quality=88)
    url = f"{bucket}/site-north/{name}"
    upload(local, url)
    with tw.open(local) as a, tw.open(url) as b:
        assert b.path == url and b.backend == "tiff"
        assert b.mpp == pytest.approx(0.2428) and a.mpp == b.mpp
        assert [tuple(lv)[:2] for lv in b.levels] == [tuple(lv)[:2] for lv in a.levels]
        for y, x, h, w in ((0, 0, 300, 700), (517, 1201, 733, 1099), (1650, 2250, 50, 50)):
            np.testing.assert_array_equal(b.read_level(0, y, x, h, w), a.read_level(0, y, x, h, w))
        np.testing.assert_array_equal(b.at_mpp(0.9713).read(11, 17, 200, 300), a.at_mpp(0.9713).read(11, 17, 200, 300))
        # an independent decoder of the local file: tifffile (libjpeg-turbo through imagecodecs)
        page = tifffile.TiffFile(local).series[0].levels[0]
        want = page.asarray()[517:1250, 1201:2300]
        assert np.abs(b.read_level(0, 517, 1201, 733, 1099).astype(int) - want).max() <= 2


def test_a_read_fetches_its_rows_of_tiles_in_one_request(tmp_path, bucket):
    local = tmp_path / "rows.tif"
    write_pyramid(local, IMG, mpp=0.2527, tile=256, factor=4)
    url = f"{bucket}/rows.tif"
    upload(local, url)
    assert local.stat().st_size < 1 << 20  # ground truth: all of level 0 lies within 1 MiB
    with tw.open(url) as s:
        before = _requests(s)
        s.read_level(0, 256, 256, 1024, 1024)  # 4 x 4 tiles: one range a row, all in flight at once...
        assert _requests(s) - before == 1  # ...and rows less than 1 MiB apart coalesced into one request
        before = _requests(s)
        s.read_level(0, 300, 300, 100, 100)  # inside one tile
        assert _requests(s) - before == 1


def test_dicom_series_under_a_prefix_reads_as_the_local_series(tmp_path, bucket):
    folder = tmp_path / "case.07"
    levels = [IMG[:1200, :1610], vc.reduce_to(IMG[:1200, :1610], 4)]
    write_dicom_series(folder, levels, mpp=0.2527, thumbnail=vc.reduce_to(IMG[:1200, :1610], 16), tile=256)
    prefix = f"{bucket}/dicom/case.07"
    upload(folder, prefix)
    with tw.open(folder) as a:
        want = a.read_level(0, 0, 0, 1200, 1610)
        small = a.read_level(1, 0, 0, 300, 402)
    for url in (prefix + "/", prefix, f"{prefix}/volume_0.dcm" if (folder / "volume_0.dcm").exists()
                else f"{prefix}/{sorted(p.name for p in folder.glob('*.dcm'))[0]}"):
        with tw.open(url) as b:
            assert b.backend == "dicom" and b.path == prefix + "/"  # the series is the slide, named by its prefix
            assert b.mpp == pytest.approx(0.2527)  # ground truth: Pixel Spacing written
            np.testing.assert_array_equal(b.read_level(0, 0, 0, 1200, 1610), want)
            np.testing.assert_array_equal(b.read_level(1, 0, 0, 300, 402), small)


@pytest.mark.parametrize("offset_table, fragments", [("basic", 1), ("basic", 2), ("extended", 1), ("none", 1)])
def test_dicom_frame_tables_from_a_bucket(tmp_path, bucket, offset_table, fragments):
    import pydicom

    folder = tmp_path / f"t-{offset_table}-{fragments}"
    levels = [IMG[:700, :900]]
    write_dicom_series(folder, levels, mpp=0.4991, tile=256, offset_table=offset_table, fragments=fragments)
    upload(folder, f"{bucket}/{folder.name}")
    with tw.open(f"{bucket}/{folder.name}/") as b, tw.open(folder) as a:
        np.testing.assert_array_equal(b.read_level(0, 0, 0, 700, 900), a.read_level(0, 0, 0, 700, 900))
        got = b.read_level(0, 256, 512, 256, 256).astype(int)
    frame = pydicom.dcmread(next(folder.glob("*.dcm"))).pixel_array[4 * 1 + 2]  # pydicom's own decode, frame (1, 2) of a 4-frame-wide grid
    assert np.abs(got - frame.astype(int)).max() <= 8  # decoders differ by a few levels at most


def test_missing_slide_and_openslide_only_files_are_refused_with_the_reason(tmp_path, bucket):
    with pytest.raises(SlideNotFoundError) as e:
        tw.open(f"{bucket}/nowhere/a.svs")
    assert f"{bucket}/nowhere/a.svs" in str(e.value)
    (tmp_path / "a.mrxs").write_bytes(b"\x00\x01binary index" * 40)
    upload(tmp_path / "a.mrxs", f"{bucket}/a.mrxs")
    with pytest.raises((UnsupportedSlideError, NotAnImageError)) as e:
        tw.open(f"{bucket}/a.mrxs")
    assert f"{bucket}/a.mrxs" in str(e.value)
    local = tmp_path / "big-strips.tif"
    import tifffile

    tifffile.imwrite(local, IMG[:600, :800], photometric="rgb", compression="zlib", rowsperstrip=600,
                     resolution=(1e4 / 0.25,) * 2, resolutionunit="CENTIMETER")
    from tilewright.slide import tiff_strips

    upload(local, f"{bucket}/big-strips.tif")
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(tiff_strips, "MAX_STRIP_BYTES", 1 << 18)  # the tiff backend refuses this layout
        with pytest.raises(UnsupportedSlideError) as e:
            tw.open(f"{bucket}/big-strips.tif")
    assert "OpenSlide reads local files only" in str(e.value) and "strip" in str(e.value)
