"""The dicom backend (frames decoded directly) against OpenSlide reading the same DICOM WSI series.

Series are written with pydicom (tilewright.demo.dicom_series): TILED_FULL and TILED_SPARSE, JPEG
baseline, JPEG 2000 and uncompressed frames, Basic / Extended / no offset table, fragmented
frames, a THUMBNAIL instance, an ICC profile. OpenSlide (an independent reader of the same files)
is the reference for level lists, µm/px and pixels; where OpenSlide refuses a series (photometric
interpretations it does not handle, fragments without an offset table) pydicom's own decoding is.
"""

from __future__ import annotations

import pickle
from concurrent.futures import ThreadPoolExecutor

import numpy as np
import pytest

import tilewright as tw
from tilewright.demo.dicom_series import write_dicom_series
from tilewright.errors import UnsupportedSlideError

import vendor_corpus as vc

IMG = vc.image(1200, 1610, seed=31)
LEVELS = [IMG, vc.reduce_to(IMG, 4), vc.reduce_to(IMG, 16)]  # x4 and x16 levels, odd sizes


def _omit(level, r, c):
    """Frames of a TILED_SPARSE series left out (glass): a scattered third of levels 0 and 1."""
    return level < 2 and (3 * r + c) % 3 == 1


CASES = {  # name: (level-0 µm/px, writer options)
    "jpeg-full": (0.2527, dict(codec="jpeg")),
    "jpeg-sparse": (0.2428, dict(codec="jpeg", organization="TILED_SPARSE", omit=_omit)),
    "j2k-full": (0.4991, dict(codec="jpeg2000")),
    "j2k-sparse": (0.2265, dict(codec="jpeg2000", organization="TILED_SPARSE", omit=_omit, offset_table="none")),
    "native-rgb": (0.2527, dict(codec="none")),
    "jpeg-rgb": (0.4991, dict(codec="jpeg", photometric="RGB")),
    "jpeg-extended-table": (0.2428, dict(codec="jpeg", offset_table="extended")),
    "jpeg-no-table": (0.2527, dict(codec="jpeg", offset_table="none")),
    "jpeg-two-fragments": (0.2265, dict(codec="jpeg", fragments=2)),
    "j2k-rgb-extended": (0.4991, dict(codec="jpeg2000", photometric="RGB", offset_table="extended")),
}
LOSSLESS = ("j2k-full", "j2k-sparse", "native-rgb", "j2k-rgb-extended")


@pytest.fixture(scope="module")
def series(tmp_path_factory):
    """``series(name) -> (folder, files)``, written once per module."""
    root, made = tmp_path_factory.mktemp("dicom-fast"), {}

    def make(name, levels=LEVELS, **extra):
        if name not in made:
            mpp, kw = CASES.get(name, (0.2527, {}))
            folder = root / name
            made[name] = folder, write_dicom_series(folder, levels, mpp=mpp, tile=256, seed=11,
                                                    thumbnail=vc.reduce_to(IMG, 32), **{**kw, **extra})
        return made[name]

    return make


def _openslide_level(path, level):
    """OpenSlide's whole level, composited onto white (transparent: frames never stored)."""
    import openslide

    s = openslide.OpenSlide(str(path))
    try:
        w, h = s.level_dimensions[level]
        rgba = np.asarray(s.read_region((0, 0), level, (w, h))).astype(float)
    finally:
        s.close()
    a = rgba[..., 3:] / 255.0
    return np.rint(rgba[..., :3] * a + 255.0 * (1.0 - a)).astype(int)


@pytest.mark.parametrize("name", list(CASES))
def test_levels_mpp_and_pixels_equal_openslide(series, name):
    import openslide

    folder, files = series(name)
    mpp = CASES[name][0]
    ref = openslide.OpenSlide(str(files[0]))
    try:
        ref_levels = [(h, w) for (w, h) in ref.level_dimensions]
        ref_mpp = float(ref.properties["openslide.mpp-x"])
    finally:
        ref.close()
    with tw.open(folder) as s:
        assert s.backend == "dicom"
        assert [(lv.height, lv.width) for lv in s.levels] == ref_levels  # reference: OpenSlide's level list
        assert [(lv.height, lv.width) for lv in s.levels] == [im.shape[:2] for im in LEVELS]  # ground truth
        assert s.mpp == pytest.approx(ref_mpp) == pytest.approx(mpp)  # OpenSlide; Pixel Spacing written
        assert s.mpp_origin == "dicom"
        for i, lv in enumerate(s.levels):
            got = s.read_level(i, 0, 0, lv.height, lv.width).astype(int)
            want = _openslide_level(files[0], i)
            if name in LOSSLESS:
                np.testing.assert_array_equal(got, want)  # reference: OpenSlide decode, lossless
            else:  # reference: OpenSlide (libjpeg-turbo too); within JPEG decoder rounding
                assert np.abs(got - want).max() <= 8 and np.abs(got - want).mean() <= 1.0
        y, x, h, w = 517, 901, 300, 655  # across frame edges, odd offsets
        assert np.abs(s.read_level(0, y, x, h, w).astype(int) - _openslide_level(files[0], 0)[y:y + h, x:x + w]).max() <= 8


@pytest.mark.parametrize("name", LOSSLESS)
def test_lossless_frames_give_the_pixels_written(series, name):
    folder, _ = series(name)
    sparse = CASES[name][1].get("organization") == "TILED_SPARSE"
    with tw.open(folder) as s:
        for i, img in enumerate(LEVELS):
            got = s.read_level(i, 0, 0, *img.shape[:2])
            want = img.copy()
            if sparse:  # ground truth constructed: the frames left out are glass
                for r in range(-(-img.shape[0] // 256)):
                    for c in range(-(-img.shape[1] // 256)):
                        if _omit(i, r, c):
                            want[r * 256:(r + 1) * 256, c * 256:(c + 1) * 256] = 255
            np.testing.assert_array_equal(got, want)  # ground truth: the pixels written


def test_sparse_frames_left_out_read_as_glass(series):
    folder, _ = series("jpeg-sparse")
    with tw.open(folder) as s:
        missing = [(r, c) for r in range(5) for c in range(7) if _omit(0, r, c)]
        assert len(missing) >= 10
        for r, c in missing:  # ground truth constructed: no frame there
            assert (s.read_level(0, r * 256 + 3, c * 256 + 5, 250, 250) == 255).all()
        # a stored frame is tissue-coloured (the pixels written, through JPEG q90)
        assert np.abs(s.read_level(0, 0, 0, 256, 256).astype(int) - IMG[:256, :256]).mean() < 6


@pytest.mark.parametrize("kw", [dict(codec="jpeg", photometric="YBR_FULL"), dict(codec="none", photometric="YBR_FULL"),
                                dict(codec="none", photometric="YBR_FULL_422"),
                                dict(codec="jpeg", fragments=2, offset_table="none")],
                         ids=["jpeg-ybr-full", "native-ybr-full", "native-ybr-full-422", "fragments-no-table"])
def test_series_openslide_refuses_decode_as_pydicom_does(series, kw):
    import pydicom

    name = "pydicom-" + "-".join(f"{v}" for v in kw.values())
    folder, files = series(name, levels=LEVELS[:2], **kw)
    ds = pydicom.dcmread(files[0])
    frames = ds.pixel_array  # reference: pydicom's decoding (YBR converted to RGB, its default)
    with tw.open(folder) as s:
        assert s.backend == "dicom"
        for k in (0, 8, 34):  # TILED_FULL: frame k is tile (k // 7, k % 7)
            r, c = divmod(k, 7)
            h, w = min(256, 1200 - r * 256), min(256, 1610 - c * 256)
            got = s.read_level(0, r * 256, c * 256, h, w).astype(int)
            # YCbCr -> RGB rounding and JPEG decoders (Pillow's and libjpeg-turbo) differ by 1 level
            assert np.abs(got - frames[k][:h, :w]).max() <= 1


@pytest.mark.parametrize("stored, labelled", [("YBR_FULL_422", "RGB"), ("RGB", "YBR_FULL_422")])
def test_jpeg_stream_markers_win_over_a_wrong_label(series, stored, labelled):
    import pydicom

    folder, files = series(f"mislabelled-{labelled}", levels=LEVELS[:1], codec="jpeg", photometric=stored)
    ds = pydicom.dcmread(files[0])
    ds.PhotometricInterpretation = labelled  # a converter's wrong label; the JFIF/Adobe markers are right
    ds.save_as(files[0])
    with tw.open(folder) as s:
        got = s.read_level(0, 0, 0, 1200, 1610).astype(int)
    # ground truth: the pixels written, through JPEG q90 (OpenSlide follows the label: colours far off)
    assert np.abs(got - IMG).mean() < 6


def test_thumbnail_instance_is_associated_not_a_level(series):
    import openslide

    folder, files = series("jpeg-full")
    thumb = [f for f in files if f.name.startswith("thumbnail")][0]
    ref = openslide.OpenSlide(str(files[0]))
    try:
        assert "thumbnail" in ref.associated_images  # reference: OpenSlide sees it as associated
        want = ref.associated_images["thumbnail"].size[::-1]
    finally:
        ref.close()
    for path in (folder, thumb):
        with tw.open(path) as s:
            assert s.backend == "dicom" and len(s.levels) == 3
            assert s._reader.associated == {"thumbnail": want} == {"thumbnail": vc.reduce_to(IMG, 32).shape[:2]}


@pytest.mark.parametrize("backend", ["dicom", "openslide"])
def test_icc_profile_of_the_optical_path_converts_reads(series, backend):
    import hashlib

    from colour_refs import delta_e, lcms_reference
    from tilewright.demo import icc

    wide = icc.matrix_trc_profile(**icc.SCANNER_B)
    folder, _ = series("icc", levels=LEVELS[:2], codec="jpeg2000", icc_profile=wide)
    with tw.open(folder, backend=backend) as s:
        # ground truth: the bytes written into the optical path (OpenSlide: an independent reader of them)
        assert s.colour.sha256 == hashlib.sha256(wide).hexdigest() and s.colour.applied
        assert s.colour_profile == icc.SCANNER_B["description"]
        got = s.read_level(0, 0, 0, 1200, 1610)
    d = delta_e(got, lcms_reference(wide, IMG))  # reference: LittleCMS via Pillow ImageCms on the pixels written
    assert d.mean() <= 1.0 and np.percentile(d, 99) <= 2.5
    with tw.open(folder, backend=backend, colour_profile="ignore") as s:
        np.testing.assert_array_equal(s.read_level(0, 0, 0, 1200, 1610), IMG)  # raw: lossless frames as written
    with tw.open(series("jpeg-full")[0]) as s:
        assert s._reader.icc_profile is None and s.colour_profile is None


def test_reads_touch_only_the_frames_needed(series, monkeypatch):
    from tilewright.slide.dicom_backend import DicomBackend

    seen = []
    orig = DicomBackend._fetch_row

    def spy(self, offs, cnts, *fd):
        seen.append(len(offs))
        return orig(self, offs, cnts, *fd)

    monkeypatch.setattr(DicomBackend, "_fetch_row", spy)
    with tw.open(series("jpeg-full")[0]) as s:
        s.read_level(0, 300, 300, 100, 100)  # inside frame (1, 1) of 256 px frames
        assert seen == [1]
        seen.clear()
        s.read_level(0, 250, 250, 20, 20)  # straddles 4 frames
        assert seen == [2, 2]


def test_concurrent_reads_from_threads(series):
    with tw.open(series("jpeg-sparse")[0]) as s:
        view = s.at_mpp(0.5)
        boxes = [(y, x, 200, 230) for y in range(0, view.shape[0], 150) for x in range(0, view.shape[1], 170)]
        serial = [view.read(*b) for b in boxes]
        with ThreadPoolExecutor(4) as pool:
            parallel = list(pool.map(lambda b: view.read(*b), boxes))
    for p, q in zip(serial, parallel):
        np.testing.assert_array_equal(p, q)  # ground truth: single-threaded reads


def test_backend_choice_and_fallback(series, monkeypatch, tmp_path):
    import tifffile

    from tilewright.slide import dicom_backend

    folder, _ = series("jpeg-full")
    with tw.open(folder, backend="openslide") as s:
        assert s.backend == "openslide"
    with pickle.loads(pickle.dumps(tw.open(folder))) as s:
        assert s.backend == "dicom"
    tif = tmp_path / "plain.tif"
    tifffile.imwrite(tif, IMG[:256, :256], photometric="rgb", resolution=(1e4 / 0.25,) * 2, resolutionunit="CENTIMETER")
    with pytest.raises(UnsupportedSlideError, match="DICOM whole-slide series only"):
        tw.open(tif, backend="dicom")

    def refuse(self, series, *, verify_jpeg=True):
        raise UnsupportedSlideError("a layout the frame reader does not serve", series.source)

    monkeypatch.setattr(dicom_backend.DicomBackend, "__init__", refuse)
    with tw.open(folder) as s:  # auto: OpenSlide serves what the frame reader refuses
        assert s.backend == "openslide"
    with pytest.raises(UnsupportedSlideError, match="does not serve"):
        tw.open(folder, backend="dicom")


def test_frames_off_the_grid_are_refused_with_both_reasons(series):
    import pydicom

    folder, files = series("off-grid", levels=LEVELS[:2], organization="TILED_SPARSE")
    ds = pydicom.dcmread(files[0])
    pos = ds.PerFrameFunctionalGroupsSequence[0].PlanePositionSlideSequence[0]
    pos.ColumnPositionInTotalImagePixelMatrix = 129  # half a frame over: frames overlap
    ds.save_as(files[0])
    with pytest.raises(UnsupportedSlideError) as e:
        tw.open(folder)
    assert "off the 256 x 256 frame grid" in str(e.value) and "OpenSlide" in str(e.value)


@pytest.mark.parametrize("layout", ["svs", "ifd"])
def test_tiff_tiles_stored_as_frames_read_the_same(write, tmp_path, layout):
    from tilewright.demo.dicom_series import dicom_series_from_tiff

    path = write(f"jpeg_{layout}.tif", compression="jpeg", quality=90, layout=layout)
    dicom_series_from_tiff(path, tmp_path / "series")
    with tw.open(path) as a, tw.open(tmp_path / "series") as b:
        assert (a.backend, b.backend) == ("tiff", "dicom")
        assert [(lv.height, lv.width) for lv in a.levels] == [(lv.height, lv.width) for lv in b.levels]
        assert b.mpp == pytest.approx(a.mpp)
        for i, lv in enumerate(a.levels):  # ground truth: the same JPEG streams, so the same pixels
            np.testing.assert_array_equal(a.read_level(i, 0, 0, lv.height, lv.width),
                                          b.read_level(i, 0, 0, lv.height, lv.width))


@pytest.mark.parametrize("open_by", ["folder", "level-0 file", "thumbnail file"])
def test_each_instance_header_is_parsed_once(series, monkeypatch, open_by):
    """Opening a series parses each instance's header once (was two or three times: once to find
    the series, again for its folder, again for the frame reader); the pixels are the same."""
    import pydicom

    folder, files = series("jpeg-sparse")
    target = {"folder": folder, "level-0 file": files[0],
              "thumbnail file": [f for f in files if f.name.startswith("thumbnail")][0]}[open_by]
    with tw.open(target) as s:
        before = s.at_mpp(s.mpp).read(100, 200, 300, 400)
    parsed = []
    real = pydicom.dcmread
    monkeypatch.setattr(pydicom, "dcmread", lambda fp, *a, **k: parsed.append(getattr(fp, "name", fp)) or real(fp, *a, **k))
    with tw.open(target) as s:
        assert np.array_equal(s.at_mpp(s.mpp).read(100, 200, 300, 400), before)
    # ground truth: the files the writer made, each read once (levels and the thumbnail instance)
    assert sorted(str(p) for p in parsed) == sorted(str(f) for f in files)
