"""Philips TIFF on the tiff backend's fast path, against OpenSlide's Philips reader of the same file.

The files are built here with tifffile the way the layout is documented to look (Software "Philips
DP", ImageDescription XML of a DPUfsImport DataObject whose WSI image lists one pixel data
representation a level with its DICOM_PIXEL_SPACING; reduced pages padded to whole tiles; tiles
never stored). OpenSlide recognizes them as vendor "philips" and is the reference for level sizes,
µm/px and pixels.
"""

from __future__ import annotations

import numpy as np
import pytest
import tifffile

import tilewright as tw
from tilewright.errors import UnsupportedSlideError
from tilewright.slide.tiff_backend import TiffBackend

import vendor_corpus as vc

IMG = vc.image(1200, 1610, seed=41)


def _spacing(mm):
    return f"&quot;{mm:.9f}&quot; &quot;{mm:.9f}&quot;"


def _xml(mpp, factors):
    reps = "".join(
        f'<DataObject ObjectType="PixelDataRepresentation">'
        f'<Attribute Name="DICOM_PIXEL_SPACING" Group="0x0028" Element="0x0030" PMSVR="IDoubleArray">'
        f'{_spacing(mpp * f / 1e3)}</Attribute>'
        f'<Attribute Name="PIIM_PIXEL_DATA_REPRESENTATION_NUMBER" Group="0x101D" Element="0x1009" '
        f'PMSVR="IUInt16">{k}</Attribute></DataObject>' for k, f in enumerate(factors))
    return ('<?xml version="1.0" encoding="UTF-8" ?>\n<DataObject ObjectType="DPUfsImport">'
            '<Attribute Name="DICOM_MANUFACTURER" Group="0x0008" Element="0x0070" PMSVR="IString">Synthetic</Attribute>'
            '<Attribute Name="PIM_DP_SCANNED_IMAGES" Group="0x1001" Element="0x8000" PMSVR="IDataObjectArray"><Array>'
            '<DataObject ObjectType="DPScannedImage">'
            '<Attribute Name="PIM_DP_IMAGE_TYPE" Group="0x101D" Element="0x1004" PMSVR="IString">WSI</Attribute>'
            f'<Attribute Name="DICOM_PIXEL_SPACING" Group="0x0028" Element="0x0030" PMSVR="IDoubleArray">'
            f'{_spacing(mpp / 1e3)}</Attribute>'
            '<Attribute Name="PIIM_PIXEL_DATA_REPRESENTATION_SEQUENCE" Group="0x1001" Element="0x8003" '
            f'PMSVR="IDataObjectArray"><Array>{reps}</Array></Attribute>'
            '</DataObject></Array></Attribute></DataObject>\n')


def write_philips(path, *, mpp=0.2265, factors=(1, 4, 16), pad=True, missing=()):
    """A Philips-style tiled JPEG pyramid of IMG; ``missing``: (level, row, column) tiles not stored."""
    with tifffile.TiffWriter(path) as tif:
        for k, f in enumerate(factors):
            lv = IMG if f == 1 else vc.reduce_to(IMG, f)
            h, w = lv.shape[:2]
            if pad and k:  # reduced levels padded to whole tiles, as the layout stores them
                h, w = -(-h // 256) * 256, -(-w // 256) * 256
                full = np.full((h, w, 3), 255, np.uint8)
                full[:lv.shape[0], :lv.shape[1]] = lv
                lv = full

            def tiles(lv=lv, k=k):
                for r in range(-(-lv.shape[0] // 256)):
                    for c in range(-(-lv.shape[1] // 256)):
                        if (k, r, c) in missing:
                            yield None
                        else:
                            t = np.full((256, 256, 3), 255, np.uint8)
                            part = lv[r * 256:(r + 1) * 256, c * 256:(c + 1) * 256]
                            t[:part.shape[0], :part.shape[1]] = part
                            yield t

            tif.write(tiles(), shape=lv.shape, dtype="uint8", tile=(256, 256), compression="jpeg",
                      photometric="rgb", software="Philips DP v1.0", metadata=None,
                      description=_xml(mpp, factors) if k == 0 else f"level={k}", subfiletype=1 if k else 0)
    return path


def _openslide(path):
    import openslide

    s = openslide.OpenSlide(str(path))
    levels = [(h, w) for (w, h) in s.level_dimensions]
    mpp = float(s.properties["openslide.mpp-x"])
    pixels = []
    for i, (h, w) in enumerate(levels):
        rgba = np.asarray(s.read_region((0, 0), i, (w, h))).astype(float)
        a = rgba[..., 3:] / 255.0
        pixels.append(np.rint(rgba[..., :3] * a + 255.0 * (1.0 - a)).astype(int))
    vendor = s.properties.get("openslide.vendor")
    s.close()
    return vendor, levels, mpp, pixels


@pytest.mark.parametrize("pad", [True, False], ids=["padded-pages", "exact-pages"])
def test_philips_served_directly_as_openslide_reads_it(tmp_path, pad):
    path = write_philips(tmp_path / "p.tiff", pad=pad)
    vendor, levels, mpp, pixels = _openslide(path)
    assert vendor == "philips"  # the reference reads it with its Philips driver
    with tw.open(path) as s:
        assert s.backend == "tiff" and s._reader.flavour == "philips"
        assert [(lv.height, lv.width) for lv in s.levels] == levels == [(1200, 1610), (300, 402), (75, 100)]
        assert [lv.downsample for lv in s.levels] == [1.0, 4.0, 16.0]
        assert s.mpp == pytest.approx(mpp) == pytest.approx(0.2265)  # OpenSlide; the spacing written
        for i, lv in enumerate(s.levels):
            got = s.read_level(i, 0, 0, lv.height, lv.width).astype(int)
            # reference: OpenSlide (libjpeg-turbo), within JPEG decoder rounding
            assert np.abs(got - pixels[i]).max() <= 8 and np.abs(got - pixels[i]).mean() <= 1.0


def test_philips_tiles_never_stored_are_glass(tmp_path):
    path = write_philips(tmp_path / "sparse.tiff", missing={(0, 1, 2), (0, 3, 5), (1, 0, 1)})
    _, _, _, pixels = _openslide(path)
    with tw.open(path) as s:
        got = s.read_level(0, 0, 0, 1200, 1610)
        assert (got[256:512, 512:768] == 255).all() and (got[768:1024, 1280:1536] == 255).all()  # ground truth
        assert (pixels[0][256:512, 512:768] == 255).all()  # reference: OpenSlide draws them transparent
        assert np.abs(got.astype(int) - pixels[0]).max() <= 8
        assert (s.read_level(1, 0, 256, 44, 146) == 255).all()


def test_philips_without_level_descriptions_goes_to_openslide(tmp_path):
    path = tmp_path / "bare.tiff"
    with tifffile.TiffWriter(path) as tif:
        tif.write(IMG, tile=(256, 256), compression="jpeg", photometric="rgb", software="Philips DP v1.0",
                  metadata=None, description='<?xml version="1.0" encoding="UTF-8" ?>\n<DataObject '
                  'ObjectType="DPUfsImport"></DataObject>\n')
    with pytest.raises(UnsupportedSlideError, match="WSI image description"):
        TiffBackend(str(path))
