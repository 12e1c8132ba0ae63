"""DICOM WSI series (VL Whole Slide Microscopy Image IOD, TILED_FULL, JPEG baseline frames) written
with pydicom: the files of one series are one slide, read as OpenSlide reads the same series."""

from __future__ import annotations

import pickle

import numpy as np
import pytest

import tilewright as tw
from tilewright.demo.dicom_series import write_dicom_series
from tilewright.errors import SlideNotFoundError, UnsupportedSlideError

import vendor_corpus as vc

MPP = 0.2527
IMG = vc.image(1200, 1610, seed=31)
LEVELS = [IMG, vc.reduce_to(IMG, 4)]


@pytest.fixture(scope="module")
def series(tmp_path_factory):
    folder = tmp_path_factory.mktemp("dicom") / "case-017"
    files = write_dicom_series(folder, LEVELS, mpp=MPP, thumbnail=vc.reduce_to(IMG, 16), tile=256)
    return folder, files


def test_folder_and_every_file_open_the_same_slide(series):
    import openslide

    folder, files = series
    ref = openslide.OpenSlide(str(files[0]))  # reference: OpenSlide reading the series itself
    try:
        want = np.asarray(ref.read_region((0, 0), 0, (1610, 1200)))[..., :3]
        for path in [folder, *files]:  # the folder, each level file, the thumbnail file
            with tw.open(path) as s:
                assert s.path == str(folder)  # the slide is the series, named by its folder
                assert [(lv.height, lv.width) for lv in s.levels] == \
                    [(h, w) for (w, h) in ref.level_dimensions] == [(1200, 1610), (300, 403)]
                assert s.mpp == pytest.approx(MPP)  # ground truth: Pixel Spacing written (mm)
                np.testing.assert_array_equal(s.read_level(0, 0, 0, 1200, 1610), want)
    finally:
        ref.close()
    # ground truth: the pixels written, through JPEG q90 (common practice: mean error of a few levels)
    assert np.abs(want.astype(int) - IMG).mean() < 6


def test_frames_decode_as_pydicom_decodes_them(series):
    import pydicom

    folder, files = series
    ds = pydicom.dcmread(files[0])
    # pydicom's own JPEG decoding of frame (0, 1) (YBR converted to RGB, its default), an
    # independent decoder of the instance
    frame = ds.pixel_array[1]
    with tw.open(folder) as s:
        got = s.read_level(0, 0, 256, 256, 256).astype(int)
    assert np.abs(got - frame.astype(int)).max() <= 8  # decoders differ by a few levels at most


def test_series_is_one_slide_in_folder_search_and_ids(tmp_path):
    from tilewright.run.sources import find_slides
    from tilewright.store.layout import slide_ids

    root = tmp_path / "cohort"
    small = [IMG[:512, :640], vc.reduce_to(IMG[:512, :640], 2)]
    write_dicom_series(root / "site-north" / "b.07", small, mpp=0.4991, thumbnail=small[1][::4, ::4])
    write_dicom_series(root / "site-south" / "b.07", small, mpp=0.4991)
    lone = root / "labels-only"
    write_dicom_series(lone, [small[1]], mpp=0.4991)
    for f in lone.glob("volume_*.dcm"):  # turn the one instance into a LABEL: not a slide
        import pydicom

        ds = pydicom.dcmread(f)
        ds.ImageType = ["ORIGINAL", "PRIMARY", "LABEL", "NONE"]
        ds.save_as(f)
    found = find_slides(root)
    # ground truth constructed: two VOLUME series (one folder each); the label-only series is none
    assert found == [root / "site-north" / "b.07", root / "site-south" / "b.07"]
    assert slide_ids(found) == ["site-north_b.07", "site-south_b.07"]  # folder names, collision rule
    assert slide_ids(found[:1]) == ["b.07"]
    with pytest.raises(UnsupportedSlideError, match="LABEL|label"):
        tw.open(next(lone.glob("*.dcm")))


def test_two_series_in_one_folder(tmp_path):
    from tilewright.run.sources import find_slides

    small = [IMG[:512, :640]]
    write_dicom_series(tmp_path / "mixed", small, mpp=0.4991)
    for f in (tmp_path / "mixed").glob("*.dcm"):
        f.rename(f.with_name("a_" + f.name))
    write_dicom_series(tmp_path / "mixed", small, mpp=0.2428)
    with pytest.raises(UnsupportedSlideError, match="2 DICOM whole-slide series") as e:
        tw.open(tmp_path / "mixed")
    assert str(tmp_path / "mixed") in str(e.value)
    found = find_slides(tmp_path)
    assert [p.name for p in found] == ["a_volume_01.dcm", "volume_01.dcm"]  # one level-0 file a series
    with tw.open(found[0]) as a, tw.open(found[1]) as b:
        assert a.mpp == pytest.approx(0.4991) and b.mpp == pytest.approx(0.2428)  # written above


def test_errors_name_the_folder(tmp_path, series):
    folder, _ = series
    with pytest.raises(UnsupportedSlideError, match="TIFF files only"):
        tw.open(folder, backend="tiff")
    (tmp_path / "empty").mkdir()
    with pytest.raises(SlideNotFoundError) as e:
        tw.open(tmp_path / "empty")
    assert str(tmp_path / "empty") in str(e.value)


def test_pickled_slide_reopens_the_series(series):
    folder, _ = series
    with tw.open(folder) as s:
        view = s.at_mpp(1.0)
        again = pickle.loads(pickle.dumps(view))
        np.testing.assert_array_equal(again.read(10, 20, 64, 64), view.read(10, 20, 64, 64))
        again.slide.close()


def test_cohort_run_writes_one_store_a_series(series, tmp_path):
    from tilewright.run.cohort import tile_cohort
    from tilewright.run.config import TilingConfig
    from tilewright.run.sources import find_slides

    folder, _ = series
    paths = find_slides(folder.parent)
    assert paths == [folder]
    results = tile_cohort(paths, tmp_path / "out", TilingConfig(mpp=1.0, tile=128, min_tissue=0.0, max_tiles=8,
                                                                qc_overlay=False), progress=False)
    assert [r.status for r in results] == ["ok"], results
    cohort = tw.open_cohort(tmp_path / "out")
    row = cohort.manifest.iloc[0]
    assert row["slide_id"] == "case-017" and row["source"] == str(folder)  # the series folder
    store = tw.open_store(tmp_path / "out" / "case-017.zarr")
    assert store.attrs["source"]["digest"].startswith("sha256f:") and len(store) > 0
    # run again: the complete store of the series is kept (its recorded size is the series' bytes,
    # the sum over its files, not the folder entry's size)
    again = tile_cohort(paths, tmp_path / "out", TilingConfig(mpp=1.0, tile=128, min_tissue=0.0, max_tiles=8,
                                                              qc_overlay=False), progress=False)
    assert [(r.status, r.kept) for r in again] == [("ok", True)], again
