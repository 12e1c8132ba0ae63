"""µm/px and objective from every metadata source; overrides and refusals."""

from __future__ import annotations

import math

import numpy as np
import pytest

import tilewright as tw
from tilewright.errors import ImplausibleResolutionError, MissingResolutionError
from tilewright.slide.resolution import (
    mpp_from_aperio,
    mpp_from_ome,
    mpp_from_openslide,
    mpp_from_tiff_tags,
    objective_from_ome,
)

from .conftest import make_image

SMALL = make_image(256, 320, seed=3)


@pytest.mark.parametrize("unit", ["cm", "inch"])
@pytest.mark.parametrize("mpp", [0.25, 0.2527, 0.5, 1.0])
def test_tiff_resolution_tags(tmp_path, unit, mpp):
    path = tmp_path / f"r_{unit}.tif"
    from tilewright.demo.pyramid import write_pyramid

    write_pyramid(path, SMALL, mpp=mpp, resolution_unit=unit, n_levels=1, compression="zlib")
    import tifffile

    with tifffile.TiffFile(path) as tf:
        tags = tf.pages[0].tags
        # ground truth constructed by the writer: pixels per unit = unit length / mpp
        per_unit = 1e4 if unit == "cm" else 25400.0
        num, den = tags["XResolution"].value
        assert num / den == pytest.approx(per_unit / mpp, rel=1e-6)
        assert tags["ResolutionUnit"].value == (3 if unit == "cm" else 2)
    with tw.open(path) as s:
        assert s.mpp == pytest.approx(mpp, rel=1e-6) and s.mpp_origin == "tiff-tags"
    with tw.open(path, backend="openslide") as s:
        assert s.mpp == pytest.approx(mpp, rel=1e-5)  # reference: OpenSlide's own parsing


def test_tiff_tags_function():
    # TIFF 6.0: unit 3 = centimetre, 2 = inch, 1 = none (ground truth constructed here)
    assert mpp_from_tiff_tags((40000, 1), (40000, 1), 3) == pytest.approx(0.25)
    assert mpp_from_tiff_tags((101600, 1), (101600, 1), 2) == pytest.approx(0.25)
    assert mpp_from_tiff_tags((40000, 1), (40000, 1), 1) is None
    assert mpp_from_tiff_tags((40000, 1), (40000, 1), "NONE") is None
    assert math.isnan(mpp_from_tiff_tags((0, 1), (0, 1), 3))


def test_unit_none_is_unknown(tmp_path):
    from tilewright.demo.pyramid import write_pyramid

    path = tmp_path / "none.tif"
    write_pyramid(path, SMALL, mpp=0.25, resolution_unit=None, n_levels=1, compression="zlib")
    with pytest.raises(MissingResolutionError) as err:
        tw.open(path)
    assert "mpp=" in str(err.value) and str(path) in str(err.value)  # names file and fix
    with tw.open(path, mpp=0.25) as s:
        assert s.mpp == 0.25 and s.mpp_origin == "override"


def test_ome_physical_size(tmp_path):
    from tilewright.demo.pyramid import write_pyramid

    path = tmp_path / "s.ome.tif"
    write_pyramid(path, SMALL, mpp=0.2465, layout="ome", compression="zlib", n_levels=2,
                  objective=40)
    with tw.open(path) as s:
        assert s.mpp == pytest.approx(0.2465) and s.mpp_origin == "ome"  # written above
        assert s.objective == 40.0 and len(s.levels) == 2


def test_ome_units_and_objective():
    # OME schema 2016-06: PhysicalSizeXUnit defaults to µm; constructed documents
    ns = 'xmlns="http://www.openmicroscopy.org/Schemas/OME/2016-06"'
    doc = (f'<OME {ns}><Instrument ID="Instrument:0"><Objective ID="Objective:0" '
           'NominalMagnification="20"/></Instrument><Image ID="Image:0">'
           '<ObjectiveSettings ID="Objective:0"/><Pixels ID="Pixels:0" '
           'PhysicalSizeX="{x}" PhysicalSizeXUnit="{u}" PhysicalSizeY="{x}" '
           'PhysicalSizeYUnit="{u}"/></Image></OME>')
    assert mpp_from_ome(doc.format(x=500, u="nm")) == pytest.approx(0.5)
    assert mpp_from_ome(doc.format(x=0.0005, u="mm")) == pytest.approx(0.5)
    assert mpp_from_ome(doc.format(x=0.5, u="µm")) == pytest.approx(0.5)
    assert mpp_from_ome(doc.format(x=0.5, u="parsec")) is None
    assert mpp_from_ome(doc.replace('PhysicalSizeX="{x}" PhysicalSizeXUnit="{u}" ', "")
                        .replace('PhysicalSizeY="{x}" PhysicalSizeYUnit="{u}"', "")) is None
    assert objective_from_ome(doc.format(x=1, u="µm")) == 20.0


def test_aperio_description(write):
    # Aperio-style description "...|AppMag = 40|MPP = 0.2500" (constructed by the writer)
    path = write("lossless_svs.tif", compression="zlib", layout="svs", objective=40)
    with tw.open(path) as s:
        assert s.mpp == pytest.approx(0.25) and s.objective == 40.0 and s.mpp_origin == "aperio"
    with tw.open(path, backend="openslide") as s:
        # reference: OpenSlide's aperio reader exposes openslide.mpp-x / objective-power
        assert s.mpp == pytest.approx(0.25) and s.objective == 40.0
    assert mpp_from_aperio("Aperio Image Library v12\r\n1x1|AppMag = 20|MPP = 0.4990") == \
        (pytest.approx(0.499), 20.0)
    assert mpp_from_aperio("a plain description") == (None, None)


def test_openslide_properties():
    # OpenSlide property names (openslide.org/docs/properties), constructed mappings
    r = mpp_from_openslide({"openslide.mpp-x": "0.2520", "openslide.mpp-y": "0.2530",
                            "openslide.objective-power": "40"})
    assert r.mpp == pytest.approx(0.2525) and r.objective == 40.0
    r = mpp_from_openslide({"tiff.XResolution": "40000", "tiff.YResolution": "40000",
                            "tiff.ResolutionUnit": "centimeter"})
    assert r.mpp == pytest.approx(0.25) and r.source == "tiff-tags"
    r = mpp_from_openslide({"tiff.XResolution": "1", "tiff.ResolutionUnit": "none"})
    assert r.mpp is None


@pytest.mark.parametrize("bad", [100.0, 0.01, 0.0, -0.25, float("nan"), float("inf")])
def test_implausible_override_refused(write, bad):
    path = write("jpeg_ifd.tif", compression="jpeg", layout="ifd")
    with pytest.raises(ImplausibleResolutionError) as err:
        tw.open(path, mpp=bad)
    assert str(path) in str(err.value)


def test_implausible_tags_refused(tmp_path):
    import tifffile

    # 72 dpi, the default of photo editors, is 352.8 µm/px: not a slide resolution
    path = tmp_path / "photo.tif"
    tifffile.imwrite(path, np.zeros((64, 64, 3), np.uint8), tile=(16, 16), photometric="rgb",
                     resolution=(72, 72), resolutionunit="INCH")
    with pytest.raises(ImplausibleResolutionError, match="mpp="):
        tw.open(path)
    with tw.open(path, mpp=0.5) as s:  # the override repairs a misstated file
        assert s.mpp == 0.5


def test_mpp_source_is_the_old_name_of_mpp_origin(tmp_path):
    """In stores and manifests ``mpp_source`` is a number; on a slide the word for where the value
    came from is ``mpp_origin``; the old attribute still answers, with a DeprecationWarning."""
    from helpers import write_slide

    path, _ = write_slide(tmp_path / "a.tif", mpp=0.2428, size_um=(300.0, 300.0), seed=3)
    with tw.open(path) as s:
        assert s.mpp_origin == "tiff-tags"  # ground truth: written as TIFF resolution tags (cm)
        with pytest.warns(DeprecationWarning, match="mpp_origin"):
            assert s.mpp_source == "tiff-tags"
