"""TIFF files carrying a scanner vendor's layout: which the tiff backend serves, and why the others not.

tifffile recognizes these layouts (its ``is_<vendor>`` flags). The tiff backend serves a file only
where its geometry is a grid of separately decoded, non-overlapping tiles whose level sizes and
resolution it can read exactly:

``philips``  Philips TIFF: served. Levels are the tiled pages of the IFD chain, one a pixel data
             representation of the WSI image in the ImageDescription XML (DataObject
             DPUfsImport); each level's downsample is its ``DICOM_PIXEL_SPACING`` over level 0's,
             and its size is level 0's over that downsample (floor): reduced pages are padded to
             whole tiles, and the padding is not image. µm/px from the WSI image's
             ``DICOM_PIXEL_SPACING`` (mm, row spacing first; else representation 0's). Tiles
             never stored (byte count 0) are glass. Label and macro live in the XML (base64), not
             in pages, and are not read.

Left to OpenSlide, with the reason:

``ndpi``     Hamamatsu NDPI: a level is one JPEG whose restart-marker intervals serve as tiles
             (and offsets past 4 GiB keep their high bits elsewhere): no grid of tiles to read.
``scn``      Leica SCN: the slide is a collection canvas on which the XML places one or more
             scanned regions (each its own pyramid) beside the macro image; composing them is
             the vendor reader's work.
``bif``      Ventana BIF: neighbouring tiles overlap by amounts recorded per joint in the XMP
             metadata, and rows may be stored serpentine: tiles cannot be placed on a grid.
``qpi``      PerkinElmer/Akoya QPTIFF: mostly multiplexed fluorescence (one grey page a channel);
             not tested here with brightfield files.
``mdgel``, ``lsm``  Molecular Dynamics gel scans and Zeiss confocal stacks: not slide pyramids.

References
----------
.. [1] Goode, A. et al. (2013). OpenSlide: A vendor-neutral software foundation for digital
   pathology. J Pathol Inform 4:27 (the vendor layouts above, as OpenSlide reads them).
"""

from __future__ import annotations

import math
import re
import xml.etree.ElementTree as ET

from tilewright.errors import UnsupportedSlideError
from tilewright.slide.resolution import resolution_from_xy
from tilewright.slide.tiff_pages import Pyramid
from tilewright.slide.tiff_pixels import page_problem

__all__ = ["OPENSLIDE_ONLY", "philips_pyramid"]

#: tifffile flags of layouts left to OpenSlide (reasons in the module docstring).
OPENSLIDE_ONLY = ("is_ndpi", "is_scn", "is_qpi", "is_bif", "is_mdgel", "is_lsm")


def _spacing(text: str | None) -> tuple[float, float] | None:
    """(row, column) spacing in mm from a Philips ``IDoubleArray`` value (``"0.000243" "0.000243"``)."""
    values = [float(v) for v in re.findall(r"[-+0-9.eE]+", text or "")]
    if len(values) < 2 or not all(math.isfinite(v) and v > 0 for v in values[:2]):
        return None
    return values[0], values[1]


def _wsi_image(root):
    """The DPScannedImage element of the whole-slide image (PIM_DP_IMAGE_TYPE WSI)."""
    for obj in root.iter("DataObject"):
        if obj.get("ObjectType") != "DPScannedImage":
            continue
        for attr in obj.findall("Attribute"):
            if attr.get("Name") == "PIM_DP_IMAGE_TYPE" and (attr.text or "").strip() == "WSI":
                return obj
    return None


def philips_pyramid(tf, path) -> tuple[Pyramid, list[tuple[int, int]]]:
    """The levels of a Philips TIFF (tiled pages), their true sizes and the resolution.

    Raises
    ------
    UnsupportedSlideError
        The XML does not describe the levels, or a page cannot be served exactly (then OpenSlide
        reads the file).
    """
    pages = [p for p in tf.pages if p.is_tiled]
    try:
        root = ET.fromstring(tf.pages[0].description)
    except ET.ParseError as exc:
        raise UnsupportedSlideError(f"Philips TIFF whose description is not XML ({exc})", path) from exc
    wsi = _wsi_image(root)
    if wsi is None or not pages:
        raise UnsupportedSlideError("Philips TIFF without a WSI image description or tiled pages", path)
    spacing = {}
    for obj in wsi.iter("DataObject"):
        if obj.get("ObjectType") != "PixelDataRepresentation":
            continue
        attrs = {a.get("Name"): a.text for a in obj.findall("Attribute")}
        number, sp = attrs.get("PIIM_PIXEL_DATA_REPRESENTATION_NUMBER"), _spacing(attrs.get("DICOM_PIXEL_SPACING"))
        if number is not None and sp is not None:
            spacing[int(number)] = sp
    n = min(len(pages), len(spacing))
    if n == 0 or sorted(spacing)[:n] != list(range(n)):
        raise UnsupportedSlideError("Philips TIFF whose pixel data representations do not list its levels", path)
    h0, w0 = int(pages[0].imagelength), int(pages[0].imagewidth)
    levels, sizes = [], []
    for k, page in enumerate(pages[:n]):
        problem = page_problem(page)
        if problem:
            raise UnsupportedSlideError(f"Philips TIFF level {k}: {problem}", path)
        ds_y, ds_x = spacing[k][0] / spacing[0][0], spacing[k][1] / spacing[0][1]
        h, w = math.floor(h0 / ds_y + 1e-9), math.floor(w0 / ds_x + 1e-9)
        ph, pw, th, tw = int(page.imagelength), int(page.imagewidth), int(page.chunks[0]), int(page.chunks[1])
        if not (0 < h <= ph and 0 < w <= pw) or -(-h // th) != -(-ph // th) or -(-w // tw) != -(-pw // tw):
            raise UnsupportedSlideError(
                f"Philips TIFF level {k}: page of {pw} x {ph} px does not hold {w} x {h} px on its tile grid", path)
        levels.append(page)
        sizes.append((h, w))
    top = {a.get("Name"): a.text for a in wsi.findall("Attribute")}
    sp = _spacing(top.get("DICOM_PIXEL_SPACING")) or spacing[0]
    return Pyramid(levels, {}, resolution_from_xy((sp[1] * 1e3, sp[0] * 1e3), None, "philips")), sizes
