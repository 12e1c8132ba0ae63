"""Scanner and converter layouts (tests/vendor_corpus.py) read by the tiff backend, checked against
the pixels written (ground truth) and against OpenSlide reading the same file (an independent
decoder); where OpenSlide cannot agree, the documented difference is what is checked."""

from __future__ import annotations

import numpy as np
import pytest

import tilewright as tw
from tilewright.errors import TilewrightError, UnsupportedSlideError

import vendor_corpus as vc

SERVED = [n for n in vc.CASES if n != "cmyk"]
AGREE = ("equal", "jpeg", "close")


@pytest.fixture(scope="module")
def corpus(tmp_path_factory):
    folder = tmp_path_factory.mktemp("corpus")
    built = {}

    def get(name):
        if name not in built:
            built[name] = vc.build(name, folder)
        return built[name]

    return get


def _levels(slide):
    return [(lv.height, lv.width) for lv in slide.levels]


@pytest.mark.parametrize("name", SERVED)
def test_tiff_backend_reads_every_layout(corpus, name):
    case = corpus(name)
    with tw.open(case.path, backend="tiff") as s:
        assert _levels(s) == [tuple(x) for x in case.levels]  # ground truth: levels written
        assert s.mpp == pytest.approx(case.mpp, rel=1e-4)  # ground truth: µm/px written
        got = s.read_level(0, 0, 0, *s.dimensions).astype(int)
        diff = np.abs(got - case.truth.astype(int))
        if case.lossy:
            assert diff.mean() < 6  # JPEG of this texture stays near the pixels written (common practice)
        else:
            assert diff.max() <= case.notes.get("tolerance", 0)  # ground truth: pixels written
        if len(s.levels) > 1:  # a coarse level holds the reduced slide, not another image
            lv = s.levels[-1]
            small = vc.reduce_to(case.truth, round(case.truth.shape[1] / lv.width)).astype(int)
            assert np.abs(s.read_level(len(s.levels) - 1, 0, 0, lv.height, lv.width) - small).mean() < 6


@pytest.mark.parametrize("name", list(vc.CASES))
def test_backends_agree_or_differ_as_documented(corpus, name):
    case = corpus(name)
    if case.openslide not in AGREE:
        # documented difference (vendor_corpus says which): OpenSlide refuses, or the tiff backend does
        if name == "cmyk":
            with pytest.raises(UnsupportedSlideError, match="CMYK") as e:
                tw.open(case.path, backend="tiff")
            assert str(case.path) in str(e.value)
            with tw.open(case.path) as s:  # auto: OpenSlide converts the inks to RGB itself
                assert s.backend == "openslide"
                with tw.open(case.path, backend="openslide") as o:
                    np.testing.assert_array_equal(s.read_level(0, 0, 0, 64, 64), o.read_level(0, 0, 0, 64, 64))
            return
        with pytest.raises(TilewrightError):
            tw.open(case.path, backend="openslide")  # reference: OpenSlide does not read this layout
        return
    with tw.open(case.path, backend="tiff") as a, tw.open(case.path, backend="openslide") as b:
        assert _levels(a) == _levels(b)  # reference: OpenSlide's level list
        assert a.mpp == pytest.approx(b.mpp, rel=1e-4)  # reference: OpenSlide's µm/px
        for k, lv in enumerate(a.levels):
            ra = a.read_level(k, 0, 0, lv.height, lv.width).astype(int)
            rb = b.read_level(k, 0, 0, lv.height, lv.width).astype(int)
            if case.openslide == "equal":
                np.testing.assert_array_equal(ra, rb)  # reference: OpenSlide decode
            elif case.openslide == "close":
                # reference: OpenSlide; its integer colour conversion rounds differently by 1-2
                assert np.abs(ra - rb).max() <= 2
            else:
                # reference: OpenSlide (libjpeg-turbo); decoders may differ by a few levels
                assert np.abs(ra - rb).max() <= 8 and np.abs(ra - rb).mean() <= 1.0


def test_aperio_associated_images_kept_apart(corpus):
    from tilewright.slide.tiff_backend import TiffBackend

    for name in ("aperio_jpeg", "aperio_no_thumbnail"):
        case = corpus(name)
        b = TiffBackend(str(case.path))
        try:
            # ground truth: the label (LZW), macro (JPEG) and stripped thumbnail written
            assert set(b.associated) == case.notes["associated"]
            assert b.associated["label"] == (300, 290)
        finally:
            b.close()
        with tw.open(case.path) as s:
            assert s.objective == 40.0  # written as AppMag


def test_small_label_is_no_level_and_thumbnail_shows_the_slide(corpus):
    case = corpus("tiny_label")
    with tw.open(case.path) as s:
        assert [lv.downsample for lv in s.levels] == [1.0, 4.0]  # the 62 x 64 label is not a level
        thumb = s.thumbnail(8.0).astype(int)
        # ground truth: the slide reduced to 8 µm/px; the label is pure green (20, 200, 30)
        h, w = thumb.shape[:2]
        ref = vc.reduce_to(case.truth, 32)[:h, :w].astype(int)
        assert np.abs(thumb - ref).mean() < 4


def test_ome_other_images_are_not_levels(corpus):
    case = corpus("ome_two_scenes")
    with tw.open(case.path) as s:
        assert (450, 604) not in _levels(s)  # ground truth: the second scene written
    case = corpus("ome_macro_first")
    with tw.open(case.path) as s:
        assert s.mpp == pytest.approx(0.2265) and s.mpp_origin == "ome"  # 226.5 nm written
        assert s.dimensions == (vc.H0, vc.W0)


def test_ome_xml_is_parsed_once(corpus, monkeypatch):
    """Opening an OME-TIFF parses its OME-XML once in tilewright (was once an image plus twice
    more); the levels and µm/px found are the same as the corpus records."""
    import sys
    import xml.etree.ElementTree as ET

    case = corpus("ome_two_scenes")
    ours = []
    real = ET.fromstring

    def counted(text, *a, **k):
        if sys._getframe(1).f_globals.get("__name__", "").startswith("tilewright"):
            ours.append(len(text))
        return real(text, *a, **k)

    monkeypatch.setattr(ET, "fromstring", counted)
    with tw.open(case.path) as s:
        assert s.mpp == pytest.approx(0.2428) and s.dimensions == (vc.H0, vc.W0)
    assert len(ours) == 1
